"""The bake layer in real Blender: composition, non-destruction, reduction, removal, persistence.

References named beside the checks: Blender's own evaluation (the pose after ``scene.frame_set``,
``FCurve.evaluate``) and mathutils for the expected composition animated ∘ offset.
"""
import math

import bpy
import numpy as np
import pytest
from blender_helpers import action_digest
from mathutils import Euler, Matrix, Quaternion

from overlap_assist.blender import anim_data, bake, bake_layer, bake_ops, pose_read
from overlap_assist.blender.bake import bake_offsets
from overlap_assist.blender.bake_layer import BakeError, remove_bake
from overlap_assist.blender.demo_scene import build_armature
from overlap_assist.core.rotations import compose_euler

BONES = (
    ("root", None, (0, 0, 0), (0, 0.3, 0)),
    ("c0", "root", (0, 0, 1.5), (0, 0.05, 1.3)),
    ("c1", "c0", (0, 0.05, 1.3), (0, 0.1, 1.1)),
    ("c2", "c1", (0, 0.1, 1.1), (0, 0.15, 0.9)),
    ("c3", "c2", (0, 0.15, 0.9), (0, 0.2, 0.7)),
    ("arm", "root", (0.3, 0, 1.4), (0.6, 0, 1.4)),
)
CHAIN = ("c0", "c1", "c2", "c3")
KEY_FRAMES = np.arange(1, 82, 8)          # base keys, frames 1..81
BAKE_FRAMES = np.arange(10, 71)           # baked range, inside the base range
MODES = ("QUATERNION",) + bake.EULER_ORDERS
POSE_ATOL = 1e-5   # brief: evaluated pose = animated ∘ offset within 1e-5 (keys stored as float32, ~1e-7)
# Widened for quaternion bones on the layer, reason: Blender's COMBINE raises the (normalised) offset
# quaternion to the strip influence as angle = acos(w) in float32 (pow_qt_fl_normalized in its NLA
# blending), even at influence 1. Near w = 1 float32 steps by 2**-24, so the evaluated offset's angle
# is quantised: error <= 2 acos(1 - 2**-24) = 6.9e-4 rad, and a rotation matrix element moves by at
# most the angle. The written curves themselves match the offsets to 1e-6 (checked separately).
COMBINE_QUAT_ATOL = 2 * math.acos(1 - 2.0**-24)
CURVE_ATOL = 1e-6  # F-curve keys are float32: |value| <= 1 stored with ~6e-8 error


# ---------------------------------------------------------------------------------------------
# Scene and data
# ---------------------------------------------------------------------------------------------

def key_channel(obj, bone, prop, values, frames=KEY_FRAMES):
    bag = anim_data.active_fcurves(obj, create=True)
    path = obj.pose.bones[bone].path_from_id(prop)
    for i in range(values.shape[1]):
        anim_data.write_keys(anim_data.ensure_fcurve(bag, path, i, bone), frames, values[:, i], 'BEZIER')


def make_rig(mode="QUATERNION", name="Rig"):
    """Root + 4-bone chain + arm; the base action animates the chain's rotation (in ``mode``),
    the root's location and the arm's rotation. Euler bases sweep their first axis across 180°."""
    scene = bpy.context.scene
    scene.frame_start, scene.frame_end = 1, 81
    obj = build_armature(name, bones=BONES)
    t = (KEY_FRAMES - 1) / 80.0
    key_channel(obj, "root", "location", np.stack((0.3 * np.sin(3 * t), 0.5 * t, 0.1 * t * t), axis=1))
    arm_q = np.array([Quaternion((0.2, 1, 0.3), 1.5 * s) for s in t])
    key_channel(obj, "arm", "rotation_quaternion", arm_q)
    for i, bone in enumerate(CHAIN):
        pb = obj.pose.bones[bone]
        pb.rotation_mode = mode
        if mode == "QUATERNION":
            vals = np.array([Quaternion((math.cos(i), 0.4, math.sin(i)), 2.5 * s + 0.2 * i) for s in t])
            key_channel(obj, bone, "rotation_quaternion", vals)
        else:
            first = "XYZ".index(mode[0])
            vals = np.stack((0.3 * np.sin(4 * t + i), 0.2 * np.cos(3 * t), 0.25 * np.sin(2 * t)), axis=1)
            vals[:, first] = 2.6 + 1.3 * t + 0.05 * i      # crosses pi: naive Euler decomposition flips
            key_channel(obj, bone, "rotation_euler", vals)
    scene.frame_set(1)
    return obj


