"""Body segment tables, bone-to-segment matching and the whole-body centre of mass.

Each segment is a rigid piece of the body between two landmarks; the tables give its share of
body mass and where its centre of mass lies between the landmarks. The rig provides the
landmarks as bone heads and tails (``Landmark``), matched from bone names.

References
----------
Winter D.A. (2009), *Biomechanics and Motor Control of Human Movement*, 4th ed., Table 4.1
(Dempster 1955 cadaver data).
de Leva P. (1996), "Adjustments to Zatsiorsky-Seluyanov's segment inertia parameters",
J. Biomech. 29(9):1223-1230, Table 4.
"""
from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Mapping, Sequence

import numpy as np

# Landmarks a segment can run between. Each is found on the rig as a bone head or tail:
#   (bone role, 'head' | 'tail' | 'mid').  'mid' = halfway along the bone.
# Roles with a side are written 'thigh.L' etc.; the trunk uses midpoints of two landmarks.
SIDES = ("L", "R")


@dataclass(frozen=True)
class Segment:
    """One body segment: mass fraction and CoM position between two landmarks.

    ``com_fraction`` is measured from ``start`` toward ``end``.
    """
    name: str
    mass_fraction: float
    start: str
    end: str
    com_fraction: float


@dataclass(frozen=True)
class SegmentTable:
    name: str
    source: str
    segments: tuple

    @property
    def total_mass_fraction(self) -> float:
        return float(sum(s.mass_fraction for s in self.segments))


def _bilateral(name, mass, start, end, com):
    return tuple(Segment(f"{name}.{side}", mass, f"{start}.{side}", f"{end}.{side}", com) for side in SIDES)


# Landmark names used below (resolved on the rig by `landmark_bones`):
#   hip_centre.X   head of the thigh bone          shoulder.X   head of the upper-arm bone
#   knee.X         head of the shin bone           elbow.X      head of the forearm bone
#   ankle.X        head of the foot bone           wrist.X      head of the hand bone
#   toe.X          tail of the foot bone           knuckle.X    tail of the hand bone
#   neck_base      head of the neck bone (or head bone if no neck)
#   head_mid       halfway along the head bone (ear-canal level, an approximation for rigs)
#   vertex         tail of the head bone (top of the head)
#   mid_hips / mid_shoulders   midpoints of the two hip / shoulder landmarks
DEMPSTER_WINTER = SegmentTable(
    name="dempster",
    source="Dempster (1955) via Winter (2009), Biomechanics and Motor Control of Human Movement, 4th ed., Table 4.1",
    segments=(
        # Head and neck: C7-T1 to ear canal, CoM at the ear canal (fraction 1.0).
        Segment("head_neck", 0.081, "neck_base", "head_mid", 1.0),
        # Trunk: greater trochanter to glenohumeral joint, CoM at 0.50.
        Segment("trunk", 0.497, "mid_hips", "mid_shoulders", 0.50),
        *_bilateral("upper_arm", 0.028, "shoulder", "elbow", 0.436),
        *_bilateral("forearm", 0.016, "elbow", "wrist", 0.430),
        *_bilateral("hand", 0.006, "wrist", "knuckle", 0.506),
        *_bilateral("thigh", 0.100, "hip_centre", "knee", 0.433),
        *_bilateral("shank", 0.0465, "knee", "ankle", 0.433),
        *_bilateral("foot", 0.0145, "ankle", "toe", 0.50),
    ),
)

DE_LEVA_MALE = SegmentTable(
    name="de_leva_male",
    source="de Leva (1996), J. Biomech. 29(9):1223-1230, Table 4 (males)",
    segments=(
        # Head: vertex to C7 (cervicale), CoM 50.02 % from the vertex.
        Segment("head_neck", 0.0694, "vertex", "neck_base", 0.5002),
        # Trunk: mid shoulder joint centres to mid hip joint centres, CoM 43.10 % from the shoulders.
        Segment("trunk", 0.4346, "mid_shoulders", "mid_hips", 0.4310),
        *_bilateral("upper_arm", 0.0271, "shoulder", "elbow", 0.5772),
        *_bilateral("forearm", 0.0162, "elbow", "wrist", 0.4574),
        # Hand: wrist joint centre to 3rd metacarpale, CoM 79.00 %.
        *_bilateral("hand", 0.0061, "wrist", "knuckle", 0.7900),
        *_bilateral("thigh", 0.1416, "hip_centre", "knee", 0.4095),
        *_bilateral("shank", 0.0433, "knee", "ankle", 0.4395),
        # Foot: heel to toe tip, CoM 44.15 %; rigs seldom have a heel, the ankle stands in for it.
        *_bilateral("foot", 0.0137, "ankle", "toe", 0.4415),
    ),
)

