"""Choosing what the headless commands process: --scene, the armatures that move, rigs moved by a
parent or a constraint, Rigify files, the file's stored frame range (real Blender, subprocesses)."""
import json

import bpy
import numpy as np
import pytest
from blender_helpers import generate_rigify_file, run_cli, tail_jumper

from overlap_assist.blender.demo_scene import HUMANOID_BONES, build_armature
from overlap_assist.core.jump_curves import JumpSpec, jump_events, jump_position


def errors(err):
    return [ln for ln in err.splitlines() if ln.strip()]


def one_error(proc, fragment):
    assert proc.returncode == 2, (proc.returncode, proc.stderr)
    lines = errors(proc.stderr)
    assert len(lines) == 1 and lines[0].startswith("overlap_assist: error:") and fragment in lines[0], proc.stderr
    return lines[0]


@pytest.fixture(scope="module")
def demo_file(tmp_path_factory):
    """The demo's own file: three scenes (good_jump, floaty_jump, floaty_jump_fixed: the floaty clip with
    its flight fixed), one rig in each, chains stored."""
    out = tmp_path_factory.mktemp("demo")
    proc = run_cli("demo", "--out", str(out))
    assert proc.returncode == 0, proc.stderr[-3000:]
    return str(out / "overlap_demo.blend")


def _scene_facts(path):
    bpy.ops.wm.open_mainfile(filepath=path, load_ui=False, use_scripts=False)
    facts = {s.name: (s.frame_start, s.frame_end) for s in bpy.data.scenes}
    active = bpy.context.window.scene.name
    bpy.ops.wm.read_factory_settings(use_empty=True)
    return facts, active


def test_demo_second_clip_is_analyzed_in_its_own_scene(demo_file):
    # Before: the active scene was always used, so the floaty rig "did not move".
    proc = run_cli("analyze", demo_file, "--scene", "floaty_jump", "--json")
    assert proc.returncode == 0, proc.stderr
    (line,) = proc.stdout.splitlines()
    d = json.loads(line)
    assert (d["armature"], d["scene"]) == ("Wren_floaty_jump", "floaty_jump")
    assert d["flights"][0]["verdict"].startswith("floaty")


def test_analyze_without_choice_takes_every_armature_that_moves(demo_file):
    proc = run_cli("analyze", demo_file, "--json")
    assert proc.returncode == 0, proc.stderr
    rows = [json.loads(ln) for ln in proc.stdout.splitlines()]
    assert {(r["armature"], r["scene"]) for r in rows} == {("Wren_good_jump", "good_jump"),
                                                          ("Wren_floaty_jump", "floaty_jump"),
                                                          ("Wren_floaty_jump_fixed", "floaty_jump_fixed")}
    # The fixed copy plays its fix layer: a ballistic flight.
    fixed = next(r for r in rows if r["scene"] == "floaty_jump_fixed")
    assert fixed["flights"][0]["verdict"].startswith("ballistic")


def test_simulate_and_bake_answer_for_the_scene_asked(demo_file, tmp_path):
    # Before: exit 0 with the chains and the frame range of the active scene.
    facts, active = _scene_facts(demo_file)
    sim = run_cli("simulate", demo_file, "--scene", "floaty_jump", "--json")
    assert sim.returncode == 0, sim.stderr
    d = json.loads(sim.stdout)
    assert (d["armature"], d["scene"]) == ("Wren_floaty_jump", "floaty_jump")
    assert (d["frame_start"], d["frame_end"]) == facts["floaty_jump"] != facts["good_jump"]
    out = tmp_path / "floaty_baked.blend"
    bake = run_cli("bake", demo_file, "--scene", "floaty_jump", "--out", str(out), "--tolerance-deg", "0", "--json")
    assert bake.returncode == 0, bake.stderr
    b = json.loads(bake.stdout)
    assert b["scene"] == "floaty_jump" and b["frames"] == facts["floaty_jump"][1] - facts["floaty_jump"][0] + 1
    assert b["keys_written"] == b["keys_before"]  # tolerance 0: every frame keyed
    bpy.ops.wm.open_mainfile(filepath=str(out), load_ui=False, use_scripts=False)
    # The demo baked both rigs with key reduction; only the floaty rig was baked again (every frame).
    rebaked = {o.name: f"{b['keys_written']} keys" in o.overlap_assist.last_bake
               for o in bpy.data.objects if o.type == 'ARMATURE'}
    assert rebaked == {"Wren_floaty_jump": True, "Wren_good_jump": False, "Wren_floaty_jump_fixed": False}
    assert bpy.context.window.scene.name == active  # the file's active scene is left as it was