def damped_offsets(bones=CHAIN, frames=BAKE_FRAMES, amp_deg=20.0, freq_hz=1.5, zeta=0.15, fps=24.0,
                   flip_signs=False):
    """Damped sine swings per bone, unit quaternions (n, 4); optionally with per-frame sign flips."""
    t = (np.asarray(frames) - frames[0]) / fps
    wn = 2 * np.pi * freq_hz
    out = {}
    for i, bone in enumerate(bones):
        angle = np.deg2rad(amp_deg) * np.exp(-zeta * wn * t) * np.sin(wn * np.sqrt(1 - zeta**2) * t + 0.5 * i)
        axis = np.array([math.cos(0.7 * i), math.sin(0.7 * i), 0.3])
        axis /= np.linalg.norm(axis)
        q = np.concatenate((np.cos(angle / 2)[:, None], np.sin(angle / 2)[:, None] * axis), axis=1)
        if flip_signs:
            q[1::3] *= -1.0   # the same rotations, signs flipped: the writer must make them continuous
        out[bone] = q
    return out


def assignment(obj):
    ad = obj.animation_data
    return (ad.action, ad.action_slot.identifier if ad.action_slot else None, ad.action_blend_type,
            ad.action_influence, ad.action_extrapolation, ad.use_nla, [t.name for t in ad.nla_tracks])


def sample_pose(obj, frames):
    """Evaluated basis rotations (n_frames, n_bones, 3, 3) and locations, from Blender's evaluation."""
    scene = bpy.context.scene
    rot, loc = [], []
    for f in frames:
        scene.frame_set(int(f))
        rot.append([np.array(pb.matrix_basis.to_3x3()) for pb in obj.pose.bones])
        loc.append([np.array(pb.matrix_basis.translation) for pb in obj.pose.bones])
    return np.array(rot), np.array(loc)


def expected_composition(obj, basis_rot, offsets):
    """animated basis ∘ offset (mathutils), per frame, for the offset bones; others unchanged."""
    out = basis_rot.copy()
    names = [pb.name for pb in obj.pose.bones]
    for bone, q in offsets.items():
        j = names.index(bone)
        for k in range(q.shape[0]):
            out[k, j] = np.array(Matrix(basis_rot[k, j].tolist()) @ Quaternion(q[k]).to_matrix())
    return out


def assert_composed(obj, rot, expected, offsets):
    """Evaluated vs expected rotation matrices: 1e-5, or the COMBINE quantisation for quaternion bones."""
    names = [pb.name for pb in obj.pose.bones]
    for j, name in enumerate(names):
        quat_layer = name in offsets and obj.pose.bones[name].rotation_mode == 'QUATERNION' and bake_layer.has_bake(obj)
        err = np.max(np.abs(rot[:, j] - expected[:, j]))
        assert err < (COMBINE_QUAT_ATOL if quat_layer else POSE_ATOL), (name, err)


def assert_curves_hold_offsets(obj, offsets, frames):
    """Blender's FCurve.evaluate of the written quaternion curves = the offsets (up to sign),
    conjugated by the user's action U where it animates the bone (U ∘ offset ∘ U⁻¹, mathutils)."""
    curves = bake_fcurves(obj)
    user = anim_data.active_fcurves(obj)
    for bone, q in offsets.items():
        path = obj.pose.bones[bone].path_from_id("rotation_quaternion")
        if user.fcurves.find(path, index=0) is not None:
            u = [Quaternion([user.fcurves.find(path, index=i).evaluate(f) for i in range(4)]).normalized()
                 for f in frames]
            q = np.array([list(uk @ Quaternion(qk) @ uk.inverted()) for uk, qk in zip(u, q)])
        got = np.array([[curves[(path, i)].evaluate(f) for i in range(4)] for f in frames])
        sign = np.sign(np.sum(got * q, axis=1))[:, None]
        assert np.max(np.abs(got - sign * q)) < CURVE_ATOL


def bake_fcurves(obj):
    _track, _strip, act = bake_layer.find_bake(obj)
    return {(fc.data_path, fc.array_index): fc for fc in anim_data.all_action_fcurves(act)}


