"""Analyze Body Motion in real Blender on motion keyed the way real animation is: every frame,
Blender's automatic handles, feet planted by their own bones, drops, a stand-up after the
landing, and a Rigify-generated human rig keyed on its controls.

References: exact events of piecewise-constant accelerations (kinematics); apex h = v^2/2g
(Bosco, Luhtanen & Komi 1983); in flight the load is 0 (Newton's second law, Linthorne 2001).
"""
import json
import pathlib
import sys

import bpy
import numpy as np
import pytest
from blender_helpers import action_digest, generate_rigify_file, op

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1] / "core"))
from jump_paths import feet_for, force_curve_jump, piecewise, stand_up_pieces  # noqa: E402

from overlap_assist.blender import anim_data  # noqa: E402
from overlap_assist.blender.demo_scene import HUMANOID_BONES, build_armature, key_location  # noqa: E402
from overlap_assist.core.constants import STANDARD_GRAVITY_MPS2 as G0  # noqa: E402
from overlap_assist.core.jump_curves import JumpSpec, jump_events, jump_position  # noqa: E402

# The stick rig with feet that have their own keys (as IK feet do) and toes.
PLANTED_BONES = tuple((n, None if n.startswith("foot") else p, h, t) for n, p, h, t in HUMANOID_BONES) + (
    ("toe.L", "foot.L", (0.10, -0.15, 0.0), (0.10, -0.22, 0.0)),
    ("toe.R", "foot.R", (-0.10, -0.15, 0.0), (-0.10, -0.22, 0.0)),
)


def set_auto_handles(obj):
    """Blender's automatic handles on every key (what a per-frame bake or capture import gives)."""
    auto = bpy.types.Keyframe.bl_rna.properties["handle_left_type"].enum_items["AUTO"].value
    for fc in anim_data.active_fcurves(obj).fcurves:
        n = len(fc.keyframe_points)
        fc.keyframe_points.foreach_set("handle_left_type", np.full(n, auto, dtype=np.int32))
        fc.keyframe_points.foreach_set("handle_right_type", np.full(n, auto, dtype=np.int32))
        fc.update()


def key_path(obj, frames, body_z, foot_z=None, body_x=None, z_rest=None):
    """Key the hips (body) and, when given, both feet per frame; offsets from the rest pose (m),
    the hips' rest height standing for ``z_rest`` of the path (default: its first height)."""
    rest = np.array(obj.data.bones["hips"].head_local)
    pos = np.tile(rest, (frames.size, 1))
    pos[:, 2] += body_z - (body_z[0] if z_rest is None else z_rest)
    if body_x is not None:
        pos[:, 0] += body_x
    key_location(obj, "hips", frames, pos)
    if foot_z is not None:
        for side in ("L", "R"):
            head = np.array(obj.data.bones[f"foot.{side}"].head_local)
            fp = np.tile(head, (frames.size, 1))
            fp[:, 2] += foot_z
            key_location(obj, f"foot.{side}", frames, fp)
    set_auto_handles(obj)
    bpy.context.scene.frame_start, bpy.context.scene.frame_end = int(frames[0]), int(frames[-1])


def setup(fps, fps_base=1.0, bones=PLANTED_BONES):
    scene = bpy.context.scene
    scene.render.fps, scene.render.fps_base = fps, fps_base
    scene.gravity = (0.0, 0.0, -G0)
    return scene, build_armature("Hero", bones=bones)


def summary_of(obj):
    assert op(obj, "analyze_motion") == {'FINISHED'}
    return json.loads(obj.overlap_assist.body.last_summary)


