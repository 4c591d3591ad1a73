"""Fix Flight and Check Spin in real Blender: a stick rig, the demo character and a Rigify rig.

Checks: the corrected whole-body CoM, re-sampled from Blender's own evaluation of the layer,
lies on the scene-gravity parabola (Halliday, Resnick & Walker, ch. 4) within 1 mm at every
frame of the flight; the user's action stays byte-identical; removing the layer restores the
pose exactly; one undo step takes the fix back; running it again replaces it.
"""
import bpy
import numpy as np
import pytest
from blender_helpers import action_digest, op, select_bones

from overlap_assist.blender import anim_data, flight_fix_layer, flight_jobs
from overlap_assist.blender.analyze import run_analysis
from overlap_assist.blender.bake_layer import BAKE_TRACK_NAME
from overlap_assist.blender.demo_scene import HUMANOID_BONES, build_armature, key_jump, key_location
from overlap_assist.blender.sample_body import sample_bones
from overlap_assist.blender.sample_segments import segment_motion
from overlap_assist.core.constants import STANDARD_GRAVITY_MPS2 as G0
from overlap_assist.core.flight_check import fit_parabola
from overlap_assist.core.jump_curves import JumpSpec, jump_events, jump_position

FIX = flight_fix_layer.FIX_TRACK_NAME
FLOATY = JumpSpec(flight_gravity_mps2=0.5 * G0, forward_mps=1.0)
TAIL = (
    ("tail.001", "hips", (0, 0.08, 0.98), (0, 0.20, 0.90)),
    ("tail.002", "tail.001", (0, 0.20, 0.90), (0, 0.30, 0.78)),
)


def run(obj, name, **kw):
    """The operator as a button press does it (records its undo step)."""
    with bpy.context.temp_override(active_object=obj, object=obj):
        return getattr(bpy.ops.overlap_assist, name)('EXEC_DEFAULT', True, **kw)


def pose_snapshot(obj, frames):
    scene = bpy.context.scene
    out = []
    buf = np.empty(len(obj.pose.bones) * 16, dtype=np.float32)
    for f in frames:
        scene.frame_set(int(f))
        obj.pose.bones.foreach_get("matrix", buf)
        out.append(buf.copy())
    return np.array(out)


def com_at_frames(obj):
    """Whole-body CoM from Blender's evaluation at whole frames: (frames, com)."""
    motion, com = segment_motion(obj, bpy.context.scene, obj.overlap_assist.body)
    whole = np.isclose(motion.frames, np.round(motion.frames))
    return motion.frames[whole], com[whole]


def arc_error(obj, flight, g=G0):
    """Largest distance (m) of the re-sampled CoM from the 1 g parabola through it at the contacts,
    over the whole frames strictly inside the flight, and the implied gravity of those frames."""
    frames, com = com_at_frames(obj)
    fps = bpy.context.scene.render.fps
    inside = (frames > flight.takeoff_frame) & (frames < flight.touchdown_frame)
    tau = (frames[inside] - flight.takeoff_frame) / fps
    coef = fit_parabola(tau, com[inside])
    implied = -2 * coef[2][2]
    # The exact arc at g through the fit's takeoff point and the contacts' mean horizontal speed.
    t_td = (flight.touchdown_frame - flight.takeoff_frame) / fps
    p_to = coef[0] + coef[1] * 0 + coef[2] * 0
    p_td = coef[0] + coef[1] * t_td + coef[2] * t_td**2
    v0 = (p_td - p_to - 0.5 * np.array([0, 0, -g]) * t_td**2) / t_td
    exact = p_to + np.outer(tau, v0) + 0.5 * np.outer(tau**2, [0, 0, -g])
    return float(np.max(np.linalg.norm(com[inside] - exact, axis=1))), float(implied)


@pytest.fixture
def jumper():
    bpy.context.scene.gravity = (0, 0, -G0)
    obj = build_armature("Jumper", bones=HUMANOID_BONES + TAIL)
    key_jump(obj, FLOATY)
    body = obj.overlap_assist.body
    body.body_source, body.segment_table = 'COM', 'de_leva_male'
    return obj