# ---------------------------------------------------------------------------------------------
# Tests
# ---------------------------------------------------------------------------------------------

@pytest.mark.parametrize("mode", MODES)
def test_layer_is_animated_pose_times_offset_and_removal_restores(mode):
    obj = make_rig(mode)
    base = obj.animation_data.action
    digest, before_assign = action_digest(base), assignment(obj)
    rot0, loc0 = sample_pose(obj, BAKE_FRAMES)
    offsets = damped_offsets(flip_signs=True)
    stats = bake_offsets(obj, BAKE_FRAMES, offsets, tolerance_deg=0.0)
    assert stats.keys_written == stats.keys_before == (4 if mode == "QUATERNION" else 3) * 4 * len(BAKE_FRAMES)
    ad = obj.animation_data
    # The user's action stays active (new keys land in it), at COMBINE over the layer under it.
    assert [t.name for t in ad.nla_tracks] == [bake_layer.BAKE_TRACK_NAME]
    assert ad.action == base and ad.action_blend_type == 'COMBINE'
    assert ad.nla_tracks[-1].strips[0].blend_type == 'COMBINE'
    # Reference: Blender's evaluated pose vs mathutils animated ∘ offset.
    rot1, loc1 = sample_pose(obj, BAKE_FRAMES)
    assert_composed(obj, rot1, expected_composition(obj, rot0, offsets), offsets)
    assert np.max(np.abs(loc1 - loc0)) < POSE_ATOL          # locations (root) pass through unchanged
    assert action_digest(base) == digest                     # the user's keys, byte for byte
    # No ±180° jumps in the written curves (Blender's FCurve.evaluate on every baked frame).
    for (_path, _i), fc in bake_fcurves(obj).items():
        vals = np.array([fc.evaluate(f) for f in BAKE_FRAMES])
        limit = math.pi if mode != "QUATERNION" else 0.5   # 180° (brief); quaternion components: a sign flip moves ~2
        assert np.max(np.abs(np.diff(vals))) < limit
    if mode == "QUATERNION":  # sign continuity: consecutive written quaternions on one hemisphere
        assert_curves_hold_offsets(obj, offsets, BAKE_FRAMES)
        for bone in CHAIN:
            path = obj.pose.bones[bone].path_from_id("rotation_quaternion")
            q = np.array([[bake_fcurves(obj)[(path, i)].evaluate(f) for i in range(4)] for f in BAKE_FRAMES])
            assert np.all(np.sum(q[1:] * q[:-1], axis=1) > 0.0)
    assert remove_bake(obj) is True
    assert assignment(obj) == before_assign and action_digest(base) == digest
    rot2, loc2 = sample_pose(obj, BAKE_FRAMES)
    assert np.array_equal(rot2, rot0) and np.array_equal(loc2, loc0)   # exactly as before
    assert bake_layer.bake_action_name(obj) not in bpy.data.actions


def test_result_shows_at_the_next_update_as_after_frame_set():
    """The bake does not evaluate the scene itself; the next depsgraph update shows the layer.
    Reference: Blender's own evaluation after ``scene.frame_set`` on the same frame."""
    obj = make_rig("XYZ")
    scene = bpy.context.scene
    scene.frame_set(30)
    before = np.array([tuple(pb.matrix_basis.col[c]) for pb in obj.pose.bones for c in range(3)])
    bake_offsets(obj, BAKE_FRAMES, damped_offsets(), tolerance_deg=0.0)
    bpy.context.view_layer.update()
    updated = np.array([tuple(pb.matrix_basis.col[c]) for pb in obj.pose.bones for c in range(3)])
    scene.frame_set(30)
    evaluated = np.array([tuple(pb.matrix_basis.col[c]) for pb in obj.pose.bones for c in range(3)])
    assert np.array_equal(updated, evaluated)
    assert np.max(np.abs(evaluated - before)) > 0.01   # the layer moved the chain at frame 30


