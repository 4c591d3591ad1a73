"""Write simulated rotation offsets to a removable NLA layer (or, when asked, into the action).

Arrangement (measured the same on Blender 4.5.15, 5.2.3 and 5.3.0)
------------------------------------------------------------------
The active action is evaluated *on top of* the NLA stack with its own blend type, so a layer on
an NLA track under an active REPLACE action is hidden for every channel the action animates.
While a bake exists the object's animation data therefore looks like this (bottom to top)::

    the user's own NLA tracks (untouched)
    "Overlap Base"   one strip holding the user's action and slot, with the action's former
                     blend type, influence and extrapolation (REPLACE, 1, HOLD by default)
    "Overlap Bake"   one strip holding "<object> Overlap Bake", blend COMBINE, extrapolation
                     NOTHING (no offset outside the baked frames), animated influence
    active action:   none

COMBINE composes quaternions as ``lower @ upper`` (the offset on the right) and adds Euler
angles, so the evaluated basis rotation is ``animated ∘ offset``. The base strip maps action time
1:1 onto scene time; with no user tracks before the bake (the action was then evaluated directly,
F-curve extrapolation included) its range is widened to cover the scene range and the baked frames.
The user's action is never edited: only its assignment moves into the strip, and
:func:`remove_bake` puts back action, slot, blend type, influence, extrapolation and the NLA switch
exactly. To edit the base animation while a bake exists, tab into the "Overlap Base" strip
(NLA tweak mode) or remove the bake. Making the bake the active action instead was rejected: new
keys the animator sets would then land in the bake.

Influence: the bake strip's influence with "Animated Influence" on, held by one constant key
(``strip.influence`` alone is ignored unless animated). :func:`set_bake_influence` rewrites that key;
the animator can also key it in the NLA editor.

Rotation modes: QUATERNION offsets are written as they are (w, x, y, z), hemisphere-continuous.
The six Euler orders get ``euler(animated ∘ offset) - euler(animated)`` per frame, each frame's
Euler chosen nearest the previous one (no ±180° flips), from the animated pose sampled before the
layer exists. AXIS_ANGLE is refused. The animated Euler values
come from ``FCurve.evaluate`` when plain F-curves of the active action are all that animate the
channel (:func:`plain_channel_fcurves`), otherwise from evaluating the scene frame by frame.
A rotation channel that nothing animates is written absolute
(its static pose ∘ offset, COMBINE over the identity) and its static value restored on removal.

Keys: at tolerance 0 a key on every frame with Blender's automatic (AUTO_CLAMPED) handles (exact
at every frame, Blender's own shape between frames); above 0 the keys of
``core.key_reduce.reduce_rotation_keys``: each component keyed where it needs keys, fitted
handles (ALIGNED where both sides share a slope, FREE elsewhere), no curve for a component that
stays at the value it has without one, the rotation angle bounded at every frame.

Limitation: rotation channels keyed on only some of their components, and drivers on baked
channels (drivers run after the NLA and win), are not handled specially.
"""
from __future__ import annotations

from dataclasses import dataclass

import bpy
import numpy as np

from ..core.rotations import compose_euler, quat_multiply
from ..core.errors import OverlapAssistError
from ..core.key_reduce import RotationTrack, reduce_rotation_keys
from . import anim_data

BAKE_TRACK_NAME = "Overlap Bake"
BASE_TRACK_NAME = "Overlap Base"
INFO_KEY = "overlap_assist_bake"
"""Custom property on the bake action: how to restore the object's animation data."""
EULER_ORDERS = ("XYZ", "XZY", "YXZ", "YZX", "ZXY", "ZYX")


class BakeError(OverlapAssistError):
    """The bake cannot be written; the message says what to do. Nothing was changed."""


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


# ---------------------------------------------------------------------------------------------
# Finding and checking
# ---------------------------------------------------------------------------------------------

def bake_action_name(obj) -> str:
    return f"{obj.name} {BAKE_TRACK_NAME}"


def find_bake(obj):
    """(track, strip, action) of the object's bake layer, or None."""
    ad = obj.animation_data
    track = ad.nla_tracks.get(BAKE_TRACK_NAME) if ad else None
    if track is None or len(track.strips) != 1:
        return None
    strip = track.strips[0]
    act = strip.action
    if act is None or INFO_KEY not in act.keys():
        return None
    return track, strip, act