def test_fix_puts_the_com_on_the_scene_gravity_arc_and_keeps_the_action(jumper):
    obj, scene = jumper, bpy.context.scene
    action, slot = obj.animation_data.action, obj.animation_data.action_slot
    digest = action_digest(action)
    before = pose_snapshot(obj, range(scene.frame_start, scene.frame_end + 1, 7))
    result, _w = run_analysis(obj, scene)
    (flight,) = result.flights
    assert flight.gravity_ratio == pytest.approx(0.5, abs=0.05)          # floaty as keyed
    assert run(obj, "fix_flight") == {'FINISHED'}
    ad = obj.animation_data
    # The user's action stays active (COMBINE over the layer), the fix is its own track under it.
    assert [t.name for t in ad.nla_tracks] == [FIX] and ad.action == action and ad.action_blend_type == 'COMBINE'
    assert action_digest(action) == digest                                 # the user's keys untouched
    err, implied = arc_error(obj, flight)
    assert err < 1e-3, f"corrected CoM {err * 1000:.2f} mm off the 1 g arc"
    assert implied == pytest.approx(G0, rel=2e-3)
    # The analysis now sees the corrected body: a ballistic flight.
    after, _w = run_analysis(obj, scene)
    assert after.flights[0].gravity_ratio == pytest.approx(1.0, abs=0.03)
    assert run(obj, "remove_flight_fix") == {'FINISHED'}
    assert ad.action == action and ad.action_slot == slot and len(ad.nla_tracks) == 0
    assert ad.action_blend_type == 'REPLACE' and action_digest(action) == digest
    assert FIX not in " ".join(a.name for a in bpy.data.actions)
    np.testing.assert_array_equal(pose_snapshot(obj, range(scene.frame_start, scene.frame_end + 1, 7)), before)


def test_rerun_replaces_and_keep_apex_keeps_the_apex(jumper):
    obj, scene = jumper, bpy.context.scene
    assert run(obj, "fix_flight") == {'FINISHED'}
    assert run(obj, "fix_flight", mode='KEEP_APEX') == {'FINISHED'}
    tracks = [t.name for t in obj.animation_data.nla_tracks]
    assert tracks.count(FIX) == 1 and sum(FIX in a.name for a in bpy.data.actions) == 1
    assert flight_fix_layer.fix_info(obj)["mode"] == 'KEEP_APEX'
    (fl,) = flight_jobs.fix_summary(obj)["flights"]
    assert fl["apex_after_m"] == pytest.approx(fl["apex_before_m"], abs=1e-6)
    assert fl["touchdown_shift_frames"] < -1 and fl["takeoff_shift_frames"] > 1     # 0.5 g -> 1 g: shorter hang
    ev = jump_events(FLOATY)
    half = np.sqrt(2 * ev["apex_height_m"] / G0) * scene.render.fps                   # frames, apex -> contact
    assert fl["touchdown_shift_frames"] == pytest.approx(half - ev["hang_time_s"] / 2 * scene.render.fps, abs=0.3)


def test_one_undo_step_takes_the_fix_back(jumper):
    obj = jumper
    names = sorted(a.name for a in bpy.data.actions)
    bpy.ops.ed.undo_push(message="before")
    assert run(obj, "fix_flight") == {'FINISHED'}
    assert flight_fix_layer.has_fix(bpy.data.objects["Jumper"])
    if not bpy.ops.ed.undo.poll():
        pytest.skip("bpy.ops.ed.undo() is unavailable here (no undo step recorded)")
    bpy.ops.ed.undo()
    obj = bpy.data.objects["Jumper"]
    assert not flight_fix_layer.has_fix(obj) and len(obj.animation_data.nla_tracks) == 0
    assert obj.animation_data.action is not None and sorted(a.name for a in bpy.data.actions) == names


def _root_location(obj, frames):
    scene = bpy.context.scene
    out = []
    for f in frames:
        scene.frame_set(int(f))
        out.append(np.array(obj.pose.bones["root"].location))
    return np.array(out)


