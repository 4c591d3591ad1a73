"""Which frames a job covers: one rule for the analysis, the preview, the bake and the CLI.

A range stored on the rig wins (the Body Motion panel's range for the analysis, the Bake panel's
range for the chains); without one, the frames the animator is playing: the scene's preview range
when it is on (the timeline's "use preview range"), else the scene's own range. The live preview
solves the same frames as the bake, so what plays is what bakes.
"""


def playing_range(scene):
    """The scene's preview range when it is on, else its frame range (start, end)."""
    if scene.use_preview_range:
        return scene.frame_preview_start, scene.frame_preview_end
    return scene.frame_start, scene.frame_end


def body_range(scene, body_settings):
    """The frames the body analysis samples (the Body Motion panel's range, else the playing range)."""
    if body_settings.use_frame_range:
        return body_settings.frame_start, body_settings.frame_end
    return playing_range(scene)


def chain_range(obj, scene):
    """The frames the chains are solved and baked over (the Bake panel's range, else the playing range)."""
    s = obj.overlap_assist
    if s.bake_use_range:
        return s.bake_frame_start, s.bake_frame_end
    return playing_range(scene)
