"""The "Overlap Bake" NLA layer: owning it (write, influence, remove, stale check) — the bake's last stage.

Arrangement (measured the same on Blender 4.5, 5.2 and 5.3)
-----------------------------------------------------------
The active action is evaluated *on top of* the NLA stack with its own blend type. While a bake
exists the object's animation data looks like this (bottom to top)::

    the user's own NLA tracks (untouched)
    "Overlap Bake"   one strip holding "<object> Overlap Bake", blend COMBINE, extrapolation
                     NOTHING (no offset outside the baked frames), animated influence
    active action:   the user's own action, still assigned, blend COMBINE (was Replace)

The user's action stays the active action, so keys the animator sets while a bake exists
(I key, auto-keying, ``keyframe_insert``) go into their own action and play at once; Blender's
keying maps the value through the layer below, so the key gives the pose on screen. Nothing
animates a channel under the action but the layer (or the user's tracks, see below), and COMBINE
over nothing equals Replace (location adds to 0, scale multiplies 1, quaternions compose with the
identity, other properties add to their default), so switching the blend changes no channel
except through the layer. COMBINE composes quaternions as ``lower @ upper`` and adds Euler angles:
the layer holds ``U ∘ offset ∘ U⁻¹`` for a quaternion channel the action animates with rotation U
(so ``layer ∘ U = U ∘ offset``) and ``euler(animated ∘ offset) - euler(animated)`` for Euler
(``key_sets``). A channel nothing animates is written absolute (static pose ∘ offset) and its
static value restored on removal.

Refused (nothing changed, the message says what to do): an action at an influence other than 1
or a blend other than Replace/Combine, and a Replace action sharing a channel with one of the
user's NLA tracks (COMBINE would mix what Replace hid).

:func:`remove_bake` deletes the layer and its action and puts the action's blend type back; the
user's action and every key in it (edits made after the bake included) stay. Files baked by the
earlier arrangement (the action moved into an "Overlap Base" strip) are still removed exactly, and
an action created by keying meanwhile is kept.

Stale: the bake records a digest of the user's animation (every key of the active action and of
the user's unmuted NLA strips; our own ``overlap_*`` properties left out). :func:`bake_state` says
"stale" once it differs: bake again to refresh.
"""
import hashlib

import bpy
import numpy as np

from ..core.errors import OverlapAssistError
from . import anim_data, nla_layer
from .pose_read import rotation_property

BAKE_TRACK_NAME = "Overlap Bake"
BASE_TRACK_NAME = "Overlap Base"
"""Track of the earlier arrangement (files baked before the user's action stayed active)."""
INFO_KEY = "overlap_assist_bake"
"""Custom property on the bake action: how to restore the object's animation data."""
OWN_PROPERTY_PREFIX = '["overlap_'
"""Data paths of our own properties (load curve): not part of the body's animation."""


class BakeError(OverlapAssistError):
    """The bake cannot be written; the message says what to do. Nothing was changed."""


# ---------------------------------------------------------------------------------------------
# Finding and checking
# ---------------------------------------------------------------------------------------------

BAKE_LAYER = nla_layer.LayerKind(BAKE_TRACK_NAME, INFO_KEY, BakeError, "Select the character's armature to bake onto",
                                 "the bake layer")
bake_action_name = BAKE_LAYER.action_name
find_bake = BAKE_LAYER.find
"""(track, strip, action) of the object's bake layer, or None."""
has_bake = BAKE_LAYER.has
check_object = BAKE_LAYER.check_object


def _user_tracks(ad):
    return [t for t in ad.nla_tracks if t.name != BAKE_TRACK_NAME]


def check_layerable(obj):
    """Raise BakeError if a layer cannot be put under the object's active action exactly."""
    ad = obj.animation_data
    if ad is None or ad.action is None:
        return
    found = find_bake(obj)
    blend = ad.action_blend_type
    if found is not None and blend == 'COMBINE':
        blend = found[2][INFO_KEY].to_dict().get("blend_type", blend)
    act = ad.action.name
    if ad.action_influence != 1.0:
        raise BakeError(f"The action '{act}' plays at influence {ad.action_influence:.2f}: set it to 1 "
                        "(NLA editor > Animated Influence off) or bake into the action")
    if blend not in ('REPLACE', 'COMBINE'):
        raise BakeError(f"The action '{act}' blends as {blend.title()}: set its blending to Replace or Combine "
                        "in the NLA editor, then bake again")
    if blend == 'COMBINE':
        return
    own = {fc.data_path for fc in anim_data.slot_fcurves(ad.action, ad.action_slot)}
    for track in _user_tracks(ad):
        if track.mute:
            continue
        for strip in track.strips:
            if strip.mute:
                continue
            shared = own & {fc.data_path for fc in anim_data.slot_fcurves(strip.action, strip.action_slot)}
            if shared:
                raise BakeError(f"The action '{act}' and the NLA track '{track.name}' both animate "
                                f"{sorted(shared)[0]}: push the action down into the NLA (Push Down in the "
                                "NLA editor) or mute that track, then bake again")


