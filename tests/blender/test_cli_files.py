"""File safety of the headless commands in real Blender: --in-place, compression, output checks,
batch never re-reading its own outputs, --jobs, folders given as inputs."""
import json
import os
import pathlib
import stat

import bpy
import pytest
from blender_helpers import run_cli, tail_jumper

from overlap_assist import outputs

CHAIN = ("--chain", "tail.001,tail.002")


def cpu_count():
    """CPUs this process may use (what --jobs is capped at)."""
    return len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()


def one_error(proc, fragment):
    assert proc.returncode == 2, (proc.returncode, proc.stdout, proc.stderr)
    lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("overlap_assist: error:") and fragment in lines[0], proc.stderr
    assert "Traceback" not in proc.stderr + proc.stdout


def make_clip(path, compress=False, with_chain=True):
    bpy.ops.wm.read_factory_settings(use_empty=True)
    tail_jumper(with_chain)
    bpy.ops.wm.save_as_mainfile(filepath=str(path), copy=True, compress=compress)
    return str(path)


def has_bake(path):
    bpy.ops.wm.open_mainfile(filepath=str(path), load_ui=False, use_scripts=False)
    found = bpy.data.objects["Hero"].animation_data.nla_tracks.get("Overlap Bake") is not None
    bpy.ops.wm.read_factory_settings(use_empty=True)
    return found


@pytest.fixture
def clip(tmp_path):
    return make_clip(tmp_path / "clip.blend")


def test_in_place_refuses_a_read_only_file(clip):
    # Before: the file was replaced and came back 0644.
    os.chmod(clip, 0o444)
    before = pathlib.Path(clip).read_bytes()
    try:
        one_error(run_cli("bake", clip, "--in-place"), "read-only")
        assert stat.S_IMODE(os.stat(clip).st_mode) == 0o444
        assert pathlib.Path(clip).read_bytes() == before
    finally:
        os.chmod(clip, 0o644)


def test_in_place_follows_a_symlink_and_keeps_the_mode(clip, tmp_path):
    # Before: the symlink was replaced by a plain file and the real file kept the old content.
    os.chmod(clip, 0o640)
    link = tmp_path / "shot_link.blend"
    link.symlink_to(clip)
    proc = run_cli("bake", str(link), "--in-place")
    assert proc.returncode == 0, proc.stderr
    assert link.is_symlink() and os.readlink(link) == clip
    assert stat.S_IMODE(os.stat(clip).st_mode) == 0o640
    assert has_bake(clip)
    assert not [p for p in tmp_path.iterdir() if ".tmp" in p.name]


@pytest.mark.parametrize("compress", [True, False])
def test_outputs_are_compressed_like_their_input(tmp_path, compress):
    # Before: every output was written uncompressed (92 KB zstd input -> 593 KB output).
    src = make_clip(tmp_path / "src.blend", compress=compress)
    kind = outputs.blend_compression(src)
    assert kind == ("zstd" if compress else "none")  # Blender >= 3.0 compresses with Zstandard
    out = tmp_path / "out.blend"
    assert run_cli("bake", src, "--out", str(out)).returncode == 0
    assert outputs.blend_compression(out) == kind
    assert run_cli("bake", src, "--in-place").returncode == 0
    assert outputs.blend_compression(src) == kind
    batch = run_cli("batch", src, "--out", str(tmp_path / "batch"))
    assert batch.returncode == 0, batch.stdout + batch.stderr
    assert outputs.blend_compression(tmp_path / "batch" / "src.baked.blend") == kind


def test_in_place_with_out_is_an_error(clip, tmp_path):
    # Before: --out was silently ignored and the input overwritten.
    before = pathlib.Path(clip).read_bytes()
    one_error(run_cli("bake", clip, "--in-place", "--out", str(tmp_path / "x.blend")), "not both")
    assert pathlib.Path(clip).read_bytes() == before and not (tmp_path / "x.blend").exists()


