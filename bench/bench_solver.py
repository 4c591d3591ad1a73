"""Chain solver benchmark: a character's chains on the demo's good jump, time and accuracy.

12 chains x 8 links x 250 frames at 24 fps with the default settings (default sub-steps; the
automatic sub-stepping may add some for the coupled chain's highest modes). The anchors ride the
demo's good jump (``core.jump_curves``, ``JumpSpec(forward_mps=2.0)``, the spec the demo character
is keyed from) plus a bob, sway and turn of their own; the animated directions sway.

Prints, measured in this run:
- the median of several full ``simulate_chains`` calls (checks, set-up, pre-roll, output
  included; the joint-spring calibration is cached after the first call);
- the first call (calibration of every chain included);
- the re-solve after one chain's setting is edited (what the live preview does: one chain's
  calibration is new);
- the tip-path error against a converged run with 64 sub-steps per frame: the largest tip
  distance over all frames and chains, as a fraction of the largest tip swing (tip distance from
  its animated position).

Run: ``python bench/bench_solver.py`` (copy the numbers into docs/performance.md). The live
preview's handler cost per frame change is measured in Blender by bench/bench_preview.py.
"""
from __future__ import annotations

import dataclasses
import math
import pathlib
import platform
import statistics
import sys
import time

import numpy as np

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1]))

from overlap_assist.core.chain_setup import _calibrate_cached  # noqa: E402
from overlap_assist.core.chain_solver import simulate_chains  # noqa: E402
from overlap_assist.core.chain_types import ChainInput, ChainSettings  # noqa: E402
from overlap_assist.core.jump_curves import JumpSpec, jump_position  # noqa: E402

N_CHAINS, N_LINKS, N_FRAMES, FPS = 12, 8, 250, 24.0
RUNS = 15
GRAVITY = np.array([0.0, 0.0, -9.80665])
GOAL_MS, AIM_MS, GOAL_TIP = 100.0, 41.0, 0.02


def character():
    """Hair strands, tails and straps on a body doing the demo's good jump."""
    t = np.arange(N_FRAMES) / FPS
    body = jump_position(JumpSpec(forward_mps=2.0, after_s=8.0), t)
    chains = []
    for c in range(N_CHAINS):
        phase = 0.7 * c
        root = body + np.stack([0.05 * np.sin(1.3 * t + phase), 0.1 * np.cos(0.7 * c) + 0.0 * t,
                                0.6 + 0.02 * np.abs(np.sin(2.9 * t))], -1)
        yaw = 0.6 * np.sin(0.9 * t + phase)
        sway = 0.35 * np.sin(2.1 * t + phase)[:, None] * np.linspace(0.2, 1.0, N_LINKS)[None]
        dirs = np.stack([np.sin(sway) * np.cos(yaw)[:, None], np.sin(sway) * np.sin(yaw)[:, None], -np.cos(sway)], -1)
        chains.append(ChainInput(root, dirs, np.full(N_LINKS, 0.06 + 0.01 * (c % 3))))
    return chains


def solve(chains, settings):
    return simulate_chains(chains, settings, GRAVITY, 1.0 / FPS)


def tip_error(chains, motion, converged):
    worst, swing = 0.0, 0.0
    for c, a, b in zip(chains, motion.tip_positions_m, converged.tip_positions_m):
        animated = c.pivot_pos_m + np.sum(c.lengths_m[None, :, None] * c.target_dirs, axis=1)
        worst = max(worst, float(np.max(np.linalg.norm(a[:, -1] - b[:, -1], axis=-1))))
        swing = max(swing, float(np.max(np.linalg.norm(b[:, -1] - animated, axis=-1))))
    return worst, swing


def main():
    chains = character()
    settings = [ChainSettings()] * N_CHAINS
    _calibrate_cached.cache_clear()
    t0 = time.perf_counter()
    motion = solve(chains, settings)
    first_ms = (time.perf_counter() - t0) * 1e3
    times = []
    for _ in range(RUNS):
        t0 = time.perf_counter()
        solve(chains, settings)
        times.append(time.perf_counter() - t0)
    vec_ms = statistics.median(times) * 1e3

    edits = []
    for k in range(5):  # one chain's damping edited, a new value each time (its calibration is new)
        edited = list(settings)
        edited[3] = dataclasses.replace(settings[3], damping_ratio=0.41 + 0.01 * k)
        t0 = time.perf_counter()
        solve(chains, edited)
        edits.append(time.perf_counter() - t0)
    edit_ms = statistics.median(edits) * 1e3

    converged = solve(chains, [dataclasses.replace(s, substeps=64) for s in settings])
    worst, swing = tip_error(chains, motion, converged)

    print(f"Chain solver: {N_CHAINS} chains x {N_LINKS} links x {N_FRAMES} frames at {FPS:g} fps, "
          f"{motion.substeps} sub-steps (default settings), anchors on the demo's good jump")
    print(f"python {platform.python_version()}, numpy {np.__version__}, {platform.machine()}")
    print(f"full solve          : {vec_ms:8.1f} ms  median of {RUNS} (min {min(times) * 1e3:.1f} ms); "
          f"must <= {GOAL_MS:g} ms: {'yes' if vec_ms <= GOAL_MS else 'NO'}, aim < {AIM_MS:g} ms: "
          f"{'yes' if vec_ms < AIM_MS else 'no'}")
    print(f"first solve         : {first_ms:8.1f} ms  (joint-spring calibration of all {N_CHAINS} chains included)")
    print(f"re-solve after edit : {edit_ms:8.1f} ms  median of {len(edits)} (one chain's damping changed)")
    print(f"tip path vs 64 sub  : {worst * 1e3:8.2f} mm largest tip distance, {100 * worst / swing:.2f} % of the "
          f"largest tip swing ({swing * 1e3:.0f} mm); must <= {100 * GOAL_TIP:g} %: "
          f"{'yes' if worst <= GOAL_TIP * swing else 'NO'}")
    steps = (N_FRAMES - 1) * motion.substeps
    print(f"per sub-step        : {vec_ms / steps * 1e3:8.1f} us over all chains ({steps} sequential sub-steps)")
    assert math.isfinite(vec_ms)


if __name__ == "__main__":
    main()
