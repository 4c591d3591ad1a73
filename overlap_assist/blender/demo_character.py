"""The demo character "Wren": a stick rig with simple meshes, four hanging chains and a jump.

Everything here is our own invented scenario (proportions, palette, jump numbers). The rig
faces +x (the direction of travel) with its left side at +y, so a camera on -y sees it in
profile. Body bones are named so ``core.body_segments.match_roles`` finds every role, and the
chain bones match none (they are not part of the body's centre of mass).

The performance is keyed in three layers of one action:
  * limbs: upper arms, forearms, spine, neck, head, legs (two-bone IK solved here in numpy,
    feet planted on the ledges) as quaternion keys at every frame;
  * hips: location keys chosen so the *centre of mass* (same segment table as the analysis)
    follows the analytic jump of ``core.jump_curves`` exactly at every frame. A clean
    jump is therefore ballistic in its CoM whatever the arms do, and a late arm swing shows up
    as the rest of the body dropping, as it would in the air.
"""
from dataclasses import dataclass

import bmesh
import bpy
import numpy as np
from mathutils import Matrix

from ..core import body_segments as segs
from ..core.jump_curves import JumpSpec, jump_events, jump_position
from .demo_scene import build_armature, key_location
from . import anim_data

# (name, parent, head xyz (m), tail xyz (m)): rest pose, z up, facing +x, left side at +y.
BODY_BONES = (
    ("root", None, (0, 0, 0), (-0.3, 0, 0)),
    ("hips", "root", (0, 0, 0.95), (0, 0, 1.08)),
    ("spine", "hips", (0, 0, 1.08), (0, 0, 1.42)),
    ("neck", "spine", (0, 0, 1.42), (0, 0, 1.52)),
    ("head", "neck", (0, 0, 1.52), (0, 0, 1.74)),
    ("upper_arm.L", "spine", (0, 0.19, 1.40), (0, 0.21, 1.12)),
    ("forearm.L", "upper_arm.L", (0, 0.21, 1.12), (0, 0.22, 0.87)),
    ("hand.L", "forearm.L", (0, 0.22, 0.87), (0, 0.22, 0.71)),
    ("upper_arm.R", "spine", (0, -0.19, 1.40), (0, -0.21, 1.12)),
    ("forearm.R", "upper_arm.R", (0, -0.21, 1.12), (0, -0.22, 0.87)),
    ("hand.R", "forearm.R", (0, -0.22, 0.87), (0, -0.22, 0.71)),
    ("thigh.L", "hips", (0, 0.10, 0.95), (0, 0.10, 0.52)),
    ("shin.L", "thigh.L", (0, 0.10, 0.52), (0, 0.10, 0.09)),
    ("foot.L", "shin.L", (0, 0.10, 0.09), (0.16, 0.10, 0.02)),
    ("thigh.R", "hips", (0, -0.10, 0.95), (0, -0.10, 0.52)),
    ("shin.R", "thigh.R", (0, -0.10, 0.52), (0, -0.10, 0.09)),
    ("foot.R", "shin.R", (0, -0.10, 0.09), (0.16, -0.10, 0.02)),
)


def _links(stem, parent, points):
    """Bone rows for a chain through ``points`` (root-most first), named stem.001, stem.002, ..."""
    rows = []
    for k in range(len(points) - 1):
        rows.append((f"{stem}.{k + 1:03d}", parent if k == 0 else f"{stem}.{k:03d}", points[k], points[k + 1]))
    return tuple(rows)


# Long, hanging chains so the drag, float and whip read at thumbnail size.
PONYTAIL = _links("ponytail", "head", ((-0.10, 0, 1.70), (-0.18, 0, 1.60), (-0.23, 0, 1.47),
                                       (-0.26, 0, 1.33), (-0.28, 0, 1.19)))
SCARF = _links("scarf_end", "neck", ((-0.13, -0.03, 1.46), (-0.17, -0.03, 1.31), (-0.20, -0.03, 1.16),
                                     (-0.22, -0.03, 1.01), (-0.23, -0.03, 0.87)))
STRAP = _links("bag_strap", "spine", ((0.02, -0.27, 1.36), (0.0, -0.28, 1.20), (-0.02, -0.28, 1.04),
                                      (-0.03, -0.28, 0.88)))
