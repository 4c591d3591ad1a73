"""The one place that knows how actions store F-curves across Blender versions.

Blender 4.5 has slotted actions but still offers ``action.fcurves``; 5.x has only slots →
layers → strips → channelbags. Everything here goes through slots and channelbags, which work
on 4.5 to 5.3, and assigns slots explicitly (an unmatched slot silently animates nothing).
"""
import bpy
import numpy as np


def assigned_slot(id_data):
    ad = id_data.animation_data
    return getattr(ad, "action_slot", None) if ad else None


def channelbag_for(action, slot, create=False):
    """The channelbag of ``slot`` in ``action`` (None if absent and not ``create``)."""
    if not action.layers:
        if not create:
            return None
        action.layers.new("Layer")
    layer = action.layers[0]
    if not layer.strips:
        if not create:
            return None
        layer.strips.new(type='KEYFRAME')
    strip = layer.strips[0]
    return strip.channelbag(slot, ensure=create)


def ensure_slot(action, id_data):
    """A slot of ``action`` for ``id_data`` (its name), created if missing."""
    for slot in action.slots:
        if slot.target_id_type == id_data.id_type and slot.name_display == id_data.name:
            return slot
    return action.slots.new(id_type=id_data.id_type, name=id_data.name)


def active_fcurves(id_data, create=False):
    """F-curves of the action and slot currently animating ``id_data`` (creating them if asked)."""
    ad = id_data.animation_data
    if ad is None:
        if not create:
            return None
        ad = id_data.animation_data_create()
    act = ad.action
    if act is None:
        if not create:
            return None
        act = bpy.data.actions.new(id_data.name + "Action")
        ad.action = act
    slot = ad.action_slot
    if slot is None:
        if not create:
            return None
        slot = ensure_slot(act, id_data)
        ad.action_slot = slot
    bag = channelbag_for(act, slot, create=create)
    return None if bag is None else bag


def ensure_fcurve(bag, data_path, index=0, group_name=""):
    """Find or create an F-curve in a channelbag (4.5 has no ``group_name`` keyword)."""
    fc = bag.fcurves.find(data_path, index=index)
    if fc is None:
        fc = bag.fcurves.new(data_path, index=index)
        if group_name:
            fc.group = bag.groups.get(group_name) or bag.groups.new(group_name)
    return fc


def write_keys(fc, frames, values, interpolation='LINEAR'):
    """Replace all keys of ``fc`` with (frame, value) pairs in one bulk write."""
    fc.keyframe_points.clear()
    n = len(frames)
    fc.keyframe_points.add(n)
    co = np.empty(2 * n, dtype=np.float32)
    co[0::2] = frames
    co[1::2] = values
    fc.keyframe_points.foreach_set("co", co)
    interp = bpy.types.Keyframe.bl_rna.properties["interpolation"].enum_items[interpolation].value
    fc.keyframe_points.foreach_set("interpolation", np.full(n, interp, dtype=np.int32))
    fc.update()


def all_action_fcurves(action):
    """Every F-curve of every slot of ``action`` (for snapshots and key checks)."""
    out = []
    for layer in action.layers:
        for strip in layer.strips:
            for bag in strip.channelbags:
                out.extend(bag.fcurves)
    return out


def slot_fcurves(action, slot):
    """F-curves of ``slot`` in ``action`` (empty list when the slot has no channelbag)."""
    if action is None or slot is None:
        return []
    bag = channelbag_for(action, slot, create=False)
    return list(bag.fcurves) if bag is not None else []


def animated_paths(id_data):
    """Data paths animated on ``id_data`` by its active action and its unmuted NLA strips.

    The active action counts through its assigned slot, each strip through ``strip.action_slot``.
    """
    ad = id_data.animation_data
    if ad is None:
        return set()
    paths = {fc.data_path for fc in slot_fcurves(ad.action, ad.action_slot)}
    for track in ad.nla_tracks:
        if track.mute:
            continue
        for strip in track.strips:
            if not strip.mute:
                paths.update(fc.data_path for fc in slot_fcurves(strip.action, strip.action_slot))
    return paths


# Per-key attributes read and written in bulk; (name, numpy dtype, values per key). Enum values
# travel as their integer value through foreach_get/foreach_set on every version 4.5 to 5.3.
KEYFRAME_ATTRIBUTES = (
    ("co", "f4", 2), ("handle_left", "f4", 2), ("handle_right", "f4", 2),
    ("interpolation", "i4", 1), ("handle_left_type", "i4", 1), ("handle_right_type", "i4", 1),
    ("easing", "i4", 1), ("type", "i4", 1), ("back", "f4", 1), ("amplitude", "f4", 1),
    ("period", "f4", 1),
)


