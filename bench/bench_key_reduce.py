"""Benchmark of error-bounded key reduction; prints the numbers of one run.

Data: 100 curves x 1000 frames at 24 fps, each a rotation offset (degrees converted to radians)
that is kicked by four landings and rings down as a damped oscillation (0.5-3 Hz, damping ratio
0.05-0.4, 5-40 degrees), tolerance 0.5 degrees. The baseline is the same algorithm (slopes from
the data, split at the largest error) written as plain Python loops, one frame at a time, so the
ratio shows what the batched numpy formulation buys; both must produce the same keys.

Second part, the bake's reducer (``reduce_rotation_keys``, bounded by the true rotation angle):
Euler bones of 48 chains x 8 bones on a COMBINE layer (3 damped ring-down curves per bone),
250 / 1000 / 4000 frames: time per bone-frame (linear time shows as a flat column) and peak
memory measured with tracemalloc relative to the input values (the (frames, 3) float64 arrays);
and the same 250-frame motion at frames 1-250 and 20001-20250 (keys must not depend on it), with
the old shared-frame reducer's counts beside it.

Run:  python bench/bench_key_reduce.py
"""
from __future__ import annotations

import os
import pathlib
import platform
import statistics
import sys
import time
import tracemalloc

import numpy as np

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1]))
from overlap_assist.core.key_reduce import (  # noqa: E402
    FLOAT32_MARGIN_REL,
    RotationTrack,
    reduce_euler_groups,
    reduce_rotation_keys,
    reduce_curves,
    reduce_quaternion_curves,
)

N_CURVES = 100
N_FRAMES = 1000
FPS = 24.0
TOLERANCE_DEG = 0.5
RUNS = 5


def secondary_motion(n_curves: int, n_frames: int, seed: int = 0) -> np.ndarray:
    """Damped ring-downs after four landings per curve, radians, shape (n_curves, n_frames)."""
    rng = np.random.default_rng(seed)
    t_s = np.arange(n_frames) / FPS
    out = np.zeros((n_curves, n_frames))
    for i in range(n_curves):
        f_hz, zeta = rng.uniform(0.5, 3.0), rng.uniform(0.05, 0.4)
        wn = 2.0 * np.pi * f_hz
        wd = wn * np.sqrt(1.0 - zeta**2)
        for landing_s in np.sort(rng.uniform(0.0, t_s[-1], 4)):
            dt = np.clip(t_s - landing_s, 0.0, None)
            kick = np.deg2rad(rng.uniform(5.0, 40.0)) * np.exp(-zeta * wn * dt) * np.sin(wd * dt)
            out[i] += np.where(t_s >= landing_s, kick, 0.0)
    return out


def baseline_keys(frames: np.ndarray, row: np.ndarray, tolerance: float) -> list[int]:
    """Same algorithm as the module, one curve, pure Python per-frame error check."""
    slopes = np.gradient(row, frames, edge_order=2).tolist()
    x, y = frames.tolist(), row.tolist()
    value_scale = max(abs(v) for v in y) + (max(y) - min(y))
    margin = FLOAT32_MARGIN_REL * (value_scale + max(abs(m) for m in slopes) * (max(abs(f) for f in x) + 1.0))
    tol = max(tolerance - margin, 0.0)
    keys, stack = {0, len(x) - 1}, [(0, len(x) - 1)]
    while stack:
        lo, hi = stack.pop()
        h = x[hi] - x[lo]
        worst, worst_i = -1.0, -1
        for i in range(lo + 1, hi):
            s = (x[i] - x[lo]) / h
            v = ((1 + 2 * s) * (1 - s) ** 2 * y[lo] + s * (1 - s) ** 2 * h * slopes[lo]
                 + s * s * (3 - 2 * s) * y[hi] + s * s * (s - 1) * h * slopes[hi])
            e = abs(v - y[i])
            if e > worst:
                worst, worst_i = e, i
        if worst > tol:
            keys.add(worst_i)
            stack += [(lo, worst_i), (worst_i, hi)]
    return sorted(keys)


def median_time(fn, runs: int) -> tuple[float, object]:
    times, result = [], None
    for _ in range(runs):
        t0 = time.perf_counter()
        result = fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), result


