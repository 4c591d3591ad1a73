"""Blender layer: registration in one place, symmetric (everything added is removed in reverse).

The headless command (``blender --command overlap_assist``) is registered by the package's own
``register`` (``overlap_assist/__init__.py``), so this layer never imports the CLI that uses it.
"""
import contextlib

import bpy

from . import analyze, bake_ops, chains, flight_fix_ops, panels, preview, properties, stale_state

classes = (*properties.classes, *analyze.classes, *chains.classes, *bake_ops.classes, *flight_fix_ops.classes,
           *panels.classes)


def register():
    for cls in classes:
        bpy.utils.register_class(cls)
    bpy.types.Object.overlap_assist = bpy.props.PointerProperty(type=properties.OverlapAssistSettings)
    preview.register()
    stale_state.register()


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
    stale_state.unregister()
    preview.unregister()
    del bpy.types.Object.overlap_assist
    for cls in reversed(classes):
        bpy.utils.unregister_class(cls)