def test_simulate_lists_the_candidates_when_ambiguous(demo_file):
    line = one_error(run_cli("simulate", demo_file), "choose one with --armature")
    assert "Wren_floaty_jump" in line and "Wren_good_jump" in line
    one_error(run_cli("analyze", demo_file, "--scene", "nonesuch"), "scenes in the file: floaty_jump, floaty_jump_fixed, good_jump")
    one_error(run_cli("analyze", demo_file, "--scene", "good_jump", "--armature", "Wren_floaty_jump"),
              "no armature named 'Wren_floaty_jump' in scene 'good_jump'")


def test_batch_takes_the_demo_file(demo_file, tmp_path):
    # Before: "several armatures" and batch had no --armature.
    out = tmp_path / "out"
    proc = run_cli("batch", demo_file, "--out", str(out))
    assert proc.returncode == 0, proc.stdout + proc.stderr
    (row,) = json.loads((out / "batch_log.json").read_text())["rows"]
    assert row["status"] == "ok"
    for rig in ("Wren_good_jump", "Wren_floaty_jump"):
        assert json.loads((out / f"overlap_demo.{rig}.analysis.json").read_text())["flights"]
    report = (out / "overlap_demo.report.html").read_text()
    assert "Wren_good_jump (scene good_jump)" in report and "Wren_floaty_jump (scene floaty_jump)" in report
    one = run_cli("batch", demo_file, "--out", str(tmp_path / "one"), "--scene", "floaty_jump",
                  "--armature", "Wren_floaty_jump")
    assert one.returncode == 0, one.stdout + one.stderr
    assert (tmp_path / "one" / "overlap_demo.analysis.json").is_file()


KEY_ROOT = """
import numpy as np
from overlap_assist.core.jump_curves import JumpSpec, jump_events, jump_position
ev = jump_events(JumpSpec())
frames = 1 + np.arange(int(np.ceil(ev["duration_s"] * 24)) + 1)
pos = jump_position(JumpSpec(), (frames - 1) / 24.0)
# The root control carries the whole rig, feet included (keying only the torso would leave the
# IK feet planted: no foot leaves the ground, so no flight is the right answer there).
pb = rig.pose.bones["root"]
for f, p in zip(frames, pos - pos[0]):
    pb.location = tuple(p)
    pb.keyframe_insert("location", frame=int(f))
bpy.context.scene.frame_start, bpy.context.scene.frame_end = 1, int(frames[-1])
"""


def test_rigify_file_with_metarig_and_rig(tmp_path):
    """Bundled Rigify (metarig + generated rig, the root control keyed): analyze and batch take the rig."""
    path = tmp_path / "hero_rigify.blend"
    generate_rigify_file(path, after_generate=KEY_ROOT)   # metarig kept: the file holds both
    out = tmp_path / "out"
    batch = run_cli("batch", str(path), "--out", str(out))
    assert batch.returncode == 0, batch.stdout + batch.stderr
    d = json.loads((out / "hero_rigify.analysis.json").read_text())
    assert d["armature"] == "rig" and d["flights"]  # not the metarig, which does not move
    ev = jump_events(JumpSpec())
    assert d["flights"][0]["takeoff_frame"] == pytest.approx(1 + 24 * ev["takeoff_s"], abs=1.0)


