"""Chains in real Blender: add from a selection with a branch, presets, live preview, persistence."""
import json

import bpy
import numpy as np
import pytest
from blender_helpers import op, select_bones

from overlap_assist.blender import anim_data, preview
from overlap_assist.blender.chains import split_chains
from overlap_assist.blender.demo_scene import HUMANOID_BONES, build_armature, key_jump
from overlap_assist.core.jump_curves import JumpSpec

TAIL = (
    ("tail.001", "hips", (0, 0.08, 0.98), (0, 0.20, 0.90)),
    ("tail.002", "tail.001", (0, 0.20, 0.90), (0, 0.30, 0.78)),
    ("tail.003", "tail.002", (0, 0.30, 0.78), (0, 0.36, 0.64)),
    ("tuft.001", "tail.002", (0.02, 0.30, 0.78), (0.05, 0.40, 0.70)),
)


@pytest.fixture
def rig():
    bpy.context.scene.gravity = (0, 0, -9.80665)
    obj = build_armature("Hero", bones=HUMANOID_BONES + TAIL)
    key_jump(obj, JumpSpec(forward_mps=1.0))
    return obj


def test_split_chains_follows_hierarchy_and_branches():
    parent = {"a": None, "b": "a", "c": "b", "d": "b", "e": "c", "x": None}
    children = {}
    for k, v in parent.items():
        children.setdefault(v, []).append(k)
    got = split_chains(["a", "b", "c", "d", "e", "x"], parent.get, lambda n: children.get(n, []))
    assert got == [["a", "b"], ["x"], ["c", "e"], ["d"]]


def test_add_chains_from_selection_with_a_branch(rig):
    select_bones(rig, {b[0] for b in TAIL})
    assert op(rig, "add_chains", preset="light_tail") == {'FINISHED'}
    chains = rig.overlap_assist.chains
    assert [c.bone_names() for c in chains] == [["tail.001", "tail.002"], ["tail.003"], ["tuft.001"]]
    assert all(c.preset == "Light tail" for c in chains)
    assert chains[0].frequency_hz == pytest.approx(2.0)
    # Adding the same bones again adds nothing and says why.
    assert op(rig, "add_chains") == {'CANCELLED'}


def _pose(obj, names):
    return np.array([np.array(obj.pose.bones[n].matrix) for n in names])


def _key_count(obj):
    return sum(len(fc.keyframe_points) for fc in anim_data.all_action_fcurves(obj.animation_data.action))


def test_preview_moves_bones_without_keys_and_restores_the_animated_pose(rig):
    select_bones(rig, {"tail.001", "tail.002", "tail.003"})
    op(rig, "add_chains", preset="ponytail")
    scene = bpy.context.scene
    names = ["tail.001", "tail.002", "tail.003"]
    keys, n_actions = _key_count(rig), len(bpy.data.actions)
    frames = [20, 30, 40, 45]
    animated = {}
    for f in frames:
        scene.frame_set(f)
        animated[f] = _pose(rig, names)
    assert op(rig, "toggle_preview") == {'FINISHED'}
    try:
        moved = 0.0
        for f in frames:
            scene.frame_set(f)
            moved = max(moved, np.abs(_pose(rig, names) - animated[f]).max())
        assert moved > 0.01, "preview did not move the chain"
        assert _key_count(rig) == keys and len(bpy.data.actions) == n_actions
    finally:
        assert op(rig, "toggle_preview") == {'FINISHED'}
    for f in frames:
        scene.frame_set(f)
        np.testing.assert_array_equal(_pose(rig, names), animated[f])
    assert preview._on_frame_change not in bpy.app.handlers.frame_change_post