def test_no_offset_outside_the_baked_range_and_influence():
    obj = make_rig()
    outside = [5, 75]
    rot_out0, _ = sample_pose(obj, outside)
    rot0, _ = sample_pose(obj, BAKE_FRAMES)
    offsets = damped_offsets()
    bake_offsets(obj, BAKE_FRAMES, offsets, tolerance_deg=0.0)
    rot_out1, _ = sample_pose(obj, outside)
    assert np.max(np.abs(rot_out1 - rot_out0)) < POSE_ATOL   # extrapolation NOTHING: nothing leaks
    assert bake_layer.set_bake_influence(obj, 0.5)
    assert bake_layer.bake_influence(obj) == pytest.approx(0.5)
    half = {b: np.array([Quaternion().slerp(Quaternion(q), 0.5) for q in qs]) for b, qs in offsets.items()}
    rot_half, _ = sample_pose(obj, BAKE_FRAMES)
    # Reference: Blender's COMBINE at influence 0.5 vs mathutils animated ∘ slerp(identity, offset, 0.5).
    assert_composed(obj, rot_half, expected_composition(obj, rot0, half), half)


@pytest.mark.parametrize("mode", ("QUATERNION", "ZXY"))
def test_reduction_stays_within_tolerance_with_far_fewer_keys(mode):
    obj = make_rig(mode)
    frames = np.arange(1, 121)    # 5 s at 24 fps, one damped landing ring-down per bone
    offsets = damped_offsets(frames=frames)
    tol_deg = 0.5
    # Per-frame values: the tolerance-0 bake (a key on every frame) read with FCurve.evaluate.
    bake_offsets(obj, frames, offsets, tolerance_deg=0.0)
    exact = {k: np.array([fc.evaluate(f) for f in frames]) for k, fc in bake_fcurves(obj).items()}
    stats = bake_offsets(obj, frames, offsets, tolerance_deg=tol_deg)
    assert stats.reduction_percent >= 70.0, stats.summary()
    assert stats.max_error_deg <= tol_deg
    curves = bake_fcurves(obj)
    for fc in curves.values():   # fitted handles: ALIGNED where both sides share a slope, else FREE
        types = {k.handle_left_type for k in fc.keyframe_points} | {k.handle_right_type for k in fc.keyframe_points}
        assert types <= {'ALIGNED', 'FREE'}
    # Reference: Blender's FCurve.evaluate of the reduced curves at every frame.
    if mode == "QUATERNION":
        for bone in CHAIN:
            path = obj.pose.bones[bone].path_from_id("rotation_quaternion")
            got = np.array([[curves[(path, i)].evaluate(f) for i in range(4)] for f in frames])
            got /= np.linalg.norm(got, axis=1, keepdims=True)
            ref = np.stack([exact[(path, i)] for i in range(4)], axis=1)   # the per-frame layer values
            ref /= np.linalg.norm(ref, axis=1, keepdims=True)
            dots = np.abs(np.sum(got * ref, axis=1))
            angle = 2 * np.arccos(np.clip(dots, -1, 1))
            assert np.rad2deg(angle.max()) <= tol_deg
    else:   # the tolerance is the rotation angle (Euler layer values add to the animated angles)
        # Whole orientations as Blender evaluates the scene: after the reduced bake vs the exact one.
        reduced_rot, _ = sample_pose(obj, frames)
        bake_offsets(obj, frames, offsets, tolerance_deg=0.0)
        exact_rot, _ = sample_pose(obj, frames)
        rel = np.einsum('fbji,fbjk->fbik', exact_rot, reduced_rot)
        axis = np.stack((rel[..., 2, 1] - rel[..., 1, 2], rel[..., 0, 2] - rel[..., 2, 0],
                         rel[..., 1, 0] - rel[..., 0, 1]), axis=-1)
        angle = np.arctan2(0.5 * np.linalg.norm(axis, axis=-1), 0.5 * (np.trace(rel, axis1=2, axis2=3) - 1.0))
        assert np.rad2deg(angle.max()) <= tol_deg + 1e-4   # + float32 matrices (~1e-6 rad)