@pytest.mark.parametrize("fps,fps_base", [(24, 1.0), (30, 1.001), (60, 1.0)])
@pytest.mark.parametrize("kind", ["squat", "countermovement"])
def test_per_frame_keyed_jumps_with_automatic_handles(fps, fps_base, kind):
    scene, obj = setup(fps, fps_base)
    fps_eff = fps / fps_base
    spec = JumpSpec(unweight_s=0.0) if kind == "squat" else JumpSpec()
    ev = jump_events(spec)
    frames = 1.0 + np.arange(int(ev["duration_s"] * fps_eff) + 1)
    t = (frames - 1) / fps_eff
    pos = jump_position(spec, t)
    feet = feet_for(t, pos[:, 2], [(ev["takeoff_s"], ev["touchdown_s"])], [(0.0, 0.0)])
    key_path(obj, frames, pos[:, 2], feet[0, 0, :, 2])
    before = action_digest(obj.animation_data.action, "pose.bones")
    s = summary_of(obj)
    assert s["body_source"] == "com" and s["airborne_from"] == "feet"
    assert sorted(s["contact_feet"]) == ["foot.L", "foot.R"]
    (fl,) = s["flights"]
    assert fl["kind"] == "jump"
    assert fl["takeoff_frame"] == pytest.approx(1 + ev["takeoff_s"] * fps_eff, abs=0.5)
    assert fl["touchdown_frame"] == pytest.approx(1 + ev["touchdown_s"] * fps_eff, abs=0.5)
    # The CoM includes the feet, which keep still until takeoff; in flight it is one parabola.
    assert fl["apex_height_m"] == pytest.approx(ev["takeoff_speed_mps"] ** 2 / (2 * G0), rel=0.03)
    fc = anim_data.active_fcurves(obj).fcurves.find('["overlap_load_g"]')
    mid = [f for f in frames if fl["takeoff_frame"] + 1 < f < fl["touchdown_frame"] - 1]
    assert max(abs(fc.evaluate(f)) for f in mid) < 0.05
    assert action_digest(obj.animation_data.action, "pose.bones") == before


@pytest.mark.parametrize("fps", [24, 60])
@pytest.mark.parametrize("kind", ["cmj", "sj"])
def test_force_curve_jumps_keyed_on_a_rig(fps, kind):
    # F(t) shaped as in the force-plate literature, integrated twice with a = F/m - g
    # (impulse-momentum, Linthorne 2001; v = 0 in quiet stance, Owen et al. 2014), keyed per
    # frame on the rig (hips and planted feet), analysed, and compared with the curve: takeoff and
    # touchdown with the 20 N crossings (Harry et al. 2020), flight time and jump height
    # (h = v^2/2g, h = g T^2/8, Bosco et al. 1983), the load curve with F / body weight.
    scene, obj = setup(fps)
    d = force_curve_jump(kind)
    frames = 1.0 + np.arange(int((d["end_s"] - 0.01) * fps) + 1)
    t = (frames - 1) / fps
    feet = feet_for(d["t"], d["z"], [(d["takeoff_s"], d["touchdown_s"])], [(0.0, 0.0)])
    key_path(obj, frames, np.interp(t, d["t"], d["z"]), np.interp(t, d["t"], feet[0, 0, :, 2]))
    s = summary_of(obj)
    assert s["airborne_from"] == "feet"
    (fl,) = s["flights"]
    assert (fl["takeoff_frame"] - 1) / fps == pytest.approx(d["takeoff_s"], abs=0.5 / fps)
    assert (fl["touchdown_frame"] - 1) / fps == pytest.approx(d["touchdown_s"], abs=0.5 / fps)
    assert fl["hang_time_s"] == pytest.approx(d["hang_s"], abs=1.0 / fps)
    # The CoM of this rig includes feet that stay down until the 20 N crossing: its apex above
    # takeoff matches both height formulas within 5 %.
    assert fl["apex_height_m"] == pytest.approx(d["h_v"], rel=0.05)
    assert fl["apex_height_m"] == pytest.approx(d["h_T"], rel=0.05)
    fc = anim_data.active_fcurves(obj).fcurves.find('["overlap_load_g"]')
    before = (t > 0.1) & (t < d["takeoff_s"] - 1.0 / fps)
    tool = np.array([fc.evaluate(f) for f in frames[before]])
    ref = np.interp(t[before], d["t"], d["F"] / d["bw"])
    # The feet (2.9 % of the mass) stand still while the rest accelerates, so the CoM load is
    # (1 - m_feet) of the body's plus m_feet: 0.15 g RMS leaves room for that and for sampling.
    assert float(np.sqrt(np.mean((tool - ref) ** 2))) < 0.15
    assert tool.max() == pytest.approx(ref.max(), abs=0.2)