TAIL = _links("tail", "hips", ((-0.12, 0, 0.96), (-0.24, 0, 0.90), (-0.34, 0, 0.81), (-0.42, 0, 0.70),
                               (-0.47, 0, 0.57)))
CHARACTER_BONES = BODY_BONES + PONYTAIL + SCARF + STRAP + TAIL

# (chain name, shipped preset, bones root to tip)
CHAINS = (
    ("ponytail", "ponytail", [b[0] for b in PONYTAIL]),
    ("scarf_end", "scarf_end", [b[0] for b in SCARF]),
    ("bag_strap", "strap", [b[0] for b in STRAP]),
    ("tail", "light_tail", [b[0] for b in TAIL]),
)
# (bone, shape, radius m): keep the chains out of the body.
COLLIDERS = (("spine", "CAPSULE", 0.13), ("hips", "CAPSULE", 0.14), ("head", "SPHERE", 0.12))

# Our palette (linear RGB for Workbench object colours).
PALETTE = {
    "skin": (0.78, 0.52, 0.38), "shirt": (0.13, 0.33, 0.55), "trousers": (0.16, 0.16, 0.22),
    "shoe": (0.05, 0.05, 0.06), "hair": (0.95, 0.42, 0.05), "scarf": (0.85, 0.06, 0.22),
    "strap": (0.95, 0.80, 0.10), "bag": (0.55, 0.30, 0.08), "tail": (0.10, 0.70, 0.45),
    "ledge": (0.42, 0.40, 0.37), "sky": (0.80, 0.86, 0.90),
}

# (bone, palette key, shape, radius or (half-width, half-depth), scale along the bone)
BODY_MESHES = (
    ("hips", "trousers", "box", (0.11, 0.15), 1.0), ("spine", "shirt", "box", (0.10, 0.17), 1.0),
    ("neck", "skin", "capsule", 0.045, 1.0), ("head", "skin", "sphere", 0.12, 1.0),
    ("upper_arm.L", "shirt", "capsule", 0.05, 1.0), ("forearm.L", "skin", "capsule", 0.04, 1.0),
    ("hand.L", "skin", "capsule", 0.04, 0.6), ("upper_arm.R", "shirt", "capsule", 0.05, 1.0),
    ("forearm.R", "skin", "capsule", 0.04, 1.0), ("hand.R", "skin", "capsule", 0.04, 0.6),
    ("thigh.L", "trousers", "capsule", 0.07, 1.0), ("shin.L", "trousers", "capsule", 0.055, 1.0),
    ("foot.L", "shoe", "box", (0.05, 0.04), 1.15), ("thigh.R", "trousers", "capsule", 0.07, 1.0),
    ("shin.R", "trousers", "capsule", 0.055, 1.0), ("foot.R", "shoe", "box", (0.05, 0.04), 1.15),
)
CHAIN_MESHES = {"ponytail": ("hair", "capsule", 0.065), "scarf_end": ("scarf", "box", (0.10, 0.02)),
                "bag_strap": ("strap", "box", (0.035, 0.02)), "tail": ("tail", "capsule", 0.055)}


@dataclass(frozen=True)
class DemoJump:
    """One clip of the scenario: a jump spec plus how the arms are swung."""
    name: str
    title: str
    spec: JumpSpec
    arm_swing: str
    """'early': back in the dip, forward-up during propulsion, peaking before takeoff.
    'late': arms hang through the push and swing forward-up after takeoff (a flaw)."""
    trunk_balance: bool = True
    """True: the trunk turns in flight by what keeps the angular momentum constant while the
    arms and legs move (clean). False: the trunk keeps its keyed pitch, so the limbs' motion
    starts a spin from nothing (a flaw)."""


DEMO_JUMPS = (
    # A clean jump across a gap: countermovement, arms swung during the push, ballistic flight.
    DemoJump("good_jump", "Good jump", JumpSpec(forward_mps=2.0), "early"),
    # The same push animated with a floaty hang (0.45 g), late arms and forward speed easing off.
    DemoJump("floaty_jump", "Floaty jump",
             JumpSpec(forward_mps=2.0, flight_gravity_mps2=0.45 * 9.80665, flight_forward_accel_mps2=-1.0),
             "late", trunk_balance=False),
)