@pytest.mark.parametrize("mode", MODES)
def test_reduced_keys_keep_the_users_keys_the_hemisphere_and_no_flips(mode):
    """At the default tolerance (fitted keys): the user's action byte for byte, consecutive
    quaternions on one hemisphere and no 180° Euler jumps, by Blender's FCurve.evaluate at every
    frame and between the keys (quarter frames); the base angles cross pi (test rig)."""
    obj = make_rig(mode)
    base = obj.animation_data.action
    digest = action_digest(base)
    stats = bake_offsets(obj, BAKE_FRAMES, damped_offsets(flip_signs=True), tolerance_deg=0.5)
    assert stats.keys_written < 0.5 * stats.keys_before and stats.max_error_deg <= 0.5
    assert action_digest(base) == digest
    fine = np.arange(BAKE_FRAMES[0], BAKE_FRAMES[-1] + 0.01, 0.25)
    curves = bake_fcurves(obj)
    for bone in CHAIN:
        prop = "rotation_quaternion" if mode == "QUATERNION" else "rotation_euler"
        path = obj.pose.bones[bone].path_from_id(prop)
        rest = (1.0, 0.0, 0.0, 0.0) if mode == "QUATERNION" else (0.0, 0.0, 0.0)
        vals = np.array([[curves[(path, i)].evaluate(f) if (path, i) in curves else rest[i]
                          for i in range(len(rest))] for f in fine])
        if mode == "QUATERNION":
            assert np.all(np.sum(vals[1:] * vals[:-1], axis=1) > 0.0), bone
        else:
            assert np.max(np.abs(np.diff(vals, axis=0))) < 0.5 * math.pi, bone


@pytest.mark.parametrize("mode", ("QUATERNION", "XZY"))
def test_rebake_replaces_only_its_layer_and_is_identical(mode):
    obj = make_rig(mode)
    base = obj.animation_data.action
    digest = action_digest(base)
    offsets = damped_offsets()
    bake_offsets(obj, BAKE_FRAMES, offsets)
    first = action_digest(bake_layer.find_bake(obj)[2])
    n_actions = len(bpy.data.actions)
    bake_offsets(obj, BAKE_FRAMES, offsets)
    assert action_digest(bake_layer.find_bake(obj)[2]) == first
    assert len(bpy.data.actions) == n_actions
    assert [t.name for t in obj.animation_data.nla_tracks] == [bake_layer.BAKE_TRACK_NAME]
    assert action_digest(base) == digest


def test_existing_user_tracks_are_kept_and_restored():
    obj = make_rig()
    ad = obj.animation_data
    user_act = bpy.data.actions.new("Wave")   # a user NLA layer under the action, animating the arm
    slot = user_act.slots.new(id_type='OBJECT', name=obj.name)
    bag = anim_data.channelbag_for(user_act, slot, create=True)
    for i in range(3):
        anim_data.write_keys(bag.fcurves.new('pose.bones["arm"].location', index=i), [1, 40, 81], [0, 0.2 * i, 0], 'BEZIER')
    track = ad.nla_tracks.new()
    track.name = "User Layer"
    strip = track.strips.new("Wave", 1, user_act)
    strip.action_slot = slot
    before = assignment(obj)
    rot0, loc0 = sample_pose(obj, BAKE_FRAMES)
    offsets = damped_offsets()
    bake_offsets(obj, BAKE_FRAMES, offsets, tolerance_deg=0.0)
    assert [t.name for t in ad.nla_tracks] == ["User Layer", bake_layer.BAKE_TRACK_NAME]
    rot1, loc1 = sample_pose(obj, BAKE_FRAMES)
    assert_composed(obj, rot1, expected_composition(obj, rot0, offsets), offsets)
    assert np.max(np.abs(loc1 - loc0)) < POSE_ATOL
    remove_bake(obj)
    assert assignment(obj) == before
    rot2, loc2 = sample_pose(obj, BAKE_FRAMES)
    assert np.array_equal(rot2, rot0) and np.array_equal(loc2, loc0)


def test_unanimated_bone_gets_static_pose_times_offset_and_is_restored():
    obj = make_rig()
    pb = obj.pose.bones["arm"]
    bag = anim_data.active_fcurves(obj)
    for i in range(4):   # the arm's rotation is no longer keyed...
        bag.fcurves.remove(bag.fcurves.find(pb.path_from_id("rotation_quaternion"), index=i))
    static = Quaternion((0, 0, 1), 0.4)
    pb.rotation_quaternion = static                          # ...but posed by hand
    offsets = {"arm": damped_offsets()["c0"]}
    rot0, _ = sample_pose(obj, BAKE_FRAMES)
    bake_offsets(obj, BAKE_FRAMES, offsets, tolerance_deg=0.0)
    rot1, _ = sample_pose(obj, BAKE_FRAMES)
    # Written absolute (static ∘ offset, angles >= 0.05 rad): no small-angle COMBINE quantisation.
    assert np.max(np.abs(rot1 - expected_composition(obj, rot0, offsets))) < POSE_ATOL
    remove_bake(obj)
    bpy.context.scene.frame_set(30)
    assert np.max(np.abs(np.array(pb.rotation_quaternion) - np.array(static))) < CURVE_ATOL