def test_stand_up_after_landing_is_one_flight_on_a_rig():
    # The hips carry everything (feet move with them): the body's path decides.
    scene, obj = setup(24, bones=HUMANOID_BONES)
    v_to = 1.4 * G0 * 0.22
    land_a = v_to**2 / (2 * 0.25)
    pieces = [(0.5, 0.0), (0.25, -0.6 * G0), (0.125, 1.2 * G0), (0.22, 1.4 * G0), (2 * v_to / G0, -G0),
              (v_to / land_a, land_a), (0.1, 0.0), *stand_up_pieces(0.25, 0.5), (0.5, 0.0)]
    total = sum(p[0] for p in pieces)
    frames = 1.0 + np.arange(int(total * 24) + 1)
    z, starts = piecewise(pieces, (frames - 1) / 24)
    key_path(obj, frames, z)
    obj.overlap_assist.body.body_source = "ROOT"
    s = summary_of(obj)
    assert s["airborne_from"] == "body path"
    (fl,) = s["flights"]
    assert fl["takeoff_frame"] == pytest.approx(1 + starts[4] * 24, abs=0.5)
    assert fl["touchdown_frame"] == pytest.approx(1 + starts[5] * 24, abs=0.5)
    assert sorted(m.name for m in scene.timeline_markers) == ["apex", "takeoff", "touchdown"]


def test_drop_from_a_ledge_then_rebound_jump_on_a_rig():
    scene, obj = setup(24)
    t_fall = np.sqrt(2 * 0.3 / G0)
    v_to = 1.4 * G0 * 0.22
    pieces = [(0.5, 0.0), (t_fall, -G0), (G0 * t_fall / (3 * G0), 3 * G0), (0.22, 1.4 * G0), (2 * v_to / G0, -G0),
              (v_to / (3 * G0), 3 * G0), (0.1, 0.0), *stand_up_pieces(0.15, 0.5), (0.5, 0.0)]
    total = sum(p[0] for p in pieces)
    frames = 1.0 + np.arange(int(total * 24) + 1)
    t = (frames - 1) / 24
    z, starts = piecewise(pieces, t, z0=1.3)
    events = [(starts[1], starts[2]), (starts[4], starts[5])]
    feet = feet_for(t, z, events, [(0.3, 0.0), (0.0, 0.0)])
    key_path(obj, frames, z, feet[0, 0, :, 2], z_rest=1.0)   # the rest pose stands on the floor
    s = summary_of(obj)
    assert [f["kind"] for f in s["flights"]] == ["drop", "jump"]
    for fl, (t_to, t_td) in zip(s["flights"], events):
        assert fl["takeoff_frame"] == pytest.approx(1 + t_to * 24, abs=0.5)
        assert fl["touchdown_frame"] == pytest.approx(1 + t_td * 24, abs=0.5)
    names = sorted(m.name for m in scene.timeline_markers)
    assert names == ["apex 2", "drop 1", "takeoff 2", "touchdown 1", "touchdown 2"]
    assert s["flights"][0]["retime_frames"] is None


# ---------------------------------------------------------------- a Rigify-generated human rig

@pytest.fixture(scope="module")
def rigify_file(tmp_path_factory):
    """A human rig generated by Blender's bundled Rigify, in its own process and saved to a file.

    The test opens it with scripts off (as this add-on opens every file): the rig's constraints
    and drivers evaluate, and neither Rigify nor the generated rig UI gets registered here
    (Blender 4.5 hangs at exit while add-on classes stay registered)."""
    return generate_rigify_file(tmp_path_factory.mktemp("rigify") / "rigify_human.blend")


