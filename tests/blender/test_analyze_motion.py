"""Analyze Body Motion in real Blender on analytic jumps keyed on a rig.

The jump is piecewise-constant acceleration (ballistics in flight), keyed every frame; the
checks are against its exact events (kinematics) and the scene's gravity.
"""
import json

import bpy
import numpy as np
import pytest
from blender_helpers import action_digest

from overlap_assist.blender import anim_data
from overlap_assist.blender.analyze import LOAD_PROPERTY
from overlap_assist.blender.demo_scene import build_armature, key_jump
from overlap_assist.core.constants import STANDARD_GRAVITY_MPS2 as G0
from overlap_assist.core.jump_curves import JumpSpec


def keys_digest(obj):
    """Hash of every key of the bone F-curves (the user's animation)."""
    return action_digest(obj.animation_data.action, "pose.bones")


def make_scene(fps=24, fps_base=1.0, scale=1.0, spec=JumpSpec(forward_mps=1.0), body="ROOT"):
    scene = bpy.context.scene
    scene.render.fps, scene.render.fps_base = fps, fps_base
    scene.gravity = (0.0, 0.0, -G0 / scale)  # scene units/s²
    obj = build_armature("Hero", scale_length=scale)
    # Keys every quarter frame: the Bézier spline between keys then smears the takeoff kink over
    # a quarter frame instead of a whole one (the checks compare with exact event times).
    ev = key_jump(obj, spec, keys_per_frame=4)
    obj.overlap_assist.body.body_source = body
    return scene, obj, ev


def analyze(obj):
    with bpy.context.temp_override(active_object=obj, object=obj):
        return bpy.ops.overlap_assist.analyze_motion()


@pytest.mark.parametrize("fps,fps_base,scale,body", [
    (24, 1.0, 1.0, "ROOT"),
    (30, 1.001, 1.0, "ROOT"),
    (24, 1.0, 0.01, "ROOT"),
    (24, 1.0, 1.0, "COM"),
])
def test_analytic_jump_numbers(fps, fps_base, scale, body):
    scene, obj, ev = make_scene(fps, fps_base, scale, body=body)
    before = keys_digest(obj)
    frame_before = scene.frame_current = 7
    assert analyze(obj) == {'FINISHED'}
    fps_eff = fps / fps_base
    summary = json.loads(obj.overlap_assist.body.last_summary)
    (fl,) = summary["flights"]
    assert fl["implied_gravity_mps2"] == pytest.approx(G0, rel=0.02)
    assert fl["hang_time_s"] * fps_eff == pytest.approx(ev["hang_time_s"] * fps_eff, abs=0.5)
    assert fl["apex_height_m"] == pytest.approx(ev["apex_height_m"], rel=0.02)
    assert fl["takeoff_frame"] == pytest.approx(1 + ev["takeoff_s"] * fps_eff, abs=0.5)
    assert summary["landings"][0]["peak_load_g"] > 1
    assert fl["verdict"].startswith("ballistic")
    # Markers and the load curve exist; the load reads ~0 in mid-flight.
    names = {m.name: m.frame for m in scene.timeline_markers}
    assert set(names) == {"takeoff", "apex", "touchdown"}
    assert names["takeoff"] == round(fl["takeoff_frame"])
    bag = anim_data.active_fcurves(obj)
    fc = bag.fcurves.find(f'["{LOAD_PROPERTY}"]')
    assert fc is not None and len(fc.keyframe_points) > 10
    mid = 0.5 * (fl["takeoff_frame"] + fl["touchdown_frame"])
    assert abs(fc.evaluate(mid)) < 0.05
    assert keys_digest(obj) == before
    assert scene.frame_current == frame_before


def test_com_source_is_used_when_all_segments_match():
    scene, obj, _ = make_scene(body="COM")
    analyze(obj)
    summary = json.loads(obj.overlap_assist.body.last_summary)
    assert summary["body_source"] == "com"
    assert not any("center of mass needs" in w for w in summary["warnings"])


def test_low_gravity_jump_reads_floaty():
    scene, obj, _ = make_scene(spec=JumpSpec(flight_gravity_mps2=0.4 * G0))
    analyze(obj)
    (fl,) = json.loads(obj.overlap_assist.body.last_summary)["flights"]
    assert fl["verdict"].startswith("floaty")
    assert fl["gravity_ratio"] == pytest.approx(0.4, rel=0.03)


def test_rerun_replaces_only_its_own_markers():
    scene, obj, _ = make_scene()
    scene.timeline_markers.new("takeoff", frame=3)  # the user's own marker of the same name
    user = scene.timeline_markers.new("blocking pass", frame=5)
    analyze(obj)
    analyze(obj)
    names = sorted(m.name for m in scene.timeline_markers)
    assert names.count("takeoff") == 2 and "blocking pass" in names and user.frame == 5
    assert len(names) == 5


