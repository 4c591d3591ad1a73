"""Blender layer: registration in one place, symmetric (everything added is removed in reverse)."""
import contextlib

import bpy

from . import analyze, bake_ops, chains, flight_fix_ops, panels, preview, properties

classes = (*properties.classes, *analyze.classes, *chains.classes, *bake_ops.classes, *flight_fix_ops.classes,
           *panels.classes)

_cli_handles = []


def register():
    for cls in classes:
        bpy.utils.register_class(cls)
    bpy.types.Object.overlap_assist = bpy.props.PointerProperty(type=properties.OverlapAssistSettings)
    preview.register()
    if hasattr(bpy.utils, "register_cli_command"):
        from .. import cli
        _cli_handles.append(bpy.utils.register_cli_command("overlap_assist", cli.blender_command))


@contextlib.contextmanager
def registered():
    """Register the add-on for a headless job unless it already is (and unregister after)."""
    if hasattr(bpy.types.Object, "overlap_assist"):
        yield
        return
    register()
    try:
        yield
    finally:
        unregister()


def unregister():
    while _cli_handles:
        bpy.utils.unregister_cli_command(_cli_handles.pop())
    preview.unregister()
    del bpy.types.Object.overlap_assist
    for cls in reversed(classes):
        bpy.utils.unregister_class(cls)