def has_bake(obj) -> bool:
    return find_bake(obj) is not None


def _check_object(obj):
    if obj is None or obj.type != 'ARMATURE':
        raise BakeError("Select the character's armature to bake onto")
    ad = obj.animation_data
    if ad is not None and ad.use_tweak_mode:
        raise BakeError(f"{obj.name} is in NLA tweak mode: leave tweak mode (Tab in the NLA editor) first")
    if ad is not None and any(t.is_solo for t in ad.nla_tracks):
        raise BakeError(f"An NLA track of {obj.name} is set to Solo: turn Solo off so the bake layer can play")


def _validate(obj, frames, offsets, tolerance_deg, influence):
    """Checked copies: frames float64 (n,), offsets {bone: unit quaternions (n, 4)}."""
    _check_object(obj)
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


# ---------------------------------------------------------------------------------------------
# Sign continuity (rotation math is in core.rotations)
# ---------------------------------------------------------------------------------------------

def _continuous(q, reference):
    """q (..., n, 4) with signs flipped so q[..., 0, :]·reference >= 0 and consecutive rows share a
    hemisphere; reference (..., 4)."""
    q = np.asarray(q)
    first = np.where(np.sum(q[..., 0, :] * reference, axis=-1) < 0.0, -1.0, 1.0)  # (...)
    flips = np.sum(q[..., 1:, :] * q[..., :-1, :], axis=-1) < 0.0
    odd = np.concatenate((np.zeros(flips.shape[:-1] + (1,), dtype=np.int64), np.cumsum(flips, axis=-1)), axis=-1) % 2
    return q * (first[..., None] * np.where(odd == 1, -1.0, 1.0))[..., None]


def _rotation_property(pb):
    return "rotation_quaternion" if pb.rotation_mode == 'QUATERNION' else "rotation_euler"


def plain_channel_fcurves(obj, scene, names):
    """{bone: [F-curve or None per component]} for bones whose rotation channel nothing but plain
    F-curves of the active action animates; bones not listed need the scene evaluated.

    Plain means: the object has an active action with a slot and no NLA tracks, the action at
    blend Replace and influence 1 (so the F-curve value is the channel value), the scene's time
    mapping is 1:1, no driver on the channel, and none of its F-curves or their groups is muted.
    A component without an F-curve keeps its current (static) value.
    """
    ad = obj.animation_data
    if (ad is None or ad.action is None or anim_data.assigned_slot(obj) is None or len(ad.nla_tracks)
            or ad.action_influence != 1.0 or ad.action_blend_type != 'REPLACE'
            or scene.render.frame_map_old != scene.render.frame_map_new):
        return {}
    bag = anim_data.channelbag_for(ad.action, ad.action_slot)
    if bag is None:
        return {}
    driven = {d.data_path for d in ad.drivers}
    curves = bag.fcurves
    muted = np.zeros(len(curves), dtype=bool)
    curves.foreach_get("mute", muted)
    groups_muted = np.zeros(len(bag.groups), dtype=bool)
    bag.groups.foreach_get("mute", groups_muted)
    by_channel = {(fc.data_path, fc.array_index): (fc, bool(m)) for fc, m in zip(curves, muted)}
    any_group_muted = bool(groups_muted.any())
    out = {}
    for name in names:
        pb = obj.pose.bones[name]
        prop = _rotation_property(pb)
        path = pb.path_from_id(prop)
        found = [by_channel.get((path, i), (None, False)) for i in range(4 if prop == "rotation_quaternion" else 3)]
        if path in driven or any(m for _fc, m in found):
            continue
        fcurves = [fc for fc, _m in found]
        if any_group_muted and any(fc is not None and fc.group is not None and fc.group.mute for fc in fcurves):
            continue
        out[name] = fcurves
    return out


def _evaluate_channels(pb, fcurves, frames, sampled):
    """(n, c) float64 values of one bone's rotation channel: ``sampled[fc]`` ({F-curve: values})
    where given, else FCurve.evaluate per frame; a component without a curve keeps its static value."""
    out = np.empty((len(fcurves), len(frames)))   # components first while filling
    static, frame_list = None, None
    for c, fc in enumerate(fcurves):
        if fc is not None and fc in sampled:
            out[c] = sampled[fc]
        elif fc is not None:
            if frame_list is None:
                frame_list = [float(f) for f in frames]
            evaluate = fc.evaluate
            out[c] = np.array([evaluate(f) for f in frame_list], dtype=np.float32)
        else:
            if static is None:
                static = np.array(getattr(pb, _rotation_property(pb)), dtype=np.float32)
            out[c] = static[c]
    return out.T