ANKLE_HEIGHT_M = 0.09
"""Ankle height of a planted foot (rest pose of the rig)."""
CAMERA_VIEW_HEIGHT_M = 3.3
"""Height the portrait camera frames: the floaty apex with a raised hand still fits."""
CAMERA_VIEW_BOTTOM_M = -0.1
"""Lowest point in view: a strip of ledge below the feet."""
BALANCE_PASSES = 6
"""Newton passes on the trunk's turning rate (the limbs' relative motion barely depends on it)."""
COM_ITERATIONS = 6
"""Fixed-point passes hips ← target CoM − (CoM − hips); the legs' share shrinks each pass (< 1e-6 m)."""


# ------------------------------------------------------------------ poses over time

def _ease(u):
    """Smoothstep 3u² − 2u³ on [0, 1]: zero slope at both ends."""
    u = np.clip(u, 0.0, 1.0)
    return u * u * (3 - 2 * u)


def _smooth_track(t_s, keys):
    """Angle (rad) over time through (time_s, degrees) keys, eased in and out between keys (C1)."""
    kt = np.array([k[0] for k in keys], dtype=float)
    kv = np.radians([k[1] for k in keys])
    i = np.clip(np.searchsorted(kt, t_s, side="right") - 1, 0, len(kt) - 2)
    return kv[i] + (kv[i + 1] - kv[i]) * _ease((t_s - kt[i]) / np.maximum(kt[i + 1] - kt[i], 1e-9))


def performance_angles(ev, t_s, arm_swing, fps):
    """Per-bone pitch angles (rad, about the lateral axis, relative to the parent) except the legs."""
    on, brake, low, to, apex, td, land = (ev[k] for k in ("onset_s", "braking_s", "lowest_s", "takeoff_s",
                                                          "apex_s", "touchdown_s", "landing_end_s"))
    end = ev["duration_s"]
    rec = min(land + 0.45, end)
    if arm_swing == "early":
        arm = [(0, 0), (on, 0), (brake, 40), (low, 55), (to - 1.5 / fps, -150), (apex, -135), (td, -100),
               (land, -55), (rec, -10), (end + 1, 0)]
        elbow = [(0, 0), (low, -5), (to - 1.5 / fps, -25), (td, -30), (rec, -5), (end + 1, 0)]
    else:
        arm = [(0, 0), (on, 0), (low, 12), (to, 8), (to + 0.32, -150), (td - 0.15, -130), (td, -100),
               (land, -55), (rec, -10), (end + 1, 0)]
        elbow = [(0, 0), (to, -3), (to + 0.32, -25), (td, -30), (rec, -5), (end + 1, 0)]
    spine = [(0, 0), (on, 0), (low, 28), (to, 4), (apex, -4), (td, 6), (land, 26), (rec, 6), (end + 1, 0)]
    sp = _smooth_track(t_s, spine)
    arm_a, elbow_a = _smooth_track(t_s, arm), _smooth_track(t_s, elbow)
    out = {"spine": sp, "neck": -0.45 * sp, "head": -0.4 * sp}
    for side in "LR":
        # Positive pitch swings a hanging limb back, negative forward (+x) and up.
        out[f"upper_arm.{side}"] = arm_a
        out[f"forearm.{side}"] = elbow_a
        out[f"hand.{side}"] = 0.5 * elbow_a
    return out


def _rot_y(phi, v):
    """Rotate vectors v (n, 3) about +y by angles phi (n,): z turns toward +x for phi > 0."""
    c, s = np.cos(phi), np.sin(phi)
    return np.stack([c * v[:, 0] + s * v[:, 2], v[:, 1], -s * v[:, 0] + c * v[:, 2]], axis=1)


def _pitch_of(d):
    """Pitch angle phi with R_y(phi)·(0, 0, -1) ∥ d (d in the x-z plane), shape (n,)."""
    return np.arctan2(-d[:, 0], -d[:, 2])


