"""Bake Chains end to end in real Blender: solve → layer → Blender's own evaluation."""
import bpy
import numpy as np
import pytest
from blender_helpers import action_digest, op, select_bones

from overlap_assist.blender import anim_data, bake_layer
from overlap_assist.blender.demo_scene import HUMANOID_BONES, build_armature, key_jump
from overlap_assist.core.jump_curves import JumpSpec

TAIL = (
    ("tail.001", "hips", (0, 0.08, 0.98), (0, 0.20, 0.90)),
    ("tail.002", "tail.001", (0, 0.20, 0.90), (0, 0.30, 0.78)),
    ("tail.003", "tail.002", (0, 0.30, 0.78), (0, 0.36, 0.64)),
)
NAMES = [b[0] for b in TAIL]


@pytest.fixture
def rig():
    bpy.context.scene.gravity = (0, 0, -9.80665)
    obj = build_armature("Hero", bones=HUMANOID_BONES + TAIL)
    key_jump(obj, JumpSpec(forward_mps=1.0))
    select_bones(obj, NAMES)
    op(obj, "add_chains", preset="heavy_tail")
    return obj


def _poses(obj, frames):
    scene = bpy.context.scene
    out = []
    for f in frames:
        scene.frame_set(f)
        out.append([np.array(obj.pose.bones[n].matrix) for n in NAMES])
    return np.array(out)


def test_bake_matches_the_preview_and_remove_restores(rig):
    from overlap_assist.blender import preview
    frames = [10, 28, 35, 44, 60]
    animated = _poses(rig, frames)
    op(rig, "toggle_preview")
    previewed = _poses(rig, frames)
    op(rig, "toggle_preview")
    assert op(rig, "bake_chains") == {'FINISHED'}
    assert bake_layer.has_bake(rig)
    assert rig.overlap_assist.last_bake.startswith("1 chain: Baked")
    baked = _poses(rig, frames)
    # The bake is the preview in keys: the same solve, written with ≤ 0.5° key tolerance.
    assert np.abs(baked - previewed).max() < 0.02
    assert np.abs(baked - animated).max() > 0.01
    assert not preview.PREVIEW.is_on(rig)
    # Baking again gives the same keys (same inputs, deterministic solver).
    act = bpy.data.actions[bake_layer.bake_action_name(rig)]
    first = [tuple(k.co) for fc in anim_data.all_action_fcurves(act) for k in fc.keyframe_points]
    op(rig, "bake_chains")
    act = bpy.data.actions[bake_layer.bake_action_name(rig)]
    assert [tuple(k.co) for fc in anim_data.all_action_fcurves(act) for k in fc.keyframe_points] == first
    assert op(rig, "remove_bake") == {'FINISHED'}
    np.testing.assert_array_equal(_poses(rig, frames), animated)


def test_a_flight_looped_in_the_preview_range_plays_the_float_that_bakes(rig):
    # Frame Flight sets the timeline's preview range to one flight to loop the float. The solve
    # still starts at the scene's first frame (a simulation needs the motion that led up to the
    # flight, as Blender's own simulation caches keep their own range), so the loop shows the
    # float the bake writes; a solve started at takeoff would start settled and float differently.
    from overlap_assist.blender import preview
    scene = bpy.context.scene
    op(rig, "analyze_motion")
    assert op(rig, "frame_flight", margin=2) == {'FINISHED'} and scene.use_preview_range
    try:
        frames = list(range(scene.frame_preview_start, scene.frame_preview_end + 1, 3))
        op(rig, "toggle_preview")
        cache = preview.PREVIEW.caches[rig.name]
        assert (cache.sampled.frames[0], cache.sampled.frames[-1]) == (scene.frame_start, scene.frame_end)
        previewed = _poses(rig, frames)
        op(rig, "toggle_preview")
        op(rig, "bake_chains")
        baked = _poses(rig, frames)
        assert np.abs(baked - previewed).max() < 0.02   # the same solve (0.5° key tolerance)
    finally:
        scene.use_preview_range = False