def sample_rotations(obj, scene, frames, names, progress=None):
    """Evaluated rotation channel values of bones per frame: {name: (n, 4) quaternion or (n, 3) Euler}.

    Channels animated only by plain F-curves (:func:`plain_channel_fcurves`) are read from the
    curves (``anim_data.sample_fcurves``, or ``FCurve.evaluate`` per frame for curves with
    modifiers): the value Blender's animation system gives the channel; the others by setting
    each frame (restoring the current frame afterwards).
    """
    plain = plain_channel_fcurves(obj, scene, names)
    pose = obj.pose.bones
    sampled = anim_data.sample_fcurves([fc for n in names if n in plain for fc in plain[n] if fc is not None], frames)
    out = {n: _evaluate_channels(pose[n], plain[n], frames, sampled) for n in names if n in plain}
    rest = [n for n in names if n not in plain]
    if not rest:
        return out
    n_bones = len(pose)
    index = {pb.name: i for i, pb in enumerate(pose)}
    quats = np.empty((len(frames), n_bones * 4), dtype=np.float32)
    eulers = np.empty((len(frames), n_bones * 3), dtype=np.float32)
    frame_back, sub_back = scene.frame_current, scene.frame_subframe
    try:
        for k, f in enumerate(frames):
            scene.frame_set(int(f))
            pose.foreach_get("rotation_quaternion", quats[k])
            pose.foreach_get("rotation_euler", eulers[k])
            if progress is not None and k % 16 == 0:
                progress(0.5 * k / len(frames))
    finally:
        scene.frame_set(frame_back, subframe=sub_back)
    quats, eulers = quats.reshape(len(frames), n_bones, 4), eulers.reshape(len(frames), n_bones, 3)
    out.update({n: (quats if pose[n].rotation_mode == 'QUATERNION' else eulers)[:, index[n]].astype(np.float64)
                for n in rest})
    return out


# ---------------------------------------------------------------------------------------------
# Reduction and writing
# ---------------------------------------------------------------------------------------------

def _reduce_all(frames, tracks, tol_rad, shared_frames=False):
    """{bone: _BoneKeys} within ``tol_rad`` of rotation angle at every frame, and the largest
    measured angle (rad): one call of the core reducer for all bones ({bone: RotationTrack})."""
    names = list(tracks)
    reduced = reduce_rotation_keys(frames, [tracks[n] for n in names], tol_rad, shared_frames=shared_frames)
    out = {}
    for name, keys in zip(names, reduced):
        co, lefts, rights, types = [], [], [], []
        for ch in keys.channels:
            if ch is None:
                co.append(None)
                lefts.append(None)
                rights.append(None)
                types.append(None)
                continue
            pair = np.empty((ch.n_keys, 2), dtype=np.float32)
            pair[:, 0], pair[:, 1] = ch.frames, ch.values
            co.append(pair)
            lefts.append(np.ascontiguousarray(ch.handle_left, dtype=np.float32))
            rights.append(np.ascontiguousarray(ch.handle_right, dtype=np.float32))
            types.append(ch.handle_types())
        out[name] = _BoneKeys(co, lefts, rights, types)
    return out, max((k.max_error_rad for k in reduced), default=0.0)


@dataclass(frozen=True, slots=True)
class _BoneKeys:
    """Keys for one bone's rotation channel, one entry per component (None: no curve is written);
    handles None = Blender's automatic; handle_types: per-key type names or None (AUTO_CLAMPED)."""

    co: object                # sequence of (n_i, 2) float32 (frame, value) or None
    handle_left: object       # sequence of (n_i, 2) float32, or None for automatic handles
    handle_right: object
    handle_types: object = None

    @property
    def n_keys(self):
        return int(sum(c.shape[0] for c in self.co if c is not None))


