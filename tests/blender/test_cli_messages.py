"""Messages in real Blender: stderr carries only our lines, one line per error, no traceback from the
CLI, batch or an operator (catch-all with details elsewhere), clear chain-bone errors; property
tests over random chain/collider settings and random bad paths."""
import contextlib
import json
import os
import pathlib
import subprocess
import sys
import tempfile
import textwrap

import bpy
import pytest
from blender_helpers import ROOT, op, run_cli
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from overlap_assist import batch, cli
from overlap_assist.blender import analyze
from overlap_assist.blender.demo_scene import HUMANOID_BONES, build_armature, key_jump
from overlap_assist.core.jump_curves import JumpSpec

TAIL = (("tail.001", "hips", (0, 0.08, 0.98), (0, 0.20, 0.90)),
        ("tail.002", "tail.001", (0, 0.20, 0.90), (0, 0.30, 0.78)),
        ("tail.003", "tail.002", (0, 0.30, 0.78), (0, 0.36, 0.64)))


def build_clip(chain_bones=("tail.001", "tail.002", "tail.003"), bones=HUMANOID_BONES + TAIL):
    bpy.context.scene.gravity = (0, 0, -9.80665)
    obj = build_armature("Hero", bones=bones)
    key_jump(obj, JumpSpec(forward_mps=1.0))
    if chain_bones:
        c = obj.overlap_assist.chains.add()
        c.name = "tail"
        for n in chain_bones:
            c.bones.add().name = n
    return obj


def save(path):
    bpy.ops.wm.save_as_mainfile(filepath=str(path), copy=True)
    return str(path)


def one_error(proc, fragment, status=2):
    assert proc.returncode == status, (proc.returncode, proc.stdout, proc.stderr)
    lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("overlap_assist: error:") and fragment in lines[0], proc.stderr
    assert "Traceback" not in proc.stderr + proc.stdout
    return lines[0]


@pytest.fixture
def clip_file(tmp_path):
    build_clip()
    return save(tmp_path / "clip.blend")


def test_stderr_carries_only_our_lines(clip_file, tmp_path):
    # Before: Blender's "Read blend: ..." and "Saved copy as ..." lines appeared on stderr.
    for args in (("analyze", clip_file), ("simulate", clip_file, "--json"),
                 ("bake", clip_file, "--out", str(tmp_path / "b.blend"))):
        proc = run_cli(*args)
        assert proc.returncode == 0 and proc.stderr == "", (args, proc.stderr)
    assert "Read blend" not in proc.stdout and "Saved" not in proc.stdout


def test_usage_errors_are_one_line(clip_file):
    one_error(run_cli("analyze"), "the following arguments are required: file")
    one_error(run_cli("bake", clip_file, "--tolerance-deg", "lots"), "invalid float value")


def test_a_stored_chain_naming_a_missing_bone_is_named(tmp_path):
    # Before: KeyError: 'tail.009' with a traceback.
    build_clip(chain_bones=("tail.001", "tail.009"))
    path = save(tmp_path / "renamed.blend")
    one_error(run_cli("simulate", path), "tail.009 not found")
    one_error(run_cli("bake", path, "--out", str(tmp_path / "b.blend")), "tail.009 not found")
    proc = run_cli("batch", path, "--out", str(tmp_path / "out"))
    (row,) = json.loads((tmp_path / "out" / "batch_log.json").read_text())["rows"]
    assert row["status"] == "failed" and "tail.009 not found" in row["message"] and "details" not in row


def test_a_long_chain_on_a_jumping_body_never_quotes_internal_names(tmp_path):
    # Before: "dirs contains NaN or infinite values" for chains of ~15+ bones.
    bones = [("hair.000", "head", (0, 0.0, 1.74), (0, 0.04, 1.70))]
    for k in range(1, 16):
        z = 1.70 - 0.04 * k
        bones.append((f"hair.{k:03d}", f"hair.{k - 1:03d}", (0, 0.04 * k, z + 0.04), (0, 0.04 * (k + 1), z)))
    build_clip(chain_bones=[b[0] for b in bones], bones=HUMANOID_BONES + tuple(bones))
    path = save(tmp_path / "long.blend")
    proc = run_cli("simulate", path, "--preset", "long_hair", "--json")
    assert "Traceback" not in proc.stderr
    if proc.returncode:
        line = one_error(proc, "")
        for name in ("dirs", "pivot_pos_m", "target_dirs"):
            assert f"{name} " not in line.replace("directions", ""), line
    else:
        assert json.loads(proc.stdout)["chains"][0]["bones"] == 16