def test_influence_slider_is_the_strips_own_value_saved_with_the_file_and_undone(jumper, tmp_path):
    obj, scene = jumper, bpy.context.scene
    frames = np.arange(scene.frame_start, scene.frame_end + 1, 3)
    plain = _root_location(obj, frames)
    assert run(obj, "fix_flight") == {'FINISHED'}
    body = obj.overlap_assist.body
    assert body.fix_influence == pytest.approx(1.0)
    full = _root_location(obj, frames) - plain
    assert np.max(np.abs(full)) > 0.05
    # The slider writes the strip's influence (Blender's NLA mixes the COMBINE layer's location
    # by it: half the influence, half the shift, by Blender's own evaluation).
    body.fix_influence = 0.5
    strip = obj.animation_data.nla_tracks[FIX].strips[0]
    assert strip.use_animated_influence and strip.fcurves.find("influence").evaluate(strip.frame_start) == 0.5
    np.testing.assert_allclose(_root_location(obj, frames) - plain, 0.5 * full, atol=1e-5)
    body.fix_influence = 7.0                           # clamped to the slider's range
    assert flight_fix_layer.fix_influence(obj) == pytest.approx(1.0)
    body.fix_influence = 0.5
    # Saved with the file: the value is on the strip, nothing to re-apply on load.
    path = tmp_path / "influence.blend"
    bpy.ops.wm.save_as_mainfile(filepath=str(path))
    bpy.ops.wm.open_mainfile(filepath=str(path), load_ui=False, use_scripts=False)
    obj = bpy.data.objects["Jumper"]
    assert obj.overlap_assist.body.fix_influence == pytest.approx(0.5)
    np.testing.assert_allclose(_root_location(obj, frames) - plain, 0.5 * full, atol=1e-5)
    # Undo takes an influence edit back (the strip's key is file data like any other).
    bpy.ops.ed.undo_push(message="at half")
    obj.overlap_assist.body.fix_influence = 0.2
    bpy.ops.ed.undo_push(message="at a fifth")
    if not bpy.ops.ed.undo.poll():
        pytest.skip("bpy.ops.ed.undo() is unavailable here (no undo step recorded)")
    bpy.ops.ed.undo()
    obj = bpy.data.objects["Jumper"]
    assert obj.overlap_assist.body.fix_influence == pytest.approx(0.5)
    # Without a layer the slider has nothing to move.
    assert run(obj, "remove_flight_fix") == {'FINISHED'}
    obj.overlap_assist.body.fix_influence = 0.3
    assert flight_fix_layer.fix_influence(obj) is None and not obj.animation_data.nla_tracks


def test_fix_choices_are_stored_on_the_armature_and_survive_save_and_reload(jumper, tmp_path):
    obj = jumper
    body = obj.overlap_assist.body
    assert (body.fix_mode, body.fix_blend_frames) == ('KEEP_CONTACTS', pytest.approx(3.0))
    body.fix_mode, body.fix_blend_frames = 'KEEP_APEX', 5.0
    assert run(obj, "fix_flight") == {'FINISHED'}             # no arguments: the stored choices
    info = flight_fix_layer.fix_info(obj)
    assert info["mode"] == 'KEEP_APEX' and info["blend_frames"] == pytest.approx(5.0)
    path = tmp_path / "choices.blend"
    bpy.ops.wm.save_as_mainfile(filepath=str(path))
    bpy.ops.wm.open_mainfile(filepath=str(path), load_ui=False, use_scripts=False)
    obj = bpy.data.objects["Jumper"]
    body = obj.overlap_assist.body
    assert (body.fix_mode, body.fix_blend_frames) == ('KEEP_APEX', pytest.approx(5.0))
    # Choices given to the operator (a script, the redo panel) win and become the stored ones.
    assert run(obj, "fix_flight", mode='KEEP_CONTACTS', blend_frames=2.0) == {'FINISHED'}
    assert flight_fix_layer.fix_info(obj)["mode"] == 'KEEP_CONTACTS'
    assert (body.fix_mode, body.fix_blend_frames) == ('KEEP_CONTACTS', pytest.approx(2.0))