def test_save_and_reload_keeps_the_layer(tmp_path):
    obj = make_rig("YXZ")
    base_digest = action_digest(obj.animation_data.action)
    rot0, _ = sample_pose(obj, BAKE_FRAMES)
    bake_offsets(obj, BAKE_FRAMES, damped_offsets())
    digest = action_digest(bake_layer.find_bake(obj)[2])
    rot1, _ = sample_pose(obj, BAKE_FRAMES)
    path = str(tmp_path / "baked.blend")
    bpy.ops.wm.save_as_mainfile(filepath=path)
    bpy.ops.wm.open_mainfile(filepath=path, load_ui=False)
    obj = bpy.data.objects["Rig"]
    assert action_digest(bake_layer.find_bake(obj)[2]) == digest
    rot2, _ = sample_pose(obj, BAKE_FRAMES)
    assert np.array_equal(rot2, rot1)
    assert remove_bake(obj)   # the restore record survived the file round trip
    assert action_digest(obj.animation_data.action) == base_digest
    rot3, _ = sample_pose(obj, BAKE_FRAMES)
    assert np.array_equal(rot3, rot0)


def test_axis_angle_is_refused_with_a_clear_message_and_nothing_changes():
    obj = make_rig()
    obj.pose.bones["c2"].rotation_mode = 'AXIS_ANGLE'
    digest, before, n_actions = action_digest(obj.animation_data.action), assignment(obj), len(bpy.data.actions)
    with pytest.raises(BakeError, match="Axis Angle.*set its rotation mode to Quaternion or an Euler order"):
        bake_offsets(obj, BAKE_FRAMES, damped_offsets())
    assert action_digest(obj.animation_data.action) == digest
    assert assignment(obj) == before and len(bpy.data.actions) == n_actions


@pytest.mark.parametrize("bad,match", [
    ({"nope": np.tile([1.0, 0, 0, 0], (len(BAKE_FRAMES), 1))}, "Bone 'nope' is not in Rig"),
    ({"c0": np.zeros((len(BAKE_FRAMES), 4))}, "zero quaternion"),
    ({"c0": np.ones((3, 4))}, "must be 61 finite quaternions"),
])
def test_bad_offsets_are_refused_and_nothing_changes(bad, match):
    obj = make_rig()
    bake_offsets(obj, BAKE_FRAMES, damped_offsets())
    digest = action_digest(bake_layer.find_bake(obj)[2])
    with pytest.raises(BakeError, match=match):
        bake_offsets(obj, BAKE_FRAMES, bad)
    assert action_digest(bake_layer.find_bake(obj)[2]) == digest


@pytest.mark.parametrize("mode", ("QUATERNION", "YZX"))
def test_write_into_action_writes_the_composed_rotation(mode):
    obj = make_rig(mode)
    base = obj.animation_data.action
    others = {(fc.data_path, fc.array_index): anim_data.read_keyframes(fc) for fc in anim_data.all_action_fcurves(base)
              if not any(f'"{b}"' in fc.data_path for b in CHAIN)}
    chain_before = {(fc.data_path, fc.array_index): anim_data.read_keyframes(fc)
                    for fc in anim_data.all_action_fcurves(base) if '"c1"' in fc.data_path}
    rot0, loc0 = sample_pose(obj, BAKE_FRAMES)
    offsets = damped_offsets()
    stats = bake_offsets(obj, BAKE_FRAMES, offsets, tolerance_deg=0.0, into_action=True)
    assert stats.into_action and stats.action_name == base.name
    assert obj.animation_data.action == base and not len(obj.animation_data.nla_tracks)
    rot1, loc1 = sample_pose(obj, BAKE_FRAMES)
    # Reference: Blender's evaluated pose vs mathutils animated ∘ offset.
    assert np.max(np.abs(rot1 - expected_composition(obj, rot0, offsets))) < POSE_ATOL
    assert np.max(np.abs(loc1 - loc0)) < POSE_ATOL
    for fc in anim_data.all_action_fcurves(base):
        key = (fc.data_path, fc.array_index)
        if key in others:   # other bones' channels untouched
            for name, arr in anim_data.read_keyframes(fc).items():
                assert np.array_equal(arr, others[key][name])
        elif key in chain_before:   # user keys outside the range kept
            old = chain_before[key]["co"]
            outside = old[(old[:, 0] < BAKE_FRAMES[0]) | (old[:, 0] > BAKE_FRAMES[-1])]
            co = anim_data.read_keyframes(fc)["co"]
            assert all(any(np.array_equal(o, c) for c in co) for o in outside) and len(outside) == 4


