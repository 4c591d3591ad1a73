"""Airborne phases from the body's path alone (no feet to tell contact).

In the air only gravity acts on the centre of mass, so its height follows one parabola
(constant vertical acceleration; Newton's second law for a system of particles). An airborne
phase is therefore a stretch of the clip that one parabola fits within a tolerance, that starts
with a takeoff (rising, after a stronger push) or a drop (from rest, falling nearly freely), and
that ends in an impact (still falling when the path leaves the parabola upward). Rising out of a
crouch also decelerates at a constant rate for a while, but it comes to rest instead of falling
into an impact, so it is no flight; and a flight is one parabola, so it is never split.

Takeoff and touchdown are where the path leaves and rejoins the fitted parabola. Next to such an
event the path differs from the parabola by d = Δa (t − t_e)²/2 (the velocity is continuous, the
acceleration steps by Δa), so sqrt(d) is linear in time and two samples outside the parabola place
the event between samples exactly for piecewise-constant accelerations.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .constants import MIN_TAKEOFF_SPEED_MPS, SURE_FLIGHT_LOAD

FIT_TOLERANCE_M = 0.002
"""Largest distance (m) of a sample from the flight parabola for it to count as in flight: keyed
samples lie on it to rounding, Bézier interpolation of sparse keys and capture noise stray by a
millimetre or so (common practice); a push or a landing leaves it by centimetres within a frame."""
IMPACT_SPEED_MPS = 0.3
"""The body must still fall faster than this (m/s) where the path leaves the parabola for that
to be a touchdown; a body that comes to rest (standing up out of a crouch) does not."""
DROP_MAX_TAKEOFF_SPEED_MPS = 0.3
"""Airborne phases that start rising slower than this (m/s, an apex below 5 mm) are drops."""
MERGE_GAP_S = 0.1
"""Low-load stretches closer than this (s) are tried as one parabola first (never split a flight)."""


@dataclass(frozen=True)
class BallisticStretch:
    i_first: int
    """First sample on the parabola."""
    i_last: int
    takeoff_s: float
    touchdown_s: float
    coef: np.ndarray
    """Parabola z = c0 + c1 t + c2 t² in absolute clip time."""


def _runs(mask):
    padded = np.concatenate(([False], np.asarray(mask, bool), [False])).astype(np.int8)
    d = np.diff(padded)
    return list(zip(np.flatnonzero(d == 1), np.flatnonzero(d == -1) - 1))


def _fit(t, z, lo, hi):
    tc = t[lo:hi + 1]
    a = np.stack([np.ones_like(tc), tc, tc * tc], axis=1)
    coef, *_ = np.linalg.lstsq(a, z[lo:hi + 1], rcond=None)
    return coef


def _eval(coef, t):
    return coef[0] + coef[1] * t + coef[2] * t * t


def _grow(t, z, lo, hi, tol):
    """Fit a parabola on lo..hi and grow the range while neighbouring samples lie on it."""
    n = t.size
    coef = _fit(t, z, lo, hi)
    for _ in range(8):
        new_lo, new_hi = lo, hi
        while new_lo > 0 and abs(z[new_lo - 1] - _eval(coef, t[new_lo - 1])) <= tol:
            new_lo -= 1
        while new_hi < n - 1 and abs(z[new_hi + 1] - _eval(coef, t[new_hi + 1])) <= tol:
            new_hi += 1
        # Samples at the ends that the refit pushes off the parabola are dropped again.
        coef_new = _fit(t, z, new_lo, new_hi)
        while new_hi - new_lo > 3 and abs(z[new_lo] - _eval(coef_new, t[new_lo])) > tol:
            new_lo += 1
        while new_hi - new_lo > 3 and abs(z[new_hi] - _eval(coef_new, t[new_hi])) > tol:
            new_hi -= 1
        if (new_lo, new_hi) == (lo, hi):
            break
        lo, hi = new_lo, new_hi
        coef = _fit(t, z, lo, hi)
    return lo, hi, coef


def _event_time(t, z, coef, i_edge, step):
    """Where the path leaves the parabola next to edge sample ``i_edge`` (step -1: before it)."""
    n = t.size
    j1, j2 = i_edge + step, i_edge + 2 * step
    dt = abs(float(t[1] - t[0]))
    if not (0 <= j1 < n):
        return float(t[i_edge])
    d1 = z[j1] - _eval(coef, t[j1])
    d2 = z[j2] - _eval(coef, t[j2]) if 0 <= j2 < n else np.nan
    if np.isfinite(d2) and d1 > 0 and d2 > d1:
        s1, s2 = np.sqrt(d1), np.sqrt(d2)
        c = (s2 - s1) / dt
        est = float(t[j1] - step * s1 / c)
    else:
        est = float(0.5 * (t[j1] + t[i_edge]))
    # The edge sample itself may lie in the push within the tolerance: allow a few samples inward.
    lo, hi = sorted((float(t[j1]), float(t[j1] - step * 4 * dt)))
    return float(np.clip(est, lo, hi))


def _settle_events(t, z, lo, hi, coef):
    """Events from the samples outside the parabola, refit on the samples between them, repeat.

    Samples next to an event that stray from the parabola by less than the tolerance would bend
    the fit; placing the events first and fitting only between them removes them."""
    t_to, t_td = _event_time(t, z, coef, lo, -1), _event_time(t, z, coef, hi, +1)
    for _ in range(6):
        new_lo = int(np.searchsorted(t, t_to - 1e-12))
        new_hi = int(np.searchsorted(t, t_td + 1e-12)) - 1
        if new_hi - new_lo < 2 or (new_lo, new_hi) == (lo, hi):
            break
        lo, hi = new_lo, new_hi
        coef = _fit(t, z, lo, hi)
        t_to, t_td = _event_time(t, z, coef, lo, -1), _event_time(t, z, coef, hi, +1)
    return lo, hi, coef, t_to, t_td


def ballistic_stretches(t_s, z_m, load, g_mps2, flight_load_max, min_flight_s, tol_m=FIT_TOLERANCE_M):
    """Airborne phases of a body path (heights ``z_m`` (n,) on the uniform grid ``t_s``).

    Returns
    -------
    stretches : list of BallisticStretch (time order, not overlapping)
    warnings : list of str
    """
    t = np.asarray(t_s, float)
    z = np.asarray(z_m, float)
    n = t.size
    dt = float(t[1] - t[0])
    seeds = _runs(np.asarray(load) < flight_load_max)
    # Seeds close together are tried as one parabola first: one flight is never split.
    merged = []
    gap = max(int(round(MERGE_GAP_S / dt)), 1)
    for a, b in seeds:
        if merged and a - merged[-1][1] <= gap:
            merged[-1] = (merged[-1][0], b)
        else:
            merged.append((a, b))
    out, warnings = [], []
    covered = -1
    for a, b in merged:
        if b <= covered:
            continue
        lo, hi = (a + 1, b - 1) if b - a >= 4 else (a, b)
        lo = max(lo, covered + 1)
        if hi - lo < 2:
            continue
        lo, hi, coef = _grow(t, z, lo, hi, tol_m)
        if hi - lo < 2:
            continue
        covered = max(covered, hi)
        if lo == 0 or hi == n - 1:
            warnings.append("the clip starts or ends in the air: that airborne phase is not checked "
                            "(extend the frame range to include takeoff and touchdown)")
            continue
        accel = 2.0 * coef[2]
        if not 1.0 + accel / g_mps2 < flight_load_max:
            continue
        lo, hi, coef, t_to, t_td = _settle_events(t, z, lo, hi, coef)
        accel = 2.0 * coef[2]
        if t_td - t_to < min_flight_s:
            continue
        v_to = coef[1] + 2 * coef[2] * t_to
        v_td = coef[1] + 2 * coef[2] * t_td
        after = z[hi + 1] - _eval(coef, t[hi + 1])
        before = z[lo - 1] - _eval(coef, t[lo - 1])
        if not (v_td < -IMPACT_SPEED_MPS and after > 0):
            continue  # comes to rest (rising out of a crouch), no impact: not airborne
        if v_to >= max(DROP_MAX_TAKEOFF_SPEED_MPS, 0.0):
            if not before > 0:
                continue  # no push before it
            if v_to < MIN_TAKEOFF_SPEED_MPS and 1.0 + accel / g_mps2 > SURE_FLIGHT_LOAD:
                continue
        elif not 1.0 + accel / g_mps2 < SURE_FLIGHT_LOAD:
            continue  # falling from rest but not freely: unweighting into a crouch, not a drop
        out.append(BallisticStretch(lo, hi, t_to, t_td, coef))
    return out, warnings