def test_chains_and_the_bake_see_the_corrected_body_and_layers_unstack_in_any_order(jumper):
    obj, scene = jumper, bpy.context.scene
    action = obj.animation_data.action
    digest = action_digest(action)
    frames = np.arange(scene.frame_start, scene.frame_end + 1, dtype=float)
    heads0, _ = sample_bones(obj, scene, ["tail.001"], frames)
    assert run(obj, "fix_flight") == {'FINISHED'}
    fix, *_ = flight_jobs.compute_fix(obj, scene)
    heads1, _ = sample_bones(obj, scene, ["tail.001"], frames)
    shift = heads1["tail.001"] - heads0["tail.001"]
    assert np.max(np.abs(shift)) > 0.05                     # the chain's anchor rides the corrected body
    select_bones(obj, ["tail.001", "tail.002"])
    op(obj, "add_chains", preset="light_tail")
    assert run(obj, "bake_chains") == {'FINISHED'}
    ad = obj.animation_data
    assert [t.name for t in ad.nla_tracks] == [FIX, BAKE_TRACK_NAME] and ad.action == action
    assert run(obj, "remove_bake") == {'FINISHED'}
    assert [t.name for t in ad.nla_tracks] == [FIX] and ad.action_blend_type == 'COMBINE'   # the fix still plays
    np.testing.assert_allclose(sample_bones(obj, scene, ["tail.001"], frames)[0]["tail.001"], heads1["tail.001"],
                               atol=1e-6)
    # Bake first, fix second, then remove the fix first and the bake last: all restored.
    assert run(obj, "remove_flight_fix") == {'FINISHED'} and ad.action == action
    assert run(obj, "bake_chains") == {'FINISHED'}
    _stats, _fix, _result, warnings = flight_jobs.apply_fix(obj, scene)      # re-run on top of the bake
    assert any("bake them again" in w for w in warnings)
    # Blender adds a track only above another (nla_tracks.new), so a fix written after a bake that is
    # the lowest track goes above it; the layers animate different channels, so the pose is the same.
    assert [t.name for t in ad.nla_tracks] == [BAKE_TRACK_NAME, FIX]
    assert run(obj, "remove_flight_fix") == {'FINISHED'}
    assert [t.name for t in ad.nla_tracks] == [BAKE_TRACK_NAME] and ad.action_blend_type == 'COMBINE'
    assert run(obj, "remove_bake") == {'FINISHED'}
    assert ad.action == action and len(ad.nla_tracks) == 0 and action_digest(action) == digest
    assert ad.action_blend_type == 'REPLACE'


def _legacy_bake(obj):
    """The earlier bake arrangement, built by hand: the user's action pushed into an "Overlap Base"
    strip (no active action) and the bake's COMBINE track above it, its record saying so."""
    from overlap_assist.blender.bake_layer import BASE_TRACK_NAME, INFO_KEY, find_bake
    select_bones(obj, ["tail.001", "tail.002"])
    op(obj, "add_chains", preset="light_tail")
    assert run(obj, "bake_chains") == {'FINISHED'}
    _track, _strip, act = find_bake(obj)
    baked = act.copy()                      # the bake's keys, kept while the current layer goes
    statics = act[INFO_KEY].to_dict().get("static_rotations", {})
    assert run(obj, "remove_bake") == {'FINISHED'}
    ad = obj.animation_data
    user, slot = ad.action, ad.action_slot
    info = {"created_animdata": 0, "use_nla": int(ad.use_nla), "pushed": 1, "blend_type": ad.action_blend_type,
            "influence": ad.action_influence, "extrapolation": ad.action_extrapolation,
            "slot_identifier": slot.identifier, "static_rotations": statics}
    scene = bpy.context.scene
    base = ad.nla_tracks.new()
    base.name = BASE_TRACK_NAME
    strip = base.strips.new(user.name, scene.frame_start, user)
    strip.action_slot = slot
    strip.blend_type, strip.extrapolation = info["blend_type"], info["extrapolation"]
    ad.action = None
    track = ad.nla_tracks.new(prev=base)
    track.name = BAKE_TRACK_NAME
    strip = track.strips.new(BAKE_TRACK_NAME, scene.frame_start, baked)
    strip.action_slot = baked.slots[0]
    strip.blend_type, strip.extrapolation = 'COMBINE', 'NOTHING'
    baked.name = f"{obj.name} {BAKE_TRACK_NAME}"
    baked[INFO_KEY] = info
    return user, slot