def test_the_preview_solves_the_bake_range(rig):
    # Before: the preview always solved the scene's range, the bake its own stored range, so with
    # a bake range set what played was not what baked.
    from overlap_assist.blender import preview
    s = rig.overlap_assist
    s.bake_use_range, s.bake_frame_start, s.bake_frame_end = True, 20, 60
    frames = [24, 35, 44, 58]
    op(rig, "toggle_preview")
    assert (preview.PREVIEW.caches[rig.name].sampled.frames[0], preview.PREVIEW.caches[rig.name].sampled.frames[-1]) \
        == (20, 60)
    previewed = _poses(rig, frames)
    op(rig, "toggle_preview")
    op(rig, "bake_chains")
    assert np.abs(_poses(rig, frames) - previewed).max() < 0.02
    keyed = [k.co[0] for fc in anim_data.all_action_fcurves(bpy.data.actions[bake_layer.bake_action_name(rig)])
             for k in fc.keyframe_points]
    assert min(keyed) >= 20 and max(keyed) <= 60


def test_analysis_after_a_bake_keeps_the_layer(rig):
    op(rig, "bake_chains")
    assert op(rig, "analyze_motion") == {'FINISHED'}
    # The load curve goes into the user's action (still active) and does not make the bake stale.
    assert rig.animation_data.action.name == "HeroAction" and bake_layer.has_bake(rig)
    assert bake_layer.bake_state(rig) == "current"


def test_bake_with_a_deleted_chain_bone_is_refused_and_changes_nothing(rig):
    bpy.context.view_layer.objects.active = rig
    bpy.ops.object.mode_set(mode='EDIT')
    rig.data.edit_bones.remove(rig.data.edit_bones["tail.002"])
    bpy.ops.object.mode_set(mode='OBJECT')
    n_actions = len(bpy.data.actions)
    with pytest.raises(RuntimeError, match="tail.002 not found"):
        op(rig, "bake_chains")
    assert not bake_layer.has_bake(rig) and len(bpy.data.actions) == n_actions


def test_a_bake_cancelled_while_sampling_changes_nothing(rig):
    # The UI runs the bake step by step and Esc closes the step generator (no event loop in
    # module mode, so the generator is driven directly here).
    from overlap_assist.blender import chain_sim
    from overlap_assist.blender.bake_ops import bake_steps
    scene = bpy.context.scene
    n_actions, keys = len(bpy.data.actions), _poses(rig, [30])
    scene.frame_set(17)
    steps = bake_steps(rig, scene, chain_sim.active_chains(rig), scene.frame_start, scene.frame_end, 0.5)
    fractions = [next(steps), next(steps)]
    assert 0 < fractions[0] < fractions[1] < 0.8
    steps.close()
    assert scene.frame_current == 17
    assert not bake_layer.has_bake(rig) and len(bpy.data.actions) == n_actions
    np.testing.assert_array_equal(_poses(rig, [30]), keys)
    # Run to the end, the same generator gives the finished bake.
    steps = bake_steps(rig, scene, chain_sim.active_chains(rig), scene.frame_start, scene.frame_end, 0.5)
    with pytest.raises(StopIteration) as done:
        while True:
            next(steps)
    assert done.value.value[0].keys_written > 0 and bake_layer.has_bake(rig)


def test_one_undo_step_takes_back_a_whole_bake(rig):
    """Reference: Blender's own undo. The operator is registered with UNDO, so Blender records
    one step when it finishes (from Python: the call's undo flag, as a button press does);
    going back one step removes the layer and restores the pose."""
    frames = [10, 35, 44]
    before = _poses(rig, frames)
    bpy.ops.ed.undo_push(message="before bake")
    with bpy.context.temp_override(active_object=rig, object=rig):
        assert bpy.ops.overlap_assist.bake_chains('EXEC_DEFAULT', True) == {'FINISHED'}
    assert bake_layer.has_bake(rig)
    if not bpy.ops.ed.undo.poll():
        pytest.skip("bpy.ops.ed.undo() is unavailable here (no undo step recorded)")
    bpy.ops.ed.undo()
    obj = bpy.data.objects["Hero"]
    assert not bake_layer.has_bake(obj)
    np.testing.assert_array_equal(_poses(obj, frames), before)