def leg_ik(hip, ankle_target, l1, l2):
    """Two-bone IK in the sagittal plane, knee forward. Returns (thigh pitch, shin pitch) absolute.

    Out of reach, the leg straightens toward the target (the foot leaves the ground: toe-off).
    """
    v = ankle_target - hip
    d = np.clip(np.hypot(v[:, 0], v[:, 2]), 0.25 * (l1 + l2), (l1 + l2) * (1 - 1e-6))
    phi_v = _pitch_of(v)
    alpha = np.arccos(np.clip((l1 * l1 + d * d - l2 * l2) / (2 * l1 * d), -1, 1))
    beta = np.arccos(np.clip((l1 * l1 + l2 * l2 - d * d) / (2 * l1 * l2), -1, 1))
    thigh = phi_v - alpha
    return thigh, thigh + (np.pi - beta)


class _Rig:
    """Rest geometry of the body bones for forward kinematics in numpy."""

    def __init__(self, bones=BODY_BONES):
        self.rows = {b[0]: b for b in bones}
        self.order = [b[0] for b in bones]

    def fk(self, hips_pos, pitch):
        """World heads/tails (n, 3) of the body bones for hips positions and relative pitches."""
        n = len(hips_pos)
        heads, tails, absolute = {}, {}, {}
        for name in self.order:
            _, parent, head, tail = self.rows[name]
            head, tail = np.array(head, float), np.array(tail, float)
            phi = pitch.get(name, np.zeros(n))
            if parent is None:
                heads[name], absolute[name] = np.tile(head, (n, 1)), np.zeros(n)
            elif name == "hips":
                heads[name], absolute[name] = hips_pos.copy(), phi
            else:
                p_head = np.array(self.rows[parent][2], float)
                heads[name] = heads[parent] + _rot_y(absolute[parent], np.tile(head - p_head, (n, 1)))
                absolute[name] = absolute[parent] + phi
            tails[name] = heads[name] + _rot_y(absolute[name], np.tile(tail - head, (n, 1)))
        return heads, tails, absolute


def _momentum_about_y(t_s, heads, tails, roles, table, fps):
    """Whole-body angular momentum about the CoM along the lateral axis (per kg) and the
    whole-body moment of inertia about that axis, by the spin check's own operator."""
    from ..core import segment_inertia as inertia
    from ..core.angular_momentum import SegmentMotion, angular_momentum
    lm = segs.landmark_positions(roles, heads, tails)
    coms = segs.segment_coms(table, lm)
    com_k = np.stack([coms[s.name] for s in table.segments], axis=1)
    long_axis = np.stack([lm[s.end] - lm[s.start] for s in table.segments], axis=1)
    lateral = np.zeros_like(long_axis)
    lateral[..., 1] = 1.0                     # every segment of the sagittal performance turns about y
    rot = inertia.segment_frames(long_axis, lateral)
    radii = inertia.radii_metres(table, inertia.segment_lengths(table, lm))
    mass = np.array([s.mass_fraction for s in table.segments])
    axes = np.tile(np.eye(3), (len(t_s), 1, 1))
    motion = SegmentMotion(frames=1 + t_s * fps, fps=fps, mass_kg=mass, com_m=com_k, rotations=rot,
                           radii_m=radii, body_axes=axes)
    h, _err, _parts = angular_momentum(motion)
    _com, tensor = inertia.whole_body_inertia(mass, com_k, radii, rot)
    return h[:, 1], tensor[:, 1, 1]