# ---------------------------------------------------------------------------------------------
# The body's animation, for the stale check
# ---------------------------------------------------------------------------------------------

_HASHED_KEY_ATTRIBUTES = ("co", "handle_left", "handle_right", "interpolation", "easing")


def _hash_fcurves(h, fcurves):
    for fc in sorted(fcurves, key=lambda c: (c.data_path, c.array_index)):
        if fc.data_path.startswith(OWN_PROPERTY_PREFIX):
            continue
        h.update(f"{fc.data_path}[{fc.array_index}]{int(fc.mute)}{fc.extrapolation}".encode())
        keys = anim_data.read_keyframes(fc, _HASHED_KEY_ATTRIBUTES)
        for name in _HASHED_KEY_ATTRIBUTES:
            h.update(keys[name].tobytes())
        h.update(str(len(fc.modifiers)).encode())


def _playing_user_strips(ad):
    """(track, strip) of the user's unmuted tracks and strips that hold an action, in order."""
    for track in _user_tracks(ad):
        if track.mute:
            continue
        for strip in track.strips:
            if not strip.mute and strip.action is not None:
                yield track, strip


def animation_digest(obj) -> str:
    """Digest of the user's animation of ``obj``: keys of the active action (its slot) and of the
    unmuted strips of the user's tracks, with their placement; the bake layer left out."""
    h = hashlib.sha256()
    ad = obj.animation_data
    if ad is None:
        return h.hexdigest()
    if ad.action is not None:
        h.update(b"action")
        _hash_fcurves(h, anim_data.slot_fcurves(ad.action, ad.action_slot))
    for track, strip in _playing_user_strips(ad):
        h.update(f"{track.name}/{strip.name}:{strip.frame_start}:{strip.frame_end}:{strip.blend_type}".encode())
        _hash_fcurves(h, anim_data.slot_fcurves(strip.action, strip.action_slot))
    return h.hexdigest()


def animation_layout(obj) -> tuple:
    """What :func:`animation_digest` covers apart from the keys themselves, cheap to read: the
    active action and slot, and the placement of the unmuted strips of the user's tracks. Key
    edits change Actions (which depsgraph updates report); this changes with the object."""
    ad = obj.animation_data
    if ad is None:
        return ()
    out = [(ad.action.as_pointer() if ad.action is not None else 0,
            ad.action_slot.as_pointer() if ad.action is not None and ad.action_slot is not None else 0)]
    for track, strip in _playing_user_strips(ad):
        out.append((track.name, strip.name, strip.frame_start, strip.frame_end, strip.blend_type,
                    strip.action.as_pointer(), strip.action_slot.as_pointer() if strip.action_slot else 0))
    return tuple(out)


def recorded_digest(found):
    """The digest the bake recorded, from :func:`find_bake`'s result (None if it recorded none)."""
    return found[2][INFO_KEY].to_dict().get("digest")


def bake_state(obj):
    """None (no bake), "current", or "stale" (the user's animation changed after the bake)."""
    found = find_bake(obj)
    if found is None:
        return None
    return "current" if recorded_digest(found) == animation_digest(obj) else "stale"


STALE_MESSAGE = "The animation changed after the bake: Bake Chains again to follow it"


# ---------------------------------------------------------------------------------------------
# Writing key sets
# ---------------------------------------------------------------------------------------------

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


def write_into_action(obj, key_set) -> str:
    """Write a KeySet into the user's action, keeping its keys outside the new range. Returns its name."""
    bag = anim_data.active_fcurves(obj, create=True)
    pose = obj.pose.bones
    for name, keys in key_set.keys_by_bone.items():
        pb = pose[name]
        path = pb.path_from_id(rotation_property(pb))
        for index, co in enumerate(keys.co):
            if co is None:   # into the action every component has a curve; kept for safety
                continue
            fc = anim_data.ensure_fcurve(bag, path, index, pb.name)
            if keys.handle_left is None:
                new = anim_data.bezier_keys(co[:, 0], co[:, 1], co, co, "AUTO_CLAMPED")
            else:
                new = anim_data.bezier_keys(co[:, 0], co[:, 1], keys.handle_left[index], keys.handle_right[index],
                                            keys.handle_types[index])
            anim_data.write_keyframes(fc, _merge_outside(fc, new))
    return obj.animation_data.action.name


