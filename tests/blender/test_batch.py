"""Batch mode: worker processes, one failure does not stop the rest, skips up-to-date outputs,
never runs embedded scripts."""
import json
import pathlib

import bpy
from blender_helpers import make_malicious_blend, run_cli, tail_jumper


def make_clip(path, with_chain):
    bpy.ops.wm.read_factory_settings(use_empty=True)
    tail_jumper(with_chain)
    bpy.ops.wm.save_as_mainfile(filepath=str(path), copy=True)
    return str(path)


def test_batch_over_three_files_with_one_corrupt(tmp_path):
    src = tmp_path / "in"
    src.mkdir()
    make_clip(src / "a.blend", with_chain=True)
    make_clip(src / "b.blend", with_chain=False)
    (src / "c.blend").write_bytes(b"BLENDER-v405 this is not a blend file" * 10)
    out = tmp_path / "out"
    proc = run_cli("batch", str(src / "*.blend"), "--out", str(out), "--jobs", "2")
    assert proc.returncode == 1, proc.stderr[-2000:]
    log = json.loads((out / "batch_log.json").read_text())
    status = {pathlib.Path(r["input"]).name: r for r in log["rows"]}
    assert status["a.blend"]["status"] == "ok" and status["b.blend"]["status"] == "ok"
    assert status["c.blend"]["status"] == "failed" and "cannot read" in status["c.blend"]["message"]
    assert (out / "a.baked.blend").is_file() and not (out / "b.baked.blend").exists()
    for stem in ("a", "b"):
        assert "<svg" in (out / f"{stem}.report.html").read_text()
        assert json.loads((out / f"{stem}.analysis.json").read_text())["flights"]
    assert "2 processed, 0 up to date, 1 failed" in proc.stdout
    assert not [p for p in out.iterdir() if ".tmp" in p.name]
    # Re-running skips what is up to date; touching an input re-processes only that one.
    again = run_cli("batch", str(src / "a.blend"), str(src / "b.blend"), "--out", str(out))
    assert again.returncode == 0 and "0 processed, 2 up to date, 0 failed" in again.stdout
    make_clip(src / "b.blend", with_chain=True)
    third = run_cli("batch", str(src / "a.blend"), str(src / "b.blend"), "--out", str(out))
    assert "1 processed, 1 up to date, 0 failed" in third.stdout
    assert (out / "b.baked.blend").is_file()
    # Another key layout is another bake: the file again, each bone's channels on one set of frames.
    shared = run_cli("batch", str(src / "a.blend"), "--out", str(out), "--shared-key-frames")
    assert "1 processed, 0 up to date, 0 failed" in shared.stdout, shared.stdout
    bpy.ops.wm.open_mainfile(filepath=str(out / "a.baked.blend"), load_ui=False)
    from overlap_assist.blender import anim_data, bake_layer
    obj = next(o for o in bpy.data.objects if bake_layer.has_bake(o))
    frames_by_path = {}
    for fc in anim_data.all_action_fcurves(bake_layer.find_bake(obj)[2]):
        frames_by_path.setdefault(fc.data_path, set()).add(tuple(k.co[0] for k in fc.keyframe_points))
    assert frames_by_path and all(len(v) == 1 for v in frames_by_path.values())


def test_batch_never_runs_embedded_scripts(tmp_path):
    marker = tmp_path / "pwned.txt"
    blend = tmp_path / "evil.blend"
    make_malicious_blend(blend, marker)
    proc = run_cli("batch", str(blend), "--out", str(tmp_path / "out"))
    assert proc.returncode == 0, proc.stdout + proc.stderr[-2000:]
    for args in (("simulate", str(blend), "--chain", "hips"),
                 ("bake", str(blend), "--out", str(tmp_path / "b.blend"), "--chain", "hips")):
        run_cli(*args)
    assert not marker.exists(), marker.read_text()


def test_missing_input_is_reported_and_the_rest_continue(tmp_path):
    good = make_clip(tmp_path / "good.blend", with_chain=False)
    proc = run_cli("batch", good, str(tmp_path / "missing.blend"), "--out", str(tmp_path / "out"))
    assert proc.returncode == 1
    assert "1 processed, 0 up to date, 1 failed" in proc.stdout and "no such file" in proc.stdout