def _keys_every_frame(frames, values_by_bone):
    """{bone: _BoneKeys} with a key on every frame (values (n, c) per bone) and Blender's automatic
    handles; bones with the same number of components share one array."""
    out = {}
    for n_components in {v.shape[1] for v in values_by_bone.values()}:
        names = [n for n, v in values_by_bone.items() if v.shape[1] == n_components]
        co = np.empty((len(names), n_components, len(frames), 2), dtype=np.float32)
        co[:, :, :, 0] = frames
        co[:, :, :, 1] = np.stack([values_by_bone[n] for n in names]).transpose(0, 2, 1)
        out.update((n, _BoneKeys(list(co[b]), None, None)) for b, n in enumerate(names))
    return {n: out[n] for n in values_by_bone}


def _merge_outside(fc, keys):
    """Keys of ``fc`` outside the new keys' frame range, plus the new keys (dict for write_keyframes)."""
    new = keys
    old = anim_data.read_keyframes(fc)
    first, last = new["co"][0, 0], new["co"][-1, 0]
    keep = (old["co"][:, 0] < first - 1e-4) | (old["co"][:, 0] > last + 1e-4)
    if not keep.any():
        return new
    return {name: np.concatenate((old[name][keep], np.asarray(new[name], dtype=old[name].dtype)))
            for name in new}


def _merge_into_action(bag, pb, keys):
    """Write one bone's keys into an existing action, keeping its keys outside the new range."""
    path = pb.path_from_id(_rotation_property(pb))
    for index, co in enumerate(keys.co):
        if co is None:
            continue
        fc = anim_data.ensure_fcurve(bag, path, index, pb.name)
        if keys.handle_left is None:
            new = anim_data.bezier_keys(co[:, 0], co[:, 1], co, co, "AUTO_CLAMPED")
        else:
            new = anim_data.bezier_keys(co[:, 0], co[:, 1], keys.handle_left[index], keys.handle_right[index],
                                        keys.handle_types[index])
        anim_data.write_keyframes(fc, _merge_outside(fc, new))
    return keys.n_keys


def _write_new(bag, pose, keys_by_bone):
    """Write every bone's keys into F-curves created here (the bake action is new and empty)."""
    channels, cos, lefts, rights, types = [], [], [], [], []
    for name, keys in keys_by_bone.items():
        path = pose[name].path_from_id(_rotation_property(pose[name]))
        for index, co in enumerate(keys.co):
            if co is None:   # the component needs no curve
                continue
            channels.append((path, index, name))
            cos.append(co)
            lefts.append(keys.handle_left[index] if keys.handle_left is not None else None)
            rights.append(keys.handle_right[index] if keys.handle_right is not None else None)
            types.append(keys.handle_types[index] if keys.handle_types is not None else None)
    anim_data.write_bezier_curves(anim_data.new_fcurves(bag, channels), cos, lefts, rights, types)
    return sum(k.n_keys for k in keys_by_bone.values())


def _set_strip_influence(strip, value, frame):
    """Strip influence held by one constant key (Blender ignores it unless animated)."""
    strip.use_animated_influence = True
    fc = strip.fcurves.find("influence")
    anim_data.write_keys(fc, [frame], [value], 'LINEAR')


def bake_influence(obj):
    """The bake layer's influence (its key value at the strip start), or None without a bake."""
    found = find_bake(obj)
    if found is None:
        return None
    return found[1].fcurves.find("influence").evaluate(found[1].frame_start)


def set_bake_influence(obj, value) -> bool:
    """Set the bake layer's influence to a constant 0..1 (replacing any keys on it)."""
    found = find_bake(obj)
    if found is None:
        return False
    _set_strip_influence(found[1], min(max(float(value), 0.0), 1.0), found[1].frame_start)
    return True


# ---------------------------------------------------------------------------------------------
# Layer arrangement
# ---------------------------------------------------------------------------------------------

def _push_down_base(obj, scene, frames, info):
    """Move the active action into a strip on a new top track, evaluating as it did before."""
    ad = obj.animation_data
    act, slot = ad.action, ad.action_slot
    had_tracks = len(ad.nla_tracks) > 0
    info.update(pushed=1, blend_type=ad.action_blend_type, influence=ad.action_influence,
                extrapolation=ad.action_extrapolation, slot_identifier=slot.identifier if slot else "")
    top = ad.nla_tracks[-1] if had_tracks else None
    ad.action = None
    track = ad.nla_tracks.new(prev=top)
    track.name = BASE_TRACK_NAME
    strip = track.strips.new(act.name, int(np.floor(frames[0])), act)
    strip.action_slot = slot
    lo, hi = strip.action_frame_start, strip.action_frame_end  # the range Blender used before
    if not had_tracks:  # it evaluated the action directly: cover everything that can play
        lo, hi = min(lo, scene.frame_start, frames[0]), max(hi, scene.frame_end, frames[-1])
    strip.action_frame_start, strip.action_frame_end = lo, hi
    strip.frame_start_ui = lo
    strip.blend_type, strip.extrapolation = info["blend_type"], info["extrapolation"]
    if info["influence"] != 1.0:
        _set_strip_influence(strip, info["influence"], lo)
    return track