def _enum_value(struct, prop, identifier):
    return struct.bl_rna.properties[prop].enum_items[identifier].value


def read_keyframes(fc, names=None):
    """All keys of ``fc`` as {attribute: array, shape (n,) or (n, 2)} (see KEYFRAME_ATTRIBUTES);
    only the attributes in ``names`` when given."""
    n = len(fc.keyframe_points)
    out = {}
    for name, dtype, width in KEYFRAME_ATTRIBUTES:
        if names is not None and name not in names:
            continue
        buf = np.empty(n * width, dtype=dtype)
        fc.keyframe_points.foreach_get(name, buf)
        out[name] = buf.reshape(n, width) if width > 1 else buf
    return out


def write_keyframes(fc, keys):
    """Replace all keys of ``fc`` with ``keys`` ({attribute: array} as from read_keyframes).

    One ``keyframe_points.add`` and one ``foreach_set`` per attribute; attributes missing from
    ``keys`` keep Blender's defaults. ``fc.update()`` sorts the keys and recomputes only the
    handles of AUTO/AUTO_CLAMPED/VECTOR keys; ALIGNED and FREE handles are kept as written.
    """
    fc.keyframe_points.clear()
    n = len(keys["co"])
    fc.keyframe_points.add(n)
    for name, dtype, _width in KEYFRAME_ATTRIBUTES:
        if name in keys:
            fc.keyframe_points.foreach_set(name, np.ascontiguousarray(keys[name], dtype=dtype).ravel())
    fc.update()


def bezier_keys(key_frames, key_values, handle_left, handle_right, handle_type="ALIGNED"):
    """{attribute: array} for Bézier keys with explicit handles (for write_keyframes); handle_type
    is one type name for all keys or a sequence of names, one per key (both sides)."""
    n = len(key_frames)
    kp = bpy.types.Keyframe
    handle = _handle_type_values(handle_type, n)
    return {
        "co": np.stack((key_frames, key_values), axis=1),
        "handle_left": np.asarray(handle_left),
        "handle_right": np.asarray(handle_right),
        "interpolation": np.full(n, _enum_value(kp, "interpolation", "BEZIER")),
        "handle_left_type": handle,
        "handle_right_type": handle.copy(),
    }


def new_fcurves(bag, channels):
    """Create F-curves in an empty channelbag: ``channels`` is a list of (data_path, index, group_name).

    5.x takes the group by keyword (one call per curve); 4.5 has no such keyword, so the group is
    created once and assigned. Returns the F-curves in the order given.
    """
    out, groups = [], {}
    new = bag.fcurves.new
    use_keyword = True
    for path, index, group_name in channels:
        fc = None
        if use_keyword and group_name:
            try:
                fc = new(path, index=index, group_name=group_name)
            except TypeError:   # 4.5: "takes at most 2 arguments"
                use_keyword = False
        if fc is None:
            fc = new(path, index=index)
            if group_name:
                group = groups.get(group_name) or bag.groups.get(group_name) or bag.groups.new(group_name)
                groups[group_name] = group
                fc.group = group
        out.append(fc)
    return out


_BEZIER = None


def _bezier_enums():
    """Enum values of the interpolation and handle types the writers use (looked up once)."""
    global _BEZIER
    if _BEZIER is None:
        kp_type = bpy.types.Keyframe
        _BEZIER = {"BEZIER": _enum_value(kp_type, "interpolation", "BEZIER"),
                   **{t: _enum_value(kp_type, "handle_left_type", t) for t in ("ALIGNED", "FREE", "AUTO_CLAMPED")}}
    return _BEZIER


def _handle_type_values(handle_type, n):
    """(n,) int32 enum values of a handle type name, of one name per key, or of one bool per key
    (True: 'ALIGNED', False: 'FREE', the reducer's two types)."""
    if isinstance(handle_type, str):
        return np.full(n, _enum_value(bpy.types.Keyframe, "handle_left_type", handle_type), dtype=np.int32)
    names = np.asarray(handle_type)
    enums = _bezier_enums()
    if names.dtype == bool:
        return np.where(names, enums["ALIGNED"], enums["FREE"]).astype(np.int32)
    aligned = names == "ALIGNED"
    if np.all(aligned | (names == "FREE")):   # the reducer's two types: no lookups
        return np.where(aligned, enums["ALIGNED"], enums["FREE"]).astype(np.int32)
    out = np.empty(n, dtype=np.int32)
    for name in np.unique(names):
        out[names == name] = _enum_value(bpy.types.Keyframe, "handle_left_type", str(name))
    return out


