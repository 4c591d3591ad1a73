"""What our removable NLA layers (the chain bake, the flight fix) share: finding one, checking
that the object can take one, and the strip's influence.

A layer is one NLA track of a fixed name holding one strip whose action carries a custom
property (its restore record) under a fixed key; anything else of that name is not ours. The
strip's influence is held by one constant key on the strip's own influence curve: Blender uses
``strip.influence`` only while it is animated, and with the key the value is saved in the file
and taken back by undo like any other edit.
"""
from __future__ import annotations

from dataclasses import dataclass

from . import anim_data


@dataclass(frozen=True)
class LayerKind:
    """One kind of our layers: its track name, the key of its record on its action, its error
    type and the words of the target check."""
    track_name: str
    info_key: str
    error: type
    select_text: str
    layer_text: str

    def action_name(self, obj) -> str:
        return f"{obj.name} {self.track_name}"

    def find(self, obj):
        """(track, strip, action) of the object's layer of this kind, or None."""
        return find_layer(obj, self.track_name, self.info_key)

    def has(self, obj) -> bool:
        return self.find(obj) is not None

    def check_object(self, obj):
        check_layer_target(obj, self.error, self.select_text, self.layer_text)

    def take_off(self, obj):
        """Delete the layer's track and action (after the target check); returns its record as a
        dict, or None without the layer. Putting the animation data back is the caller's."""
        import bpy
        found = self.find(obj)
        if found is None:
            return None
        self.check_object(obj)
        track, _strip, act = found
        info = act[self.info_key].to_dict()
        obj.animation_data.nla_tracks.remove(track)
        bpy.data.actions.remove(act)
        return info

    def influence(self, obj):
        """The layer's influence (its key value at the strip start), or None without the layer."""
        found = self.find(obj)
        return None if found is None else strip_influence(found[1])

    def set_influence(self, obj, value) -> bool:
        """Hold the layer's influence at a constant 0..1 on its strip. False without the layer."""
        found = self.find(obj)
        if found is None:
            return False
        set_strip_influence(found[1], value)
        return True


def find_layer(obj, track_name, info_key):
    """(track, strip, action) of the object's layer called ``track_name``, or None."""
    ad = obj.animation_data
    track = ad.nla_tracks.get(track_name) if ad else None
    if track is None or len(track.strips) != 1:
        return None
    strip = track.strips[0]
    act = strip.action
    if act is None or info_key not in act.keys():
        return None
    return track, strip, act


def check_layer_target(obj, error, select_text, layer_text):
    """Raise ``error`` unless ``obj`` is an armature whose NLA can take a layer.

    ``select_text``: what to say when no armature is given; ``layer_text``: the layer's name in
    the Solo message ("the bake layer").
    """
    if obj is None or obj.type != 'ARMATURE':
        raise error(select_text)
    ad = obj.animation_data
    if ad is not None and ad.use_tweak_mode:
        raise error(f"{obj.name} is in NLA tweak mode: leave tweak mode (Tab in the NLA editor) first")
    if ad is not None and any(t.is_solo for t in ad.nla_tracks):
        raise error(f"An NLA track of {obj.name} is set to Solo: turn Solo off so {layer_text} can play")


def set_strip_influence(strip, value, frame=None):
    """Hold the strip's influence at ``value`` (clamped to 0..1) by one constant key at ``frame``
    (default: the strip's start), replacing any keys on it."""
    strip.use_animated_influence = True
    fc = strip.fcurves.find("influence")
    at = strip.frame_start if frame is None else frame
    anim_data.write_keys(fc, [at], [min(max(float(value), 0.0), 1.0)], 'LINEAR')


def strip_influence(strip):
    """The strip's influence as its key holds it (at the strip's start)."""
    return strip.fcurves.find("influence").evaluate(strip.frame_start)