def _write_new(bag, pose, keys_by_bone):
    """Write every bone's keys into F-curves created here (the bake action is new and empty)."""
    channels, cos, lefts, rights, types = [], [], [], [], []
    for name, keys in keys_by_bone.items():
        path = pose[name].path_from_id(rotation_property(pose[name]))
        for index, co in enumerate(keys.co):
            if co is None:   # the component needs no curve
                continue
            channels.append((path, index, name))
            cos.append(co)
            lefts.append(keys.handle_left[index] if keys.handle_left is not None else None)
            rights.append(keys.handle_right[index] if keys.handle_right is not None else None)
            types.append(keys.handle_types[index] if keys.handle_types is not None else None)
    anim_data.write_bezier_curves(anim_data.new_fcurves(bag, channels), cos, lefts, rights, types)


bake_influence = BAKE_LAYER.influence
set_bake_influence = BAKE_LAYER.set_influence


def add_layer(obj, first_frame, key_set, influence, static_rotations) -> str:
    """Create the bake action and its COMBINE track under the active action. Returns the action's name.

    ``static_rotations``: {bone: values} of channels written absolute, put back by :func:`remove_bake`.
    """
    created = obj.animation_data is None
    ad = obj.animation_data or obj.animation_data_create()
    info = {"created_animdata": int(created), "use_nla": int(ad.use_nla), "pushed": 0,
            "blend_type": ad.action_blend_type, "combine_set": int(ad.action is not None),
            "static_rotations": static_rotations}
    act = bpy.data.actions.new(bake_action_name(obj))
    slot = act.slots.new(id_type='OBJECT', name=obj.name)
    _write_new(anim_data.channelbag_for(act, slot, create=True), obj.pose.bones, key_set.keys_by_bone)
    track = ad.nla_tracks.new(prev=ad.nla_tracks[-1] if len(ad.nla_tracks) else None)
    track.name = BAKE_TRACK_NAME
    strip = track.strips.new(BAKE_TRACK_NAME, int(first_frame), act)
    strip.action_slot = slot
    strip.blend_type, strip.extrapolation = 'COMBINE', 'NOTHING'
    nla_layer.set_strip_influence(strip, influence, first_frame)
    if ad.action is not None:
        ad.action_blend_type = 'COMBINE'
    ad.use_nla = True
    info["digest"] = animation_digest(obj)
    act[INFO_KEY] = info
    return act.name


# ---------------------------------------------------------------------------------------------
# Removing
# ---------------------------------------------------------------------------------------------

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
            setattr(pb, rotation_property(pb), values)


def _restore_pushed_base(ad, info):
    """Earlier arrangement: the user's action sat in the "Overlap Base" strip. Put it back as the
    active action, unless an action was created meanwhile by keying: then both stay (nothing lost)."""
    base = ad.nla_tracks.get(BASE_TRACK_NAME)
    if base is None or len(base.strips) != 1 or ad.action is not None:
        return
    base_act, base_slot = base.strips[0].action, base.strips[0].action_slot
    ad.nla_tracks.remove(base)
    ad.action = base_act
    if base_act is not None:
        ad.action_slot = base_slot
    ad.action_blend_type, ad.action_influence = info["blend_type"], info["influence"]
    ad.action_extrapolation = info["extrapolation"]


def remove_bake(obj) -> bool:
    """Delete the bake layer and its action; the user's action (with every edit) stays. False if none."""
    info = BAKE_LAYER.take_off(obj)
    if info is None:
        return False
    ad = obj.animation_data
    if info.get("pushed"):
        _restore_pushed_base(ad, info)
    elif info.get("combine_set") and ad.action is not None and ad.action_blend_type == 'COMBINE':
        ad.action_blend_type = info.get("blend_type", 'REPLACE')
    ad.use_nla = bool(info.get("use_nla", True))
    restore_static_rotations(obj, info.get("static_rotations", {}))
    if info.get("created_animdata") and ad.action is None and not len(ad.nla_tracks) and not len(ad.drivers):
        obj.animation_data_clear()
    return True
