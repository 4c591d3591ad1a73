"""The "Overlap Flight Fix" NLA layer: a root translation that puts the CoM on the ballistic arc.

Same rules as the chain bake (``bake_layer``): the user's action is never edited and stays the
active action, the layer is its own action on its own NLA track under it (COMBINE, so its
location keys add to the animated location), its influence is one constant key on the strip,
removing it restores the animation data exactly, and writing it again replaces it. Stack, bottom
to top::

    the user's own NLA tracks (untouched)
    "Overlap Flight Fix"  "<object> Overlap Flight Fix": location keys of the root bone
    "Overlap Bake"        chain offsets, if baked (simulated on the corrected body)
    active action:        the user's own action, blend COMBINE while a layer exists

The two layers animate different channels (root location, chain rotations), so their order does
not change the pose. A bake made after the fix goes above it and samples the corrected body; a fix
written over a bake goes right under it, or above it when the bake is the lowest track (Blender's
``nla_tracks.new`` adds a track only above another).
Keys the animator sets while the fix exists go into their own action (COMBINE over the layer).

Who restores the action's blend type (and the NLA switch, and animation data the layer created):
the first layer written records the state before it; the other finds COMBINE already set. When
the fix is written over a bake, it takes the bake's record over (the bake then records COMBINE),
and when the fix is removed while a bake exists it hands its record to the bake, so whichever
layer goes last puts the original back. A bake in the earlier arrangement (the user's action
pushed into an "Overlap Base" strip, no active action) is left as it is: the fix goes between
the base strip and the bake, and takes the blend type over the same way, so a bake removed first
puts the user's action back at COMBINE under which the fix still plays.

A root location that nothing animates is written absolute (its static value + offset, COMBINE
over zero) and its static value is put back on removal.
"""
from __future__ import annotations

from dataclasses import dataclass

import bpy
import numpy as np

from ..core.errors import OverlapAssistError
from . import anim_data, nla_layer
from . import bake_layer
from .bake_layer import find_bake

FIX_TRACK_NAME = "Overlap Flight Fix"
FIX_INFO_KEY = "overlap_assist_flight_fix"
"""Custom property on the fix action: how to restore the object's animation data."""
_RESTORE_FIELDS = ("blend_type", "combine_set", "use_nla", "created_animdata")
"""What the layer written first records, and whichever layer goes last puts back."""


class FlightFixError(OverlapAssistError):
    """The flight fix cannot be written; the message says what to do. Nothing was changed."""


@dataclass(frozen=True, slots=True)
class FixStats:
    bone: str
    n_frames: int
    max_offset_m: float
    action_name: str

    def summary(self) -> str:
        return (f"Flight fix on '{self.bone}' over {self.n_frames} frames on the {FIX_TRACK_NAME} layer "
                f"(largest shift {self.max_offset_m * 100:.1f} cm)")


FIX_LAYER = nla_layer.LayerKind(FIX_TRACK_NAME, FIX_INFO_KEY, FlightFixError,
                                "Select the character's armature to fix its flight", "the fix layer")
fix_action_name = FIX_LAYER.action_name
find_fix = FIX_LAYER.find
"""(track, strip, action) of the object's flight-fix layer, or None."""
has_fix = FIX_LAYER.has
check_object = FIX_LAYER.check_object


