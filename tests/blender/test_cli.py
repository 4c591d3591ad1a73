"""Headless commands in a separate process: JSON output, clear errors, files never changed."""
import json
import os
import pathlib
import blender_helpers
import bpy
import pytest
from blender_helpers import make_malicious_blend

from overlap_assist.blender.demo_scene import build_armature, key_jump
from overlap_assist.core.jump_curves import JumpSpec, jump_events

ROOT = pathlib.Path(__file__).resolve().parents[2]


def run_cli(*args, timeout=300):
    proc = blender_helpers.run_cli(*args, timeout=timeout)
    return proc.returncode, proc.stdout, proc.stderr


def save(path):
    bpy.ops.wm.save_as_mainfile(filepath=str(path), copy=True)
    return str(path)


@pytest.fixture
def jump_file(tmp_path):
    bpy.context.scene.gravity = (0, 0, -9.80665)
    obj = build_armature("Hero")
    key_jump(obj, JumpSpec(), keys_per_frame=4)
    return save(tmp_path / "jump.blend")


def test_analyze_json_has_the_documented_keys_and_leaves_the_file_alone(jump_file):
    before = pathlib.Path(jump_file).read_bytes()
    rc, out, err = run_cli("analyze", jump_file, "--json")
    assert rc == 0, err
    d = json.loads(out)  # stdout is exactly one JSON object (Blender's chatter goes to stderr)
    for key in ("fps", "unit_scale", "gravity_mps2", "body_source", "frames", "load_factor", "phases",
                "flights", "landings", "warnings"):
        assert key in d
    (fl,) = d["flights"]
    ev = jump_events(JumpSpec())
    assert fl["takeoff_frame"] == pytest.approx(1 + 24 * ev["takeoff_s"], abs=0.5)
    assert isinstance(fl["takeoff_frame"], float) and not float(fl["takeoff_frame"]).is_integer()
    assert {p["name"] for p in d["phases"]} >= {"unweighting", "braking", "propulsion", "flight", "landing"}
    assert pathlib.Path(jump_file).read_bytes() == before


def test_analyze_with_com_body(jump_file):
    rc, out, err = run_cli("analyze", jump_file, "--json", "--body", "com")
    assert rc == 0, err
    assert json.loads(out)["body_source"] == "com"


def _one_clear_line(rc, err, fragment):
    assert rc != 0
    lines = [ln for ln in err.splitlines() if ln.startswith("overlap_assist: error:")]
    assert len(lines) == 1 and fragment in lines[0], err
    assert "Traceback" not in err


def test_missing_file(tmp_path):
    rc, _, err = run_cli("analyze", str(tmp_path / "nope.blend"))
    _one_clear_line(rc, err, "no such file")


def test_corrupt_file(tmp_path):
    bad = tmp_path / "bad.blend"
    bad.write_bytes(b"BLENDER-v405" + os.urandom(200))
    rc, _, err = run_cli("analyze", str(bad))
    _one_clear_line(rc, err, "cannot read")


def test_unknown_armature_lists_candidates(jump_file):
    rc, _, err = run_cli("analyze", jump_file, "--armature", "Villain")
    _one_clear_line(rc, err, "Hero")


def test_several_armatures_need_a_choice(tmp_path):
    build_armature("A")
    build_armature("B")
    rc, _, err = run_cli("analyze", save(tmp_path / "two.blend"))
    _one_clear_line(rc, err, "A, B")


def test_no_animation(tmp_path):
    build_armature("Still")
    rc, _, err = run_cli("analyze", save(tmp_path / "still.blend"))
    _one_clear_line(rc, err, "has no animation")


def test_range_too_short(tmp_path):
    obj = build_armature("Hero")
    key_jump(obj, JumpSpec())
    s = obj.overlap_assist.body
    s.use_frame_range, s.frame_start, s.frame_end, s.smoothing_window = True, 25, 26, 4.0
    rc, _, err = run_cli("analyze", save(tmp_path / "short.blend"))
    _one_clear_line(rc, err, "smoothing window")


def test_embedded_scripts_never_run(tmp_path):
    """A file with a registered text block and a Python-expression driver that would write a file."""
    marker = tmp_path / "pwned.txt"
    blend = tmp_path / "evil.blend"
    make_malicious_blend(blend, marker)
    rc, out, err = run_cli("analyze", str(blend), "--json")
    assert rc == 0, err
    assert not marker.exists(), marker.read_text()


@pytest.fixture
def tail_file(tmp_path):
    from overlap_assist.blender.demo_scene import HUMANOID_BONES
    tail = (("tail.001", "hips", (0, 0.08, 0.98), (0, 0.20, 0.90)),
            ("tail.002", "tail.001", (0, 0.20, 0.90), (0, 0.30, 0.78)),
            ("tail.003", "tail.002", (0, 0.30, 0.78), (0, 0.36, 0.64)))
    bpy.context.scene.gravity = (0, 0, -9.80665)
    obj = build_armature("Hero", bones=HUMANOID_BONES + tail)
    key_jump(obj, JumpSpec(forward_mps=1.0, after_s=3.5))
    return save(tmp_path / "tail.blend")


def test_simulate_json_per_chain(tail_file):
    rc, out, err = run_cli("simulate", tail_file, "--chain", "tail.001,tail.002,tail.003", "--preset", "heavy_tail",
                           "--json")
    assert rc == 0, err
    (row,) = json.loads(out)["chains"]
    assert row["chain"] == "tail.001" and row["bones"] == 3
    assert 5 < row["max_swing_deg"] < 180
    assert row["settle_frame_after_landing"] is not None
    assert row["settle_frame_after_landing"] > row["last_touchdown_frame"]