DE_LEVA_FEMALE = SegmentTable(
    name="de_leva_female",
    source="de Leva (1996), J. Biomech. 29(9):1223-1230, Table 4 (females)",
    segments=(
        Segment("head_neck", 0.0668, "vertex", "neck_base", 0.4841),
        Segment("trunk", 0.4257, "mid_shoulders", "mid_hips", 0.3782),
        *_bilateral("upper_arm", 0.0255, "shoulder", "elbow", 0.5754),
        *_bilateral("forearm", 0.0138, "elbow", "wrist", 0.4559),
        *_bilateral("hand", 0.0056, "wrist", "knuckle", 0.7474),
        *_bilateral("thigh", 0.1478, "hip_centre", "knee", 0.3612),
        *_bilateral("shank", 0.0481, "knee", "ankle", 0.4352),
        *_bilateral("foot", 0.0129, "ankle", "toe", 0.4014),
    ),
)

SEGMENT_TABLES = {t.name: t for t in (DEMPSTER_WINTER, DE_LEVA_MALE, DE_LEVA_FEMALE)}

ARM_SEGMENTS = tuple(f"{s}.{side}" for s in ("upper_arm", "forearm", "hand") for side in SIDES)

# ---------------------------------------------------------------- bone roles and name matching

# Bone roles the landmarks need, and the bone-name stems that identify them (after the side
# marker, common prefixes and separators are removed). Stems are compared whole, not as
# substrings, so "forearm" never matches the upper-arm role.
ROLE_STEMS = {
    "upper_arm": ("upperarm", "arm", "uparm", "humerus"),
    "forearm": ("forearm", "lowerarm", "lowarm", "elbow", "radius", "ulna"),
    "hand": ("hand", "wrist", "palm"),
    "thigh": ("thigh", "upleg", "upperleg", "femur", "thighbone"),
    "shin": ("shin", "calf", "leg", "lowerleg", "lowleg", "shank", "tibia", "knee"),
    "foot": ("foot", "ankle"),
    "neck": ("neck",),
    "head": ("head", "skull", "cranium"),
    "hips": ("hips", "pelvis", "hip", "root", "torso", "cog"),
}
SIDED_ROLES = ("upper_arm", "forearm", "hand", "thigh", "shin", "foot")

_PREFIX = re.compile(r"^(?:[^:|]*[:|])?(?:(?:def|org|mch|drv|jnt|bn|bone|b|cc_base|bip\d*)[-_. ]+)*", re.I)
_SIDE_SUFFIX = re.compile(r"(?:[._\- ])(l|r|left|right|lt|rt)$", re.I)
_SIDE_PREFIX = re.compile(r"^(l|r|left|right|lt|rt)[._\- ]+", re.I)
_SIDE_WORD = re.compile(r"^(left|right)(?=[a-z0-9])", re.I)
_COPY_SUFFIX = re.compile(r"[._]\d{3}$")


def parse_bone_name(name: str):
    """Split a bone name into (stem, side, part) for matching.

    ``side`` is 'L', 'R' or '' and ``part`` is the copy number of split bones (``.001`` → 1).
    Handles ``thigh.L``, ``thigh_l``, ``LeftUpLeg``, ``L_Thigh``, ``Left Thigh``,
    ``DEF-thigh.L.001`` and ``prefix:LeftUpLeg``.
    """
    part = 0
    base = name.strip()
    m = _COPY_SUFFIX.search(base)
    if m:
        part = int(m.group(0)[1:])
        base = base[:m.start()]
    base = _PREFIX.sub("", base)
    side = ""
    m = _SIDE_SUFFIX.search(base)
    if m:
        side = m.group(1)[0].upper()
        base = base[:m.start()]
    else:
        m = _SIDE_PREFIX.match(base) or _SIDE_WORD.match(base)
        if m:
            side = m.group(1)[0].upper()
            base = base[m.end():]
    stem = re.sub(r"[^a-z0-9]", "", base.lower())
    return stem, side, part


