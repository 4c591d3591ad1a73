"""Chain solver benchmark: a typical character, vectorised solver vs a per-link Python loop.

12 chains x 8 links x 250 frames at 24 fps, 4 sub-steps per frame (default settings: the
automatic sub-stepping adds none). The vectorised time is the median of several full
``simulate_chains`` calls (checks, set-up, pre-roll and output included). The baseline is the
same model written as plain Python loops over chains and links with the ``math`` module on
Python floats (inputs converted to nested lists first: reading numpy elements one by one made
an earlier version of this loop 2.4x slower, which flattered the ratio). It is timed on the
first BASELINE_FRAMES frames (its set-up included) and scaled to 250 frames; it is also
checked to give the same motion.

Run: ``python bench/bench_solver.py`` (prints the numbers; copy them into docs/performance.md).
"""
from __future__ import annotations

import math
import pathlib
import platform
import statistics
import sys
import time

import numpy as np

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1]))

from overlap_assist.core.chain_setup import SPRING_FLOOR, initial_state, prepare  # noqa: E402
from overlap_assist.core.chain_solver import simulate_chains  # noqa: E402
from overlap_assist.core.chain_types import ChainInput, ChainSettings  # noqa: E402

N_CHAINS, N_LINKS, N_FRAMES, FPS, SUBSTEPS = 12, 8, 250, 24.0, 4
RUNS = 15
BASELINE_FRAMES = 50
BASELINE_RUNS = 3
GRAVITY = np.array([0.0, 0.0, -9.80665])


def character():
    """Hair strands, tails and straps hanging from a bobbing, turning, jumping body."""
    t = np.arange(N_FRAMES) / FPS
    chains = []
    for c in range(N_CHAINS):
        phase = 0.7 * c
        root = np.stack([0.3 * np.sin(1.3 * t + phase), 0.4 * t, 1.4 + 0.08 * np.abs(np.sin(2.9 * t))], -1)
        root[120:150, 2] += 0.5 * np.sin(np.linspace(0.0, math.pi, 30))  # a hop
        yaw = 0.6 * np.sin(0.9 * t + phase)
        sway = 0.35 * np.sin(2.1 * t + phase)[:, None] * np.linspace(0.2, 1.0, N_LINKS)[None]
        dirs = np.stack([np.sin(sway) * np.cos(yaw)[:, None], np.sin(sway) * np.sin(yaw)[:, None], -np.cos(sway)], -1)
        chains.append(ChainInput(root, dirs, np.full(N_LINKS, 0.06 + 0.01 * (c % 3))))
    return chains


def solve(chains, settings):
    return simulate_chains(chains, settings, GRAVITY, 1.0 / FPS)


def baseline(chains, settings, n_frames):
    """The solver's step as nested Python loops (sub-step -> chain -> link), scalars only."""
    chains = [ChainInput(c.pivot_pos_m[:n_frames], c.target_dirs[:n_frames], c.lengths_m) for c in chains]
    prep = prepare(chains, settings, GRAVITY, 1.0 / FPS, None, None)
    n_sub, h = prep["n_sub"], 1.0 / FPS / prep["n_sub"]
    d0, u0 = initial_state(prep)
    d = [[list(map(float, d0[c, i])) for i in range(N_LINKS)] for c in range(N_CHAINS)]
    u = [[list(map(float, u0[c, i])) for i in range(N_LINKS)] for c in range(N_CHAINS)]
    acc = [[[0.0, 0.0, 0.0] for _ in range(N_LINKS)] for _ in range(N_CHAINS)]
    lever = (1.5 / prep["lengths_safe"]).tolist()
    length = prep["lengths_active"].tolist()
    k = prep["stiffness"].tolist()
    damp = prep["damping"].tolist()
    share = prep["relative_share"].tolist()
    fconst = prep["felt_const"][:, 0].tolist()
    br = prep["body_response"][:, 0, 0].tolist()
    out = np.empty((n_frames, N_CHAINS, N_LINKS, 3))
    out[0] = d0
    # Nested lists of Python floats (element access on numpy arrays would slow the loop down):
    # (T-1, 3, C*N) rows -> [frame][chain][link][component].
    targets = prep["targets"].tolist()
    toward, spin = (np.moveaxis(prep[k].reshape(n_frames - 1, 3, N_CHAINS, N_LINKS), 1, -1).tolist()
                    for k in ("toward", "spin"))
    ang = prep["ang"].reshape(n_frames - 1, N_CHAINS, N_LINKS).tolist()
    a_piv = prep["anchor_acc"].tolist()
    for f in range(n_frames - 1):
        for j in range(n_sub):
            s = (j + 0.5) / n_sub
            for c in range(N_CHAINS):
                a = [a_piv[f][c][x] + s * (a_piv[f + 1][c][x] - a_piv[f][c][x]) for x in range(3)]
                felt = [fconst[c][x] - br[c] * a[x] for x in range(3)]
                carried = [0.0, 0.0, 0.0]
                for i in range(N_LINKS):
                    di, ui, ai = d[c][i], u[c][i], acc[c][i]
                    th = ang[f][c][i] * s
                    tgt = [targets[f][c][i][x] * math.cos(th) + toward[f][c][i][x] * math.sin(th) for x in range(3)]
                    uu = ui[0] ** 2 + ui[1] ** 2 + ui[2] ** 2
                    par = [length[c][i] * (ai[x] - uu * di[x]) for x in range(3)]
                    fv = [felt[x] - carried[x] for x in range(3)]
                    carried = [carried[x] + par[x] for x in range(3)]
                    fd = fv[0] * di[0] + fv[1] * di[1] + fv[2] * di[2]
                    cc = tgt[0] * di[0] + tgt[1] * di[1] + tgt[2] * di[2]
                    gain = 2.0 * k[c][i] / max(1.0 + cc, SPRING_FLOOR)
                    load = [lever[c][i] * (fv[x] - fd * di[x]) + gain * (tgt[x] - cc * di[x]) for x in range(3)]
                    fp = felt[0] * di[0] + felt[1] * di[1] + felt[2] * di[2]
                    stiff = gain + max(lever[c][i] * fp, 0.0)
                    hden = h / (1.0 + 0.5 * h * damp[c][i] + 0.25 * h * h * stiff)
                    w = [spin[f][c][i][x] * share[c][i] for x in range(3)]
                    ref = [w[1] * di[2] - w[2] * di[1], w[2] * di[0] - w[0] * di[2], w[0] * di[1] - w[1] * di[0]]
                    dd = damp[c][i] + 0.5 * h * stiff
                    un = [ui[x] + hden * (load[x] - dd * (ui[x] - ref[x])) for x in range(3)]
                    acc[c][i] = [(un[x] - ui[x]) / h for x in range(3)]
                    m = [ui[x] + un[x] for x in range(3)]
                    q = (0.25 * h) ** 2 * (m[0] ** 2 + m[1] ** 2 + m[2] ** 2)
                    inv = 1.0 / (1.0 + q)
                    dn = [(di[x] * (1.0 - q) + 0.5 * h * m[x]) * inv for x in range(3)]
                    um = (un[0] * m[0] + un[1] * m[1] + un[2] * m[2]) * inv
                    u[c][i] = [un[x] - um * (2.0 * (0.25 * h) ** 2 * m[x] + 0.5 * h * di[x]) for x in range(3)]
                    d[c][i] = dn
        out[f + 1] = np.array(d)
    return out