@pytest.mark.parametrize("case,fragment", [
    ("read_only_folder", "read-only folder"),
    ("folder_as_out", "is a folder"),
    ("out_is_input_other_spelling", "--out is the input file"),
    ("out_is_input_by_symlink", "--out is the input file"),
    ("read_only_out_file", "read-only"),
])
def test_bake_output_problems_are_one_line(clip, tmp_path, case, fragment):
    # Before: tracebacks for a read-only folder, a folder as --out and --out equal to an input.
    ro = tmp_path / "ro"
    ro.mkdir()
    out = {"read_only_folder": str(ro / "x.blend"), "folder_as_out": str(ro),
           "out_is_input_other_spelling": str(tmp_path / "ro" / ".." / "clip.blend"),
           "out_is_input_by_symlink": str(tmp_path / "alias.blend"),
           "read_only_out_file": str(tmp_path / "locked.blend")}[case]
    if case == "out_is_input_by_symlink":
        (tmp_path / "alias.blend").symlink_to(clip)
    if case == "read_only_out_file":
        pathlib.Path(out).write_bytes(b"keep")
        os.chmod(out, 0o444)
    os.chmod(ro, 0o555)
    before = pathlib.Path(clip).read_bytes()
    try:
        one_error(run_cli("bake", clip, "--out", out, *CHAIN), fragment)
    finally:
        os.chmod(ro, 0o755)
    assert pathlib.Path(clip).read_bytes() == before
    assert list(ro.iterdir()) == []


def test_batch_output_folder_problems_are_one_line(clip, tmp_path):
    afile = tmp_path / "afile"
    afile.write_text("x")
    one_error(run_cli("batch", clip, "--out", str(afile)), "is a file, not a folder")
    ro = tmp_path / "ro"
    ro.mkdir()
    os.chmod(ro, 0o555)
    try:
        one_error(run_cli("batch", clip, "--out", str(ro)), "read-only")
        one_error(run_cli("batch", clip, "--out", str(ro / "sub")), "cannot create the output folder")
    finally:
        os.chmod(ro, 0o755)


def test_batch_into_the_input_folder_never_rebakes_its_outputs(tmp_path):
    # Before: good.baked.blend was read as an input on the next run (good.baked.baked.blend ...).
    make_clip(tmp_path / "good.blend")
    for run in range(2):
        proc = run_cli("batch", str(tmp_path / "*.blend"), "--out", str(tmp_path))
        assert proc.returncode == 0, proc.stdout + proc.stderr
    names = sorted(p.name for p in tmp_path.iterdir())
    assert not [n for n in names if ".baked.baked" in n or (n.startswith("good.baked.") and n != "good.baked.blend")]
    assert "not read as inputs: 1 file this batch wrote (good.baked.blend)" in proc.stdout
    assert "0 processed, 1 up to date, 0 failed" in proc.stdout


def test_jobs_default_to_and_are_capped_at_the_cpu_count(tmp_path):
    # Before: --jobs 64 started 64 workers on 2 CPUs.
    a = make_clip(tmp_path / "a.blend", with_chain=False)
    proc = run_cli("batch", a, "--out", str(tmp_path / "o1"), "--jobs", "64")
    assert proc.returncode == 0, proc.stderr
    assert f"--jobs 64 lowered to {cpu_count()}" in proc.stdout
    assert json.loads((tmp_path / "o1" / "batch_log.json").read_text())["jobs"] <= cpu_count()
    one_error(run_cli("batch", a, "--out", str(tmp_path / "o2"), "--jobs", "0"), "at least 1")


def test_a_folder_given_as_input_is_reported_as_a_folder(tmp_path):
    # Before: "no such file".
    folder = tmp_path / "shots"
    folder.mkdir()
    one_error(run_cli("analyze", str(folder)), "is a folder, not a .blend file")
    proc = run_cli("batch", str(folder), "--out", str(tmp_path / "out"))
    assert proc.returncode == 1
    (row,) = json.loads((tmp_path / "out" / "batch_log.json").read_text())["rows"]
    assert "is a folder" in row["message"] and "*.blend" in row["message"]