def match_roles(bone_names: Sequence[str], overrides: Mapping[str, str] | None = None):
    """Find the rig bone for every role the landmarks need.

    Parameters
    ----------
    bone_names : sequence of str
        Candidate bones, root-most first (the order in the armature is fine). Deform bones are
        the best candidates; the caller chooses.
    overrides : mapping role -> bone name, optional
        Manual choices, e.g. ``{"thigh.L": "Leg_upper_left"}``; they win over the names.

    Returns
    -------
    roles : dict role -> list of bone names
        Split bones (``.001`` copies) are kept in order so the segment can run from the head of
        the first to the tail of the last.
    unmatched : list of str
        Roles that no bone matched.
    """
    overrides = dict(overrides or {})
    wanted = [f"{r}.{s}" for r in SIDED_ROLES for s in SIDES] + ["neck", "head", "hips"]
    found = {role: [] for role in wanted}
    for name in bone_names:
        stem, side, part = parse_bone_name(name)
        for role, stems in ROLE_STEMS.items():
            if stem in stems:
                if role not in SIDED_ROLES and side:
                    break  # a sided bone ("pelvis.L") is not the one unsided role
                key = f"{role}.{side}" if role in SIDED_ROLES else role
                if key in found:
                    found[key].append((stems.index(stem), part, name))
                break
    _rigify_head_and_neck(bone_names, found)
    roles = {}
    for key in wanted:
        if key in overrides and overrides[key]:
            roles[key] = [overrides[key]]
        elif found[key]:
            # The best-ranked stem wins ("hips" before "root"); its split copies follow in order.
            best = min(rank for rank, _, _ in found[key])
            roles[key] = [n for rank, _, n in sorted(found[key]) if rank == best]
    unmatched = [k for k in wanted if k not in roles]
    return roles, unmatched


RIGIFY_SPINE_PARTS = 7
"""Rigify's human spine is one chain of seven bones, ``spine`` to ``spine.006``: hips, two spine
bones, chest, two neck bones and the head (the bundled human metarig)."""


def _rigify_head_and_neck(bone_names, found):
    """Fill head and neck from a spine chain of seven or more parts when no bone is named so."""
    if found["head"]:
        return
    parts = sorted((part, name) for name in bone_names for stem, side, part in [parse_bone_name(name)]
                   if stem == "spine" and not side)
    if len(parts) < RIGIFY_SPINE_PARTS or len({p for p, _ in parts}) != len(parts):
        return
    found["head"].append((0, 0, parts[-1][1]))
    if not found["neck"]:
        found["neck"].extend((0, k, name) for k, (_, name) in enumerate(parts[-3:-1]))


TOE_STEMS = ("toe", "toes", "toebase", "ball", "toetip")


def contact_bones(bone_names: Sequence[str], roles: Mapping[str, Sequence[str]], chosen: str = ""):
    """Bones whose lowest point tells each foot's contact, grouped per foot.

    Parameters
    ----------
    bone_names : candidate bones (deform bones first is best)
    roles : matched roles (``foot.L`` etc.)
    chosen : the user's comma-separated "Contact bones"; when given it wins, grouped by side
        (bones without a side are a foot each).

    Returns
    -------
    dict foot name (its first bone) -> list of bone names
    """
    groups = {}
    if chosen.strip():
        by_side = {}
        for name in (n.strip() for n in chosen.split(",")):
            if not name:
                continue
            _, side, _ = parse_bone_name(name)
            by_side.setdefault(side or name, []).append(name)
        return {bones[0]: bones for bones in by_side.values()}
    for side in SIDES:
        feet = list(roles.get(f"foot.{side}", []))
        toes = [n for n in bone_names for stem, sd, _ in [parse_bone_name(n)] if stem in TOE_STEMS and sd == side]
        if feet or toes:
            bones = feet + [t for t in toes if t not in feet]
            groups[bones[0]] = bones
    return groups