def fix_bone(obj, body_bone=""):
    """The bone the fix translates so that the whole rig moves.

    With ``body_bone`` (the Root bone setting): its top-level ancestor. Without: among the
    top-level bones, the one the other top-level bones follow through their constraints (a
    production rig's parent-switch helpers, e.g. Rigify's ``MCH-*.parent``, follow its ``root``
    that way), else the one most deform bones hang from.
    """
    bones = obj.data.bones
    if body_bone:
        bone = bones.get(body_bone)
        if bone is None:
            raise FlightFixError(f"Bone '{body_bone}' is not in {obj.name}: pick the root bone in Body Motion")
        while bone.parent is not None:
            bone = bone.parent
        return bone.name
    tops = [b.name for b in bones if b.parent is None]
    if not tops:
        raise FlightFixError(f"{obj.name} has no bones")
    followers = {name: 0 for name in tops}
    for name in tops:
        for con in obj.pose.bones[name].constraints:
            targets = [getattr(con, "subtarget", "")] + [getattr(t, "subtarget", "") for t in getattr(con, "targets", ())]
            for sub in set(targets):
                if sub in followers and sub != name:
                    followers[sub] += 1
    deform = {name: sum(c.use_deform for c in bones[name].children_recursive) for name in tops}
    return max(tops, key=lambda n: (followers[n], deform[n]))


def world_to_location(obj, bone_name, offsets_m, scale_length):
    """World translations in metres (n, 3) -> the bone's location channel (its rest frame, scene units).

    A top-level bone's location is applied in its rest frame (``matrix_local``) inside the object,
    before the bone's own rotation and scale, so an offset there moves the bone and all it carries.
    """
    world = np.array(obj.matrix_world, dtype=float)[:3, :3]
    rest = np.array(obj.data.bones[bone_name].matrix_local, dtype=float)[:3, :3]
    in_object = np.linalg.solve(world, (np.asarray(offsets_m, dtype=float) / scale_length).T).T
    return in_object @ rest      # rest^T o for each row


def _bake_info(obj):
    found = find_bake(obj)
    return (found[2], found[2][bake_layer.INFO_KEY].to_dict()) if found else (None, None)


def _take_over_restore(obj, info) -> bool:
    """Take the bake's record of the state before any layer (the bake then records COMBINE). False without a bake."""
    act, bake = _bake_info(obj)
    if act is None:
        return False
    for k in _RESTORE_FIELDS:
        if k in bake:
            info[k] = bake[k]
    if bake.get("combine_set") or bake.get("pushed"):
        # The bake set COMBINE, or (earlier arrangement) will put the user's action back when it goes:
        # from now on it leaves COMBINE for the fix, and the fix restores the original.
        bake["blend_type"] = 'COMBINE'
        info["combine_set"] = 1
    bake["use_nla"], bake["created_animdata"] = 1, 0
    act[bake_layer.INFO_KEY] = bake
    return True


fix_influence = FIX_LAYER.influence
set_fix_influence = FIX_LAYER.set_influence


def fix_info(obj) -> dict:
    found = find_fix(obj)
    return found[2][FIX_INFO_KEY].to_dict() if found else {}