@pytest.mark.parametrize("fix_goes_first", [True, False], ids=["fix-then-bake", "bake-then-fix"])
def test_legacy_base_bake_and_a_fix_come_off_in_either_order_exactly(jumper, fix_goes_first):
    obj, scene = jumper, bpy.context.scene
    frames = range(scene.frame_start, scene.frame_end + 1, 4)
    original = pose_snapshot(obj, frames)
    digest = action_digest(obj.animation_data.action)
    user, slot = _legacy_bake(obj)
    ad = obj.animation_data
    assert ad.action is None and [t.name for t in ad.nla_tracks] == ["Overlap Base", BAKE_TRACK_NAME]
    legacy = pose_snapshot(obj, frames)
    assert np.abs(legacy - original).max() > 1e-3          # the baked chain moves
    assert run(obj, "fix_flight") == {'FINISHED'}
    # The fix goes between the base strip and the bake, and plays: the root moves.
    assert [t.name for t in ad.nla_tracks] == ["Overlap Base", FIX, BAKE_TRACK_NAME] and ad.action is None
    assert np.abs(pose_snapshot(obj, frames) - legacy).max() > 0.05
    if fix_goes_first:
        assert run(obj, "remove_flight_fix") == {'FINISHED'}
        assert [t.name for t in ad.nla_tracks] == ["Overlap Base", BAKE_TRACK_NAME] and ad.action is None
        np.testing.assert_array_equal(pose_snapshot(obj, frames), legacy)
        assert run(obj, "remove_bake") == {'FINISHED'}
    else:
        assert run(obj, "remove_bake") == {'FINISHED'}
        # The user's action is active again, the fix still plays over it (COMBINE while a layer exists).
        assert [t.name for t in ad.nla_tracks] == [FIX] and ad.action == user and ad.action_blend_type == 'COMBINE'
        assert np.abs(pose_snapshot(obj, frames) - original).max() > 0.05
        assert run(obj, "remove_flight_fix") == {'FINISHED'}
    assert ad.action == user and ad.action_slot == slot and len(ad.nla_tracks) == 0
    assert ad.action_blend_type == 'REPLACE' and action_digest(user) == digest
    assert not any(FIX in a.name or BAKE_TRACK_NAME in a.name for a in bpy.data.actions)
    np.testing.assert_array_equal(pose_snapshot(obj, frames), original)


def test_keys_set_after_the_fix_land_in_the_users_action_and_removal_keeps_them(jumper):
    obj, scene = jumper, bpy.context.scene
    action = obj.animation_data.action
    assert run(obj, "fix_flight") == {'FINISHED'}
    pb = obj.pose.bones["head"]
    pb.rotation_mode = 'XYZ'
    pb.rotation_euler = (0.3, 0, 0)
    assert pb.keyframe_insert("rotation_euler", index=0, frame=5)
    assert obj.animation_data.action == action
    paths = {fc.data_path for fc in anim_data.slot_fcurves(action, obj.animation_data.action_slot)}
    assert pb.path_from_id("rotation_euler") in paths
    scene.frame_set(5)
    assert obj.pose.bones["head"].rotation_euler[0] == pytest.approx(0.3, abs=1e-6)   # plays at once
    assert run(obj, "remove_flight_fix") == {'FINISHED'}
    scene.frame_set(5)
    assert obj.animation_data.action == action and obj.pose.bones["head"].rotation_euler[0] == pytest.approx(0.3)


def test_spin_check_on_a_translating_rig_finds_nothing_and_a_flip_from_nothing_is_found(jumper):
    obj, scene = jumper, bpy.context.scene
    assert run(obj, "check_spin") == {'FINISHED'}
    import json
    (c,) = json.loads(obj[flight_jobs.SPIN_PROPERTY])["flights"]
    assert c["finding"] is None and abs(c["change_deg_per_s"]) < c["threshold_deg_per_s"]
    # Key the spine pitching forward in mid-flight only (the whole upper body turns with nothing to push on;
    # the legs stay as keyed, so the contacts do not move).
    result, _ = run_analysis(obj, scene)
    fl = result.flights[0]
    pb = obj.pose.bones["spine"]
    # This rig's feet ride with the body (never planted), so flights come from the body's path: take
    # the root's, which the spine's pitch does not move (the CoM's would no longer be one parabola).
    obj.overlap_assist.body.body_source = 'ROOT'
    pb.rotation_mode = 'XYZ'
    mid = int(round((fl.takeoff_frame + fl.touchdown_frame) / 2))
    for f, angle in ((int(fl.takeoff_frame) + 1, 0.0), (mid, 0.0), (int(fl.touchdown_frame) - 1, -1.0)):
        pb.rotation_euler = (angle, 0, 0)
        pb.keyframe_insert("rotation_euler", index=0, frame=f)
    _r, checks, _w = flight_jobs.run_spin_check(obj, scene)
    (c,) = checks
    # Only the upper body (spine and what it carries) pitches: a smaller change than a whole-body
    # flip's (measured -55°/s against a 29°/s threshold), still beyond the threshold.
    assert c.finding is not None and c.axis == "left" and abs(c.change_deg_s) > max(c.threshold_deg_s, 40)