INJECT = textwrap.dedent("""
    import sys
    sys.path.insert(0, {root!r})
    from overlap_assist import cli
    def broken(*args, **kw):
        raise ZeroDivisionError("injected for the test")
    import overlap_assist.blender.analyze as analyze
    analyze.run_analysis = broken
    cli.COMMANDS["process"] = lambda args, io: broken()
    sys.exit(cli.main(sys.argv[1:], restore_streams=False))
""")


def test_an_unexpected_error_is_one_line_with_its_details_saved(clip_file, tmp_path):
    # Before: the traceback reached the user.
    code = INJECT.format(root=str(ROOT))
    proc = subprocess.run([sys.executable, "-c", code, "analyze", clip_file], capture_output=True, text=True,
                          timeout=300, cwd=tmp_path)
    line = one_error(proc, "unexpected problem (ZeroDivisionError: injected for the test)", status=3)
    assert "please report it" in line
    details = pathlib.Path(line.split("details saved in ")[1].rstrip(")"))
    try:
        text = details.read_text()
        assert "Traceback" in text and "ZeroDivisionError" in text and "analyze" in text
    finally:
        details.unlink()


def test_an_unexpected_error_in_a_batch_worker_goes_to_the_log(clip_file, tmp_path):
    prefix = [sys.executable, "-c", INJECT.format(root=str(ROOT))]
    out = tmp_path / "out"
    out.mkdir()
    row = batch.run_one(prefix, clip_file, str(out), "clip", None)
    assert row["status"] == "failed"
    assert "unexpected problem" in row["message"] and "batch_log.json" in row["message"]
    assert "Traceback" not in row["message"] and "ZeroDivisionError" in row["details"]
    assert "Traceback" in row["details"]
    assert not [p for p in pathlib.Path(tempfile.gettempdir()).glob(".overlap_assist-details-*")
                if p.stat().st_mtime > os.stat(clip_file).st_mtime]


def test_an_operator_never_shows_a_traceback(monkeypatch):
    # Before: bpy.ops raised with the whole Python traceback as the error text.
    obj = build_clip()

    def broken(*args, **kw):
        raise ZeroDivisionError("injected for the test")

    monkeypatch.setattr(analyze, "run_analysis", broken)
    with pytest.raises(RuntimeError) as info:
        op(obj, "analyze_motion")
    text = str(info.value)
    assert "Traceback" not in text and "File \"" not in text
    assert "Analyze Body Motion stopped on an unexpected problem (ZeroDivisionError: injected for the test)" in text
    assert "please report it" in text


# ---------------------------------------------------------------- property tests

@contextlib.contextmanager
def captured_fds():
    """stdout/stderr of this process at the OS level, as text after the block (for in-process main)."""
    files = [tempfile.TemporaryFile(), tempfile.TemporaryFile()]
    saved = [os.dup(1), os.dup(2)]
    result = {}
    sys.stdout.flush()
    sys.stderr.flush()
    try:
        os.dup2(files[0].fileno(), 1)
        os.dup2(files[1].fileno(), 2)
        yield result
    finally:
        sys.stdout.flush()
        sys.stderr.flush()
        os.dup2(saved[0], 1)
        os.dup2(saved[1], 2)
        for fd in saved:
            os.close(fd)
        for key, f in zip(("out", "err"), files):
            f.seek(0)
            result[key] = f.read().decode("utf-8", "replace")
            f.close()


def run_main(argv):
    with captured_fds() as got:
        rc = cli.main(list(argv))
    return rc, got["out"], got["err"]


