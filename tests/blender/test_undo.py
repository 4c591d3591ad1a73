"""Every operator that changes the file is taken back whole by one undo step (Blender's own undo).

From Python an operator records its undo step only when called with the undo flag, as a button
press does: ``bpy.ops.overlap_assist.<name>('EXEC_DEFAULT', True)``. ``bpy.ops.ed.undo`` polls
true only once there is a step to go back to.
"""
import bpy
import pytest
from blender_helpers import action_digest, op, select_bones

from overlap_assist.blender.demo_scene import HUMANOID_BONES, build_armature, key_jump
from overlap_assist.core.jump_curves import JumpSpec

TAIL = (
    ("tail.001", "hips", (0, 0.08, 0.98), (0, 0.20, 0.90)),
    ("tail.002", "tail.001", (0, 0.20, 0.90), (0, 0.30, 0.78)),
)
NAME = "Undoer"


def file_state():
    """What the operators may change, by names and values (undo reloads data-blocks)."""
    obj, scene = bpy.data.objects[NAME], bpy.context.scene
    s = obj.overlap_assist
    actions = [(a.name, action_digest(a)) for a in sorted(bpy.data.actions, key=lambda a: a.name)]
    ad = obj.animation_data
    return {
        "chains": [(c.name, tuple(c.bone_names()), c.preset, round(c.damping_ratio, 6), c.mute) for c in s.chains],
        "colliders": [(c.name, c.bone, c.shape, round(c.radius, 6)) for c in s.colliders],
        "markers": sorted((m.name, m.frame) for m in scene.timeline_markers),
        "preview_range": (scene.use_preview_range, scene.frame_preview_start, scene.frame_preview_end),
        "summary": s.body.last_summary,
        "tracks": [t.name for t in ad.nla_tracks] if ad else [],
        "actions": actions,
    }


def run(name, **kw):
    obj = bpy.data.objects[NAME]
    with bpy.context.temp_override(active_object=obj, object=obj, active_pose_bone=obj.pose.bones["hips"]):
        return getattr(bpy.ops.overlap_assist, name)('EXEC_DEFAULT', True, **kw)


@pytest.fixture
def rig():
    bpy.context.scene.gravity = (0, 0, -9.80665)
    obj = build_armature(NAME, bones=HUMANOID_BONES + TAIL)
    key_jump(obj, JumpSpec(forward_mps=1.0))
    select_bones(obj, [b[0] for b in TAIL])
    return obj


def _with_chain(obj):
    op(obj, "add_chains", preset="light_tail")


def _with_collider(obj):
    _with_chain(obj)
    with bpy.context.temp_override(active_object=obj, object=obj, active_pose_bone=obj.pose.bones["spine"]):
        bpy.ops.overlap_assist.add_collider()


def _with_bake(obj):
    _with_chain(obj)
    op(obj, "bake_chains")


CASES = [  # (operator, keyword arguments, set-up before the step to undo)
    ("analyze_motion", {}, None),
    ("add_chains", {"preset": "ponytail"}, None),
    ("remove_chain", {}, _with_chain),
    ("apply_preset", {"preset": "heavy_tail"}, _with_chain),
    ("add_collider", {}, _with_chain),
    ("remove_collider", {}, _with_collider),
    ("frame_flight", {}, lambda obj: op(obj, "analyze_motion")),
    ("bake_chains", {}, _with_chain),
    ("remove_bake", {}, _with_bake),
]


@pytest.mark.parametrize("name, kw, setup", CASES, ids=[c[0] for c in CASES])
def test_one_undo_step_takes_the_operator_back(rig, name, kw, setup):
    if setup is not None:
        setup(rig)
    before = file_state()
    bpy.ops.ed.undo_push(message="before")
    assert run(name, **kw) == {'FINISHED'}
    changed = file_state()
    assert changed != before, f"{name} changed nothing to take back"
    if not bpy.ops.ed.undo.poll():
        pytest.skip("bpy.ops.ed.undo() is unavailable here (no undo step recorded)")
    bpy.ops.ed.undo()
    assert file_state() == before
