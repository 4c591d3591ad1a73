"""Pure computations of Overlap Assist: numpy and the standard library only.

Never import bpy, mathutils or bpy_extras here (``tests/core/test_core_is_bpy_free.py``
enforces it). Time is in seconds, lengths in metres, angles in radians; frames appear only at
the Blender boundary.
"""