def write_bezier_curves(fcurves, cos, handles_left=None, handles_right=None, handle_type='ALIGNED'):
    """Add Bézier keys to F-curves that have none, in as few bulk calls as possible.

    ``cos[i]``, ``handles_left[i]``, ``handles_right[i]``: float32 C-contiguous arrays (n_i, 2) of
    (frame, value) for ``fcurves[i]``. A curve without handles (``handles_left`` None, or its
    entry None) keeps Blender's automatic (AUTO_CLAMPED) handles, computed by ``fc.update()``;
    with them both handle types are set to ``handle_type`` and kept as written: one type name for
    all curves, or a sequence with one entry per curve, each a name, an (n_i,) sequence of names or
    an (n_i,) bool array (fitted handles: True, 'ALIGNED', where both sides share a slope; False,
    'FREE', elsewhere). Interpolation and handle types are written only where the defaults of new
    keys (read once, on the first curve) differ.
    """
    enums = _bezier_enums()
    per_curve = not isinstance(handle_type, str)
    defaults = None
    for i, fc in enumerate(fcurves):
        co = cos[i]
        left = handles_left[i] if handles_left is not None else None
        points = fc.keyframe_points
        n = len(co)
        points.add(n)
        points.foreach_set("co", co.ravel())
        if defaults is None:
            first = points[0]
            defaults = (first.handle_left_type, first.handle_right_type, first.interpolation)
        wanted_type = handle_type[i] if per_curve else handle_type
        if left is None or wanted_type is None:
            wanted_type = 'AUTO_CLAMPED'
        if left is not None:
            points.foreach_set("handle_left", left.ravel())
            points.foreach_set("handle_right", handles_right[i].ravel())
        if not isinstance(wanted_type, str):   # one type per key
            types = _handle_type_values(wanted_type, n)
            points.foreach_set("handle_left_type", types)
            points.foreach_set("handle_right_type", types)
        elif defaults[0] != wanted_type or defaults[1] != wanted_type:
            types = np.full(n, enums[wanted_type], dtype=np.int32)
            points.foreach_set("handle_left_type", types)
            points.foreach_set("handle_right_type", types)
        if defaults[2] != 'BEZIER':
            points.foreach_set("interpolation", np.full(n, enums["BEZIER"], dtype=np.int32))
        fc.update()


def sample_fcurves(fcurves, frames):
    """{F-curve: (n,) float32 values at whole ``frames``} for the given curves that have keys and
    no modifiers (others are left out: evaluate them one frame at a time).

    Each action holding some of the curves is copied once (``ID.copy``: keys, handles, types,
    easing, extrapolation, all in C); every wanted curve of the copy is turned into one sample per
    whole frame by Blender (``convert_to_samples``: the evaluation of ``FCurve.evaluate``,
    bit-identical, tested) and read back with one ``foreach_get``; the copy is then deleted. The
    given curves are only read. About a sixth of the time of one ``evaluate`` call per frame.
    """
    todo = [fc for fc in fcurves if len(fc.keyframe_points) and not len(fc.modifiers)]
    if not todo:
        return {}
    first, last = int(frames[0]), int(frames[-1])
    pick = np.asarray(frames, dtype=np.int64) - first
    every_frame = pick.shape[0] == last - first + 1   # increasing whole frames: all of first..last
    by_action = {}
    for fc in todo:
        by_action.setdefault(fc.id_data, []).append(fc)
    out = {}
    for act, wanted in by_action.items():
        originals = all_action_fcurves(act)
        position = {fc.as_pointer(): i for i, fc in enumerate(originals)}
        copy = act.copy()
        try:
            copies = all_action_fcurves(copy)
            if len(copies) != len(originals):   # copies are made in order; never seen otherwise
                raise RuntimeError(f"Copy of action '{act.name}' has {len(copies)} F-curves, not {len(originals)}")
            values = np.empty(2 * (last - first + 1), dtype=np.float32)
            for fc in wanted:
                sampled = copies[position[fc.as_pointer()]]
                sampled.convert_to_samples(first, last + 1)
                sampled.sampled_points.foreach_get("co", values)
                out[fc] = values[1::2].copy() if every_frame else values[1::2][pick]
        finally:
            bpy.data.actions.remove(copy)
    return out