def test_no_flight_is_refused_and_changes_nothing():
    bpy.context.scene.gravity = (0, 0, -G0)
    obj = build_armature("Stander")
    frames = np.arange(1, 40, dtype=float)
    key_location(obj, "hips", frames, np.stack([0.02 * frames, 0 * frames, 0.95 + 0 * frames], axis=1))
    bpy.context.scene.frame_start, bpy.context.scene.frame_end = 1, 39
    digest = action_digest(obj.animation_data.action)
    for name in ("fix_flight", "check_spin"):   # an ERROR report reaches a Python caller as RuntimeError
        with pytest.raises(RuntimeError, match="no flight found"):
            run(obj, name)
    assert len(obj.animation_data.nla_tracks) == 0 and action_digest(obj.animation_data.action) == digest


def test_demo_character_floaty_clip_is_fixed():
    from overlap_assist.blender.demo_character import DEMO_JUMPS, build_clip
    jump = next(j for j in DEMO_JUMPS if j.name == "floaty_jump")
    scene, rig, _perf = build_clip(jump)
    action = rig.animation_data.action
    digest = action_digest(action)
    result, _ = run_analysis(rig, scene)
    (flight,) = result.flights
    assert flight.gravity_ratio < 0.6
    _r, checks, _w = flight_jobs.run_spin_check(rig, scene)
    assert len(checks) == 1
    with bpy.context.temp_override(active_object=rig, object=rig, scene=scene):
        assert bpy.ops.overlap_assist.fix_flight('EXEC_DEFAULT', True) == {'FINISHED'}
    err, implied = arc_error(rig, flight)
    assert err < 1e-3 and implied == pytest.approx(G0, rel=3e-3)
    assert action_digest(action) == digest
    assert flight_fix_layer.remove_fix(rig) and rig.animation_data.action == action
    assert action_digest(action) == digest


RIGIFY_SCRIPT = """
import json, os, sys
sys.path.insert(0, {root!r}); sys.path.insert(0, {tests!r})
import bpy
import addon_utils
import numpy as np
import overlap_assist
from blender_helpers import action_digest
import test_flight_fix as T
bpy.ops.wm.read_factory_settings(use_empty=True)
overlap_assist.register()
addon_utils.enable("rigify", default_set=True)
bpy.ops.object.armature_human_metarig_add()
bpy.ops.pose.rigify_generate()
rig = bpy.context.active_object
out = T.rigify_checks(rig)
print("RESULT " + json.dumps(out), flush=True)
sys.stdout.flush()
os._exit(0)   # Rigify's generated rig UI stays registered; Blender 4.5 would hang at exit
"""


def rigify_checks(rig):
    """Fix and spin checks on a generated Rigify rig whose root is keyed with the floaty jump."""
    scene = bpy.context.scene
    scene.gravity = (0, 0, -G0)
    ev = jump_events(FLOATY)
    frames = 1 + np.arange(int(np.ceil(ev["duration_s"] * 24)) + 1, dtype=float)
    pos = jump_position(FLOATY, (frames - 1) / 24) - [0, 0, FLOATY.start_height_m]
    key_location(rig, "root", frames, pos)
    scene.frame_start, scene.frame_end = 1, int(frames[-1])
    body = rig.overlap_assist.body
    body.body_source, body.segment_table = 'COM', 'de_leva_female'
    body.bone_overrides = "head=DEF-spine.006, neck=DEF-spine.004"
    action = rig.animation_data.action
    digest = action_digest(action)
    result, _ = run_analysis(rig, scene)
    (flight,) = result.flights
    status = run(rig, "fix_flight")
    err, implied = arc_error(rig, flight)
    out = {"status": sorted(status), "bone": flight_fix_layer.fix_info(rig)["bone"], "arc_error_m": err,
           "implied_gravity": implied, "digest_kept": action_digest(action) == digest,
           "gravity_ratio_before": flight.gravity_ratio}
    _r, checks, _w = flight_jobs.run_spin_check(rig, scene)
    out["spin_finding"] = checks[0].finding
    out["spin_change_deg_s"] = checks[0].change_deg_s
    removed = run(rig, "remove_flight_fix")
    out["removed"] = sorted(removed)
    out["restored"] = rig.animation_data.action == action and action_digest(action) == digest \
        and len(rig.animation_data.nla_tracks) == 0
    return out


