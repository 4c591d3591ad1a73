"""Sampling the evaluated rig into the core's MotionSamples (metres, seconds).

Positions come from ``pose.bones.foreach_get('matrix')`` after ``scene.frame_set`` at every
sub-frame, so constraints, drivers and NLA are included; the current frame is restored.
"""
import contextlib
from dataclasses import dataclass, field

import bpy
import numpy as np

from ..core import body_segments as segs
from ..core.body_types import MotionSamples
from ..core.constants import STANDARD_GRAVITY_MPS2
from ..core.errors import InputError
from .frame_ranges import body_range



def check_armature(obj):
    """Raise InputError unless ``obj`` is an animated armature."""
    if obj is None or obj.type != 'ARMATURE':
        raise InputError("select an armature object (the character's rig) first")
    from .rig_motion import has_motion  # own keys, a parent's or a constraint target's (world motion counts)
    if not has_motion(obj):
        raise InputError(f"'{obj.name}' has no animation: key the body's motion first")


def frame_range(scene, settings):
    start, end = body_range(scene, settings)
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


@dataclass
class BodyPlan:
    """What to sample for the analysis and how to turn it into MotionSamples."""
    frames: np.ndarray
    fps: float
    scale: float
    gravity: np.ndarray
    source: str
    body_bone: str
    roles: dict
    table: object
    feet: dict
    leg_m: float
    warnings: list = field(default_factory=list)

    @property
    def bones(self):
        names = {self.body_bone} | {b for bl in self.feet.values() for b in bl}
        if self.source == "com":
            names |= {b for bl in self.roles.values() for b in bl}
        return sorted(names)


def _leg_length_m(obj, roles, scale):
    """Hip-to-ankle length of the rest pose (metres), 0 if the legs are not matched."""
    bones = obj.data.bones
    for side in ("L", "R"):
        thigh, foot = roles.get(f"thigh.{side}"), roles.get(f"foot.{side}")
        if thigh and foot and thigh[0] in bones and foot[0] in bones:
            d = np.linalg.norm(np.array(bones[thigh[0]].head_local) - np.array(bones[foot[0]].head_local))
            if d > 0:
                return float(d * obj.matrix_world.to_scale()[2] * scale)
    return 0.0


def body_plan(obj, scene, settings, whole_frames=True):
    """Decide the body source, the feet and the frames to sample (no sampling yet)."""
    check_armature(obj)
    start, end = frame_range(scene, settings)
    frames = np.arange(start, end + 1, dtype=float) if whole_frames else \
        sample_times(start, end, settings.samples_per_frame)
    scale = scene.unit_settings.scale_length
    fps = scene.render.fps / scene.render.fps_base
    g = gravity_mps2(scene, settings.gravity_source)
    warnings = []
    gn = float(np.linalg.norm(g))
    if not 1.0 < gn < 30.0:
        warnings.append(f"scene gravity is {gn:.3g} m/s² (scene units × unit scale {scale:g}): "
                        "set it in scene units (e.g. -981 in a centimetre scene) or choose standard gravity")
    body_bone = pick_body_bone(obj, settings.body_bone)
    table = segs.SEGMENT_TABLES[settings.segment_table]
    deform = [b.name for b in obj.data.bones if b.use_deform] or [b.name for b in obj.data.bones]
    roles, _ = segs.match_roles(deform, settings.overrides())
    missing_bones = [b for bl in roles.values() for b in bl if b not in obj.data.bones]
    if missing_bones:
        raise InputError(f"override names bones that are not in '{obj.name}': {', '.join(missing_bones)}; "
                         "write role=bone with existing bone names")
    source = "root"
    if settings.body_source in ("COM", "AUTO"):
        needed = [r for r in segs.required_roles(table) if r not in roles]
        if not needed:
            source = "com"
        elif settings.body_source == "COM":
            warnings.append("center of mass needs bones for: " + ", ".join(needed)
                            + f"; using the root bone '{body_bone}' instead (set Bone overrides)")
        else:
            warnings.append(f"body: the root bone '{body_bone}' (the center of mass needs bones for: "
                            + ", ".join(needed) + "; set Bone overrides to use it)")
    feet = segs.contact_bones(deform, roles, settings.contact_bones)
    bad = [b for bl in feet.values() for b in bl if b not in obj.data.bones]
    if bad:
        raise InputError(f"contact bones not in '{obj.name}': {', '.join(bad)}; pick existing bones "
                         "(comma-separated) or leave Contact bones empty to find the feet by name")
    return BodyPlan(frames, fps, scale, g, source, body_bone, roles, table, feet,
                    _leg_length_m(obj, roles, scale), warnings)


