"""Chains the bake cannot key exactly are refused with a line naming the bone and what to do, or
handled exactly (uneven object scale). Reference: Blender's own evaluation of the baked pose
(``scene.frame_set``, then the bones' world matrices) against the solver's simulated directions."""
import bpy
import numpy as np
import pytest
from blender_helpers import op, run_cli, world_bone_directions

from overlap_assist.blender import bake_layer
from overlap_assist.blender.bake_ops import bake_chains
from overlap_assist.blender.demo_scene import HUMANOID_BONES, build_armature, key_jump
from overlap_assist.core.errors import OverlapAssistError
from overlap_assist.core.jump_curves import JumpSpec

TAIL = (
    ("tail.001", "hips", (0, 0.08, 0.98), (0, 0.20, 0.90)),
    ("tail.002", "tail.001", (0, 0.20, 0.90), (0, 0.30, 0.78)),
    ("tail.003", "tail.002", (0, 0.30, 0.78), (0, 0.36, 0.64)),
)
NAMES = [b[0] for b in TAIL]


def make_rig(bones=HUMANOID_BONES + TAIL, chains=(NAMES,)):
    bpy.context.scene.gravity = (0, 0, -9.80665)
    obj = build_armature("Hero", bones=bones)
    key_jump(obj, JumpSpec(forward_mps=1.0))
    for names in chains:
        c = obj.overlap_assist.chains.add()
        c.name = names[0]
        for n in names:
            c.bones.add().name = n
        c.apply_preset(__import__("overlap_assist.core.presets", fromlist=["x"]).shipped_presets()["heavy_tail"], 24.0)
    return obj


def save(tmp_path, name="rig.blend"):
    path = str(tmp_path / name)
    bpy.ops.wm.save_as_mainfile(filepath=path, copy=True)
    return path


def one_error_line(res):
    """The command failed with exactly one line of ours on stderr and no traceback."""
    assert res.returncode == 2, (res.returncode, res.stderr[-2000:])
    ours = [ln for ln in res.stderr.splitlines() if ln.startswith("overlap_assist: error:")]
    assert len(ours) == 1 and "Traceback" not in res.stderr, res.stderr[-2000:]
    return ours[0]


@pytest.mark.parametrize("spec, says", [
    ("tail.003,tail.002,tail.001", "not in parent -> child order: list them as tail.001, tail.002, tail.003"),
    ("tail.003,tail.001,hips", "bone tail.001 is not a child of tail.003"),
    ("tail.001,tail.003", "bone tail.003 is not a child of tail.001 (its parent is tail.002)"),
    ("tail.001,tail.002,tail.001", "lists bone tail.001 twice"),
])
def test_chains_out_of_order_with_gaps_or_repeats_are_refused_on_the_command_line(tmp_path, spec, says):
    make_rig(chains=())
    line = one_error_line(run_cli("simulate", save(tmp_path), "--chain", spec))
    assert says in line


def test_the_same_bone_in_two_chains_is_refused(tmp_path):
    make_rig(chains=())
    line = one_error_line(run_cli("simulate", save(tmp_path), "--chain", "tail.001,tail.002",
                                  "--chain", "tail.002,tail.003"))
    assert "bone tail.002 is in chains tail.001 and tail.002: remove it from one of them" in line


@pytest.mark.parametrize("command", ["simulate", "bake"])
def test_a_renamed_chain_bone_gives_one_clear_line_not_a_traceback(tmp_path, command):
    obj = make_rig()
    obj.data.bones["tail.002"].name = "tail_mid"
    path = save(tmp_path)
    args = ("--out", str(tmp_path / "out.blend")) if command == "bake" else ()
    line = one_error_line(run_cli(command, path, *args))
    assert "chain 'tail.001' bone tail.002 not found (renamed or deleted?)" in line
    assert not (tmp_path / "out.blend").exists()


def test_a_renamed_chain_bone_in_a_batch_is_reported_for_that_file(tmp_path):
    import json
    obj = make_rig()
    obj.data.bones["tail.002"].name = "tail_mid"
    src = save(tmp_path)
    res = run_cli("batch", src, "--out", str(tmp_path / "out"))
    assert "Traceback" not in res.stderr, res.stderr[-2000:]
    rows = json.loads((tmp_path / "out" / "batch_log.json").read_text())["rows"]
    assert "tail.002 not found" in rows[0]["message"]


def test_a_deleted_chain_bone_is_refused_by_the_bake_function_and_changes_nothing():
    obj = make_rig()
    bpy.context.view_layer.objects.active = obj
    bpy.ops.object.mode_set(mode='EDIT')
    obj.data.edit_bones.remove(obj.data.edit_bones["tail.003"])
    bpy.ops.object.mode_set(mode='OBJECT')
    scene = bpy.context.scene
    with pytest.raises(OverlapAssistError, match="tail.003 not found"):
        bake_chains(obj, scene, list(obj.overlap_assist.chains), scene.frame_start, scene.frame_end, 0.5)
    assert not bake_layer.has_bake(obj)