def _key_object_jump(ob, spec=JumpSpec()):
    """Key ``ob``'s location with the analytic jump (metres), one key per frame; returns the events."""
    scene = bpy.context.scene
    ev = jump_events(spec)
    frames = 1 + np.arange(int(np.ceil(ev["duration_s"] * 24)) + 1)
    pos = jump_position(spec, (frames - 1) / 24.0)
    for f, p in zip(frames, pos - pos[0]):
        ob.location = tuple(p)
        ob.keyframe_insert("location", frame=int(f))
    scene.frame_start, scene.frame_end = 1, int(frames[-1])
    return ev


@pytest.mark.parametrize("how", ["parent", "child_of", "object"])
def test_rig_moved_by_its_parent_a_child_of_or_the_object_is_analyzed(tmp_path, how):
    # Before: "has no animation" for the parent and Child Of cases (only the armature's own action counted).
    bpy.context.scene.gravity = (0, 0, -9.80665)
    bpy.context.scene.render.fps = 24
    obj = build_armature("Hero", bones=HUMANOID_BONES)
    if how == "object":
        ev = _key_object_jump(obj)
    else:
        mover = bpy.data.objects.new("Mover", None)
        bpy.context.scene.collection.objects.link(mover)
        ev = _key_object_jump(mover)
        if how == "parent":
            obj.parent = mover
        else:
            c = obj.constraints.new('CHILD_OF')
            c.target = mover
            c.inverse_matrix.identity()
    path = tmp_path / f"{how}.blend"
    bpy.ops.wm.save_as_mainfile(filepath=str(path), copy=True)
    proc = run_cli("analyze", str(path), "--json")
    assert proc.returncode == 0, proc.stderr
    (fl,) = json.loads(proc.stdout)["flights"]
    assert fl["takeoff_frame"] == pytest.approx(1 + 24 * ev["takeoff_s"], abs=1.0)
    assert fl["verdict"].startswith("ballistic")


def test_stored_frame_ranges_are_honored(tmp_path):
    # Before: simulate and bake used the scene's range, whatever range the file stored for the bake.
    obj = tail_jumper()
    s = obj.overlap_assist
    s.bake_use_range, s.bake_frame_start, s.bake_frame_end = True, 5, 40
    s.body.use_frame_range, s.body.frame_start, s.body.frame_end = True, 3, 45
    path = tmp_path / "ranged.blend"
    bpy.ops.wm.save_as_mainfile(filepath=str(path), copy=True)
    sim = run_cli("simulate", str(path), "--json")
    assert sim.returncode == 0, sim.stderr
    d = json.loads(sim.stdout)
    assert (d["frame_start"], d["frame_end"]) == (5, 40)
    bake = run_cli("bake", str(path), "--out", str(tmp_path / "b.blend"), "--json")
    assert bake.returncode == 0, bake.stderr
    assert json.loads(bake.stdout)["frames"] == 36
    an = run_cli("analyze", str(path), "--json")
    frames = json.loads(an.stdout)["frames"]
    assert (frames[0], frames[-1]) == (3.0, 45.0)


def test_the_timeline_preview_range_does_not_cut_the_analysis_or_the_solve(tmp_path):
    # The preview range is a viewing window (Frame Flight sets it to one flight): without a stored
    # range, analyze and simulate still cover the scene's range, so the jump keeps its takeoff
    # and the chains the motion that led up to it.
    scene = bpy.context.scene
    tail_jumper()
    scene.use_preview_range, scene.frame_preview_start, scene.frame_preview_end = True, 30, 44
    path = tmp_path / "previewed.blend"
    try:
        bpy.ops.wm.save_as_mainfile(filepath=str(path), copy=True)
    finally:
        scene.use_preview_range = False
    sim = run_cli("simulate", str(path), "--json")
    assert sim.returncode == 0, sim.stderr
    d = json.loads(sim.stdout)
    assert (d["frame_start"], d["frame_end"]) == (scene.frame_start, scene.frame_end)
    an = run_cli("analyze", str(path), "--json")
    assert an.returncode == 0, an.stderr
    a = json.loads(an.stdout)
    assert (a["frames"][0], a["frames"][-1]) == (float(scene.frame_start), float(scene.frame_end))
    assert a["flights"] and a["flights"][0]["takeoff_frame"] < 30
