"""Sampling the evaluated rig into the core's MotionSamples (metres, seconds).

Positions come from ``pose.bones.foreach_get('matrix')`` after ``scene.frame_set`` at every
sub-frame, so constraints, drivers and NLA are included; the current frame is restored.
"""
import contextlib

import bpy
import numpy as np

from ..core import body_segments as segs
from ..core.body_types import MotionSamples
from ..core.constants import STANDARD_GRAVITY_MPS2
from ..core.errors import InputError



def check_armature(obj):
    """Raise InputError unless ``obj`` is an animated armature."""
    if obj is None or obj.type != 'ARMATURE':
        raise InputError("select an armature object (the character's rig) first")
    from .rig_motion import has_motion  # own keys, a parent's or a constraint target's (world motion counts)
    if not has_motion(obj):
        raise InputError(f"'{obj.name}' has no animation: key the body's motion first")


def frame_range(scene, settings):
    if settings.use_frame_range:
        start, end = settings.frame_start, settings.frame_end
    else:
        start, end = scene.frame_start, scene.frame_end
    if end <= start:
        raise InputError(f"frame range {start}-{end} is empty: set an end frame after the start frame")
    return start, end


def sample_times(start, end, samples_per_frame):
    """Uniform sample frames from start to end inclusive."""
    n = int(round((end - start) * samples_per_frame)) + 1
    return start + np.arange(n) / samples_per_frame


def gravity_mps2(scene, source):
    """Gravity in m/s² (scene gravity is stored in scene units/s²)."""
    if source == "STANDARD":
        return np.array([0.0, 0.0, -STANDARD_GRAVITY_MPS2])
    g = np.array(scene.gravity, dtype=float) * scene.unit_settings.scale_length
    if not np.linalg.norm(g) > 0:
        raise InputError("the scene's gravity is zero: set Scene > Gravity or choose standard gravity")
    return g


def pick_body_bone(obj, name):
    bones = obj.data.bones
    if name:
        if name not in bones:
            raise InputError(f"bone '{name}' is not in '{obj.name}': pick an existing root bone")
        return name
    roles, _ = segs.match_roles([b.name for b in bones])
    if "hips" in roles:
        return roles["hips"][0]
    tops = [b.name for b in bones if b.parent is None]
    if not tops:
        raise InputError(f"'{obj.name}' has no bones")
    return tops[0]


@contextlib.contextmanager
def splined_keys(obj, enabled):
    """Evaluate stepped/constant keys as Bézier through a temporary copy of the action.

    The user's action is never edited: a copy is assigned (same slot) while sampling and the
    original assignment is put back afterwards, even on error.
    """
    ad = obj.animation_data
    if not enabled or ad is None or ad.action is None:
        yield
        return
    from .anim_data import all_action_fcurves
    original, slot = ad.action, ad.action_slot
    temp = original.copy()
    temp.name = original.name + ".splined_tmp"
    try:
        bezier = bpy.types.Keyframe.bl_rna.properties["interpolation"].enum_items["BEZIER"].value
        for fc in all_action_fcurves(temp):
            n = len(fc.keyframe_points)
            fc.keyframe_points.foreach_set("interpolation", np.full(n, bezier, dtype=np.int32))
            fc.update()
        ad.action = temp
        if slot is not None:
            ad.action_slot = temp.slots.get(slot.identifier) or temp.slots[0]
        yield
    finally:
        ad.action = original
        if slot is not None:
            ad.action_slot = slot
        bpy.data.actions.remove(temp)