def rigify_rig(path):
    bpy.ops.wm.open_mainfile(filepath=path, load_ui=False, use_scripts=False)
    rig = bpy.data.objects["rig"]
    bpy.context.view_layer.objects.active = rig
    assert rig.type == 'ARMATURE' and "DEF-spine.006" in rig.data.bones
    return rig


def key_control(rig, name, frames, offsets_m):
    """Key a control's location so its head moves by world ``offsets_m`` from the rest pose (its
    parents stay at rest). Blender's own space conversion maps a pose-space move to the
    control's location channels (controls may use local or parent-space location)."""
    from mathutils import Vector
    pb = rig.pose.bones[name]
    rest = rig.data.bones[name].matrix_local.copy()

    def local_loc(d):
        m = rest.copy()
        m.translation = rest.translation + Vector(d)
        return np.array(rig.convert_space(pose_bone=pb, matrix=m, from_space='POSE', to_space='LOCAL').translation)
    base = local_loc((0, 0, 0))
    cols = np.stack([local_loc(e) - base for e in np.eye(3)], axis=1)
    locs = base + offsets_m @ cols.T
    bag = anim_data.active_fcurves(rig, create=True)
    for axis in range(3):
        fc = anim_data.ensure_fcurve(bag, pb.path_from_id("location"), axis, name)
        anim_data.write_keys(fc, frames, locs[:, axis], 'BEZIER')


def test_rigify_rig_keyed_on_its_controls(rigify_file):
    rig = rigify_rig(rigify_file)
    scene = bpy.context.scene
    scene.render.fps = 24
    scene.gravity = (0.0, 0.0, -G0)
    spec = JumpSpec()
    ev = jump_events(spec)
    frames = 1.0 + np.arange(int(ev["duration_s"] * 24) + 1)
    t = (frames - 1) / 24
    body = jump_position(spec, t) - [0, 0, spec.start_height_m]
    feet = feet_for(t, body[:, 2], [(ev["takeoff_s"], ev["touchdown_s"])], [(0.0, 0.0)])
    zero = np.zeros((frames.size, 3))
    key_control(rig, "torso", frames, body)
    for side in ("L", "R"):
        fo = zero.copy()
        fo[:, 2] = feet[0, 0, :, 2]
        key_control(rig, f"foot_ik.{side}", frames, fo)
        # Hands swing up 0.35 m relative to the body, fastest 0.15 s before takeoff.
        swing = 0.35 / (1 + np.exp(-(t - (ev["takeoff_s"] - 0.15)) / 0.04))
        ho = body.copy()
        ho[:, 2] += swing
        key_control(rig, f"hand_ik.{side}", frames, ho)
    set_auto_handles(rig)
    scene.frame_start, scene.frame_end = 1, int(frames[-1])
    before = action_digest(rig.animation_data.action, "pose.bones")
    s = summary_of(rig)
    assert s["body_source"] == "com"
    assert not any("center of mass needs" in w or "root bone" in w for w in s["warnings"])
    assert s["airborne_from"] == "feet" and sorted(s["contact_feet"]) == ["DEF-foot.L", "DEF-foot.R"]
    (fl,) = s["flights"]
    assert fl["takeoff_frame"] == pytest.approx(1 + ev["takeoff_s"] * 24, abs=0.5)
    assert fl["touchdown_frame"] == pytest.approx(1 + ev["touchdown_s"] * 24, abs=0.5)
    # Arm swing reported before takeoff; the arms' CoM follows the hands through the IK, so its
    # fastest rise is within 2 frames of the hands' (0.15 s = 3.6 frames before takeoff).
    assert fl["arm_swing_offset_frames"] == pytest.approx(-0.15 * 24, abs=2.0)
    assert fl["late_arm_swing"] is False
    assert action_digest(rig.animation_data.action, "pose.bones") == before
    names = [p["name"] for p in s["phases"]]
    assert names[:5] == ["quiet stance", "unweighting", "braking", "propulsion", "flight"]

    # The same jump carried by the armature object instead of a bone.
    bag = anim_data.active_fcurves(rig)
    for fc in list(bag.fcurves):
        if fc.data_path.startswith("pose.bones"):
            bag.fcurves.remove(fc)
    base = np.array(rig.location)
    for axis in range(3):
        fc = anim_data.ensure_fcurve(bag, "location", axis, "Object Transforms")
        anim_data.write_keys(fc, frames, base[axis] + body[:, axis], 'BEZIER')
    set_auto_handles(rig)
    s = summary_of(rig)
    assert s["body_source"] == "com"
    (fl,) = s["flights"]
    assert fl["takeoff_frame"] == pytest.approx(1 + ev["takeoff_s"] * 24, abs=0.5)
    assert fl["touchdown_frame"] == pytest.approx(1 + ev["touchdown_s"] * 24, abs=0.5)
    assert fl["apex_height_m"] == pytest.approx(ev["apex_height_m"], rel=0.03)


