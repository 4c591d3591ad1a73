"""Batch processing of many .blend files, each in its own worker process.

Each input is analyzed and, when it has chains, baked; the outputs (``<stem>.analysis.json``,
``<stem>.report.html``, ``<stem>.baked.blend``, ``<stem>.stamp.json``) are written atomically into
the output folder, with ``batch_log.json`` for the whole run. One file's failure is reported and
the rest go on; an unexpected error in a worker is one line in the table, its details go to
``batch_log.json``. A stamp per input records what produced its outputs, so re-running skips
files whose outputs are up to date, and files the batch wrote itself are never read as inputs.
Workers open files with scripts disabled (see cli.open_blend).
"""
import concurrent.futures
import glob
import hashlib
import json
import os
import subprocess
import sys
import tempfile
import time
import traceback

STAMP_SUFFIX = ".stamp.json"
EXIT_UNEXPECTED = 3
"""A worker's exit status for an unexpected error (cli.EXIT_UNEXPECTED)."""
WORKER_TIMEOUT_S = 1800
"""A single file that takes longer than this is stopped and reported (a hung or huge scene)."""


OUTPUT_SUFFIXES = (".baked.blend", ".fixed.blend", ".analysis.json", ".report.html", STAMP_SUFFIX)
"""Names of the files a batch writes (never read back as inputs)."""