def write_fix(obj, scene, frames, offsets_m, bone_name, influence=1.0, details=None) -> FixStats:
    """Write the root translation ``offsets_m`` (world metres, one row per whole frame) as the fix layer.

    Parameters
    ----------
    obj : armature Object; scene : its scene (unit scale)
    frames : array_like (n,), whole frames, increasing, n >= 2
    offsets_m : array_like (n, 3), world translation of the whole rig per frame, metres
    bone_name : the top-level bone to translate (see :func:`fix_bone`)
    influence : 0..1
    details : dict of JSON-able values stored with the layer (mode, blend, advice)

    Raises FlightFixError on bad input (nothing changed then). Re-running replaces the layer.
    """
    check_object(obj)
    frames = np.asarray(frames, dtype=np.float64)
    offsets = np.asarray(offsets_m, dtype=np.float64)
    if frames.ndim != 1 or frames.size < 2 or np.any(frames != np.round(frames)) or np.any(np.diff(frames) <= 0):
        raise FlightFixError("The flight fix needs at least 2 whole frames in increasing order")
    if offsets.shape != (frames.size, 3) or not np.all(np.isfinite(offsets)):
        raise FlightFixError(f"The flight fix needs {frames.size} finite offsets (n, 3), got shape {offsets.shape}")
    if not 0.0 <= influence <= 1.0:
        raise FlightFixError(f"Influence must be between 0 and 1, got {influence}")
    pb = obj.pose.bones.get(bone_name)
    if pb is None or pb.parent is not None:
        raise FlightFixError(f"'{bone_name}' is not a top-level bone of {obj.name}: the fix moves the whole rig "
                             "through its top-level bone")
    try:
        bake_layer.check_layerable(obj)   # the same conditions as the bake for a layer under the action
    except bake_layer.BakeError as exc:
        raise FlightFixError(str(exc).replace("then bake again", "then fix the flight again")
                             .replace("or bake into the action", "first")) from None
    remove_fix(obj)
    path = pb.path_from_id("location")
    local = world_to_location(obj, bone_name, offsets, scene.unit_settings.scale_length)
    ad = obj.animation_data
    info = {"created_animdata": int(ad is None), "bone": bone_name, "use_nla": int(ad.use_nla) if ad else 1,
            "combine_set": int(ad is not None and ad.action is not None),
            "blend_type": ad.action_blend_type if ad is not None else 'REPLACE'}
    if path not in anim_data.animated_paths(obj):
        info["static_location"] = [float(v) for v in pb.location]
        local = local + np.array(pb.location, dtype=float)
    _take_over_restore(obj, info)
    info.update(details or {})
    ad = obj.animation_data or obj.animation_data_create()
    act = bpy.data.actions.new(fix_action_name(obj))
    slot = act.slots.new(id_type='OBJECT', name=obj.name)
    bag = anim_data.channelbag_for(act, slot, create=True)
    curves = anim_data.new_fcurves(bag, [(path, i, bone_name) for i in range(3)])
    cos = [np.ascontiguousarray(np.stack([frames, local[:, i]], axis=1), dtype=np.float32) for i in range(3)]
    anim_data.write_bezier_curves(curves, cos)
    act[FIX_INFO_KEY] = info
    bake = find_bake(obj)
    if bake is not None:         # under the bake (above an earlier arrangement's base strip)
        index = list(ad.nla_tracks).index(bake[0])
        below = ad.nla_tracks[index - 1] if index > 0 else None
    else:
        below = ad.nla_tracks[-1] if len(ad.nla_tracks) else None
    track = ad.nla_tracks.new(prev=below)
    track.name = FIX_TRACK_NAME
    strip = track.strips.new(FIX_TRACK_NAME, int(frames[0]), act)
    strip.action_slot = slot
    strip.blend_type, strip.extrapolation = 'COMBINE', 'NOTHING'
    nla_layer.set_strip_influence(strip, influence, frames[0])
    if ad.action is not None:
        ad.action_blend_type = 'COMBINE'
    ad.use_nla = True
    obj.update_tag(refresh={'TIME'})
    return FixStats(bone=bone_name, n_frames=int(frames.size),
                    max_offset_m=float(np.max(np.linalg.norm(offsets, axis=1))), action_name=act.name)


def remove_fix(obj) -> bool:
    """Delete the fix layer and its action; restore the animation data as it was. False if none."""
    info = FIX_LAYER.take_off(obj)
    if info is None:
        return False
    ad = obj.animation_data
    bake_act, bake = _bake_info(obj)
    if bake_act is not None:     # the bake stays: it puts the original state back when it goes
        bake.update({k: info[k] for k in _RESTORE_FIELDS if k in info})
        bake_act[bake_layer.INFO_KEY] = bake
    else:
        if info.get("combine_set") and ad.action is not None and ad.action_blend_type == 'COMBINE':
            ad.action_blend_type = info.get("blend_type", 'REPLACE')
        ad.use_nla = bool(info.get("use_nla", True))
    static = info.get("static_location")
    pb = obj.pose.bones.get(info.get("bone", ""))
    if static is not None and pb is not None:
        pb.location = static
    if info.get("created_animdata") and ad.action is None and not len(ad.nla_tracks) and not len(ad.drivers):
        obj.animation_data_clear()
    obj.update_tag(refresh={'TIME'})
    return True
