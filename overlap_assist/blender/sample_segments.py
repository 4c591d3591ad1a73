"""Sampling the evaluated rig's body segments for the spin check and the flight fix.

Per (sub-)frame: world head, tail and x axis of every bone the segment table needs, after
``scene.frame_set`` (constraints, drivers and NLA layers included, so a flight-fix layer is seen),
turned into the core's :class:`SegmentMotion` (metres, seconds) and the whole-body CoM. The
bone matching is the analysis' (``sample_body``); the spin check samples an even sub-frame grid,
the flight fix the analysis' own frames (whole frames). The current frame is restored.
"""
import numpy as np

from ..core import body_segments as segs
from ..core import segment_inertia as inertia
from ..core.angular_momentum import SegmentMotion, body_axes_from_landmarks
from ..core.errors import InputError
from .sample_body import check_armature, frame_range, sample_bones, sample_times, splined_keys

# The bone whose x axis gives each segment's mediolateral direction (the trunk uses its landmarks).
_SEGMENT_ROLE = {"head_neck": "head", "upper_arm": "upper_arm", "forearm": "forearm", "hand": "hand",
                 "thigh": "thigh", "shank": "shin", "foot": "foot"}


def _segment_role(name):
    base, _, side = name.partition(".")
    role = _SEGMENT_ROLE.get(base)
    return None if role is None else (f"{role}.{side}" if side else role)


def segment_roles(obj, settings):
    """(roles, table) for the center of mass, or raise InputError naming the missing roles."""
    table = segs.SEGMENT_TABLES[settings.segment_table]
    deform = [b.name for b in obj.data.bones if b.use_deform] or [b.name for b in obj.data.bones]
    roles, _unmatched = segs.match_roles(deform, settings.overrides())
    missing_bones = [b for bl in roles.values() for b in bl if b not in obj.data.bones]
    if missing_bones:
        raise InputError(f"override names bones that are not in '{obj.name}': {', '.join(missing_bones)}")
    needed = [r for r in segs.required_roles(table) if r not in roles]
    if needed:
        raise InputError("the spin check and the flight fix need the body's segments; no bone found for: "
                         + ", ".join(needed) + " (set Bone overrides in Body Motion)")
    return roles, table


def segment_motion(obj, scene, settings, progress=None, frames=None):
    """Sample ``obj``'s segments at ``frames`` (default: the frame range at the Samples per frame
    setting, the even grid the spin check's angular velocities need).

    Returns
    -------
    motion : SegmentMotion (masses are the table's fractions: H per kg of body mass)
    com_m : ndarray (n, 3), the whole-body CoM (metres)
    """
    check_armature(obj)
    roles, table = segment_roles(obj, settings)
    start, end = frame_range(scene, settings)
    if frames is None:
        frames = sample_times(start, end, settings.samples_per_frame)
    frames = np.asarray(frames, dtype=float)
    fps = scene.render.fps / scene.render.fps_base
    scale = scene.unit_settings.scale_length
    names = sorted({b for bl in roles.values() for b in bl})
    with splined_keys(obj, settings.spline_blocked_keys):
        heads, tails, xaxes = sample_bones(obj, scene, names, frames, progress, x_axes=True)
    heads = {k: v * scale for k, v in heads.items()}
    tails = {k: v * scale for k, v in tails.items()}
    lm = segs.landmark_positions(roles, heads, tails)
    coms = segs.segment_coms(table, lm)
    com_k = np.stack([coms[s.name] for s in table.segments], axis=1)
    long_axis = np.stack([lm[s.end] - lm[s.start] for s in table.segments], axis=1)
    trunk_hint = (lm["hip_centre.L"] - lm["hip_centre.R"]) + (lm["shoulder.L"] - lm["shoulder.R"])
    hints = []
    for s in table.segments:
        role = _segment_role(s.name)
        hints.append(trunk_hint if role is None else xaxes[roles[role][0]])
    hints = np.stack(hints, axis=1)
    along = np.abs(np.sum(hints * long_axis, axis=-1)) / (np.linalg.norm(hints, axis=-1)
                                                        * np.linalg.norm(long_axis, axis=-1) + 1e-300)
    if np.any(along > 0.999) or np.any(np.linalg.norm(long_axis, axis=-1) < 1e-9):
        raise InputError("a body segment has zero length or its bone's x axis lies along it: check the rig's "
                         "bone rolls and the Bone overrides")
    frames_rot = inertia.segment_frames(long_axis, hints)
    radii = inertia.radii_metres(table, inertia.segment_lengths(table, lm))
    axes = body_axes_from_landmarks(lm["mid_hips"], lm["mid_shoulders"], lm["hip_centre.L"], lm["hip_centre.R"])
    mass = np.array([s.mass_fraction for s in table.segments])
    motion = SegmentMotion(frames=frames, fps=fps, mass_kg=mass, com_m=com_k, rotations=frames_rot,
                           radii_m=radii, body_axes=axes, names=tuple(s.name for s in table.segments))
    com, _ = segs.whole_body_com(table, lm)
    return motion, com
