"""Flights, events and phases of jumps from the load-factor curve.

Phase names follow the force-plate literature on the countermovement jump (McMahon, Suchomel,
Lake & Comfort 2018, Strength Cond. J. 40(4):96-106): quiet stance (their "weighing"),
unweighting, braking, propulsion, flight, landing; "recovery" is our name for what follows the
landing; "drop" is an airborne phase entered without upward takeoff speed (stepping off a ledge).
The airborne phases themselves come from foot contact (``foot_contact``) or the body's path
(``ballistic_path``).

The countermovement is read from the body's vertical velocity, not from the load: the lowest
point is where the velocity turns upward before takeoff, braking starts at the fastest descent
and unweighting where the descent began (velocity within ``ONSET_SPEED_FRACTION`` of rest). The
velocity is the integral of the load, so arm swings that make the load cross 1 g several times do
not hide the dip.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .body_types import AnalysisSettings, Phase

RECOVERY_SETTLED_S = 0.25
"""Recovery ends once the load stays near 1 g this long (s); a judgement for keyed clips."""


ONSET_SPEED_FRACTION = 0.05
"""Unweighting starts where the downward speed is 5 % of its peak (the body leaves rest; the
load-based rule, 5 % of body weight, Meylan et al. 2011, is the same idea one derivative up)."""
MIN_DIP_SPEED_MPS = 0.1
"""A descent slower than this (m/s) before the push is no countermovement (a squat jump)."""


@dataclass(frozen=True)
class FlightEvents:
    takeoff_s: float
    touchdown_s: float
    kind: str = "jump"


def _crossing_time(t: np.ndarray, y: np.ndarray, lo: int, hi: int, level: float, rising: bool) -> float:
    """First time in samples lo..hi where y crosses ``level`` in the given direction (linear interpolation)."""
    lo, hi = max(lo, 0), min(hi, y.size - 1)
    for i in range(lo, hi):
        a, b = y[i] - level, y[i + 1] - level
        if (a < 0 <= b) if rising else (a > 0 >= b):
            return float(t[i] + (t[i + 1] - t[i]) * (a / (a - b)))
    return float("nan")


def jump_phases(t_s, load, vz, flights, settings: AnalysisSettings, fps: float, frame0: float):
    """Phases around each flight, in frames.

    Parameters
    ----------
    t_s : ndarray (n,) sample times; load : ndarray (n,) load factor; vz : ndarray (n,) vertical
    velocity (m/s); flights : list of FlightEvents.

    Returns
    -------
    phases : list of Phase (in time order)
    landing_ends_s : list of float, end of each landing (body stops descending)
    """
    def frame(ts):
        return frame0 + ts * fps

    def index_at(ts):
        return int(np.clip(np.searchsorted(t_s, ts), 0, t_s.size - 1))

    phases = []
    landing_ends = []
    limit_s = float(t_s[0])
    drop = settings.onset_load_drop
    for k, fl in enumerate(flights):
        i_to = index_at(fl.takeoff_s)
        i_lim = index_at(limit_s)
        # Lowest point: vertical velocity last crosses zero upward before takeoff.
        lowest = float("nan")
        for i in range(i_to - 1, i_lim, -1):
            if vz[i - 1] <= 0 < vz[i]:
                a, b = vz[i - 1], vz[i]
                lowest = float(t_s[i - 1] + (t_s[i] - t_s[i - 1]) * (-a / (b - a)))
                break
        events = []
        if fl.kind == "drop":
            events = []
        elif np.isfinite(lowest):
            i_low = index_at(lowest)
            seg = np.arange(i_lim, i_low + 1)
            i_peak = int(seg[np.argmin(vz[seg])]) if seg.size else i_low
            if vz[i_peak] < -MIN_DIP_SPEED_MPS:
                # Braking starts at the fastest descent (a = 0, the load passes 1 g there).
                braking = float(t_s[i_peak])
                if 0 < i_peak < t_s.size - 1:
                    a, b, c = vz[i_peak - 1], vz[i_peak], vz[i_peak + 1]
                    den = a - 2 * b + c
                    if den > 0:
                        braking += float(np.clip(0.5 * (a - c) / den, -0.5, 0.5)) * float(t_s[1] - t_s[0])
                level = ONSET_SPEED_FRACTION * vz[i_peak]
                onset = float(t_s[i_lim])
                for i in range(i_peak, i_lim, -1):
                    if vz[i - 1] >= level > vz[i]:
                        onset = _crossing_time(t_s, vz, i - 1, i, level, rising=False)
                        break
                events = [("unweighting", onset), ("braking", braking), ("propulsion", lowest)]
            else:
                events = [("propulsion", lowest)]
        else:
            start = float(t_s[i_lim])
            for i in range(i_to, i_lim, -1):
                if load[i - 1] < 1.0 + drop <= load[i]:
                    start = _crossing_time(t_s, load, i - 1, i, 1.0 + drop, rising=True)
                    break
            events = [("propulsion", start)]
        # Events in time order after the previous phase (never out of order).
        kept, last = [], limit_s
        for name, start in events:
            start = min(max(start, last), fl.takeoff_s)
            kept.append((name, start))
            last = start
        events = kept
        first = events[0][1] if events else fl.takeoff_s
        if first > limit_s + 1e-9:
            phases.append(Phase("quiet stance", frame(limit_s), frame(first)))
        bounds = [e[1] for e in events] + [fl.takeoff_s]
        for (name, start), end in zip(events, bounds[1:]):
            if end > start + 1e-9:
                phases.append(Phase(name, frame(start), frame(end)))
        phases.append(Phase("drop" if fl.kind == "drop" else "flight", frame(fl.takeoff_s), frame(fl.touchdown_s)))
        # Landing: from touchdown until the body stops descending.
        next_to = flights[k + 1].takeoff_s if k + 1 < len(flights) else float(t_s[-1])
        i_td = index_at(fl.touchdown_s)
        land_end = float("nan")
        for i in range(i_td, index_at(next_to)):
            if vz[i] <= 0 < vz[i + 1]:
                land_end = float(t_s[i] + (t_s[i + 1] - t_s[i]) * (-vz[i] / (vz[i + 1] - vz[i])))
                break
        if not np.isfinite(land_end):
            land_end = float(t_s[-1]) if k + 1 == len(flights) else fl.touchdown_s
        landing_ends.append(land_end)
        phases.append(Phase("landing", frame(fl.touchdown_s), frame(land_end)))
        # Recovery: until the load has stayed near 1 g for a while (or the next jump begins).
        dt = float(t_s[1] - t_s[0])
        need = max(int(round(RECOVERY_SETTLED_S / dt)), 1)
        near = np.abs(load - 1.0) < drop
        rec_end = float(t_s[-1])
        i = index_at(land_end)
        while i + need <= t_s.size:
            if near[i:i + need].all():
                rec_end = float(t_s[i])
                break
            i += 1
        if k + 1 < len(flights):
            rec_end = min(rec_end, flights[k + 1].takeoff_s)
        if rec_end > land_end:
            phases.append(Phase("recovery", frame(land_end), frame(rec_end)))
        limit_s = max(rec_end, land_end)
    if flights and limit_s < float(t_s[-1]):
        phases.append(Phase("quiet stance", frame(limit_s), frame(float(t_s[-1]))))
    return phases, landing_ends