def _pose_for_com(rig, t, ev, pitch, theta, target, rest_com, roles, table, start_x):
    """Hips positions and leg pitches so the CoM is on ``target``, the trunk pitched by ``theta``.

    Feet: planted at the start, reach forward for the landing, planted where they touch. In
    the air the ankles travel with the hips (in the hips' turned frame): tuck by mid-flight,
    reach down so they arrive on the landing ledge at the touchdown instant itself (the CoM
    and the feet land together). Returns (hips (n, 3), pitch with the legs, land_x).
    """
    n = len(t)
    rows = {b[0]: b for b in BODY_BONES}
    l1, l2 = (float(np.linalg.norm(np.subtract(rows[b][3], rows[b][2]))) for b in ("thigh.L", "shin.L"))
    to, td = ev["takeoff_s"], ev["touchdown_s"]
    air = (t > to) & (t < td)
    u = np.clip((t - to) / (td - to), 0, 1)
    pitch = dict(pitch)
    if np.any(theta):
        pitch["hips"] = theta
    hips = np.tile([start_x, 0, 0.95], (n, 1)) + (target - rest_com)
    down = np.array([0.0, 0.0, -1.0])
    plant0 = np.tile([start_x, 0, ANKLE_HEIGHT_M], (n, 1))
    i_to = max(int(np.searchsorted(t, to, side="right")) - 1, 0)      # last sample on the ground
    theta_td = float(np.interp(td, t, theta))
    for _ in range(COM_ITERATIONS):
        th0, sh0 = leg_ik(hips, plant0, l1, l2)
        ankle0 = hips + _rot_y(th0, np.tile(l1 * down, (n, 1))) + _rot_y(sh0, np.tile(l2 * down, (n, 1)))
        rel_to = ankle0[i_to] - hips[i_to]
        rel_tuck = np.array([-0.12, 0, -0.55])
        hip_td = np.array([np.interp(td, t, hips[:, k]) for k in range(3)])
        land_world = np.array([0.16, 0, max(ANKLE_HEIGHT_M - hip_td[2], -(l1 + l2) * 0.995)])
        rel_land = _rot_y(np.array([-theta_td]), land_world[None])[0]    # in the hips' turned frame
        rel = np.where((u < 0.5)[:, None], rel_to + (rel_tuck - rel_to) * _ease(2 * u)[:, None],
                       rel_tuck + (rel_land - rel_tuck) * _ease(2 * u - 1)[:, None])
        land_x = hip_td[0] + land_world[0]
        target_ankle = np.where(air[:, None], hips + _rot_y(theta, rel), plant0)
        target_ankle[t >= td] = [land_x, 0, ANKLE_HEIGHT_M]
        thigh, shin = leg_ik(hips, target_ankle, l1, l2)
        foot_rel = np.where(air, np.radians(25) * np.sin(np.pi * u), 0.0)
        for side in "LR":
            pitch[f"thigh.{side}"] = thigh - theta
            pitch[f"shin.{side}"] = shin - thigh
            pitch[f"foot.{side}"] = -shin + foot_rel
        heads, tails, _ = rig.fk(hips, pitch)
        com, _ = segs.whole_body_com(table, segs.landmark_positions(roles, heads, tails))
        hips = hips + (target - com)
    return hips, pitch, land_x


def _landing_return(t, td, land_end, theta_td, rate_td):
    """Trunk pitch after touchdown: from (theta, rate) at touchdown back to upright by the end
    of the landing (cubic Hermite; the ground's forces do the turning)."""
    span = max(land_end - td, 1e-3)
    s = np.clip((t - td) / span, 0.0, 1.0)
    return theta_td * (2 * s**3 - 3 * s**2 + 1) + rate_td * span * (s**3 - 2 * s**2 + s)


def _takeoff_lead(t, start, to, rate_to):
    """Trunk pitch during the push: from upright and still at ``start`` to upright turning at
    ``rate_to`` at takeoff (cubic Hermite; the push gives the body its takeoff spin)."""
    span = max(to - start, 1e-3)
    s = np.clip((t - start) / span, 0.0, 1.0)
    return rate_to * span * (s**3 - s**2)