def _add_layer(obj, frames, keys_by_bone, influence, info):
    """Create the bake action and its COMBINE track on top. Returns (action, keys written)."""
    ad = obj.animation_data
    act = bpy.data.actions.new(bake_action_name(obj))
    slot = act.slots.new(id_type='OBJECT', name=obj.name)
    bag = anim_data.channelbag_for(act, slot, create=True)
    keys = _write_new(bag, obj.pose.bones, keys_by_bone)
    act[INFO_KEY] = info
    track = ad.nla_tracks.new(prev=ad.nla_tracks[-1] if len(ad.nla_tracks) else None)
    track.name = BAKE_TRACK_NAME
    strip = track.strips.new(BAKE_TRACK_NAME, int(frames[0]), act)
    strip.action_slot = slot
    strip.blend_type, strip.extrapolation = 'COMBINE', 'NOTHING'
    _set_strip_influence(strip, influence, frames[0])
    ad.use_nla = True
    return act, keys


def unbaked_static_rotations(obj) -> dict:
    """Rotation values that un-animated baked bones had before the bake (bone -> values).

    Nothing animates those channels but the layer, so muting the layer leaves the last baked
    value on the bone; whoever needs the animated pose writes these back first.
    """
    found = find_bake(obj)
    if found is None:
        return {}
    return {k: list(v) for k, v in found[2][INFO_KEY].to_dict().get("static_rotations", {}).items()}


def restore_static_rotations(obj, statics) -> None:
    for name, values in statics.items():
        pb = obj.pose.bones.get(name)
        if pb is not None:
            setattr(pb, _rotation_property(pb), values)


def remove_bake(obj) -> bool:
    """Delete the bake layer and its action; restore the animation data as it was. False if none."""
    found = find_bake(obj)
    if found is None:
        return False
    _check_object(obj)
    track, _strip, act = found
    info = act[INFO_KEY].to_dict()
    ad = obj.animation_data
    ad.nla_tracks.remove(track)
    bpy.data.actions.remove(act)
    base = ad.nla_tracks.get(BASE_TRACK_NAME)
    if info.get("pushed") and base is not None and len(base.strips) == 1:
        base_act, base_slot = base.strips[0].action, base.strips[0].action_slot
        ad.nla_tracks.remove(base)
        ad.action = base_act
        if base_act is not None:
            ad.action_slot = base_slot
        ad.action_blend_type, ad.action_influence = info["blend_type"], info["influence"]
        ad.action_extrapolation = info["extrapolation"]
    ad.use_nla = bool(info.get("use_nla", True))
    restore_static_rotations(obj, info.get("static_rotations", {}))
    if info.get("created_animdata") and ad.action is None and not len(ad.nla_tracks) and not len(ad.drivers):
        obj.animation_data_clear()
    return True


# ---------------------------------------------------------------------------------------------
# The bake
# ---------------------------------------------------------------------------------------------