def test_remove_bake_operator_polls_and_restores():
    registered_here = not hasattr(bpy.types, "OVERLAP_ASSIST_OT_remove_bake")
    if registered_here:
        for cls in bake_ops.classes:
            bpy.utils.register_class(cls)
    try:
        obj = make_rig()
        before = assignment(obj)
        with bpy.context.temp_override(active_object=obj, object=obj):
            assert not bpy.ops.overlap_assist.remove_bake.poll()    # nothing baked yet
            bake_offsets(obj, BAKE_FRAMES, damped_offsets())
            assert bpy.ops.overlap_assist.remove_bake.poll()
            assert bpy.ops.overlap_assist.remove_bake() == {'FINISHED'}
        assert assignment(obj) == before and not bake_layer.has_bake(obj)
    finally:
        if registered_here:
            for cls in reversed(bake_ops.classes):
                bpy.utils.unregister_class(cls)


def test_undo_after_bake_restores_the_scene():
    """Reference: Blender's own undo (memfile undo works in module mode; ``ed.undo`` only polls
    true once there is a step to go back to)."""
    obj = make_rig()
    rot0, _ = sample_pose(obj, BAKE_FRAMES)
    base_name, keys0 = obj.animation_data.action.name, action_digest(obj.animation_data.action)
    assign0 = (base_name,) + assignment(obj)[1:]   # names, not data-block references: undo reloads them
    bpy.ops.ed.undo_push(message="before bake")
    bake_offsets(obj, BAKE_FRAMES, damped_offsets())
    bpy.ops.ed.undo_push(message="bake")
    if not bpy.ops.ed.undo.poll():
        pytest.skip("bpy.ops.ed.undo() is unavailable here (no undo step recorded)")
    bpy.ops.ed.undo()
    obj = bpy.data.objects["Rig"]
    assert not bake_layer.has_bake(obj)
    rot1, _ = sample_pose(obj, BAKE_FRAMES)
    assert np.array_equal(rot1, rot0)
    assert action_digest(bpy.data.actions[base_name]) == keys0
    assert (obj.animation_data.action.name,) + assignment(obj)[1:] == assign0


@pytest.mark.parametrize("order", bake.EULER_ORDERS)
def test_numpy_euler_composition_matches_mathutils(order):
    """Reference: mathutils, frame by frame: (Euler(basis).to_matrix() @ Quaternion(offset).to_matrix())
    .to_euler(order, Euler(basis + previous offset)). mathutils computes in float32: 1e-5 rad."""
    frames = np.arange(1, 121)
    t = (frames - 1) / 120.0
    first = "XYZ".index(order[0])
    basis = np.stack((0.3 * np.sin(4 * t), 0.2 * np.cos(3 * t), 0.25 * np.sin(2 * t)), axis=1)
    basis[:, first] = 2.6 + 1.3 * t       # crosses pi
    offsets = damped_offsets(bones=("a", "b"), frames=frames, amp_deg=40.0)
    stacked = np.stack([offsets["a"], offsets["b"]])
    ours = compose_euler(np.stack([basis, -basis]), order, stacked)
    for b, sign in enumerate((1.0, -1.0)):
        prev = np.zeros(3)
        for k in range(len(frames)):
            base = sign * basis[k]
            m = Euler(base, order).to_matrix() @ Quaternion(stacked[b, k]).to_matrix()
            ref = np.array(m.to_euler(order, Euler(base + prev, order)))
            assert np.max(np.abs(ours[b, k] - ref)) < 1e-5, (b, k)
            prev = ref - base