def solve_performance(jump: DemoJump, fps, start_x=0.0, table=segs.DEMPSTER_WINTER, samples_per_frame=8):
    """Hips positions and bone pitches per frame so the CoM follows the analytic jump.

    The CoM is exact at whole frames (where the keys are); between keys Blender's Bézier
    interpolation of hips and rotations leaves sub-millimetre differences. The pose is solved on
    a grid of ``samples_per_frame`` samples per frame (the angular momentum needs the motion
    between keys) and returned at whole frames.

    With ``jump.trunk_balance`` the hips (and with them the whole body) turn in flight by what
    keeps the whole-body angular momentum about the CoM at its takeoff value while the limbs
    move, as a body in the air must (``_momentum_about_y`` uses the spin check's own operator).

    Returns dict with frames (n,), hips (n, 3) metres, pitch {bone: (n,) rad}, com (n, 3),
    heads {bone: (n, 3)}, the analytic events (s), land_x (where the feet plant on landing),
    and the fine grid's t_s, angular momentum h_y (per kg) and trunk pitch theta (rad).
    """
    ev = jump_events(jump.spec)
    n_frames = int(np.ceil(ev["duration_s"] * fps)) + 1
    spf = int(samples_per_frame)
    t = np.arange((n_frames - 1) * spf + 1, dtype=float) / (fps * spf)
    rig = _Rig()
    roles, _ = segs.match_roles([b[0] for b in BODY_BONES if b[0] != "root"])
    upper = performance_angles(ev, t, jump.arm_swing, fps)
    rest_heads, rest_tails, _ = rig.fk(np.tile([0, 0, 0.95], (len(t), 1)), {})
    rest_com, _ = segs.whole_body_com(table, segs.landmark_positions(roles, rest_heads, rest_tails))
    target = rest_com + jump_position(jump.spec, t) - [0, 0, jump.spec.start_height_m] + [start_x, 0, 0]
    to, td = ev["takeoff_s"], ev["touchdown_s"]
    air = (t > to) & (t < td)
    theta, rate = np.zeros(len(t)), np.zeros(len(t))
    for _ in range(BALANCE_PASSES if jump.trunk_balance else 1):
        hips, pitch, land_x = _pose_for_com(rig, t, ev, upper, theta, target, rest_com, roles, table, start_x)
        if not jump.trunk_balance:
            break
        heads, tails, _ = rig.fk(hips, pitch)
        h_y, inertia_y = _momentum_about_y(t, heads, tails, roles, table, fps)
        # Newton step on the turning rate: an extra rate w of the whole body adds I w to H. The
        # takeoff momentum h0 is the one that brings the trunk back upright at touchdown.
        step = np.where(air, rate - np.nan_to_num(h_y) / inertia_y, 0.0)
        h0 = -np.sum(np.where(air, step, 0.0)) / np.sum(np.where(air, 1.0 / inertia_y, 0.0))
        rate = np.where(air, step + h0 / inertia_y, 0.0)
        theta = np.concatenate([[0.0], np.cumsum(0.5 * (rate[1:] + rate[:-1]) * np.diff(t))])
        theta_td, rate_td = float(np.interp(td, t, theta)), float(np.interp(td, t, rate))
        rate_to = float(rate[np.flatnonzero(air)[0]])
        theta = np.where(t < td, theta, _landing_return(t, td, ev["landing_end_s"], theta_td, rate_td))
        theta = np.where(t <= to, _takeoff_lead(t, ev["lowest_s"], to, rate_to), theta)
    heads, tails, _ = rig.fk(hips, pitch)
    com, _ = segs.whole_body_com(table, segs.landmark_positions(roles, heads, tails))
    h_y, _inertia = _momentum_about_y(t, heads, tails, roles, table, fps)
    whole = slice(0, None, spf)
    return {"frames": 1 + np.arange(n_frames, dtype=float), "hips": hips[whole],
            "pitch": {k: v[whole] for k, v in pitch.items()}, "com": com[whole], "events": ev,
            "land_x": land_x, "heads": {k: v[whole] for k, v in heads.items()},
            "t_s": t, "h_y": h_y, "theta": theta}


# ------------------------------------------------------------------ keys

def key_pitches(obj, frames, pitch):
    """Key each bone's pitch (rotation about the world lateral axis) as quaternions, one bulk write per curve."""
    bag = anim_data.active_fcurves(obj, create=True)
    lateral = np.array([0.0, 1.0, 0.0])
    for name, phi in pitch.items():
        pb = obj.pose.bones[name]
        pb.rotation_mode = 'QUATERNION'
        rest = np.array(obj.data.bones[name].matrix_local, dtype=float)[:3, :3]
        axis = rest.T @ lateral            # the lateral axis in the bone's rest frame
        q = np.concatenate([np.cos(phi / 2)[:, None], np.sin(phi / 2)[:, None] * axis[None, :]], axis=1)
        path = pb.path_from_id("rotation_quaternion")
        for i in range(4):
            anim_data.write_keys(anim_data.ensure_fcurve(bag, path, i, name), frames, q[:, i], 'BEZIER')


def key_camera_follow(cam, frames, x):
    """Key the camera's x to follow the body (z and framing stay fixed, so heights compare)."""
    if cam.animation_data is None:
        cam.animation_data_create()
    bag = anim_data.active_fcurves(cam, create=True)
    anim_data.write_keys(anim_data.ensure_fcurve(bag, "location", 0, "Follow"), frames, x, 'BEZIER')


