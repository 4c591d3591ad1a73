"""Which frames a job covers: one rule for the analysis, the preview, the bake and the CLI.

A range stored on the rig wins (the Body Motion panel's range for the analysis, the Bake panel's
range for the chains); without one, the scene's frame range. The timeline's preview range is a
viewing window and is not used: a simulation needs the motion that led up to the frames shown
(as Blender's own simulation caches keep their own range), and Frame Flight sets the preview
range to loop one flight, where a solve started at takeoff would show a different float from the
one baked. The live preview solves the same frames as the bake, so what plays is what bakes.
"""


def body_range(scene, body_settings):
    """The frames the body analysis samples (the Body Motion panel's range, else the scene's)."""
    if body_settings.use_frame_range:
        return body_settings.frame_start, body_settings.frame_end
    return scene.frame_start, scene.frame_end


def chain_range(obj, scene):
    """The frames the chains are solved and baked over (the Bake panel's range, else the scene's)."""
    s = obj.overlap_assist
    if s.bake_use_range:
        return s.bake_frame_start, s.bake_frame_end
    return scene.frame_start, scene.frame_end
