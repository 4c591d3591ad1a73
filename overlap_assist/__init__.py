"""Overlap Assist: effective-gravity analysis of body motion and secondary motion for bone chains.

The add-on entry points forward to ``blender/``; ``core/`` holds the computations and never
imports Blender, so ``import overlap_assist`` works without Blender too (for the CLI and tests).
"""


def register():
    from .blender import register as _register
    _register()


def unregister():
    from .blender import unregister as _unregister
    _unregister()