# ------------------------------------------------------------------ meshes

def _material(key):
    name = "Demo " + key
    mat = bpy.data.materials.get(name) or bpy.data.materials.new(name)
    mat.diffuse_color = (*PALETTE[key], 1.0)
    return mat


def _shape_mesh(name, shape, size, length):
    """A mesh in bone space: y runs from the head (0) to the tail (length)."""
    bm = bmesh.new()
    if shape == "box":
        hw, hd = size
        bmesh.ops.create_cube(bm, size=1.0)
        bmesh.ops.scale(bm, vec=(2 * hw, length, 2 * hd), verts=bm.verts)
        bmesh.ops.translate(bm, vec=(0, 0.5 * length, 0), verts=bm.verts)
    else:
        r = size
        bmesh.ops.create_uvsphere(bm, u_segments=16, v_segments=10, radius=r)
        bmesh.ops.rotate(bm, cent=(0, 0, 0), matrix=Matrix.Rotation(np.pi / 2, 3, 'X'), verts=bm.verts)
        if shape == "capsule":
            for v in bm.verts:
                if v.co.y > 1e-6:
                    v.co.y += length
        else:
            bmesh.ops.translate(bm, vec=(0, 0.5 * length, 0), verts=bm.verts)
    mesh = bpy.data.meshes.new(name)
    bm.to_mesh(mesh)
    bm.free()
    for p in mesh.polygons:
        p.use_smooth = shape != "box"
    return mesh


def add_bone_mesh(rig, collection, bone, key, shape, size, scale=1.0):
    length = rig.data.bones[bone].length * scale
    obj = bpy.data.objects.new(f"{rig.name} {bone}", _shape_mesh(f"{rig.name} {bone}", shape, size, length))
    obj.data.materials.append(_material(key))
    obj.color = (*PALETTE[key], 1.0)
    collection.objects.link(obj)
    obj.parent, obj.parent_type, obj.parent_bone = rig, 'BONE', bone
    # A bone child sits at the bone's tail; shift it back to the head so the mesh spans the bone.
    obj.matrix_parent_inverse = Matrix.Translation((0, -rig.data.bones[bone].length, 0))
    obj.hide_select = True
    return obj


def add_box(collection, name, key, lo, hi):
    bm = bmesh.new()
    bmesh.ops.create_cube(bm, size=1.0)
    lo, hi = np.array(lo, float), np.array(hi, float)
    bmesh.ops.scale(bm, vec=tuple(hi - lo), verts=bm.verts)
    bmesh.ops.translate(bm, vec=tuple(0.5 * (hi + lo)), verts=bm.verts)
    mesh = bpy.data.meshes.new(name)
    bm.to_mesh(mesh)
    bm.free()
    obj = bpy.data.objects.new(name, mesh)
    obj.data.materials.append(_material(key))
    obj.color = (*PALETTE[key], 1.0)
    collection.objects.link(obj)
    return obj


def dress(rig, collection):
    """Parent simple meshes to the rig's bones (body, hair, scarf, strap with bag, tail)."""
    for bone, key, shape, size, scale in BODY_MESHES:
        add_bone_mesh(rig, collection, bone, key, shape, size, scale)
    for chain, _preset, bones in CHAINS:
        key, shape, size = CHAIN_MESHES[chain]
        for k, bone in enumerate(bones):
            taper = 1.0 - 0.35 * k / max(len(bones) - 1, 1)
            sz = size * taper if shape != "box" else size
            add_bone_mesh(rig, collection, bone, key, shape, sz)
    # The bag hangs at the end of the strap.
    bag = add_bone_mesh(rig, collection, STRAP[-1][0], "bag", "box", (0.13, 0.06), 1.5)
    bag.data.transform(Matrix.Translation((0, 0.5 * rig.data.bones[STRAP[-1][0]].length, 0)))
    bag.name = f"{rig.name} bag"


# ------------------------------------------------------------------ the scene

