"""The root translation that puts the whole-body center of mass on the exact ballistic parabola.

In flight only gravity acts, so the center of mass follows ``p(τ) = p0 + v0 τ + ½ g τ²`` at scene
gravity whatever the limbs do (Newton's second law for a system of particles; Halliday, Resnick &
Walker, *Fundamentals of Physics*, ch. 9). Translating the whole rig by ``o(t)`` moves the CoM by
the same ``o(t)``, so ``o = p − com`` puts it on the parabola exactly; an arm swing late in the
flight then lowers the trunk by the arms' rise × their mass share by itself.

Two ways to choose the parabola (per flight):

``keep_contacts``
    through the CoM at takeoff and at touchdown, in the same time: contacts stay where and when
    they are, the apex moves (higher for a floaty jump, lower for a heavy one).
``keep_apex``
    through the CoM's apex (the vertex of its least-squares parabola) at scene gravity, with the
    horizontal path of ``keep_contacts``; the contacts would then have to move in time, which is
    advised (frames earlier or later), not done. A drop has no apex in the air: its takeoff point
    and takeoff velocity are kept instead, and the touchdown time is advised.

Outside the flight the offset is faded from its value at the contact to zero over ``blend_s``
before takeoff and after touchdown (smoothstep, 3u² − 2u³), so the body does not jump at the
contacts (the feet do not pop). With ``keep_contacts`` that value is zero: nothing outside the
flight changes, and the takeoff (touchdown) speed changes at the contact itself, which the
advice states; a rate-matching blend was rejected because it must sink the body before a
faster takeoff (through the floor for a floaty jump).

The parabola is anchored at the CoM at the contact instants, extrapolated from the three
nearest samples inside the flight (quadratic: exact for ballistic samples; linear interpolation
across the contact would mix in the push-off's acceleration).
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from .effective_gravity import up_axis
from .errors import InputError
from .flight_check import fit_parabola
from .flight_windows import FlightWindow

MODES = ("keep_contacts", "keep_apex")
BLEND_FRAMES = 3.0
"""Default blend at each contact, frames (common practice: a 2-4 frame ease reads as continuous)."""


@dataclass(frozen=True)
class FlightCorrection:
    """What the fix did to one flight (heights above the CoM at takeoff, metres; times seconds)."""
    takeoff_s: float
    touchdown_s: float
    kind: str
    mode: str
    apex_before_m: float
    apex_after_m: float
    apex_time_before_s: float
    apex_time_after_s: float
    takeoff_speed_before_mps: float
    takeoff_speed_after_mps: float
    """Vertical CoM speed at takeoff before and after the fix."""
    takeoff_shift_s: float
    """keep_apex: move the takeoff by this (+ later) for the contacts to meet the parabola; else 0."""
    touchdown_shift_s: float
    """keep_apex: move the touchdown by this (+ later); else 0."""
    max_offset_m: float
    """Largest root translation the fix writes for this flight."""

    def advice(self, fps: float) -> str:
        """Plain words for the animator."""
        if self.mode == "keep_contacts":
            change = (self.apex_after_m - self.apex_before_m) * 100
            return (f"center of mass put on the ballistic arc with takeoff and touchdown kept: the apex "
                    f"{'rises' if change >= 0 else 'drops'} by {abs(change):.1f} cm and the takeoff speed goes "
                    f"from {self.takeoff_speed_before_mps:.2f} to {self.takeoff_speed_after_mps:.2f} m/s "
                    f"(match the push-off to it)")
        parts = []
        for what, shift in (("take off", self.takeoff_shift_s), ("touch down", self.touchdown_shift_s)):
            frames = shift * fps
            if abs(frames) >= 0.05:
                parts.append(f"{what} {abs(frames):.1f} frames {'later' if frames > 0 else 'earlier'}")
        return ("apex kept on the ballistic arc; retime the contacts: " + " and ".join(parts)) if parts else \
            "apex kept on the ballistic arc; the contacts already fit it"


@dataclass(frozen=True)
class FlightFix:
    """Root translation per sample and what it does."""
    offsets_m: np.ndarray
    """World translation to add to the body's root, shape (n, 3), metres."""
    corrected_com_m: np.ndarray
    """Center of mass after the fix, shape (n, 3)."""
    flights: tuple