@pytest.fixture(scope="module")
def bad_paths(tmp_path_factory):
    root = tmp_path_factory.mktemp("bad")
    (root / "folder.blend").mkdir()
    (root / "garbage.blend").write_bytes(b"BLENDER-v405" + bytes(range(256)) * 4)
    (root / "empty.blend").write_bytes(b"")
    (root / "text.blend").write_text("not a blend file\n")
    (root / "loop.blend").symlink_to(root / "loop.blend")
    (root / "dangling.blend").symlink_to(root / "nowhere.blend")
    ro = root / "readonly"
    ro.mkdir()
    os.chmod(ro, 0o555)
    build_clip()
    good = save(root / "good.blend")
    yield {"root": root, "good": good,
           "inputs": [str(root / n) for n in ("folder.blend", "garbage.blend", "empty.blend", "text.blend",
                                              "loop.blend", "dangling.blend", "missing.blend")]
           + ["", " ", str(root / "weird name é ☃.blend"), "/dev/null", str(ro)],
           "outs": [str(root / "folder.blend"), str(ro / "x.blend"), str(ro), good, str(root / "no" / "such" / "x.blend"),
                    str(root / "loop.blend"), "", str(root / "garbage.blend") + "/x.blend"]}
    os.chmod(ro, 0o755)


@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_random_bad_paths_never_produce_a_traceback(bad_paths, data):
    command = data.draw(st.sampled_from(["analyze", "simulate", "bake_in", "bake_out", "batch_out"]))
    if command in ("analyze", "simulate", "bake_in"):
        path = data.draw(st.sampled_from(bad_paths["inputs"]))
        argv = {"analyze": ["analyze", path], "simulate": ["simulate", path, "--chain", "tail.001"],
                "bake_in": ["bake", path, "--in-place"]}[command]
    elif command == "bake_out":
        argv = ["bake", bad_paths["good"], "--out", data.draw(st.sampled_from(bad_paths["outs"]))]
        argv += data.draw(st.sampled_from([[], ["--in-place"]]))
    else:
        root = bad_paths["root"]
        argv = ["batch", bad_paths["good"], "--out", data.draw(st.sampled_from(
            [str(root / "readonly"), str(root / "readonly" / "sub"), bad_paths["good"],
             str(root / "garbage.blend" / "x")]))]
    before = pathlib.Path(bad_paths["good"]).read_bytes()
    rc, out, err = run_main(argv)
    assert rc == 2, (argv, rc, err)
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("overlap_assist: error:"), (argv, err)
    assert "Traceback" not in err + out
    assert pathlib.Path(bad_paths["good"]).read_bytes() == before


def _ui_range(group, name):
    p = group.bl_rna.properties[name]
    return p.hard_min, p.hard_max


@settings(max_examples=12, deadline=None)
@given(data=st.data())
def test_random_chain_and_collider_settings_never_produce_a_traceback(data):
    """Any value the sliders allow, through the Bake operator: it bakes, or says one clear thing."""
    bpy.ops.wm.read_factory_settings(use_empty=True)
    obj = build_clip()
    chain = obj.overlap_assist.chains[0]
    for name in ("frequency_hz", "damping_ratio", "tip_looseness", "gravity_scale", "body_response", "air_drag",
                 "bend_limit", "collision_radius", "lag_frames", "settle_frames", "bounce"):
        lo, hi = _ui_range(chain, name)
        setattr(chain, name, data.draw(st.floats(lo, hi, allow_nan=False), label=name))
    lo, hi = _ui_range(chain, "substeps")
    chain.substeps = data.draw(st.integers(lo, min(hi, 8)), label="substeps")
    chain.response_mode = data.draw(st.sampled_from(["ANIMATOR", "PHYSICAL"]), label="response_mode")
    for _ in range(data.draw(st.integers(0, 2), label="colliders")):
        col = obj.overlap_assist.colliders.add()
        col.bone = data.draw(st.sampled_from(["spine", "head", "thigh.L", "nonesuch"]), label="collider bone")
        col.shape = data.draw(st.sampled_from(["SPHERE", "CAPSULE"]), label="shape")
        lo, hi = _ui_range(col, "radius")
        col.radius = data.draw(st.floats(lo, hi, allow_nan=False), label="radius")
    obj.overlap_assist.use_ground = data.draw(st.booleans(), label="ground")
    try:
        result = op(obj, "bake_chains")
    except RuntimeError as exc:
        text = str(exc)
        assert "Traceback" not in text and "unexpected problem" not in text, text
        assert text.strip(), "an error says what to do"
    else:
        assert result == {'FINISHED'}