def setup_chains(rig, fps):
    """Chains from the shipped presets, plus body colliders."""
    from ..core.presets import preset_by_name
    s = rig.overlap_assist
    s.chains.clear()
    for name, preset, bones in CHAINS:
        chain = s.chains.add()
        chain.name = name
        for b in bones:
            chain.bones.add().name = b
        chain.apply_preset(preset_by_name(preset), fps)
    s.colliders.clear()
    for bone, shape, radius in COLLIDERS:
        col = s.colliders.add()
        col.name = col.bone = bone
        col.shape, col.radius = shape, radius
    s.active_chain = 0


def build_set(scene, collection, land_x, frames, follow_x, small=False):
    """Two ledges with a gap, a side camera following the body, a sun and a sky colour."""
    edge1 = 0.30
    edge2 = max(edge1 + 0.35, land_x - 0.45)
    add_box(collection, "Ledge takeoff", "ledge", (-4.0, -1.2, -2.0), (edge1, 1.2, 0.0))
    add_box(collection, "Ledge landing", "ledge", (edge2, -1.2, -2.0), (land_x + 6.0, 1.2, 0.0))
    cam_data = bpy.data.cameras.new("Side camera")
    cam_data.type = 'ORTHO'
    cam_data.ortho_scale = CAMERA_VIEW_HEIGHT_M
    cam = bpy.data.objects.new("Side camera", cam_data)
    collection.objects.link(cam)
    cam.location = (0.0, -8.0, CAMERA_VIEW_BOTTOM_M + 0.5 * CAMERA_VIEW_HEIGHT_M)
    cam.rotation_euler = (np.pi / 2, 0.0, 0.0)
    scene.camera = cam
    key_camera_follow(cam, frames, follow_x)
    sun = bpy.data.objects.new("Sun", bpy.data.lights.new("Sun", 'SUN'))
    sun.rotation_euler = (0.8, 0.2, -0.6)
    collection.objects.link(sun)
    world = bpy.data.worlds.get("Demo sky") or bpy.data.worlds.new("Demo sky")
    world.color = PALETTE["sky"]
    scene.world = world
    return cam


def frame_camera(scene, view_height_m):
    """Open the side camera up to ``view_height_m`` of height from the same ledge strip at the
    bottom (no smaller than the standard view). Returns the view height set."""
    height = max(float(view_height_m), CAMERA_VIEW_HEIGHT_M)
    cam = scene.camera
    cam.data.ortho_scale = height
    cam.location.z = CAMERA_VIEW_BOTTOM_M + 0.5 * height
    return height


def setup_render(scene, width, height):
    """Workbench, flat object colours, outlines: renders headless with software GL on every version."""
    scene.render.engine = 'BLENDER_WORKBENCH'
    scene.render.resolution_x, scene.render.resolution_y = width, height
    scene.render.resolution_percentage = 100
    scene.render.film_transparent = False
    scene.render.image_settings.file_format = 'PNG'
    scene.render.image_settings.color_mode = 'RGB'
    shading = scene.display.shading
    shading.light = 'STUDIO'
    shading.color_type = 'OBJECT'
    shading.show_object_outline = True
    shading.show_shadows = False
    scene.display.render_aa = 'FXAA' if width < 200 else '5'
    scene.view_settings.view_transform = 'Standard'


def build_clip(jump: DemoJump, fps=24, render_size=(320, 400)):
    """A new scene named after the clip with the dressed, keyed character, set and camera.

    Returns (scene, rig, performance dict).
    """
    scene = bpy.data.scenes.new(jump.name)
    bpy.context.window.scene = scene
    scene.render.fps, scene.render.fps_base = fps, 1.0
    scene.gravity = (0.0, 0.0, -9.80665)
    perf = solve_performance(jump, fps)
    rig = build_armature(f"Wren_{jump.name}", CHARACTER_BONES)
    rig.show_in_front = False
    frames = perf["frames"]
    key_pitches(rig, frames, perf["pitch"])
    key_location(rig, "hips", frames, perf["hips"])
    scene.frame_start, scene.frame_end = int(frames[0]), int(frames[-1])
    dress(rig, scene.collection)
    rig.hide_render = True
    setup_chains(rig, fps)
    build_set(scene, scene.collection, perf["land_x"], frames, perf["com"][:, 0])
    setup_render(scene, *render_size)
    scene.frame_set(scene.frame_start)
    return scene, rig, perf