def test_unjoined_bones_are_refused_naming_the_bone():
    gap = TAIL[:2] + (("tail.003", "tail.002", (0, 0.40, 0.70), (0, 0.46, 0.56)),)
    obj = make_rig(bones=HUMANOID_BONES + gap)
    with pytest.raises(RuntimeError, match="bone tail.003 does not start at the tail of tail.002"):
        op(obj, "bake_chains")
    assert not bake_layer.has_bake(obj)


def test_a_locked_rotation_is_refused_naming_the_bone_and_nothing_changes():
    obj = make_rig()
    obj.pose.bones["tail.002"].lock_rotation[0] = True
    n_actions = len(bpy.data.actions)
    with pytest.raises(RuntimeError, match=r"bone tail.002 has its rotation locked \(X\): .* unlock its rotation"):
        op(obj, "bake_chains")
    assert not bake_layer.has_bake(obj) and len(bpy.data.actions) == n_actions


def test_uneven_scale_of_a_parent_bone_is_refused_naming_it():
    obj = make_rig()
    obj.pose.bones["hips"].scale = (1.0, 1.6, 1.0)
    with pytest.raises(RuntimeError, match="bone tail.001 is scaled unevenly at frame 1 \\(by its parent hips\\)"):
        op(obj, "bake_chains")
    assert not bake_layer.has_bake(obj)


@pytest.mark.parametrize("scale", [(3.0, 1.0, 1.0), (1.0, 1.0, 2.0), (1.0, 1.0, 1.0)])
@pytest.mark.parametrize("tolerance_deg, allowed_deg", [
    (0.0, 0.05),   # a key on every frame: float32 keys and Blender's COMBINE rounding only (~0.04°)
    (0.5, None),   # reduced keys: see below
])
def test_uneven_object_scale_bakes_the_simulated_directions(scale, tolerance_deg, allowed_deg):
    if allowed_deg is None:
        # Reduced keys: each of the 3 bones may be off by the tolerance (a rotation angle, in the
        # armature's own space) and the errors add down the chain: 3 x tol. An uneven object scale S
        # then turns a small angle between two directions by at most max(S)/min(S) in world space
        # (the ratio of the largest to the smallest singular value of S). Before the rotation-angle
        # reducer (issue 15) the keys used less of their budget and 3 x tol held even under
        # scale; the reducer fills the budget (measured: 0.77° at scale 1, 0.84° at (1, 1, 2),
        # 2.03° at (3, 1, 1), on Blender 5.3), so the bound now carries the scale factor.
        allowed_deg = 3 * tolerance_deg * max(scale) / min(scale)
    obj = make_rig()
    obj.scale = scale
    scene = bpy.context.scene
    stats, sampled, motion = bake_chains(obj, scene, list(obj.overlap_assist.chains), scene.frame_start,
                                         scene.frame_end, tolerance_deg)
    got = world_bone_directions(obj, NAMES, sampled.frames)
    err = np.degrees(np.arccos(np.clip(np.sum(got * motion.dirs[0], axis=-1), -1, 1)))
    swing = np.degrees(np.arccos(np.clip(np.sum(sampled.inputs[0].target_dirs * motion.dirs[0], axis=-1), -1, 1)))
    assert swing.max() > 10.0          # the chain does swing away from its animated directions
    assert err.max() < allowed_deg, err.max()


def test_a_chain_posed_by_ik_is_refused_naming_the_constraint_and_nothing_changes():
    obj = make_rig()
    ik = obj.pose.bones["tail.003"].constraints.new('IK')
    ik.target, ik.subtarget, ik.chain_count = obj, "hand.L", 3
    n_actions = len(bpy.data.actions)
    with pytest.raises(RuntimeError, match="bone tail.001 is posed by the IK constraint 'IK' of tail.003 "
                                           r"\(target hand.L\): rotation keys would not reach it"):
        op(obj, "bake_chains")
    assert not bake_layer.has_bake(obj) and len(bpy.data.actions) == n_actions


def test_a_child_of_constraint_between_keys_and_pose_is_solved_for():
    """Child Of keeps the bone's own keys reaching it, through the target's motion: solved by evaluation."""
    obj = make_rig()
    c = obj.pose.bones["tail.002"].constraints.new('CHILD_OF')
    c.target, c.subtarget = obj, "spine"
    with bpy.context.temp_override(object=obj, active_object=obj):
        bpy.ops.object.mode_set(mode='POSE')
        obj.data.bones.active = obj.data.bones["tail.002"]
        bpy.ops.constraint.childof_set_inverse(constraint=c.name, owner='BONE')
        bpy.ops.object.mode_set(mode='OBJECT')
    scene = bpy.context.scene
    stats, sampled, motion = bake_chains(obj, scene, list(obj.overlap_assist.chains), scene.frame_start,
                                         scene.frame_end, 0.0)
    got = world_bone_directions(obj, NAMES, sampled.frames)
    err = np.degrees(np.arccos(np.clip(np.sum(got * motion.dirs[0], axis=-1), -1, 1)))
    assert err.max() < 0.05, err.max()   # per-frame keys: float32 keys and COMBINE rounding only
