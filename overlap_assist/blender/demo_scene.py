"""A small character rig of our own and an analytic jump keyed on it (demo and tests).

The rig is a stick humanoid (hips, spine, neck, head, arms, legs) plus optional hanging chains.
Its proportions and the jump's numbers are invented for the demo scenario.
"""
import bpy
import numpy as np

from ..core.jump_curves import JumpSpec, jump_events, jump_position

# (name, parent, head xyz (m), tail xyz (m)) in rest pose, z up, character facing -y.
HUMANOID_BONES = (
    ("root", None, (0, 0, 0), (0, 0.3, 0)),
    ("hips", "root", (0, 0, 0.95), (0, 0, 1.08)),
    ("spine", "hips", (0, 0, 1.08), (0, 0, 1.42)),
    ("neck", "spine", (0, 0, 1.42), (0, 0, 1.52)),
    ("head", "neck", (0, 0, 1.52), (0, 0, 1.74)),
    ("upper_arm.L", "spine", (0.18, 0, 1.40), (0.20, 0, 1.12)),
    ("forearm.L", "upper_arm.L", (0.20, 0, 1.12), (0.21, 0, 0.86)),
    ("hand.L", "forearm.L", (0.21, 0, 0.86), (0.21, 0, 0.68)),
    ("upper_arm.R", "spine", (-0.18, 0, 1.40), (-0.20, 0, 1.12)),
    ("forearm.R", "upper_arm.R", (-0.20, 0, 1.12), (-0.21, 0, 0.86)),
    ("hand.R", "forearm.R", (-0.21, 0, 0.86), (-0.21, 0, 0.68)),
    ("thigh.L", "hips", (0.10, 0, 0.95), (0.10, 0, 0.52)),
    ("shin.L", "thigh.L", (0.10, 0, 0.52), (0.10, 0, 0.09)),
    ("foot.L", "shin.L", (0.10, 0, 0.09), (0.10, -0.15, 0.0)),
    ("thigh.R", "hips", (-0.10, 0, 0.95), (-0.10, 0, 0.52)),
    ("shin.R", "thigh.R", (-0.10, 0, 0.52), (-0.10, 0, 0.09)),
    ("foot.R", "shin.R", (-0.10, 0, 0.09), (-0.10, -0.15, 0.0)),
)


def build_armature(name="Hero", bones=HUMANOID_BONES, scale_length=1.0):
    """Create an armature object from (name, parent, head_m, tail_m) rows; sizes in metres.

    With ``scale_length`` 0.01 the scene is in centimetres and bone sizes are multiplied by 100.
    """
    scene = bpy.context.scene
    scene.unit_settings.scale_length = scale_length
    to_bu = 1.0 / scale_length
    arm = bpy.data.armatures.new(name)
    obj = bpy.data.objects.new(name, arm)
    scene.collection.objects.link(obj)
    bpy.context.view_layer.objects.active = obj
    bpy.ops.object.mode_set(mode='EDIT')
    for bname, parent, head, tail in bones:
        eb = arm.edit_bones.new(bname)
        eb.head = [c * to_bu for c in head]
        eb.tail = [c * to_bu for c in tail]
        if parent:
            eb.parent = arm.edit_bones[parent]
            eb.use_connect = False
        eb.use_deform = bname != "root"
    bpy.ops.object.mode_set(mode='OBJECT')
    return obj


def key_location(obj, bone_name, frames, positions_bu):
    """Key a bone's location (pose space = rest-relative offset) at ``frames`` in one bulk write."""
    from . import anim_data
    pb = obj.pose.bones[bone_name]
    rest = np.array(obj.data.bones[bone_name].matrix_local, dtype=float)
    # Pose-space location is in the bone's rest frame: offset = R_rest^T (p - head_rest).
    offsets = (positions_bu - rest[:3, 3]) @ rest[:3, :3]
    bag = anim_data.active_fcurves(obj, create=True)
    for axis in range(3):
        fc = anim_data.ensure_fcurve(bag, pb.path_from_id("location"), axis, bone_name)
        anim_data.write_keys(fc, frames, offsets[:, axis], 'BEZIER')


def key_jump(obj, spec=JumpSpec(), first_frame=1, bone_name="hips", scene=None, keys_per_frame=1):
    """Key an analytic jump (metres) on ``bone_name`` at every frame; sets the scene range.

    ``keys_per_frame`` > 1 keys sub-frames too, so the Bézier curve follows the analytic kinks
    (takeoff, touchdown) closely; tests use it to compare with exact event times.

    Returns the exact events of the jump (seconds from ``first_frame``).
    """
    scene = scene or bpy.context.scene
    fps = scene.render.fps / scene.render.fps_base
    ev = jump_events(spec)
    last = first_frame + int(np.ceil(ev["duration_s"] * fps))
    frames = first_frame + np.arange((last - first_frame) * keys_per_frame + 1) / keys_per_frame
    pos_m = jump_position(spec, (frames - first_frame) / fps)
    rest_head_m = np.array(obj.data.bones[bone_name].head_local) * scene.unit_settings.scale_length
    pos_m = pos_m - np.array([0, 0, spec.start_height_m]) + rest_head_m
    key_location(obj, bone_name, frames, pos_m / scene.unit_settings.scale_length)
    scene.frame_start, scene.frame_end = first_frame, last
    return ev