# ---------------------------------------------------------------- contact bones, overrides, bad input

RENAMED_FEET = tuple((("Sole_Left" if n == "foot.L" else "Sole_Right" if n == "foot.R" else n),
                      ("Sole_Left" if p == "foot.L" else "Sole_Right" if p == "foot.R" else p), h, t)
                     for n, p, h, t in PLANTED_BONES if not n.startswith("toe"))


def test_contact_bones_setting_names_feet_the_names_do_not_reveal():
    scene, obj = setup(24, bones=RENAMED_FEET)
    spec = JumpSpec()
    ev = jump_events(spec)
    frames = 1.0 + np.arange(int(ev["duration_s"] * 24) + 1)
    t = (frames - 1) / 24
    pos = jump_position(spec, t)
    feet = feet_for(t, pos[:, 2], [(ev["takeoff_s"], ev["touchdown_s"])], [(0.0, 0.0)])
    key_path(obj, frames, pos[:, 2])
    for name in ("Sole_Left", "Sole_Right"):
        head = np.array(obj.data.bones[name].head_local)
        fp = np.tile(head, (frames.size, 1))
        fp[:, 2] += feet[0, 0, :, 2]
        key_location(obj, name, frames, fp)
    set_auto_handles(obj)
    s = summary_of(obj)
    assert s["airborne_from"] == "body path" and s["body_source"] == "root"
    obj.overlap_assist.body.contact_bones = "Sole_Left, Sole_Right"
    s = summary_of(obj)
    assert s["airborne_from"] == "feet" and sorted(s["contact_feet"]) == ["Sole_Left", "Sole_Right"]
    (fl,) = s["flights"]
    assert fl["takeoff_frame"] == pytest.approx(1 + ev["takeoff_s"] * 24, abs=0.5)
    # A bone that does not exist: a clear error, and the last result stays as it was.
    last = obj.overlap_assist.body.last_summary
    obj.overlap_assist.body.contact_bones = "Sole_Left, Heel_Nowhere"
    with pytest.raises(RuntimeError, match="contact bones not in 'Hero': Heel_Nowhere"):
        op(obj, "analyze_motion")
    assert obj.overlap_assist.body.last_summary == last