@pytest.mark.parametrize("mode", ("QUATERNION", "ZYX"))
def test_sampling_by_fcurve_evaluate_equals_setting_each_frame(mode):
    """Reference: the channel values Blender's scene evaluation gives (frame_set, then read back)."""
    obj = make_rig(mode)
    scene = bpy.context.scene
    names = list(CHAIN) + ["arm"]
    assert set(pose_read.plain_channel_fcurves(obj, scene, names)) == set(names)
    fast = pose_read.sample_rotations(obj, scene, BAKE_FRAMES, names)
    prop = "rotation_quaternion" if mode == "QUATERNION" else "rotation_euler"
    for k, f in enumerate(BAKE_FRAMES):
        scene.frame_set(int(f))
        for name in names:
            pb = obj.pose.bones[name]
            expected = np.array(getattr(pb, "rotation_quaternion" if name == "arm" else prop), dtype=np.float32)
            np.testing.assert_array_equal(fast[name][k].astype(np.float32), expected)


def test_driven_or_layered_channels_are_sampled_by_the_scene():
    obj = make_rig("XYZ")
    scene = bpy.context.scene
    fc = obj.driver_add('pose.bones["c1"].rotation_euler', 0)
    fc.driver.type = 'SUM'   # no Python: a driver without variables gives 0
    plain = pose_read.plain_channel_fcurves(obj, scene, list(CHAIN))
    assert "c1" not in plain and "c0" in plain
    obj.driver_remove('pose.bones["c1"].rotation_euler', 0)
    bag = anim_data.active_fcurves(obj)
    curves = {(fc.data_path, fc.array_index): fc for fc in bag.fcurves}
    curves[('pose.bones["c2"].rotation_euler', 1)].mute = True       # a muted curve
    curves[('pose.bones["c3"].rotation_euler', 0)].group.mute = True  # a muted group
    plain = pose_read.plain_channel_fcurves(obj, scene, list(CHAIN))
    assert set(plain) == {"c0", "c1"}
    # Reference: Blender's evaluation of the muted channels (frame_set, read back) equals what the
    # bake samples for them.
    sampled = pose_read.sample_rotations(obj, scene, BAKE_FRAMES[:5], ["c2", "c3"])
    for k, f in enumerate(BAKE_FRAMES[:5]):
        scene.frame_set(int(f))
        for bone in ("c2", "c3"):
            np.testing.assert_array_equal(sampled[bone][k].astype(np.float32),
                                          np.array(obj.pose.bones[bone].rotation_euler, dtype=np.float32))
    obj.animation_data.nla_tracks.new()
    assert pose_read.plain_channel_fcurves(obj, scene, list(CHAIN)) == {}


def test_a_replace_action_sharing_a_channel_with_a_user_track_is_refused_and_nothing_changes():
    obj = make_rig()
    ad = obj.animation_data
    user_act = bpy.data.actions.new("Sway")   # a user track animating the root's location, as the action does
    slot = user_act.slots.new(id_type='OBJECT', name=obj.name)
    bag = anim_data.channelbag_for(user_act, slot, create=True)
    anim_data.write_keys(bag.fcurves.new('pose.bones["root"].location', index=0), [1, 81], [0, 1], 'BEZIER')
    track = ad.nla_tracks.new()
    track.name = "Sway"
    track.strips.new("Sway", 1, user_act).action_slot = slot
    before = assignment(obj)
    with pytest.raises(BakeError, match=r"'Sway' both animate pose.bones\[\"root\"\].location: push the action down"):
        bake_offsets(obj, BAKE_FRAMES, damped_offsets())
    assert assignment(obj) == before and not bake_layer.has_bake(obj)


def test_the_action_plays_as_before_outside_its_keys_under_the_layer():
    """The action stays active at COMBINE: F-curve extrapolation beyond its keys is unchanged."""
    obj = make_rig("XYZ")
    for fc in anim_data.active_fcurves(obj).fcurves:
        fc.extrapolation = 'LINEAR'
    outside = np.arange(82, 100)
    rot0, loc0 = sample_pose(obj, outside)
    bake_offsets(obj, BAKE_FRAMES, damped_offsets(), tolerance_deg=0.0)
    rot1, loc1 = sample_pose(obj, outside)
    assert np.max(np.abs(rot1 - rot0)) < POSE_ATOL and np.max(np.abs(loc1 - loc0)) < POSE_ATOL
