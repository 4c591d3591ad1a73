"""Reading the animated rotation channels of pose bones, per whole frame (the bake's first stage).

Hands the next stage a plain value: ``{bone: (n, 4) quaternion or (n, 3) Euler values}`` in
float64, the channel values Blender's animation system gives (or the active action alone gives,
for :func:`action_rotations`). Nothing here writes to the file; the current frame is restored.
"""
import numpy as np

from . import anim_data


def rotation_property(pb) -> str:
    """The pose bone's rotation channel used by its rotation mode (Axis Angle is refused earlier)."""
    return "rotation_quaternion" if pb.rotation_mode == 'QUATERNION' else "rotation_euler"


def plain_channel_fcurves(obj, scene, names, action_only=False):
    """{bone: [F-curve or None per component]} for bones whose rotation channel nothing but plain
    F-curves of the active action animates; bones not listed need the scene evaluated.

    Plain means: the object has an active action with a slot and no NLA tracks, the action at
    blend Replace and influence 1 (so the F-curve value is the channel value), the scene's time
    mapping is 1:1, no driver on the channel, and none of its F-curves or their groups is muted.
    A component without an F-curve keeps its current (static) value.

    With ``action_only`` the NLA tracks and the action's blend are not looked at: the curves then
    give what the active action itself contributes to the channel (the caller knows how it mixes).
    """
    ad = obj.animation_data
    if ad is None or ad.action is None or anim_data.assigned_slot(obj) is None \
            or scene.render.frame_map_old != scene.render.frame_map_new:
        return {}
    if not action_only and (len(ad.nla_tracks) or ad.action_influence != 1.0 or ad.action_blend_type != 'REPLACE'):
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
        prop = rotation_property(pb)
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
                static = np.array(getattr(pb, rotation_property(pb)), dtype=np.float32)
            out[c] = static[c]
    return out.T


def _from_curves(obj, plain, frames, names):
    pose = obj.pose.bones
    wanted = [n for n in names if n in plain]
    sampled = anim_data.sample_fcurves([fc for n in wanted for fc in plain[n] if fc is not None], frames)
    return {n: _evaluate_channels(pose[n], plain[n], frames, sampled) for n in wanted}


def sample_rotations(obj, scene, frames, names, progress=None):
    """Evaluated rotation channel values of bones per frame: {name: (n, 4) quaternion or (n, 3) Euler}.

    Channels animated only by plain F-curves (:func:`plain_channel_fcurves`) are read from the
    curves (``anim_data.sample_fcurves``, or ``FCurve.evaluate`` per frame for curves with
    modifiers): the value Blender's animation system gives the channel; the others by setting
    each frame (restoring the current frame afterwards).
    """
    out = _from_curves(obj, plain_channel_fcurves(obj, scene, names), frames, names)
    rest = [n for n in names if n not in out]
    if not rest:
        return out
    pose = obj.pose.bones
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


def action_rotations(obj, scene, frames, names, progress=None):
    """What the active action alone gives the rotation channels of ``names`` per frame.

    From its F-curves where they are plain (``action_only``), else from the scene (then the value
    is the whole animated channel: equal to the action's part when nothing below animates it).
    """
    out = _from_curves(obj, plain_channel_fcurves(obj, scene, names, action_only=True), frames, names)
    rest = [n for n in names if n not in out]
    if rest:
        out.update(sample_rotations(obj, scene, frames, rest, progress))
    return out