def test_missing_animation_is_a_clear_error_and_changes_nothing():
    obj = build_armature("Still")
    with pytest.raises(RuntimeError, match="has no animation"):
        analyze(obj)
    assert LOAD_PROPERTY not in obj.keys()
    assert len(bpy.context.scene.timeline_markers) == 0


def test_range_too_short_is_a_clear_error():
    scene, obj, _ = make_scene()
    s = obj.overlap_assist.body
    s.use_frame_range, s.frame_start, s.frame_end = True, 25, 26
    s.smoothing_window = 4.0
    with pytest.raises(RuntimeError, match="smoothing window"):
        analyze(obj)


def test_blocked_keys_can_be_analysed_as_splines_without_changing_the_action():
    scene, obj, ev = make_scene()
    bag = anim_data.active_fcurves(obj)
    for fc in bag.fcurves:
        if fc.data_path.startswith("pose.bones"):
            n = len(fc.keyframe_points)
            fc.keyframe_points.foreach_set("interpolation", np.zeros(n, dtype=np.int32))  # CONSTANT
    before = keys_digest(obj)
    n_actions = len(bpy.data.actions)
    obj.overlap_assist.body.spline_blocked_keys = True
    assert analyze(obj) == {'FINISHED'}
    (fl,) = json.loads(obj.overlap_assist.body.last_summary)["flights"]
    assert fl["implied_gravity_mps2"] == pytest.approx(G0, rel=0.02)
    assert keys_digest(obj) == before and len(bpy.data.actions) == n_actions
    interp = [k.interpolation for fc in bag.fcurves if fc.data_path.startswith("pose.bones") for k in fc.keyframe_points]
    assert set(interp) == {'CONSTANT'}


def test_settings_survive_save_and_reload(tmp_path):
    scene, obj, _ = make_scene()
    s = obj.overlap_assist.body
    s.body_source, s.segment_table, s.smoothing_window = "COM", "de_leva_female", 2.5
    analyze(obj)
    path = str(tmp_path / "saved.blend")
    bpy.ops.wm.save_as_mainfile(filepath=path)
    bpy.ops.wm.open_mainfile(filepath=path, load_ui=False)
    s2 = bpy.data.objects["Hero"].overlap_assist.body
    assert (s2.body_source, s2.segment_table, s2.smoothing_window) == ("COM", "de_leva_female", 2.5)
    assert json.loads(s2.last_summary)["flights"]


def test_unmatched_segments_are_listed_and_the_root_is_used():
    from overlap_assist.blender.demo_scene import HUMANOID_BONES
    scene = bpy.context.scene
    scene.gravity = (0.0, 0.0, -G0)
    no_hands = tuple(b for b in HUMANOID_BONES if not b[0].startswith("hand"))
    obj = build_armature("Handless", bones=no_hands)
    key_jump(obj, JumpSpec(), keys_per_frame=4)
    obj.overlap_assist.body.body_source = "COM"
    analyze(obj)
    summary = json.loads(obj.overlap_assist.body.last_summary)
    assert summary["body_source"] == "root"
    (warning,) = [w for w in summary["warnings"] if "center of mass needs" in w]
    assert "hand.L" in warning and "hand.R" in warning and "'hips'" in warning
    # A manual override fills the gap (here with the forearms, just to name existing bones).
    obj.overlap_assist.body.bone_overrides = "hand.L=forearm.L, hand.R=forearm.R"
    analyze(obj)
    assert json.loads(obj.overlap_assist.body.last_summary)["body_source"] == "com"


def test_standard_gravity_ignores_a_wrong_scene_gravity():
    # A centimetre scene whose gravity was left at -9.81 scene units (0.098 m/s²): the analysis warns,
    # and standard gravity (9.80665 m/s², CGPM 1901) gives the right verdict.
    scene, obj, _ = make_scene(scale=0.01)
    scene.gravity = (0.0, 0.0, -9.81)
    analyze(obj)
    summary = json.loads(obj.overlap_assist.body.last_summary)
    assert any("scene gravity is 0.0981" in w for w in summary["warnings"])
    assert summary["flights"][0]["verdict"].startswith("heavy")
    obj.overlap_assist.body.gravity_source = "STANDARD"
    analyze(obj)
    summary = json.loads(obj.overlap_assist.body.last_summary)
    assert summary["gravity_mps2"] == G0 and summary["flights"][0]["verdict"].startswith("ballistic")