def test_preview_cache_follows_setting_changes(rig):
    select_bones(rig, {"tail.001", "tail.002", "tail.003"})
    op(rig, "add_chains", preset="ponytail")
    scene = bpy.context.scene
    op(rig, "toggle_preview")
    try:
        scene.frame_set(44)
        soft = np.array(rig.pose.bones["tail.003"].matrix)
        rig.overlap_assist.chains[0].response_mode = "PHYSICAL"
        rig.overlap_assist.chains[0].frequency_hz = 9.0
        rig.overlap_assist.chains[0].damping_ratio = 1.5
        scene.frame_set(44)
        stiff = np.array(rig.pose.bones["tail.003"].matrix)
        assert np.abs(stiff - soft).max() > 1e-3
    finally:
        op(rig, "toggle_preview")


def test_chains_survive_save_and_reload(rig, tmp_path):
    select_bones(rig, {"tail.001", "tail.002", "tail.003"})
    op(rig, "add_chains", preset="scarf_end")
    c = rig.overlap_assist.chains[0]
    c.name, c.mute, c.bounce = "swishy", True, 40.0
    col = rig.overlap_assist.colliders.add()
    col.bone, col.shape, col.radius = "spine", "CAPSULE", 0.12
    path = str(tmp_path / "chains.blend")
    bpy.ops.wm.save_as_mainfile(filepath=path)
    bpy.ops.wm.open_mainfile(filepath=path, load_ui=False)
    s = bpy.data.objects["Hero"].overlap_assist
    assert (s.chains[0].name, s.chains[0].mute, s.chains[0].bounce) == ("swishy", True, 40.0)
    assert s.chains[0].bone_names() == ["tail.001", "tail.002", "tail.003"]
    assert (s.colliders[0].bone, s.colliders[0].radius) == ("spine", pytest.approx(0.12))


def test_deleted_bone_gives_a_clear_problem_line(rig):
    from overlap_assist.blender.chain_sim import chain_problem
    select_bones(rig, {"tail.001", "tail.002", "tail.003"})
    op(rig, "add_chains")
    bpy.context.view_layer.objects.active = rig
    bpy.ops.object.mode_set(mode='EDIT')
    rig.data.edit_bones.remove(rig.data.edit_bones["tail.003"])
    bpy.ops.object.mode_set(mode='OBJECT')
    chain = rig.overlap_assist.chains[0]
    assert "tail.003 not found" in chain_problem(rig, chain)
    with pytest.raises(RuntimeError, match="tail.003 not found"):
        op(rig, "toggle_preview")
    assert not preview.PREVIEW.is_on(rig)


def test_frame_flight_sets_the_preview_range(rig):
    op(rig, "analyze_motion")
    fl = json.loads(rig.overlap_assist.body.last_summary)["flights"][0]
    assert op(rig, "frame_flight", margin=3) == {'FINISHED'}
    scene = bpy.context.scene
    assert scene.use_preview_range
    assert scene.frame_preview_start == int(fl["takeoff_frame"]) - 3
    assert scene.frame_preview_end >= fl["touchdown_frame"] + 3


def test_preview_handler_is_removed_when_a_file_is_loaded(rig, tmp_path):
    select_bones(rig, {"tail.001", "tail.002", "tail.003"})
    op(rig, "add_chains", preset="ponytail")
    path = str(tmp_path / "p.blend")
    bpy.ops.wm.save_as_mainfile(filepath=path, copy=True)
    op(rig, "toggle_preview")
    assert preview._on_frame_change in bpy.app.handlers.frame_change_post
    bpy.ops.wm.open_mainfile(filepath=path, load_ui=False)
    assert preview._on_frame_change not in bpy.app.handlers.frame_change_post
    assert not preview.PREVIEW.caches


def test_preview_follows_a_new_scene_range(rig):
    select_bones(rig, {"tail.001", "tail.002", "tail.003"})
    op(rig, "add_chains", preset="ponytail")
    scene = bpy.context.scene
    op(rig, "toggle_preview")
    try:
        scene.frame_end += 12
        scene.frame_set(scene.frame_end)
        cache = preview.PREVIEW.caches[rig.name]
        assert cache.sampled.frames[-1] == scene.frame_end
    finally:
        op(rig, "toggle_preview")