def _fade(u, value):
    """Smoothstep from 0 (u = 0) to ``value`` (u = 1); u shape (m,), value (3,) -> (m, 3)."""
    u = u[:, None]
    return (3 * u**2 - 2 * u**3) * value


def _extrapolate(t, values, idx, at):
    """Quadratic through the samples ``idx`` (3 of them) evaluated at time ``at``, shape (3,)."""
    tt = t[idx] - at
    coef = np.polyfit(tt, values[idx], 2) if idx.size >= 3 else np.polyfit(tt, values[idx], idx.size - 1)
    return coef[-1]


def _blend_limits(windows, t0, t1, blend_s):
    """Blend length before/after each flight, shortened where flights are closer than two blends."""
    out = []
    for i, w in enumerate(windows):
        before = blend_s if i == 0 else min(blend_s, 0.5 * (w.takeoff_s - windows[i - 1].touchdown_s))
        after = blend_s if i == len(windows) - 1 else min(blend_s, 0.5 * (windows[i + 1].takeoff_s - w.touchdown_s))
        out.append((max(min(before, w.takeoff_s - t0), 0.0), max(min(after, t1 - w.touchdown_s), 0.0)))
    return out


def fix_flights(times_s: np.ndarray, com_m: np.ndarray, gravity_mps2: np.ndarray,
                windows: Sequence[FlightWindow], mode: str = "keep_contacts",
                blend_s: float = 0.125) -> FlightFix:
    """Root translation putting the CoM on the scene-gravity parabola in every flight.

    Parameters
    ----------
    times_s : ndarray (n,), uniform sample times
    com_m : ndarray (n, 3), whole-body CoM (or the body source the analysis used), metres
    gravity_mps2 : ndarray (3,)
    windows : FlightWindow per flight, increasing and not overlapping
    mode : 'keep_contacts' or 'keep_apex'
    blend_s : blend before takeoff and after touchdown, seconds (>= 0)

    Returns
    -------
    FlightFix
    """
    t = np.asarray(times_s, dtype=float)
    com = np.asarray(com_m, dtype=float)
    g = np.asarray(gravity_mps2, dtype=float)
    if mode not in MODES:
        raise InputError(f"flight fix mode must be one of {MODES}, got {mode!r}")
    if com.shape != (t.size, 3) or t.size < 4:
        raise InputError("the flight fix needs CoM positions of shape (n, 3) with n >= 4 matching the times")
    if not blend_s >= 0:
        raise InputError("the blend at the contacts must be 0 frames or more")
    windows = sorted(windows, key=lambda w: w.takeoff_s)
    for a, b in zip(windows, windows[1:]):
        if b.takeoff_s < a.touchdown_s:
            raise InputError("flights overlap: re-run the analysis")
    if not windows:
        raise InputError("no flight to fix: the analysis found none (check the flight threshold)")
    up = up_axis(g)
    g_abs = float(np.linalg.norm(g))
    offsets = np.zeros_like(com)
    corrections = []
    for w, (before, after) in zip(windows, _blend_limits(windows, t[0], t[-1], blend_s)):
        if w.takeoff_s < t[0] - 1e-9 or w.touchdown_s > t[-1] + 1e-9:
            raise InputError("a flight lies outside the sampled range: analyze the whole clip")
        T = w.duration_s
        inside = (t >= w.takeoff_s) & (t <= w.touchdown_s)
        idx = np.flatnonzero(inside)
        if idx.size < 2:
            raise InputError("a flight is shorter than two samples: sample more sub-frames per frame")
        c_to = _extrapolate(t, com, idx[:3], w.takeoff_s)
        c_td = _extrapolate(t, com, idx[-3:], w.touchdown_s)
        tau = t[inside] - w.takeoff_s
        z = (com[inside] - c_to) @ up
        if tau.size >= 3:
            cz = fit_parabola(tau, z)
        else:
            cz = np.array([0.0, ((c_td - c_to) @ up) / T, 0.0])
        if cz[2] < 0 and 0 < -cz[1] / (2 * cz[2]) < T:
            apex_t_before = -cz[1] / (2 * cz[2])
        else:
            apex_t_before = 0.0 if cz[1] <= 0 else T
        apex_before = float(cz[0] + cz[1] * apex_t_before + cz[2] * apex_t_before**2)
        rise_td = float((c_td - c_to) @ up)
        horiz0 = c_to - (c_to @ up) * up
        horiz_v = ((c_td - c_to) - rise_td * up) / T
        if mode == "keep_contacts":
            v0 = (c_td - c_to - 0.5 * g * T**2) / T
            p0, shift_to, shift_td = c_to, 0.0, 0.0
            vz0 = float(v0 @ up)
        elif w.kind == "jump" and 0 < apex_t_before < T:
            z_apex = (c_to @ up) + apex_before
            vz0 = g_abs * apex_t_before                 # rises to the kept apex in the kept time
            p0 = horiz0 + (z_apex - 0.5 * g_abs * apex_t_before**2) * up
            v0 = horiz_v + vz0 * up
            shift_to = apex_t_before - math.sqrt(2 * max(apex_before, 0.0) / g_abs)
            shift_td = apex_t_before + math.sqrt(2 * max(apex_before - rise_td, 0.0) / g_abs) - T
        else:   # a drop (or a flight that never rises): keep the takeoff point and takeoff velocity
            vz0 = float(cz[1])
            p0, v0 = c_to, horiz_v + vz0 * up
            shift_to = 0.0
            disc = vz0**2 - 2 * g_abs * rise_td          # lands where it touched down: ½gτ² − vz0 τ + rise = 0
            shift_td = (vz0 + math.sqrt(disc)) / g_abs - T if disc >= 0 else 0.0
        p = p0 + np.outer(tau, v0) + 0.5 * np.outer(tau**2, g)
        offsets[inside] = p - com[inside]
        if mode == "keep_contacts":   # zero by construction (not left to rounding)
            o_to = o_td = np.zeros(3)
        else:
            o_to, o_td = p0 - c_to, p0 + v0 * T + 0.5 * g * T**2 - c_td
        if before > 0:
            sel = (t >= w.takeoff_s - before) & (t < w.takeoff_s)
            offsets[sel] = _fade((t[sel] - (w.takeoff_s - before)) / before, o_to)
        if after > 0:
            sel = (t > w.touchdown_s) & (t <= w.touchdown_s + after)
            offsets[sel] = _fade((w.touchdown_s + after - t[sel]) / after, o_td)
        apex_t_after = min(max(vz0 / g_abs, 0.0), T)
        apex_after = float(((p0 - c_to) @ up) + vz0 * apex_t_after - 0.5 * g_abs * apex_t_after**2)
        span = (t >= w.takeoff_s - before) & (t <= w.touchdown_s + after)
        corrections.append(FlightCorrection(
            takeoff_s=w.takeoff_s, touchdown_s=w.touchdown_s, kind=w.kind, mode=mode,
            apex_before_m=apex_before, apex_after_m=apex_after, apex_time_before_s=float(apex_t_before),
            apex_time_after_s=float(apex_t_after), takeoff_speed_before_mps=float(cz[1]),
            takeoff_speed_after_mps=float(vz0), takeoff_shift_s=float(shift_to), touchdown_shift_s=float(shift_td),
            max_offset_m=float(np.max(np.linalg.norm(offsets[span], axis=1))) if span.any() else 0.0))
    return FlightFix(offsets_m=offsets, corrected_com_m=com + offsets, flights=tuple(corrections))


def fix_to_dict(fix: FlightFix, fps: float, frame0: float) -> dict:
    """JSON-ready summary (frames for times)."""
    return {"flights": [{
        "takeoff_frame": frame0 + c.takeoff_s * fps, "touchdown_frame": frame0 + c.touchdown_s * fps,
        "kind": c.kind, "mode": c.mode,
        "apex_before_m": round(c.apex_before_m, 5), "apex_after_m": round(c.apex_after_m, 5),
        "apex_frame_before": frame0 + (c.takeoff_s + c.apex_time_before_s) * fps,
        "apex_frame_after": frame0 + (c.takeoff_s + c.apex_time_after_s) * fps,
        "takeoff_speed_before_mps": round(c.takeoff_speed_before_mps, 4),
        "takeoff_speed_after_mps": round(c.takeoff_speed_after_mps, 4),
        "takeoff_shift_frames": round(c.takeoff_shift_s * fps, 3),
        "touchdown_shift_frames": round(c.touchdown_shift_s * fps, 3),
        "max_offset_m": round(c.max_offset_m, 5), "advice": c.advice(fps)} for c in fix.flights]}
