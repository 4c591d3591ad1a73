"""Work after a bake is kept: keys set while a bake exists land in the animator's own action and
play; Remove Bake drops no action and no edit; a changed animation makes the bake stale.

Reference: Blender's own evaluation (pose after ``scene.frame_set``) and its own keying
(``PoseBone.keyframe_insert``, the call the I key makes).
"""
import bpy
import numpy as np
import pytest
from blender_helpers import op, run_cli, select_bones

from overlap_assist.blender import anim_data, bake_layer
from overlap_assist.blender.demo_scene import HUMANOID_BONES, build_armature, key_jump
from overlap_assist.core.jump_curves import JumpSpec

TAIL = (
    ("tail.001", "hips", (0, 0.08, 0.98), (0, 0.20, 0.90)),
    ("tail.002", "tail.001", (0, 0.20, 0.90), (0, 0.30, 0.78)),
    ("tail.003", "tail.002", (0, 0.30, 0.78), (0, 0.36, 0.64)),
)
EDIT_FRAME = 30
EDIT_SHIFT_BU = 0.25


@pytest.fixture
def rig():
    bpy.context.scene.gravity = (0, 0, -9.80665)
    obj = build_armature("Hero", bones=HUMANOID_BONES + TAIL)
    key_jump(obj, JumpSpec(forward_mps=1.0))
    select_bones(obj, [b[0] for b in TAIL])
    op(obj, "add_chains", preset="heavy_tail")
    return obj


def _hips(obj, frames):
    scene = bpy.context.scene
    out = []
    for f in frames:
        scene.frame_set(f)
        out.append(np.array(obj.pose.bones["hips"].location))
    return np.array(out)


def _key_torso(obj):
    """What the I key does on the torso: pose it at EDIT_FRAME and key location and rotation."""
    scene = bpy.context.scene
    scene.frame_set(EDIT_FRAME)
    pb = obj.pose.bones["hips"]
    pb.location[0] += EDIT_SHIFT_BU
    pb.keyframe_insert("location", frame=EDIT_FRAME)
    pb.keyframe_insert("rotation_quaternion", frame=EDIT_FRAME)
    return np.array(pb.location)


def test_keying_the_torso_after_a_bake_goes_into_the_users_action_and_survives_removal(rig, tmp_path):
    scene = bpy.context.scene
    frames = list(range(scene.frame_start, scene.frame_end + 1))
    user_action = rig.animation_data.action
    user_action_name = user_action.name
    before = _hips(rig, frames)
    assert op(rig, "bake_chains") == {'FINISHED'}
    n_actions = len(bpy.data.actions)
    edited = _key_torso(rig)
    # The key went into the animator's own action, which is still the one playing ...
    assert rig.animation_data.action == user_action and len(bpy.data.actions) == n_actions
    # ... and it is evaluated at once while the rest of the jump plays as before.
    after = _hips(rig, frames)
    k = frames.index(EDIT_FRAME)
    np.testing.assert_allclose(after[k], edited, atol=1e-6)
    others = [i for i in range(len(frames)) if i != k]
    np.testing.assert_allclose(after[others], before[others], atol=1e-6)
    assert np.ptp(after[:, 1]) > 0.3      # the jump (hips' rest y axis points up) is still there
    assert bake_layer.bake_state(rig) == "stale"
    path = str(tmp_path / "edited.blend")
    bpy.ops.wm.save_as_mainfile(filepath=path)
    bpy.ops.wm.open_mainfile(filepath=path, load_ui=False, use_scripts=False)
    rig = bpy.data.objects["Hero"]
    assert bake_layer.bake_state(rig) == "stale"
    assert op(rig, "remove_bake") == {'FINISHED'}
    ad = rig.animation_data
    assert ad.action is not None and ad.action.name == user_action_name and ad.action_blend_type == 'REPLACE'
    bag = anim_data.active_fcurves(rig)
    fc = bag.fcurves.find('pose.bones["hips"].location', index=0)
    value = {round(k.co[0]): k.co[1] for k in fc.keyframe_points}[EDIT_FRAME]
    assert abs(value - edited[0]) < 1e-6
    removed = _hips(rig, frames)
    np.testing.assert_allclose(removed[k], edited, atol=1e-6)
    np.testing.assert_allclose(removed[others], before[others], atol=1e-6)
    # Saved and reloaded again: the edit is not in an orphan action dropped on save.
    bpy.ops.wm.save_as_mainfile(filepath=path)
    bpy.ops.wm.open_mainfile(filepath=path, load_ui=False, use_scripts=False)
    np.testing.assert_allclose(_hips(bpy.data.objects["Hero"], [EDIT_FRAME])[0], edited, atol=1e-6)


