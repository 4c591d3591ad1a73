"""The bake: per-frame rotation offsets of bones -> keys on the "Overlap Bake" layer (or into the action).

Three stages, each in its own module and each handing the next a plain value::

    pose_read   the animated rotation channels         -> {bone: (n, c) values}
    key_sets    offsets ∘ animated values, reduced     -> KeySet (keys per bone)
    bake_layer  the NLA layer: write, influence, remove -> the bake action's name

This module checks the input, decides per bone how its channel is written (``key_sets.ChannelJob``)
and runs the stages. Rotation modes: QUATERNION and the six Euler orders; AXIS_ANGLE is refused.
Limitation: rotation channels keyed on only some of their components, and drivers on baked
channels (drivers run after the NLA and win), are not handled specially.
"""
from __future__ import annotations

from dataclasses import dataclass

import bpy
import numpy as np

from . import anim_data, bake_layer, key_sets, pose_read
from .bake_layer import BAKE_TRACK_NAME, BakeError

EULER_ORDERS = ("XYZ", "XZY", "YXZ", "YZX", "ZXY", "ZYX")


@dataclass(frozen=True, slots=True)
class BakeStats:
    """What one bake wrote."""

    bones: tuple
    """Names of the baked bones."""
    n_frames: int
    """Number of simulated frames."""
    keys_before: int
    """Keys a per-frame bake would write (curves x frames)."""
    keys_written: int
    """Keys written after reduction."""
    max_error_deg: float
    """Largest rotation angle between the baked and the simulated bone orientation at any baked
    frame, degrees, the written (float32) curves evaluated by Blender's Bézier rule
    (``core.key_reduce.reduce_rotation_keys``); 0 with a key on every frame."""
    action_name: str
    """The bake action, or the user's action for ``into_action``."""
    into_action: bool
    """True when the result went into the user's action instead of a layer."""

    @property
    def reduction_percent(self) -> float:
        """Share of per-frame keys not written, 0..100."""
        return 100.0 * (1.0 - self.keys_written / self.keys_before) if self.keys_before else 0.0

    def summary(self) -> str:
        where = "into the action" if self.into_action else f"on the {BAKE_TRACK_NAME} layer"
        return (f"Baked {self.keys_written} keys on {len(self.bones)} bones over {self.n_frames} frames {where} "
                f"({self.reduction_percent:.0f} % fewer than per frame, max rotation error {self.max_error_deg:.2f}°)")


def _validate(obj, frames, offsets, tolerance_deg, influence):
    """Checked copies: frames float64 (n,), offsets {bone: unit quaternions (n, 4)}."""
    bake_layer.check_object(obj)
    frames = np.asarray(frames, dtype=np.float64)
    if frames.ndim != 1 or frames.shape[0] < 2:
        raise BakeError(f"Bake needs at least 2 frames, got shape {frames.shape}")
    if not np.all(np.isfinite(frames)) or np.any(frames != np.round(frames)) or np.any(np.diff(frames) <= 0):
        raise BakeError("Bake frames must be whole frame numbers in increasing order")
    if not (np.isfinite(tolerance_deg) and tolerance_deg >= 0.0):
        raise BakeError(f"Key tolerance must be 0° or more, got {tolerance_deg}")
    if not (0.0 <= influence <= 1.0):
        raise BakeError(f"Influence must be between 0 and 1, got {influence}")
    if not offsets:
        raise BakeError("Nothing to bake: no bone offsets were given")
    names = list(offsets)
    arrays = []
    for name in names:
        pb = obj.pose.bones.get(name)
        if pb is None:
            raise BakeError(f"Bone '{name}' is not in {obj.name}: check the chain's bone names")
        if pb.rotation_mode == 'AXIS_ANGLE':
            raise BakeError(f"Bone '{name}' uses Axis Angle rotation, which cannot be layered: set its rotation "
                            "mode to Quaternion or an Euler order (N panel > Bone > Rotation Mode) and bake again")
        try:
            q = np.asarray(offsets[name], dtype=np.float64)
        except (TypeError, ValueError):
            q = np.zeros(0)
        if q.shape != (frames.shape[0], 4):
            raise BakeError(f"Offsets of '{name}' must be {frames.shape[0]} finite quaternions, got shape {q.shape}")
        arrays.append(q)
    stacked = np.stack(arrays)  # (bones, frames, 4), a copy: the caller's arrays are never touched
    finite = np.isfinite(stacked).all(axis=(1, 2))
    if not finite.all():
        name = names[int(np.argmin(finite))]
        raise BakeError(f"Offsets of '{name}' must be {frames.shape[0]} finite quaternions, got NaN or infinite values")
    norm = np.sqrt(np.einsum('bfc,bfc->bf', stacked, stacked))[:, :, None]   # einsum: ~5x a sum over the 4-axis
    zero = (norm[:, :, 0] < 1e-6).any(axis=1)
    if zero.any():
        raise BakeError(f"Offsets of '{names[int(np.argmax(zero))]}' contain a zero quaternion")
    stacked /= norm
    return frames, dict(zip(names, stacked))