def main() -> None:
    frames = np.arange(N_FRAMES, dtype=float)
    values = secondary_motion(N_CURVES, N_FRAMES)
    tol_rad = np.deg2rad(TOLERANCE_DEG)

    t_fast, curves = median_time(lambda: reduce_curves(frames, values, tol_rad), RUNS)
    t_base, base = median_time(lambda: [baseline_keys(frames, row, tol_rad) for row in values], 1)
    same = all(np.array_equal(c.key_frames, frames[k]) for c, k in zip(curves, base))

    before = sum(c.n_keys_before for c in curves)
    after = sum(c.n_keys_after for c in curves)
    max_err_deg = np.rad2deg(max(c.max_error for c in curves))

    quats = np.zeros((N_FRAMES, 4))
    half = 0.5 * values[:3]
    quats[:, 0] = np.cos(np.linalg.norm(half, axis=0))
    axis = half / np.maximum(np.linalg.norm(half, axis=0), 1e-12)
    quats[:, 1:] = (np.sin(np.linalg.norm(half, axis=0)) * axis).T
    t_quat, qcurves = median_time(lambda: [reduce_quaternion_curves(frames, quats, tol_rad) for _ in range(N_CURVES // 4)], RUNS)

    print(f"python {platform.python_version()}, numpy {np.__version__}, {os.cpu_count()} cores")
    print(f"key reduction, {N_CURVES} curves x {N_FRAMES} frames, tolerance {TOLERANCE_DEG} deg")
    print(f"  vectorised reduce_curves   median of {RUNS}: {1000 * t_fast:8.1f} ms")
    print(f"  pure-Python baseline       1 run:         {1000 * t_base:8.1f} ms")
    print(f"  speed-up                   {t_base / t_fast:8.1f} x   (same keys: {same})")
    print(f"  keys before -> after       {before} -> {after}  ({100 * (1 - after / before):.1f} % fewer)")
    print(f"  max error                  {max_err_deg:.4f} deg")
    print(f"  reduce_quaternion_curves, {N_CURVES // 4} bones x {N_FRAMES} frames (4 curves each), "
          f"median of {RUNS}: {1000 * t_quat:.1f} ms, {qcurves[0][0].n_keys_after} shared keys on bone 0")
    rotation_keys()


N_ROT_BONES = 48 * 8


def euler_tracks(n_bones, n_frames, seed=1):
    values = secondary_motion(3 * n_bones, n_frames, seed).reshape(n_bones, 3, n_frames).transpose(0, 2, 1)
    zeros, rest = np.zeros((n_frames, 3)), np.zeros(3)
    return [RotationTrack(np.ascontiguousarray(v), "XYZ", zeros, rest) for v in values]


def rotation_keys() -> None:
    tol_rad = np.deg2rad(TOLERANCE_DEG)
    print(f"reduce_rotation_keys, {N_ROT_BONES} Euler bones (48 chains x 8), tolerance {TOLERANCE_DEG} deg of rotation")
    print("  frames   time s   us/bone-frame   keys (% of per frame)   peak MiB   peak / input")
    for n_frames in (250, 1000, 4000):
        frames = np.arange(1.0, n_frames + 1)
        tracks = euler_tracks(N_ROT_BONES, n_frames)
        input_bytes = sum(t.values.nbytes for t in tracks)
        t0 = time.perf_counter()
        result = reduce_rotation_keys(frames, tracks, tol_rad)
        seconds = time.perf_counter() - t0
        tracemalloc.start()
        reduce_rotation_keys(frames, tracks, tol_rad)
        _now, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        keys = sum(r.n_keys for r in result)
        print(f"  {n_frames:6d} {seconds:8.2f} {1e6 * seconds / (N_ROT_BONES * n_frames):12.2f} "
              f"{keys:14d} ({100.0 * keys / (3 * N_ROT_BONES * n_frames):4.1f} %) {peak / 2**20:12.1f} "
              f"{peak / input_bytes:10.2f}")
    tracks = euler_tracks(64, 250, seed=2)
    stacked = np.stack([t.values for t in tracks])
    print("  same motion, 64 bones x 250 frames: first frame   new keys   old (per-channel, shared frames) keys")
    for first in (1.0, 3751.0, 20001.0):
        frames = np.arange(first, first + 250)
        new = sum(r.n_keys for r in reduce_rotation_keys(frames, tracks, tol_rad))
        old = sum(c.n_keys_after for g in reduce_euler_groups(frames, stacked, tol_rad) for c in g)
        print(f"  {first:34.0f} {new:10d} {old:10d}")


if __name__ == "__main__":
    main()
