"""Every panel and list of the sidebar draws without error, in each state an animator meets, and
names only what Blender has: properties of the data drawn, registered operators and their
properties, registered lists, icons that exist in this Blender version (icon names change between
versions). The layout is a recorder (no window in module mode), checked against Blender's own RNA
(``bl_rna.properties``, the operators' RNA types, ``UILayout``'s icon enum)."""
import types

import bpy
import pytest
from blender_helpers import op, select_bones, tail_jumper

from overlap_assist.blender import panels

ICONS = set(bpy.types.UILayout.bl_rna.functions["label"].parameters["icon"].enum_items.keys())


def _check_icon(kw):
    icon = kw.get("icon")
    assert icon is None or icon in ICONS, f"icon {icon!r} does not exist in Blender {bpy.app.version_string}"


def _check_prop(data, name):
    assert data is not None and name in data.bl_rna.properties, f"{type(data).__name__} has no property {name!r}"


def _operator_rna(idname):
    module, name = idname.split(".")
    try:
        return getattr(getattr(bpy.ops, module), name).get_rna_type()
    except (AttributeError, KeyError) as err:
        raise AssertionError(f"operator {idname} is not registered") from err


class OperatorProps:
    """What ``layout.operator`` returns: setting a property the operator lacks is an error."""

    def __init__(self, rna):
        object.__setattr__(self, "_rna", rna)

    def __setattr__(self, name, value):
        assert name in self._rna.properties, f"operator {self._rna.identifier} has no property {name!r}"


class RecordingLayout:
    """Stands in for bpy.types.UILayout and checks each call against Blender's RNA."""

    def __init__(self, log):
        object.__setattr__(self, "log", log)

    def __setattr__(self, name, value):   # use_property_split, enabled, alert, active, scale_y ...
        assert name in bpy.types.UILayout.bl_rna.properties, f"UILayout has no attribute {name!r}"

    def _child(self, *args, **kw):
        return RecordingLayout(self.log)

    row = column = box = split = grid_flow = column_flow = _child

    def label(self, text="", icon=None, **kw):
        _check_icon({"icon": icon})
        self.log.append(("label", text))

    def separator(self, **kw):
        pass

    def prop(self, data, name, **kw):
        _check_prop(data, name)
        _check_icon(kw)
        self.log.append(("prop", name))

    def prop_search(self, data, name, search_data, search_name, **kw):
        _check_prop(data, name)
        _check_prop(search_data, search_name)
        _check_icon(kw)
        self.log.append(("prop", name))

    def operator(self, idname, **kw):
        _check_icon(kw)
        self.log.append(("operator", idname))
        return OperatorProps(_operator_rna(idname))

    def operator_menu_enum(self, idname, prop, **kw):
        _check_icon(kw)
        assert prop in _operator_rna(idname).properties
        self.log.append(("operator", idname))

    def template_list(self, list_type, list_id, data, prop, active_data, active_prop, **kw):
        assert hasattr(bpy.types, list_type), f"list {list_type} is not registered"
        _check_prop(data, prop)
        _check_prop(active_data, active_prop)
        ui_list = getattr(bpy.types, list_type)
        for i, item in enumerate(getattr(data, prop)):   # draw each row the way Blender would
            ui_list.draw_item(None, self.context, RecordingLayout(self.log), data, item, 0, active_data,
                              active_prop, i)
        self.log.append(("list", list_type))


def draw_all(obj):
    """Draw every panel class that polls true for ``obj``; returns the calls made."""
    log = []
    context = types.SimpleNamespace(active_object=obj, object=obj, scene=bpy.context.scene)
    RecordingLayout.context = context
    drawn = []
    for cls in panels.classes:
        if not issubclass(cls, bpy.types.Panel) or not cls.poll(context):
            continue
        layout = RecordingLayout(log)
        cls.draw(types.SimpleNamespace(layout=layout), context)
        drawn.append(cls.__name__)
    return drawn, log


@pytest.fixture
def rig():
    obj = tail_jumper(with_chain=False)
    bpy.context.view_layer.objects.active = obj
    return obj


def test_panels_draw_in_every_state_of_a_shot(rig):
    n_panels = sum(issubclass(c, bpy.types.Panel) for c in panels.classes)
    states = {}
    states["fresh rig"] = draw_all(rig)
    assert op(rig, "analyze_motion") == {'FINISHED'}
    states["analyzed"] = draw_all(rig)
    select_bones(rig, ["tail.001", "tail.002"])
    assert op(rig, "add_chains", preset="heavy_tail") == {'FINISHED'}
    rig.overlap_assist.colliders.add().bone = "spine"
    states["chains and a collider"] = draw_all(rig)
    assert op(rig, "toggle_preview") == {'FINISHED'}
    states["previewing"] = draw_all(rig)
    assert op(rig, "toggle_preview") == {'FINISHED'}
    assert op(rig, "bake_chains") == {'FINISHED'}
    states["baked"] = draw_all(rig)
    assert op(rig, "check_spin") == {'FINISHED'}
    assert op(rig, "fix_flight") == {'FINISHED'}
    states["spin checked, flight fixed"] = draw_all(rig)
    labels = [text for kind, text in states["spin checked, flight fixed"][1] if kind == "label"]
    # Findings, advice and warnings on their own line read as sentences (the core keeps phrases).
    for phrase in ("center of mass put on the ballistic arc", "the feet (foot.l, foot.r) are never planted"):
        (line,) = [t for t in labels if t.lower().startswith(phrase)]
        assert line[0].isupper(), line
    rig.overlap_assist.chains[0].response_mode = "PHYSICAL"
    states["physical mode"] = draw_all(rig)
    for name, (drawn, log) in states.items():
        assert len(drawn) == n_panels, (name, drawn)    # every panel polls true on an armature
    ops = {idname for _d, log in states.values() for kind, idname in log if kind == "operator"}
    # Each state shows what belongs to it (the test can fail: a panel that stops drawing a control).
    assert {"overlap_assist.analyze_motion", "overlap_assist.add_chains", "overlap_assist.bake_chains",
            "overlap_assist.check_spin", "overlap_assist.fix_flight"} <= ops
    assert ("operator", "overlap_assist.remove_flight_fix") in states["spin checked, flight fixed"][1]
    assert ("operator", "overlap_assist.remove_flight_fix") not in states["baked"][1]
    assert ("list", "OVERLAP_ASSIST_UL_chains") in states["chains and a collider"][1]


def test_the_recorder_catches_a_wrong_name(rig):
    # The checks above can fail: a property, operator or icon that does not exist is caught.
    layout = RecordingLayout([])
    with pytest.raises(AssertionError, match="no property"):
        layout.prop(rig.overlap_assist, "no_such_setting")
    with pytest.raises(AssertionError, match="not registered"):
        layout.operator("overlap_assist.no_such_operator")
    with pytest.raises(AssertionError, match="does not exist"):
        layout.label(text="x", icon="NO_SUCH_ICON_NAME")