def test_keying_a_baked_chain_bone_gives_the_pose_on_screen(rig):
    """Blender's keying maps the value through the layer under the action: the key shows as posed."""
    from mathutils import Quaternion
    op(rig, "bake_chains")
    scene = bpy.context.scene
    scene.frame_set(EDIT_FRAME)
    pb = rig.pose.bones["tail.002"]
    posed = Quaternion((1, 0, 0), 0.4) @ Quaternion(pb.rotation_quaternion)
    pb.rotation_quaternion = posed
    assert pb.keyframe_insert("rotation_quaternion", frame=EDIT_FRAME)
    assert rig.animation_data.action.name == "HeroAction"
    scene.frame_set(EDIT_FRAME + 1)
    scene.frame_set(EDIT_FRAME)
    got = Quaternion(rig.pose.bones["tail.002"].rotation_quaternion)
    assert got.rotation_difference(posed).angle < 1e-4


def test_a_rebake_after_an_edit_is_current_again_and_follows_the_edit(rig):
    op(rig, "bake_chains")
    _key_torso(rig)
    assert bake_layer.bake_state(rig) == "stale"
    assert op(rig, "bake_chains") == {'FINISHED'}
    assert bake_layer.bake_state(rig) == "current"
    assert rig.animation_data.action.name == "HeroAction"


def test_bake_check_on_the_command_line_says_current_or_stale(rig, tmp_path):
    src = str(tmp_path / "rig.blend")
    baked = str(tmp_path / "baked.blend")
    bpy.ops.wm.save_as_mainfile(filepath=src)
    assert run_cli("bake", src, "--out", baked).returncode == 0
    res = run_cli("bake", baked, "--check")
    assert res.returncode == 0 and "the bake is current" in res.stdout, res.stderr
    bpy.ops.wm.open_mainfile(filepath=baked, load_ui=False, use_scripts=False)
    _key_torso(bpy.data.objects["Hero"])
    bpy.ops.wm.save_as_mainfile(filepath=baked)
    res = run_cli("bake", baked, "--check")
    assert res.returncode == 1 and "stale" in res.stdout and "bake again" in res.stdout, res.stderr
    res = run_cli("bake", src, "--check")
    assert res.returncode == 1 and "no Overlap Bake layer" in res.stdout


def test_the_panels_stale_check_is_cached_between_edits_and_follows_them(rig, monkeypatch):
    """The Bake panel asks at every redraw; the user's keys are hashed again only after a change
    that can alter them (a depsgraph update of an Action, a new layout), and the answer always
    equals the uncached check."""
    from overlap_assist.blender import stale_state
    op(rig, "bake_chains")
    calls = []
    digest = bake_layer.animation_digest
    monkeypatch.setattr(bake_layer, "animation_digest", lambda obj: calls.append(1) or digest(obj))
    assert [stale_state.bake_state(rig) for _ in range(5)] == ["current"] * 5
    assert len(calls) == 1                                   # hashed once for five redraws
    _key_torso(rig)                                          # the I key: an Action update
    bpy.context.view_layer.update()
    assert stale_state.bake_state(rig) == "stale" == bake_layer.bake_state(rig)
    n = len(calls)
    assert stale_state.bake_state(rig) == "stale" and len(calls) == n
    user_action = rig.animation_data.action
    rig.animation_data.action = None                         # a new layout, no Action edited
    assert stale_state.bake_state(rig) == bake_layer.bake_state(rig)
    rig.animation_data.action = user_action
    rig.animation_data.action_slot = user_action.slots[0]
    assert op(rig, "bake_chains") == {'FINISHED'}            # a new recorded digest
    assert stale_state.bake_state(rig) == "current" == bake_layer.bake_state(rig)