def cpu_count() -> int:
    """CPUs this process may use (the default and the maximum of --jobs)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def own_outputs(out_dir):
    """Real paths of the files earlier runs of a batch wrote into ``out_dir`` (from the stamps and by name)."""
    found = set()
    try:
        names = os.listdir(out_dir)
    except OSError:
        return found
    for name in names:
        path = os.path.join(out_dir, name)
        if name.endswith(OUTPUT_SUFFIXES):
            found.add(os.path.realpath(path))
        if name.endswith(STAMP_SUFFIX):
            try:
                with open(path, encoding="utf-8") as f:
                    stamp = json.load(f)
                found.update(os.path.realpath(os.path.join(out_dir, o)) for o in stamp.get("outputs", []))
            except (OSError, ValueError, AttributeError, TypeError):
                pass
    return found


def expand_inputs(patterns):
    """Paths from paths and globs, in order, without repeats; unmatched patterns are kept (they fail clearly)."""
    seen, out = set(), []
    for pat in patterns:
        matches = sorted(glob.glob(pat)) if glob.has_magic(pat) else [pat]
        for p in matches or [pat]:
            key = os.path.abspath(p)
            if key not in seen:
                seen.add(key)
                out.append(p)
    return out


def output_stems(paths):
    """A distinct output name per input (same file names in different folders get _2, _3...)."""
    stems, used = [], {}
    for p in paths:
        stem = os.path.splitext(os.path.basename(p))[0] or "clip"
        n = used.get(stem, 0) + 1
        used[stem] = n
        stems.append(stem if n == 1 else f"{stem}_{n}")
    return stems


def file_digest(path):
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def stamp_for(path, preset_file):
    version = _tool_version()
    return {"input": os.path.abspath(path), "input_sha256": file_digest(path),
            "preset_sha256": file_digest(preset_file) if preset_file else None, "tool_version": version}


def _tool_version():
    manifest = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "blender_manifest.toml")
    here = os.path.join(os.path.dirname(os.path.abspath(__file__)), "blender_manifest.toml")
    for m in (here, manifest):
        if os.path.isfile(m):
            for line in open(m, encoding="utf-8"):
                if line.startswith("version"):
                    return line.split("=", 1)[1].strip().strip('"')
    return "unknown"


def up_to_date(out_dir, stem, stamp):
    path = os.path.join(out_dir, stem + STAMP_SUFFIX)
    try:
        with open(path, encoding="utf-8") as f:
            old = json.load(f)
    except (OSError, ValueError):
        return False
    outputs = old.get("outputs", [])
    return (all(old.get(k) == v for k, v in stamp.items()) and outputs
            and all(os.path.isfile(os.path.join(out_dir, o)) for o in outputs))


def worker_prefix():
    """How to start a worker. Decided once, on the main thread (never import bpy from a thread)."""
    bpy = sys.modules.get("bpy")  # inside Blender it is already imported; never import it just to ask
    binary = getattr(getattr(bpy, "app", None), "binary_path", "") if bpy else ""
    if binary and os.path.basename(binary).lower().startswith("blender"):
        # Inside Blender: a background Blender runs the same command through the extension hook.
        return [binary, "--background", "--factory-startup", "--command", "overlap_assist"]
    return [sys.executable, "-m", "overlap_assist"]


def worker_command(prefix, path, out_dir, stem, preset_file, scene=None, armature=None, details_file=None,
                   fix=False, shared_frames=False):
    args = ["process", path, "--out-dir", out_dir, "--stem", stem]
    if preset_file:
        args += ["--preset-file", preset_file]
    if scene:
        args += ["--scene", scene]
    if armature:
        args += ["--armature", armature]
    if details_file:
        args += ["--details-file", details_file]
    if fix:
        args.append("--fix")
    if shared_frames:
        args.append("--shared-key-frames")
    return [*prefix, *args]


BUG_HINT = "this is a bug in Overlap Assist: please report it with the file and batch_log.json"


def run_one(prefix, path, out_dir, stem, preset_file, scene=None, armature=None, fix=False, shared_frames=False):
    """Process one input in a worker process; returns a log row (unexpected errors: ``details``)."""
    start = time.perf_counter()
    row = {"input": path, "stem": stem, "status": "failed", "message": "", "seconds": 0.0}
    details = None
    try:
        if os.path.isdir(path):
            row["message"] = f"{path} is a folder, not a .blend file: give {os.path.join(path, '*.blend')}"
            return row
        if not os.path.isfile(path):
            row["message"] = f"no such file: {path}"
            return row
        stamp = stamp_for(path, preset_file)
        stamp.update(scene=scene, armature=armature)
        stamp["fix"] = bool(fix)
        stamp["shared_key_frames"] = bool(shared_frames)   # a change of layout bakes again
        if up_to_date(out_dir, stem, stamp):
            row.update(status="skipped", message="outputs up to date")
            return row
        fd, details = tempfile.mkstemp(prefix=".overlap_assist-details-", suffix=".txt")
        os.close(fd)
        proc = subprocess.run(worker_command(prefix, path, out_dir, stem, preset_file, scene, armature, details, fix,
                                             shared_frames),
                              capture_output=True, text=True, timeout=WORKER_TIMEOUT_S, stdin=subprocess.DEVNULL)
        if proc.returncode != 0:
            lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
            errors = [ln for ln in lines if "overlap_assist: error:" in ln]
            message = (errors or [f"the worker stopped with status {proc.returncode}"])[-1]
            message = message.replace("overlap_assist: error: ", "")
            text = _read(details)
            if text or not errors or proc.returncode == EXIT_UNEXPECTED:
                # Unexpected: one line in the table, the details (traceback, Blender's log) in batch_log.json.
                row["details"] = text or (proc.stderr[-20000:] + proc.stdout[-2000:])
                message = f"{message.split('; this is a bug')[0]}; {BUG_HINT}"
            row["message"] = message
            return row
        result = json.loads(proc.stdout.strip().splitlines()[-1])
        stamp["outputs"] = result["outputs"]
        write_json_atomic(os.path.join(out_dir, stem + STAMP_SUFFIX), stamp)
        row.update(status="ok", message=result.get("summary", ""), outputs=result["outputs"])
    except subprocess.TimeoutExpired:
        row["message"] = f"took longer than {WORKER_TIMEOUT_S} s and was stopped"
    except OSError as exc:
        row["message"] = f"cannot use {exc.filename or path}: {exc.strerror or exc}"
    except Exception as exc:  # noqa: BLE001 - one file's unexpected error never stops the batch
        row["message"] = f"unexpected problem ({type(exc).__name__}: {exc}); {BUG_HINT}"
        row["details"] = traceback.format_exc()
    finally:
        if details and os.path.exists(details):
            os.remove(details)
        row["seconds"] = round(time.perf_counter() - start, 2)
    return row


def _read(path):
    try:
        with open(path, encoding="utf-8", errors="replace") as f:
            return f.read()
    except (OSError, TypeError):
        return ""


def write_json_atomic(path, data):
    tmp = f"{path}.tmp{os.getpid()}"
    with open(tmp, "w", encoding="utf-8") as f:
        json.dump(data, f, indent=1)
    os.replace(tmp, path)


def run_batch(patterns, out_dir, preset_file=None, jobs=None, out=sys.stdout, scene=None, armature=None, fix=False,
              shared_frames=False):
    """Process every input; returns (rows, exit status). Prints a summary table to ``out``.

    ``jobs``: worker processes at once (default and maximum: the CPU count). Files this batch
    wrote into ``out_dir`` (outputs of earlier runs) are left out of the inputs. ``fix``: each
    worker also fixes the flights and writes ``<stem>.fixed.blend``. ``shared_frames``: bake with
    all rotation channels of a bone keyed on the same frames.
    """
    out_dir = os.path.abspath(out_dir)
    os.makedirs(out_dir, exist_ok=True)
    ours = own_outputs(out_dir)
    paths, left_out = [], []
    for p in expand_inputs(patterns):
        (left_out if os.path.realpath(p) in ours else paths).append(p)
    if left_out:
        out.write(f"not read as inputs: {len(left_out)} file{'s' if len(left_out) > 1 else ''} this batch wrote "
                  f"({', '.join(os.path.basename(p) for p in left_out[:5])}{', ...' if len(left_out) > 5 else ''})\n")
    stems = output_stems(paths)
    jobs = max(1, min(jobs or cpu_count(), cpu_count(), len(paths) or 1))
    prefix = worker_prefix()
    with concurrent.futures.ThreadPoolExecutor(max_workers=jobs) as pool:
        futures = [pool.submit(run_one, prefix, p, out_dir, s, preset_file, scene, armature, fix, shared_frames)
                   for p, s in zip(paths, stems)]
        rows = [f.result() for f in futures]
    width = max([len(r["input"]) for r in rows] + [5])
    out.write(f"{'input':<{width}}  {'status':<8} {'time':>7}  message\n")
    for r in rows:
        out.write(f"{r['input']:<{width}}  {r['status']:<8} {r['seconds']:6.1f}s  {r['message']}\n")
    counts = {k: sum(r["status"] == k for r in rows) for k in ("ok", "skipped", "failed")}
    out.write(f"{counts['ok']} processed, {counts['skipped']} up to date, {counts['failed']} failed\n")
    write_json_atomic(os.path.join(out_dir, "batch_log.json"),
                      {"inputs": len(rows), **counts, "not_read_as_inputs": left_out, "jobs": jobs, "rows": rows,
                       "caution": "figures are for animation plausibility only"})
    return rows, (1 if counts["failed"] else 0)