def main():
    chains = character()
    settings = [ChainSettings(substeps=SUBSTEPS)] * N_CHAINS
    motion = solve(chains, settings)  # warm-up
    times = []
    for _ in range(RUNS):
        t0 = time.perf_counter()
        solve(chains, settings)
        times.append(time.perf_counter() - t0)
    vec_ms = statistics.median(times) * 1e3

    base = []
    for _ in range(BASELINE_RUNS):
        t0 = time.perf_counter()
        ref = baseline(chains, settings, BASELINE_FRAMES)
        base.append(time.perf_counter() - t0)
    base_ms = statistics.median(base) * 1e3 * (N_FRAMES - 1) / (BASELINE_FRAMES - 1)
    short = solve([ChainInput(c.pivot_pos_m[:BASELINE_FRAMES], c.target_dirs[:BASELINE_FRAMES], c.lengths_m)
                   for c in chains], settings)
    same = max(float(np.max(np.abs(np.stack(short.dirs, 1) - ref))), 0.0)

    print(f"Chain solver: {N_CHAINS} chains x {N_LINKS} links x {N_FRAMES} frames x {motion.substeps} sub-steps "
          f"({N_CHAINS * N_LINKS * (N_FRAMES - 1) * motion.substeps} link-steps), {FPS:g} fps")
    print(f"python {platform.python_version()}, numpy {np.__version__}, {platform.machine()}")
    print(f"vectorised solver   : {vec_ms:8.1f} ms  (median of {RUNS} full runs; min {min(times) * 1e3:.1f} ms)")
    print(f"per-link Python loop: {base_ms:8.1f} ms  (median of {BASELINE_RUNS} runs on {BASELINE_FRAMES} frames, "
          f"scaled x{(N_FRAMES - 1) / (BASELINE_FRAMES - 1):.2f})")
    print(f"speed-up            : {base_ms / vec_ms:8.1f} x   (goal >= 30 x)")
    print(f"under 41 ms         : {'yes' if vec_ms < 41.0 else 'no'}")
    print(f"same motion         : max |difference| of directions {same:.2e}")
    # What the time loop is made of: sequential sub-steps of a few dozen small numpy calls each.
    kernel_us, call_us = kernel_cost(chains, settings)
    n_steps = (N_FRAMES - 1) * motion.substeps
    print(f"kernel per sub-step : {kernel_us:8.2f} us  ({n_steps} sequential sub-steps -> {kernel_us * n_steps / 1e3:.1f} ms); "
          f"one multiply of two (3, {N_CHAINS * N_LINKS}) arrays: {call_us:.2f} us")
    print(f"30 x would need     : {base_ms / 30.0:8.1f} ms in all, {base_ms / 30.0 / n_steps * 1e3:.1f} us per sub-step")


def kernel_cost(chains, settings):
    """Median time of one sub-step of the vectorised kernel, and of one elementary numpy call."""
    from overlap_assist.core.chain_solver import _Kernel

    prep = prepare(chains, settings, GRAVITY, 1.0 / FPS, None, None)
    kernel = _Kernel(prep, 1.0 / FPS / prep["n_sub"])
    m = N_CHAINS * N_LINKS
    rng = np.random.default_rng(1)
    d = rng.normal(size=(3, m))
    d /= np.sqrt((d * d).sum(0))
    u = 0.1 * rng.normal(size=(3, m))
    rate_change, rows, pair = np.zeros((3, m)), rng.normal(size=(5, 3, m)), np.empty((2, 3, m))
    a, b = rng.normal(size=(3, m)), rng.normal(size=(3, m))

    def per_call_us(fn, n=2000):
        runs = []
        for _ in range(7):
            t0 = time.perf_counter()
            for _ in range(n):
                fn()
            runs.append((time.perf_counter() - t0) / n * 1e6)
        return statistics.median(runs)

    return per_call_us(lambda: kernel.step(d, u, rate_change, rows, pair)), per_call_us(lambda: a * b)


if __name__ == "__main__":
    main()