def test_cli_contact_override_and_body_options(tmp_path):
    from blender_helpers import run_cli
    from overlap_assist.blender.demo_scene import key_jump
    scene = bpy.context.scene
    scene.gravity = (0.0, 0.0, -G0)
    no_hands = tuple(b for b in HUMANOID_BONES if not b[0].startswith("hand"))
    obj = build_armature("Handless", bones=no_hands)
    key_jump(obj, JumpSpec())
    path = str(tmp_path / "handless.blend")
    bpy.ops.wm.save_as_mainfile(filepath=path)
    proc = run_cli("analyze", path, "--json")
    d = json.loads(proc.stdout)
    assert proc.returncode == 0 and d["body_source"] == "root" and len(d["flights"]) == 1
    proc = run_cli("analyze", path, "--json", "--override", "hand.L=forearm.L", "--override", "hand.R=forearm.R",
                   "--contact", "foot.L,foot.R")
    d = json.loads(proc.stdout)
    assert proc.returncode == 0 and d["body_source"] == "com", proc.stderr
    assert len(d["flights"]) == 1
    for args, fragment in ((("--override", "hand.L"), "must be ROLE=BONE"),
                           (("--override", "paw.L=forearm.L"), "unknown role 'paw.L'"),
                           (("--override", "hand.L=Nope"), "bone 'Nope' is not in"),
                           (("--contact", "foot.L,Nope"), "--contact names bones that are not in")):
        proc = run_cli("analyze", path, *args)
        assert proc.returncode == 2 and fragment in proc.stderr and "Traceback" not in proc.stderr
        assert proc.stdout == ""


def test_sparse_keys_place_contact_events_between_frames_as_blender_evaluates_them():
    # Keys every 3 frames (an animator's poses, Blender's default automatic clamped handles): the
    # interpolation is the motion, so the feet are sampled at sub-frames around each contact
    # change. Reference: Blender's own evaluation of the foot's curve, 400 samples per frame.
    from overlap_assist.core.foot_contact import ContactTolerances
    scene, obj = setup(24)
    spec = JumpSpec()
    ev = jump_events(spec)
    frames = 1.0 + np.arange(0, int(ev["duration_s"] * 24) + 1, 3)
    t = (frames - 1) / 24
    pos = jump_position(spec, t)
    dense_t = np.linspace(0, t[-1], 4000)
    feet = feet_for(dense_t, jump_position(spec, dense_t)[:, 2], [(ev["takeoff_s"], ev["touchdown_s"])], [(0.0, 0.0)])
    foot_z = np.interp(t, dense_t, feet[0, 0, :, 2])
    rest = np.array(obj.data.bones["hips"].head_local)
    hp = np.tile(rest, (frames.size, 1))
    hp[:, 2] += pos[:, 2] - pos[0, 2]
    key_location(obj, "hips", frames, hp)
    for side in ("L", "R"):
        fp = np.tile(np.array(obj.data.bones[f"foot.{side}"].head_local), (frames.size, 1))
        fp[:, 2] += foot_z
        key_location(obj, f"foot.{side}", frames, fp)
    scene.frame_start, scene.frame_end = 1, int(frames[-1])
    s = summary_of(obj)
    assert s["airborne_from"] == "feet"
    (fl,) = s["flights"]
    leg = np.linalg.norm(np.array(obj.data.bones["thigh.L"].head_local) - np.array(obj.data.bones["foot.L"].head_local))
    level = ContactTolerances.for_leg(leg, G0).event_m
    fc = anim_data.active_fcurves(obj).fcurves.find('pose.bones["foot.L"].location', index=2)
    fr = np.linspace(1, frames[-1], int((frames[-1] - 1) * 400) + 1)
    # Rest frame of the foot bone maps pose z to world z up to a sign: read it from the rest matrix.
    axis = np.array(obj.data.bones["foot.L"].matrix_local)[:3, :3] @ np.eye(3)
    fcs = [anim_data.active_fcurves(obj).fcurves.find('pose.bones["foot.L"].location', index=i) for i in range(3)]
    local = np.array([[c.evaluate(f) for c in fcs] for f in fr])
    world_z = local @ axis[2]
    up = np.flatnonzero((world_z[:-1] <= level) & (world_z[1:] > level))
    down = np.flatnonzero((world_z[:-1] > level) & (world_z[1:] <= level))
    assert fc is not None and up.size == 1 and down.size == 1
    assert fl["takeoff_frame"] == pytest.approx(fr[up[0]], abs=0.125)
    assert fl["touchdown_frame"] == pytest.approx(fr[down[0]], abs=0.125)