def test_simulate_physical_overrides_change_the_result(tail_file):
    chain = ("--chain", "tail.001,tail.002,tail.003", "--json")
    _, soft, _ = run_cli("simulate", tail_file, *chain, "--frequency-hz", "0.8", "--damping-ratio", "0.1")
    _, stiff, _ = run_cli("simulate", tail_file, *chain, "--frequency-hz", "8", "--damping-ratio", "1")
    assert json.loads(soft)["chains"][0]["max_swing_deg"] > json.loads(stiff)["chains"][0]["max_swing_deg"]


@pytest.mark.parametrize("args,fragment", [
    ((), "has no chains"),
    (("--chain", "tail.001,nope"), "no bone named nope"),
    (("--chain", "tail.001", "--preset", "nonesuch"), "no preset named"),
    (("--chain", "tail.001", "--damping-ratio", "50"), "--damping-ratio 50 is outside 0–2"),
])
def test_simulate_bad_input(tail_file, args, fragment):
    rc, _, err = run_cli("simulate", tail_file, *args)
    _one_clear_line(rc, err, fragment)


def test_bake_writes_a_new_file_and_leaves_the_input(tail_file, tmp_path):
    before = pathlib.Path(tail_file).read_bytes()
    out_path = tmp_path / "baked.blend"
    rc, out, err = run_cli("bake", tail_file, "--out", str(out_path), "--chain", "tail.001,tail.002,tail.003",
                           "--preset", "heavy_tail", "--json")
    assert rc == 0, err
    d = json.loads(out)
    assert d["keys_written"] < d["keys_before"] and d["bones"] == ["tail.001", "tail.002", "tail.003"]
    assert pathlib.Path(tail_file).read_bytes() == before
    assert not [p for p in tmp_path.iterdir() if ".tmp" in p.name]
    bpy.ops.wm.open_mainfile(filepath=str(out_path), load_ui=False)
    obj = bpy.data.objects["Hero"]
    assert obj.animation_data.nla_tracks.get("Overlap Bake") is not None
    assert [c.bone_names() for c in obj.overlap_assist.chains] == [["tail.001", "tail.002", "tail.003"]]


def test_bake_with_shared_key_frames_keys_each_bone_on_one_set_of_frames(tail_file, tmp_path):
    chain = ("--chain", "tail.001,tail.002,tail.003", "--preset", "heavy_tail", "--json")
    rc, out, err = run_cli("bake", tail_file, "--out", str(tmp_path / "separate.blend"), *chain)
    assert rc == 0, err
    separate = json.loads(out)
    rc, out, err = run_cli("bake", tail_file, "--out", str(tmp_path / "shared.blend"), "--shared-key-frames", *chain)
    assert rc == 0, err
    shared = json.loads(out)
    assert shared["keys_written"] > separate["keys_written"] and shared["max_error_deg"] <= 0.5
    bpy.ops.wm.open_mainfile(filepath=str(tmp_path / "shared.blend"), load_ui=False)
    from overlap_assist.blender import anim_data, bake_layer
    act = bpy.data.actions[bake_layer.bake_action_name(bpy.data.objects["Hero"])]
    frames_by_bone = {}
    for fc in anim_data.all_action_fcurves(act):
        frames_by_bone.setdefault(fc.data_path, set()).add(tuple(k.co[0] for k in fc.keyframe_points))
    assert frames_by_bone and all(len(sets) == 1 for sets in frames_by_bone.values())


def test_batch_and_process_pass_the_key_layout_on():
    from overlap_assist import batch, cli
    args = cli.build_parser().parse_args(["process", "a.blend", "--out-dir", "o", "--stem", "a", "--shared-key-frames"])
    assert args.shared_key_frames is True
    assert cli.build_parser().parse_args(["batch", "a.blend", "--out", "o"]).shared_key_frames is False
    assert "--shared-key-frames" in batch.worker_command(["x"], "a.blend", "o", "a", None, shared_frames=True)
    assert "--shared-key-frames" not in batch.worker_command(["x"], "a.blend", "o", "a", None)


def test_free_pendulum_bake_with_stored_chains(tail_file, tmp_path):
    # Chains stored in the file are baked when no --chain is given.
    bpy.ops.wm.open_mainfile(filepath=tail_file, load_ui=False)
    c = bpy.data.objects["Hero"].overlap_assist.chains.add()
    c.name = "tail"
    for n in ("tail.001", "tail.002", "tail.003"):
        c.bones.add().name = n
    stored = save(tmp_path / "stored.blend")
    rc, out, err = run_cli("bake", stored, "--out", str(tmp_path / "free.blend"), "--frequency-hz", "0",
                           "--damping-ratio", "0", "--air-drag", "0", "--json")
    assert rc == 0, err
    assert json.loads(out)["bones"] == ["tail.001", "tail.002", "tail.003"]


@pytest.mark.parametrize("extra,fragment", [
    ((), "--out"),
    (("--out", "SAME"), "--in-place"),
    (("--out", "/no/such/dir/x.blend", "--chain", "tail.001"), "output folder does not exist"),
])
def test_bake_refuses_unsafe_outputs(tail_file, extra, fragment):
    extra = tuple(tail_file if a == "SAME" else a for a in extra)
    before = pathlib.Path(tail_file).read_bytes()
    rc, _, err = run_cli("bake", tail_file, *extra)
    _one_clear_line(rc, err, fragment)
    assert pathlib.Path(tail_file).read_bytes() == before