def test_write_into_the_action_is_taken_back_by_one_undo_step(rig):
    """Reference: Blender's own undo; the user's keys come back byte for byte."""
    base = rig.animation_data.action
    name = base.name
    keys = action_digest(base)
    bpy.ops.ed.undo_push(message="before writing")
    with bpy.context.temp_override(active_object=rig, object=rig):
        assert bpy.ops.overlap_assist.bake_chains('EXEC_DEFAULT', True, into_action=True) == {'FINISHED'}
    written = {(fc.data_path, fc.array_index) for fc in anim_data.all_action_fcurves(bpy.data.actions[name])}
    assert any(path.startswith('pose.bones["tail') for path, _i in written)
    if not bpy.ops.ed.undo.poll():
        pytest.skip("bpy.ops.ed.undo() is unavailable here (no undo step recorded)")
    bpy.ops.ed.undo()
    assert action_digest(bpy.data.actions[name]) == keys


def _bone_curves(obj):
    """{bone: [F-curves of its rotation channel]} on the bake layer."""
    act = bpy.data.actions[bake_layer.bake_action_name(obj)]
    out = {}
    for fc in anim_data.all_action_fcurves(act):
        if ".rotation_" in fc.data_path:
            out.setdefault(fc.data_path.split('"')[1], []).append(fc)
    return out


def test_shared_key_frames_setting_survives_reload_and_reaches_the_keys(rig, tmp_path):
    """The stored setting (saved and reopened) keys every channel of a bone on the same frames;
    the rotation error against the per-frame bake, by Blender's own FCurve.evaluate, stays within
    the tolerance. Reference: FCurve.evaluate of both layers; mathutils for the rotation angle."""
    from mathutils import Quaternion
    assert rig.overlap_assist.bake_shared_frames is False    # default: each channel keyed where it needs
    rig.overlap_assist.bake_shared_frames = True
    path = str(tmp_path / "shared.blend")
    bpy.ops.wm.save_as_mainfile(filepath=path)
    bpy.ops.wm.open_mainfile(filepath=path, load_ui=False)
    obj = bpy.data.objects["Hero"]
    assert obj.overlap_assist.bake_shared_frames is True
    frames = range(bpy.context.scene.frame_start, bpy.context.scene.frame_end + 1)
    obj.overlap_assist.bake_tolerance_deg = 0.0
    op(obj, "bake_chains")
    per_frame = {n: [[fc.evaluate(f) for fc in sorted(fcs, key=lambda c: c.array_index)] for f in frames]
                 for n, fcs in _bone_curves(obj).items()}
    obj.overlap_assist.bake_tolerance_deg = 0.5
    op(obj, "bake_chains")
    shared = _bone_curves(obj)
    n_shared = sum(len(fc.keyframe_points) for fcs in shared.values() for fc in fcs)
    worst = 0.0
    for name, fcs in shared.items():
        assert obj.pose.bones[name].rotation_mode == 'QUATERNION'
        assert len({tuple(k.co[0] for k in fc.keyframe_points) for fc in fcs}) == 1, name
        by_index = {fc.array_index: fc for fc in fcs}
        for k, f in enumerate(frames):
            got = Quaternion([by_index[i].evaluate(f) if i in by_index else (1.0, 0, 0, 0)[i] for i in range(4)])
            want = Quaternion(per_frame[name][k])
            worst = max(worst, np.degrees(got.normalized().rotation_difference(want.normalized()).angle))
    assert worst <= 0.5 + 1e-4
    obj.overlap_assist.bake_shared_frames = False
    op(obj, "bake_chains")
    assert sum(len(fc.keyframe_points) for fcs in _bone_curves(obj).values() for fc in fcs) < n_shared