def required_roles(table: SegmentTable) -> list:
    """Roles a table needs (neck is optional: the head bone's head stands in for it)."""
    need = set()
    for seg in table.segments:
        for lm in (seg.start, seg.end):
            need.update(_LANDMARK_ROLES[lm.split(".")[0]](lm))
    return sorted(need)


def _side(lm):
    return lm.split(".")[1]


_LANDMARK_ROLES = {
    "hip_centre": lambda lm: [f"thigh.{_side(lm)}"],
    "knee": lambda lm: [f"shin.{_side(lm)}"],
    "ankle": lambda lm: [f"foot.{_side(lm)}"],
    "toe": lambda lm: [f"foot.{_side(lm)}"],
    "shoulder": lambda lm: [f"upper_arm.{_side(lm)}"],
    "elbow": lambda lm: [f"forearm.{_side(lm)}"],
    "wrist": lambda lm: [f"hand.{_side(lm)}"],
    "knuckle": lambda lm: [f"hand.{_side(lm)}"],
    "neck_base": lambda lm: ["head"],
    "head_mid": lambda lm: ["head"],
    "vertex": lambda lm: ["head"],
    "mid_hips": lambda lm: ["thigh.L", "thigh.R"],
    "mid_shoulders": lambda lm: ["upper_arm.L", "upper_arm.R"],
}


def landmark_positions(roles: Mapping[str, Sequence[str]], heads: Mapping[str, np.ndarray],
                       tails: Mapping[str, np.ndarray]) -> dict:
    """Landmark positions over time from bone head/tail positions.

    Parameters
    ----------
    roles : role -> bone names (from :func:`match_roles`)
    heads, tails : bone name -> ndarray, shape (n_samples, 3), world positions in metres

    Returns
    -------
    dict landmark name -> ndarray, shape (n_samples, 3)
    """
    def head(role):
        return heads[roles[role][0]]

    def tail(role):
        return tails[roles[role][-1]]

    lm = {}
    for s in SIDES:
        lm[f"hip_centre.{s}"] = head(f"thigh.{s}")
        lm[f"knee.{s}"] = head(f"shin.{s}")
        lm[f"ankle.{s}"] = head(f"foot.{s}")
        lm[f"toe.{s}"] = tail(f"foot.{s}")
        lm[f"shoulder.{s}"] = head(f"upper_arm.{s}")
        lm[f"elbow.{s}"] = head(f"forearm.{s}")
        lm[f"wrist.{s}"] = head(f"hand.{s}")
        lm[f"knuckle.{s}"] = tail(f"hand.{s}")
    lm["neck_base"] = head("neck") if "neck" in roles else head("head")
    lm["vertex"] = tail("head")
    lm["head_mid"] = 0.5 * (head("head") + tail("head"))
    lm["mid_hips"] = 0.5 * (lm["hip_centre.L"] + lm["hip_centre.R"])
    lm["mid_shoulders"] = 0.5 * (lm["shoulder.L"] + lm["shoulder.R"])
    return lm


def segment_coms(table: SegmentTable, landmarks: Mapping[str, np.ndarray]) -> dict:
    """Centre of mass of every segment: start + com_fraction · (end − start), shape (n, 3) each."""
    return {seg.name: landmarks[seg.start] + seg.com_fraction * (landmarks[seg.end] - landmarks[seg.start])
            for seg in table.segments}


def whole_body_com(table: SegmentTable, landmarks: Mapping[str, np.ndarray], only: Sequence[str] | None = None):
    """Mass-weighted mean of segment CoMs (optionally of a subset), shape (n, 3), and its mass fraction."""
    coms = segment_coms(table, landmarks)
    segs = [s for s in table.segments if only is None or s.name in only]
    total = sum(s.mass_fraction for s in segs)
    com = sum(s.mass_fraction * coms[s.name] for s in segs) / total
    return com, total