def bake_offsets(obj, frames, offsets, tolerance_deg=0.5, into_action=False, influence=1.0,
                 progress=None, scene=None, shared_frames=False) -> BakeStats:
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
        ad = obj.animation_data
        if ad is not None and len(ad.nla_tracks) and (ad.action_blend_type != 'REPLACE' or ad.action_influence != 1.0):
            raise BakeError("Write into the action needs the action at blend Replace and influence 1: "
                            "set them in the NLA editor or bake to a layer")
    tol_rad = np.deg2rad(tolerance_deg)
    report = progress or (lambda _f: None)
    remove_bake(obj)  # re-bake replaces the layer; into_action must not stack onto it either
    pose = obj.pose.bones
    animated = anim_data.animated_paths(obj)
    needs_sampling = [n for n in offsets if into_action or (pose[n].rotation_mode != 'QUATERNION'
                                                              and pose[n].path_from_id("rotation_euler") in animated)]
    sampled = sample_rotations(obj, scene, frames, needs_sampling, report) if needs_sampling else {}
    info = {"created_animdata": int(obj.animation_data is None),
            "use_nla": int(obj.animation_data.use_nla) if obj.animation_data else 1, "pushed": 0}
    static = {}
    values_by_bone, quaternion_bones, euler_jobs, layered_quats = {}, set(), {}, []
    tracks = {}   # bone -> (basis the layer adds to or None, value of a component without a curve or None)
    for name, q_off in offsets.items():
        pb = pose[name]
        prop = _rotation_property(pb)
        absolute = into_action or pb.path_from_id(prop) not in animated
        if absolute and not into_action:
            static[name] = [float(v) for v in getattr(pb, prop)]
        if pb.rotation_mode == 'QUATERNION' and not absolute:
            quaternion_bones.add(name)
            values_by_bone[name] = None   # filled for all such bones at once below
            layered_quats.append(name)
            tracks[name] = (None, np.array([1.0, 0.0, 0.0, 0.0]))   # COMBINE: no curves = no offset
            continue
        if name in sampled:
            basis = sampled[name]
        else:
            basis = np.tile(np.array(getattr(pb, prop), dtype=np.float64), (len(frames), 1))
        # Absolute: a component without a curve keeps its static value (into the action: always a curve).
        tracks[name] = (None, None if into_action else np.array(getattr(pb, prop), dtype=np.float64))
        if pb.rotation_mode == 'QUATERNION':
            quaternion_bones.add(name)
            values_by_bone[name] = _continuous(quat_multiply(basis, q_off), basis[0])
        else:
            values_by_bone[name] = None   # keeps the bones' order; filled per Euler order below
            euler_jobs.setdefault(pb.rotation_mode, []).append((name, basis, q_off, absolute))
    if layered_quats:   # offsets as they are on the COMBINE layer, hemisphere-continuous from identity
        stacked = _continuous(np.stack([offsets[n] for n in layered_quats]), np.array([1.0, 0.0, 0.0, 0.0]))
        values_by_bone.update(zip(layered_quats, stacked))
    for order, jobs in euler_jobs.items():   # one batched composition per Euler order
        bases = np.stack([basis for _n, basis, _q, _a in jobs])
        composed = compose_euler(bases, order, np.stack([q for _n, _b, q, _a in jobs]))
        layered = composed - bases
        for b, (name, _basis, _q, absolute) in enumerate(jobs):
            values_by_bone[name] = composed[b] if absolute else layered[b]
            if not absolute:   # COMBINE adds the curves to the animated angles; no curve adds 0
                tracks[name] = (bases[b], np.zeros(3))
    report(0.7)
    n_channels = sum(values.shape[1] for values in values_by_bone.values())
    if tol_rad == 0.0:   # a key on every frame, exact; Blender's automatic handles between frames
        keys_by_bone = _keys_every_frame(frames, values_by_bone)
        max_err = 0.0
    else:
        keys_by_bone, max_err = _reduce_all(frames, {
            n: RotationTrack(v, 'QUATERNION' if n in quaternion_bones else pose[n].rotation_mode, *tracks[n])
            for n, v in values_by_bone.items()}, tol_rad, shared_frames)
    report(0.9)
    keys_before = n_channels * len(frames)
    if into_action:
        bag = anim_data.active_fcurves(obj, create=True)
        keys = sum(_merge_into_action(bag, pose[n], k) for n, k in keys_by_bone.items())
        action_name = obj.animation_data.action.name
    else:
        if obj.animation_data is None:
            obj.animation_data_create()
        if obj.animation_data.action is not None:
            _push_down_base(obj, scene, frames, info)
        info["static_rotations"] = static
        act, keys = _add_layer(obj, frames, keys_by_bone, influence, info)
        action_name = act.name
    obj.update_tag(refresh={'TIME'})   # re-evaluate its animation at the next depsgraph update
    report(1.0)
    return BakeStats(bones=tuple(offsets), n_frames=len(frames), keys_before=keys_before, keys_written=keys,
                     max_error_deg=float(np.rad2deg(max_err)), action_name=action_name, into_action=into_action)
