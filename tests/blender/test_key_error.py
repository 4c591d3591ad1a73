"""The bake's tolerance is the true rotation angle, as Blender evaluates the written curves.

References: Blender's own evaluation (``FCurve.evaluate`` of the written curves, and the pose
after ``scene.frame_set``) and mathutils (Euler -> quaternion in every order, quaternion products
and ``rotation_difference``) for the simulated orientation animated ∘ offset.
"""
import math

import bpy
import numpy as np
import pytest
from mathutils import Euler, Quaternion

from overlap_assist.blender import anim_data, bake, bake_layer
from overlap_assist.blender.bake import bake_offsets
from overlap_assist.blender.demo_scene import build_armature

BONES = (
    ("root", None, (0, 0, 0), (0, 0.3, 0)),
    ("c0", "root", (0, 0, 1.5), (0, 0.05, 1.3)),
    ("c1", "c0", (0, 0.05, 1.3), (0, 0.1, 1.1)),
    ("c2", "c1", (0, 0.1, 1.1), (0, 0.15, 0.9)),
    ("loose", "root", (0.3, 0, 1.4), (0.6, 0, 1.4)),   # not animated: baked absolute
)
ANIMATED = ("c0", "c1", "c2")
BAKED = ANIMATED + ("loose",)
MODES = ("QUATERNION",) + bake.EULER_ORDERS
TOL_DEG = 0.5
# F-curve evaluation in float32 moves a value by ~1e-7 rad; mathutils works in float32 too.
ROUNDING_DEG = 1e-4


def make_rig(mode, first_frame=1, n_frames=120):
    scene = bpy.context.scene
    scene.frame_start, scene.frame_end = first_frame, first_frame + n_frames - 1
    obj = build_armature("KeyErr", bones=BONES)
    bag = anim_data.active_fcurves(obj, create=True)
    key_frames = np.arange(first_frame, first_frame + n_frames, 8, dtype=float)
    t = (key_frames - first_frame) / n_frames
    for i, name in enumerate(BAKED):
        obj.pose.bones[name].rotation_mode = mode
    obj.pose.bones["loose"].rotation_quaternion = Quaternion((0.3, 1.0, 0.2), 0.4)
    obj.pose.bones["loose"].rotation_euler = (0.2, -0.3, 0.5)
    for i, name in enumerate(ANIMATED):
        pb = obj.pose.bones[name]
        if mode == "QUATERNION":
            vals = np.array([Quaternion((math.cos(i), 0.4, math.sin(i)), 2.0 * s + 0.2 * i) for s in t])
            prop = "rotation_quaternion"
        else:
            vals = np.stack((0.9 * np.sin(4 * t + i), 0.6 * np.cos(3 * t), 0.7 * np.sin(2 * t + 1)), axis=1)
            prop = "rotation_euler"
        path = pb.path_from_id(prop)
        for c in range(vals.shape[1]):
            anim_data.write_keys(anim_data.ensure_fcurve(bag, path, c, name), key_frames, vals[:, c], 'BEZIER')
    scene.frame_set(first_frame)
    return obj


def swing_offsets(frames, seed=0):
    """Damped swings after two landings per bone (Ogata 2010 Sec. 5-3 underdamped response)."""
    rng = np.random.default_rng(seed)
    t = (frames - frames[0]) / 24.0
    out = {}
    for name in BAKED:
        angle = np.zeros_like(t)
        for land_s in (0.3, 2.5):
            f_hz, zeta = rng.uniform(0.8, 2.5), rng.uniform(0.08, 0.3)
            wn = 2 * np.pi * f_hz
            dt = np.clip(t - land_s, 0, None)
            angle += np.where(t >= land_s, np.deg2rad(rng.uniform(10, 35)) * np.exp(-zeta * wn * dt)
                              * np.sin(wn * np.sqrt(1 - zeta**2) * dt), 0.0)
        axis = rng.normal(size=3)
        axis /= np.linalg.norm(axis)
        out[name] = np.concatenate((np.cos(angle / 2)[:, None], np.sin(angle / 2)[:, None] * axis), axis=1)
    return out


def animated_rotations(obj, frames):
    """{bone: [mathutils Quaternion per frame]} of the animated pose, from Blender's evaluation."""
    scene = bpy.context.scene
    out = {n: [] for n in BAKED}
    for f in frames:
        scene.frame_set(int(f))
        for n in BAKED:
            pb = obj.pose.bones[n]
            out[n].append(pb.rotation_quaternion.copy() if pb.rotation_mode == 'QUATERNION'
                          else pb.rotation_euler.copy())
    return out


def written_curves(obj):
    act = bake_layer.find_bake(obj)[2]
    return {(fc.data_path, fc.array_index): fc for fc in anim_data.all_action_fcurves(act)}