def samples_from(plan, heads, tails):
    """MotionSamples from sampled bone heads and tails (scene units, dicts name -> (n, 3))."""
    heads = {k: v * plan.scale for k, v in heads.items()}
    tails = {k: v * plan.scale for k, v in tails.items()}
    kw = {}
    if plan.source == "com":
        lm = segs.landmark_positions(plan.roles, heads, tails)
        body, _ = segs.whole_body_com(plan.table, lm)
        arms, arm_mass = segs.whole_body_com(plan.table, lm, only=segs.ARM_SEGMENTS)
        # The arms swing against the trunk and head: the legs extend in the push-off and fold in
        # the landing while the arms ride on the trunk, so they are left out of the reference.
        rest, _ = segs.whole_body_com(plan.table, lm, only=("trunk", "head_neck"))
        kw = dict(arm_com_m=arms, rest_com_m=rest, arm_mass_fraction=arm_mass)
    else:
        body = heads[plan.body_bone]
    if np.ptp(body, axis=0).max() < 1e-9:
        raise InputError(f"the body ('{plan.body_bone}') does not move in frames {plan.frames[0]:g}-{plan.frames[-1]:g}: "
                         "key the body's motion or pick the bone that carries it")
    if plan.feet:
        kw.update(foot_points_m=foot_points(plan, heads, tails), foot_names=tuple(plan.feet),
                  leg_length_m=plan.leg_m)
    return MotionSamples(frames=plan.frames, fps=plan.fps, body_pos_m=body, gravity_mps2=plan.gravity,
                         body_source=plan.source, unit_scale=plan.scale, **kw)


def foot_points(plan, heads_m, tails_m):
    """(n_feet, k, n, 3) heads and tails of each foot's bones, padded to the same k by repeating."""
    groups = [[heads_m[b] for b in bl] + [tails_m[b] for b in bl] for bl in plan.feet.values()]
    k = max(len(g) for g in groups)
    return np.stack([np.stack(g + [g[-1]] * (k - len(g))) for g in groups])


def make_refine(obj, scene, plan, sub_per_frame):
    """Callable(t_from_s, t_to_s) -> (t_fine, foot points) sampling the feet between two frames."""
    names = sorted({b for bl in plan.feet.values() for b in bl})
    frame0 = float(plan.frames[0])

    def refine(t_a, t_b):
        fa, fb = frame0 + t_a * plan.fps, frame0 + t_b * plan.fps
        m = max(int(round((fb - fa) * sub_per_frame)), 1) + 1
        fr = np.linspace(fa, fb, m)
        heads, tails = sample_bones(obj, scene, names, fr)
        pts = foot_points(plan, {k: v * plan.scale for k, v in heads.items()},
                          {k: v * plan.scale for k, v in tails.items()})
        return (fr - frame0) / plan.fps, pts
    return refine


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


def sample_bones(obj, scene, bone_names, frames, progress=None, x_axes=False):
    """World head and tail positions (scene units) of ``bone_names`` at each (fractional) frame.

    Returns dict name -> (n, 3) heads, dict name -> (n, 3) tails, and with ``x_axes`` also
    dict name -> (n, 3) unit world x axes (the bones' roll, for segment orientations).
    """
    pbones = obj.pose.bones
    index = {b.name: i for i, b in enumerate(pbones)}
    idx = np.array([index[n] for n in bone_names], dtype=int)
    lengths = np.array([obj.data.bones[n].length for n in bone_names], dtype=float)
    nb = len(pbones)
    buf = np.empty(nb * 16, dtype=np.float32)
    out = np.empty((3 if x_axes else 2, len(frames), len(idx), 3))
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
            out[0, k] = h @ world[:3, :3].T + world[:3, 3]
            out[1, k] = t @ world[:3, :3].T + world[:3, 3]
            if x_axes:
                out[2, k] = mats[:, :3, 0] @ world[:3, :3].T
            if progress is not None and k % 16 == 0:
                progress(k / len(frames))
    finally:
        scene.frame_set(saved[0], subframe=saved[1])
    if x_axes:
        out[2] /= np.linalg.norm(out[2], axis=-1, keepdims=True)
    return tuple({n: out[j][:, i] for i, n in enumerate(bone_names)} for j in range(out.shape[0]))


def keys_are_dense(obj, start, end):
    """True when the animated curves have a key on every frame (or more often) in start..end.

    Such keys are samples of motion (capture, a bake, a simulation): the Bézier interpolation
    between them smooths corners such as takeoff over a frame, so events are read from the keyed
    samples themselves; sparse keys are the animator's poses and their interpolation is the motion.
    """
    from .anim_data import active_fcurves
    ad = obj.animation_data
    if ad is None or ad.action is None:
        return False
    bag = active_fcurves(obj)
    spacings = []
    for fc in (bag.fcurves if bag is not None else []):
        n = len(fc.keyframe_points)
        if n < 3:
            continue
        co = np.empty(2 * n, dtype=np.float32)
        fc.keyframe_points.foreach_get("co", co)
        f = co[0::2]
        f = f[(f >= start - 1) & (f <= end + 1)]
        if f.size >= 3:
            spacings.append(float(np.median(np.diff(f))))
    return bool(spacings) and float(np.median(spacings)) <= 1.0 + 1e-6


def body_samples(obj, scene, settings, progress=None):
    """Sample ``obj`` as the analysis needs it (whole frames).

    Returns (MotionSamples, warnings list, refine callable or None).
    """
    plan = body_plan(obj, scene, settings)
    with splined_keys(obj, settings.spline_blocked_keys):
        heads, tails = sample_bones(obj, scene, plan.bones, plan.frames, progress)
    samples = samples_from(plan, heads, tails)
    refine = None
    if plan.feet and not settings.spline_blocked_keys and \
            not keys_are_dense(obj, plan.frames[0], plan.frames[-1]):
        refine = make_refine(obj, scene, plan, settings.samples_per_frame)
    return samples, plan.warnings, refine