def sample_bones(obj, scene, bone_names, frames, progress=None):
    """World head and tail positions (scene units) of ``bone_names`` at each (fractional) frame.

    Returns dict name -> (n, 3) heads, dict name -> (n, 3) tails.
    """
    pbones = obj.pose.bones
    index = {b.name: i for i, b in enumerate(pbones)}
    idx = np.array([index[n] for n in bone_names], dtype=int)
    lengths = np.array([obj.data.bones[n].length for n in bone_names], dtype=float)
    nb = len(pbones)
    buf = np.empty(nb * 16, dtype=np.float32)
    heads = np.empty((len(frames), len(idx), 3))
    tails = np.empty_like(heads)
    saved = (scene.frame_current, scene.frame_subframe)
    try:
        for k, f in enumerate(frames):
            whole = int(np.floor(f))
            scene.frame_set(whole, subframe=float(f - whole))
            pbones.foreach_get("matrix", buf)
            mats = buf.reshape(nb, 4, 4).transpose(0, 2, 1)[idx].astype(float)  # column-major -> row-major
            world = np.array(obj.matrix_world, dtype=float)
            h = mats[:, :3, 3]
            t = h + mats[:, :3, 1] * lengths[:, None]
            heads[k] = h @ world[:3, :3].T + world[:3, 3]
            tails[k] = t @ world[:3, :3].T + world[:3, 3]
            if progress is not None and k % 16 == 0:
                progress(k / len(frames))
    finally:
        scene.frame_set(saved[0], subframe=saved[1])
    return ({n: heads[:, i] for i, n in enumerate(bone_names)},
            {n: tails[:, i] for i, n in enumerate(bone_names)})


def body_samples(obj, scene, settings, progress=None):
    """Sample ``obj`` as the analysis needs it.

    Returns (MotionSamples, warnings list).
    """
    check_armature(obj)
    start, end = frame_range(scene, settings)
    frames = sample_times(start, end, settings.samples_per_frame)
    scale = scene.unit_settings.scale_length
    fps = scene.render.fps / scene.render.fps_base
    g = gravity_mps2(scene, settings.gravity_source)
    warnings = []
    gn = float(np.linalg.norm(g))
    if not 1.0 < gn < 30.0:
        warnings.append(f"scene gravity is {gn:.3g} m/s² (scene units × unit scale {scale:g}): "
                        "set it in scene units (e.g. -981 in a centimetre scene) or choose standard gravity")
    body_bone = pick_body_bone(obj, settings.body_bone)
    source = "root"
    roles, unmatched = None, []
    table = segs.SEGMENT_TABLES[settings.segment_table]
    if settings.body_source == "COM":
        deform = [b.name for b in obj.data.bones if b.use_deform] or [b.name for b in obj.data.bones]
        roles, unmatched = segs.match_roles(deform, settings.overrides())
        missing_bones = [b for bl in roles.values() for b in bl if b not in obj.data.bones]
        if missing_bones:
            raise InputError(f"override names bones that are not in '{obj.name}': {', '.join(missing_bones)}")
        needed = [r for r in segs.required_roles(table) if r not in roles]
        if needed:
            warnings.append("center of mass needs bones for: " + ", ".join(needed)
                            + f"; using the root bone '{body_bone}' instead (set Bone overrides)")
        else:
            source = "com"
    names = [body_bone]
    if source == "com":
        names = sorted({b for bl in roles.values() for b in bl} | {body_bone})
    with splined_keys(obj, settings.spline_blocked_keys):
        heads, tails = sample_bones(obj, scene, names, frames, progress)
    heads = {k: v * scale for k, v in heads.items()}
    tails = {k: v * scale for k, v in tails.items()}
    kw = {}
    if source == "com":
        lm = segs.landmark_positions(roles, heads, tails)
        body, _ = segs.whole_body_com(table, lm)
        arms, arm_mass = segs.whole_body_com(table, lm, only=segs.ARM_SEGMENTS)
        rest_names = [s.name for s in table.segments if s.name not in segs.ARM_SEGMENTS]
        rest, _ = segs.whole_body_com(table, lm, only=rest_names)
        kw = dict(arm_com_m=arms, rest_com_m=rest, arm_mass_fraction=arm_mass)
    else:
        body = heads[body_bone]
    if np.ptp(body, axis=0).max() < 1e-9:
        raise InputError(f"the body ('{body_bone}') does not move in frames {start}-{end}: "
                         "key the body's motion or pick the bone that carries it")
    samples = MotionSamples(frames=frames, fps=fps, body_pos_m=body, gravity_mps2=g, body_source=source,
                            unit_scale=scale, **kw)
    return samples, warnings