def true_errors_deg(obj, frames, animated, offsets, static):
    """Per bone: largest angle between the orientation from the written curves (FCurve.evaluate,
    combined as the COMBINE layer combines) and animated ∘ offset (mathutils).

    The layer lies under the active action, which blends COMBINE (bake_layer): quaternions compose
    as ``layer @ action`` (lower @ upper), Euler angles add."""
    curves = written_curves(obj)
    out = {}
    for name in BAKED:
        pb = obj.pose.bones[name]
        quat = pb.rotation_mode == 'QUATERNION'
        path = pb.path_from_id("rotation_quaternion" if quat else "rotation_euler")
        layered = name in ANIMATED
        worst = 0.0
        for k, f in enumerate(frames):
            rest = ([1.0, 0, 0, 0] if layered else list(static[name])) if quat else \
                ([0.0, 0, 0] if layered else list(static[name]))
            vals = [curves[(path, c)].evaluate(float(f)) if (path, c) in curves else rest[c] for c in range(len(rest))]
            base = animated[name][k] if layered else (Quaternion(static[name]) if quat else Euler(static[name], pb.rotation_mode))
            base_q = base if quat else base.to_quaternion()
            want = base_q @ Quaternion(offsets[name][k])
            if quat:
                got = (Quaternion(vals).normalized() @ base_q) if layered else Quaternion(vals).normalized()
            elif layered:
                got = Euler([b + v for b, v in zip(base, vals)], pb.rotation_mode).to_quaternion()
            else:
                got = Euler(vals, pb.rotation_mode).to_quaternion()
            worst = max(worst, math.degrees(got.rotation_difference(want).angle))
        out[name] = worst
    return out


@pytest.mark.parametrize("mode", MODES)
def test_true_rotation_error_within_tolerance_and_reported(mode):
    obj = make_rig(mode)
    frames = np.arange(1, 121)
    offsets = swing_offsets(frames)
    static = {n: (list(obj.pose.bones[n].rotation_quaternion) if mode == "QUATERNION"
                  else list(obj.pose.bones[n].rotation_euler)) for n in BAKED}
    animated = animated_rotations(obj, frames)
    stats = bake_offsets(obj, frames, offsets, tolerance_deg=TOL_DEG)
    errors = true_errors_deg(obj, frames, animated, offsets, static)
    assert max(errors.values()) <= TOL_DEG + ROUNDING_DEG, errors
    assert stats.max_error_deg <= TOL_DEG
    assert stats.max_error_deg == pytest.approx(max(errors.values()), abs=0.01)   # the same quantity
    assert stats.reduction_percent >= 70.0, stats.summary()
    for fc in written_curves(obj).values():   # fitted handle types survive fc.update()
        assert {k.handle_left_type for k in fc.keyframe_points} <= {'ALIGNED', 'FREE'}
        assert all(k.handle_left_type == k.handle_right_type for k in fc.keyframe_points)


@pytest.mark.parametrize("mode", ("QUATERNION", "XYZ", "ZYX"))
def test_pose_after_frame_set_within_tolerance(mode):
    """The pose Blender evaluates through the NLA (COMBINE adds the layer's Euler angles and
    composes quaternions, components without a curve included)."""
    obj = make_rig(mode)
    frames = np.arange(1, 121)
    offsets = swing_offsets(frames, seed=2)
    animated = animated_rotations(obj, frames)
    bake_offsets(obj, frames, offsets, tolerance_deg=TOL_DEG)
    scene = bpy.context.scene
    worst = 0.0
    for k, f in enumerate(frames):
        scene.frame_set(int(f))
        for name in ANIMATED:
            got = obj.pose.bones[name].matrix_basis.to_quaternion()
            base = animated[name][k]
            base_q = base.normalized() if mode == "QUATERNION" else base.to_quaternion()
            want = base_q @ Quaternion(offsets[name][k])
            worst = max(worst, math.degrees(got.rotation_difference(want).angle))
    assert worst <= TOL_DEG + ROUNDING_DEG


def test_flat_offsets_write_no_curves_and_late_clips_keep_their_reduction():
    frames = np.arange(1, 121)
    obj = make_rig("XZY")
    offsets = swing_offsets(frames, seed=4)
    offsets["c1"] = np.tile([1.0, 0.0, 0.0, 0.0], (len(frames), 1))    # no swing at all
    stats_early = bake_offsets(obj, frames, offsets, tolerance_deg=TOL_DEG)
    path = obj.pose.bones["c1"].path_from_id("rotation_euler")
    assert not any(key[0] == path for key in written_curves(obj))      # nothing to write for c1
    bpy.data.objects.remove(obj)
    late = np.arange(20001, 20121)
    obj = make_rig("XZY", first_frame=20001)
    animated = animated_rotations(obj, late)
    static = {n: list(obj.pose.bones[n].rotation_euler) for n in BAKED}
    stats_late = bake_offsets(obj, late, offsets, tolerance_deg=TOL_DEG)
    assert abs(stats_late.keys_written - stats_early.keys_written) <= 0.02 * stats_early.keys_written
    errors = true_errors_deg(obj, late, animated, offsets, static)
    assert max(errors.values()) <= TOL_DEG + ROUNDING_DEG


def test_shared_frames_option_keys_each_bone_on_one_set_of_frames():
    obj = make_rig("YXZ")
    frames = np.arange(1, 121)
    offsets = swing_offsets(frames, seed=6)
    static = {n: list(obj.pose.bones[n].rotation_euler) for n in BAKED}
    animated = animated_rotations(obj, frames)
    separate = bake_offsets(obj, frames, offsets, tolerance_deg=TOL_DEG)
    shared = bake_offsets(obj, frames, offsets, tolerance_deg=TOL_DEG, shared_frames=True)
    assert shared.keys_written > separate.keys_written
    errors = true_errors_deg(obj, frames, animated, offsets, static)   # the bound holds in this layout too
    assert max(errors.values()) <= TOL_DEG + ROUNDING_DEG, errors
    assert shared.max_error_deg == pytest.approx(max(errors.values()), abs=0.01)
    curves = written_curves(obj)
    for name in BAKED:
        path = obj.pose.bones[name].path_from_id("rotation_euler")
        sets = {tuple(k.co[0] for k in fc.keyframe_points) for (p, _i), fc in curves.items() if p == path}
        assert len(sets) <= 1
