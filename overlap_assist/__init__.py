"""Overlap Assist: effective-gravity analysis of body motion and secondary motion for bone chains.

The add-on entry points forward to ``blender/`` and register the headless command from ``cli``
(here, so that neither of those two imports the other in a circle); ``core/`` holds the
computations and never imports Blender, so ``import overlap_assist`` works without Blender too
(for the CLI and tests).
"""
_cli_handles = []


def register():
    import bpy

    from .blender import register as _register
    _register()
    if hasattr(bpy.utils, "register_cli_command"):
        from .cli import blender_command
        _cli_handles.append(bpy.utils.register_cli_command("overlap_assist", blender_command))


def unregister():
    import bpy

    from .blender import unregister as _unregister
    while _cli_handles:
        bpy.utils.unregister_cli_command(_cli_handles.pop())
    _unregister()