def test_rigify_rig_fix_and_spin():
    # In its own process: the generated rig's UI script registers classes nothing unregisters.
    import json
    import pathlib
    import subprocess
    import sys
    tests = pathlib.Path(__file__).resolve().parent
    script = RIGIFY_SCRIPT.format(root=str(tests.parents[1]), tests=str(tests))
    proc = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=600)
    lines = [ln for ln in proc.stdout.splitlines() if ln.startswith("RESULT ")]
    assert lines, proc.stderr[-2000:]
    out = json.loads(lines[-1][len("RESULT "):])
    assert out["status"] == ["FINISHED"] and out["bone"] == "root"
    assert out["gravity_ratio_before"] == pytest.approx(0.5, abs=0.05)
    assert out["arc_error_m"] < 1e-3 and out["implied_gravity"] == pytest.approx(G0, rel=2e-3)
    assert out["digest_kept"] and out["removed"] == ["FINISHED"] and out["restored"]
    assert out["spin_finding"] is None


def test_cli_fix_flight_writes_a_fixed_copy_and_analyze_reports_the_spin(jumper, tmp_path):
    import hashlib
    import json

    from blender_helpers import run_cli
    src = tmp_path / "jump.blend"
    bpy.ops.wm.save_as_mainfile(filepath=str(src))
    before = hashlib.sha256(src.read_bytes()).hexdigest()
    fixed = tmp_path / "jump.fixed.blend"
    proc = run_cli("fix-flight", str(src), "--out", str(fixed), "--json")
    assert proc.returncode == 0, proc.stderr
    d = json.loads(proc.stdout.strip().splitlines()[-1])
    assert d["layer"] == FIX and d["bone"] == "root" and fixed.exists()
    (fl,) = d["flights"]
    assert fl["mode"] == "keep_contacts" and fl["apex_after_m"] > 1.5 * fl["apex_before_m"]   # 0.5 g -> 1 g
    assert hashlib.sha256(src.read_bytes()).hexdigest() == before                          # input untouched
    proc = run_cli("analyze", str(fixed), "--json")
    assert proc.returncode == 0, proc.stderr
    a = json.loads(proc.stdout.strip().splitlines()[-1])
    assert a["flights"][0]["gravity_ratio"] == pytest.approx(1.0, abs=0.03)                 # the fixed file
    assert a["spin"]["flights"][0]["finding"] is None
    proc = run_cli("fix-flight", str(src))
    assert proc.returncode == 2 and "--out" in proc.stderr and "Traceback" not in proc.stderr


def test_batch_fix_writes_the_fixed_file_and_the_report_shows_both_arcs(jumper, tmp_path):
    import json

    from blender_helpers import run_cli
    src = tmp_path / "hop.blend"
    bpy.ops.wm.save_as_mainfile(filepath=str(src))
    out = tmp_path / "out"
    proc = run_cli("batch", str(src), "--out", str(out), "--fix")
    assert proc.returncode == 0, proc.stderr
    log = json.loads((out / "batch_log.json").read_text())
    assert log["ok"] == 1, log
    assert (out / "hop.fixed.blend").exists()
    page = (out / "hop.report.html").read_text()
    assert "Flight arc before and after the fix" in page and "Spin in flight" in page
    assert 'data-arc="after"' in page


def test_cli_fix_flight_follows_the_cli_rules(jumper, tmp_path):
    """--scene choice, compression kept, file-safety refusals as one line (exit 2), nothing written."""
    from blender_helpers import run_cli

    from overlap_assist import outputs
    jumper.users_scene[0].name = "Shot"
    src = tmp_path / "jump.blend"
    bpy.ops.wm.save_as_mainfile(filepath=str(src), copy=True, compress=True)
    fixed = tmp_path / "fixed.blend"
    proc = run_cli("fix-flight", str(src), "--out", str(fixed), "--scene", "Shot")
    assert proc.returncode == 0, proc.stderr
    assert "Jumper (scene Shot)" in proc.stdout and outputs.is_compressed(str(fixed))   # compressed like its input
    for args, words in ((("--scene", "Nowhere", "--out", str(tmp_path / "a.blend")), "no scene named 'Nowhere'"),
                        (("--out", str(tmp_path / "b.blend"), "--in-place"), "either --in-place or --out"),
                        (("--out", str(src)), "--in-place"),
                        (("--out", str(tmp_path / "c.blend"), "--blend-frames", "40"), "outside 0–12")):
        proc = run_cli("fix-flight", str(src), *args)
        lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
        assert proc.returncode == 2 and len(lines) == 1 and words in lines[0], proc.stderr
        assert lines[0].startswith("overlap_assist: error: ")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["fixed.blend", "jump.blend"]