def _check_into_action(obj):
    ad = obj.animation_data
    if ad is not None and len(ad.nla_tracks) and (ad.action_blend_type != 'REPLACE' or ad.action_influence != 1.0):
        raise BakeError("Write into the action needs the action at blend Replace and influence 1: "
                        "set them in the NLA editor or bake to a layer")


def _channel_jobs(obj, scene, frames, names, into_action, report):
    """{bone: ChannelJob} and {bone: static values} of the channels written absolute (layer only)."""
    pose = obj.pose.bones
    animated = anim_data.animated_paths(obj)
    ad = obj.animation_data
    own = {fc.data_path for fc in anim_data.slot_fcurves(ad.action, ad.action_slot)} if ad else set()
    path = {n: pose[n].path_from_id(pose_read.rotation_property(pose[n])) for n in names}
    quat = {n for n in names if pose[n].rotation_mode == 'QUATERNION'}
    absolute = {n for n in names if into_action or path[n] not in animated}
    whole = [n for n in names if n not in quat and n not in absolute] + ([n for n in names if n in absolute
                                                                           and into_action])
    sampled = pose_read.sample_rotations(obj, scene, frames, whole, report) if whole else {}
    action_part = [n for n in names if n in quat and n not in absolute and path[n] in own]
    sampled.update(pose_read.action_rotations(obj, scene, frames, action_part, report) if action_part else {})
    jobs, static = {}, {}
    for n in names:
        prop = pose_read.rotation_property(pose[n])
        if n in absolute and not into_action:
            static[n] = [float(v) for v in getattr(pose[n], prop)]
            basis = np.tile(np.array(static[n], dtype=np.float64), (len(frames), 1))
        else:
            basis = sampled.get(n)
        jobs[n] = key_sets.ChannelJob(pose[n].rotation_mode, key_sets.ABSOLUTE if n in absolute else key_sets.LAYERED,
                                      basis)
    return jobs, static


def bake_offsets(obj, frames, offsets, tolerance_deg=0.5, into_action=False, influence=1.0,
                 progress=None, scene=None, tolerance_by_bone_deg=None, shared_frames=False) -> BakeStats:
    """Bake per-frame rotation offsets of bones onto the "Overlap Bake" layer (or into the action).

    Parameters
    ----------
    obj : armature Object
    frames : array_like, shape (n,), whole frame numbers, increasing, n >= 2
    offsets : {bone name: array_like, shape (n, 4)}, unit quaternions (w, x, y, z) to right-multiply
        onto each bone's animated basis rotation (final = animated ∘ offset).
    tolerance_deg : float, largest rotation angle between the baked and the simulated orientation
        at every frame, as Blender evaluates the written curves (0 keeps every frame)
    into_action : bool, write animated ∘ offset into the user's action instead of a layer
    influence : float, 0..1, the layer's influence (ignored with ``into_action``)
    progress : callable(fraction 0..1) or None
    scene : the scene whose frames are sampled (default: the context scene)
    tolerance_by_bone_deg : {bone: float} or None, a tighter tolerance for the bones named
    shared_frames : bool, key all components of a bone on the same frames (more keys; default
        False: each component gets only the keys it needs)

    Raises
    ------
    BakeError
        On bad input; nothing has been changed then.

    The scene is not evaluated afterwards (the object is tagged): Blender shows the result at its
    next update; a script reading the pose calls ``view_layer.update()`` or ``scene.frame_set`` first.
    """
    scene = scene or bpy.context.scene
    frames, offsets = _validate(obj, frames, offsets, tolerance_deg, influence)
    if into_action:
        _check_into_action(obj)
    else:
        bake_layer.check_layerable(obj)
    report = progress or (lambda _f: None)
    bake_layer.remove_bake(obj)  # re-bake replaces the layer; into_action must not stack onto it either
    jobs, static = _channel_jobs(obj, scene, frames, list(offsets), into_action, report)
    values = key_sets.channel_values(offsets, jobs)
    report(0.7)
    per_bone = {n: float(np.deg2rad(min(t, tolerance_deg))) for n, t in (tolerance_by_bone_deg or {}).items()
                if n in values}
    key_set = key_sets.make_key_set(frames, key_sets.rotation_tracks(values, jobs, into_action),
                                    np.deg2rad(tolerance_deg), per_bone, shared_frames)
    report(0.9)
    if into_action:
        action_name = bake_layer.write_into_action(obj, key_set)
    else:
        action_name = bake_layer.add_layer(obj, frames[0], key_set, influence, static)
    obj.update_tag(refresh={'TIME'})   # re-evaluate its animation at the next depsgraph update
    report(1.0)
    return BakeStats(bones=tuple(offsets), n_frames=len(frames), keys_before=key_set.keys_before,
                     keys_written=key_set.keys_written, max_error_deg=float(np.rad2deg(key_set.max_error_rad)),
                     action_name=action_name, into_action=into_action)
