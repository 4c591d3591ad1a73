"""Checks a flight against ballistics and gives retiming advice.

In flight only gravity acts, so the body's centre of mass follows a parabola fixed at takeoff
whatever the limbs do (Newton's second law for a system of particles; Halliday, Resnick &
Walker, *Fundamentals of Physics*, ch. 9). A least-squares parabola through the sampled flight
gives the gravity the animation implies; hang time and apex height are tied by
h = g·T²/8 for equal takeoff and landing heights (Bosco, Luhtanen & Komi 1983).
"""
from __future__ import annotations

import math

import numpy as np

from . import constants as C
from .body_types import Flight
from .effective_gravity import up_axis
from .errors import InputError
from .readout import ratio_g


def fit_parabola(tau_s: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Least-squares c0 + c1·τ + c2·τ² per column; returns coefficients shape (3, ...)."""
    a = np.stack([np.ones_like(tau_s), tau_s, tau_s**2], axis=1)
    coef, *_ = np.linalg.lstsq(a, values, rcond=None)
    return coef


def hang_time_for_apex(apex_m: float, landing_rise_m: float, g_mps2: float) -> float:
    """Time up to an apex ``apex_m`` above takeoff plus time down to a landing ``landing_rise_m``
    above takeoff (negative if lower), under constant gravity."""
    down = max(apex_m - landing_rise_m, 0.0)
    return math.sqrt(2 * max(apex_m, 0.0) / g_mps2) + math.sqrt(2 * down / g_mps2)


def apex_for_hang_time(hang_s: float, landing_rise_m: float, g_mps2: float) -> float:
    """Apex above takeoff implied by a hang time: v0 = (Δ + g T²/2)/T, h = v0²/2g (Δ = 0 gives g T²/8)."""
    v0 = (landing_rise_m + 0.5 * g_mps2 * hang_s**2) / hang_s
    return v0 * v0 / (2 * g_mps2) if v0 > 0 else 0.0


def verdict_for(ratio: float) -> str:
    """Plain words for implied/scene gravity, e.g. 'floaty: 0.45 g'."""
    if not np.isfinite(ratio) or ratio <= 0:
        return "not ballistic: the body does not fall back"
    if ratio < C.FLOATY_RATIO:
        word = "floaty"
    elif ratio > C.HEAVY_RATIO:
        word = "heavy"
    else:
        word = "ballistic"
    return f"{word}: {ratio_g(ratio)}"  # one rounding everywhere (core.readout)


def check_flight(t_s, pos_m, gravity_mps2, takeoff_s, touchdown_s, fps, frame0) -> Flight:
    """Fit the flight between takeoff and touchdown and compare it with ballistics.

    Parameters
    ----------
    t_s : ndarray (n,); pos_m : ndarray (n, 3) body positions; gravity_mps2 : (3,)
    takeoff_s, touchdown_s : event times (s, same clock as t_s)
    fps, frame0 : to express times as frames (frame = frame0 + t·fps)
    """
    g_vec = np.asarray(gravity_mps2, dtype=float)
    g = float(np.linalg.norm(g_vec))
    up = up_axis(g_vec)
    sel = (t_s >= takeoff_s) & (t_s <= touchdown_s)
    if sel.sum() < 3:
        raise InputError("flight too short to fit: it must span at least three samples")
    tau = t_s[sel] - takeoff_s
    p = pos_m[sel]
    z = p @ up
    horiz = p - z[:, None] * up[None, :]
    cz = fit_parabola(tau, z)
    ch = fit_parabola(tau, horiz)
    resid = z - (cz[0] + cz[1] * tau + cz[2] * tau**2)
    rms = float(np.sqrt(np.mean(resid**2)))
    hang = touchdown_s - takeoff_s
    implied = -2.0 * float(cz[2])
    v0 = float(cz[1])
    if implied > 0:
        tau_apex = float(np.clip(v0 / implied, 0.0, hang))
    else:
        tau_apex = float(tau[np.argmax(z)])
    apex_h = float(cz[1] * tau_apex + cz[2] * tau_apex**2)
    landing_rise = float(cz[1] * hang + cz[2] * hang**2)
    tau_mid = 0.5 * hang
    v_h = ch[1] + 2 * ch[2] * tau_mid
    speed_h = float(np.linalg.norm(v_h))
    a_h = 2 * ch[2]
    # Signed along the direction of travel: negative = slowing down (easing into the landing).
    accel_h = float(a_h @ v_h / speed_h) if speed_h > 1e-6 else float(np.linalg.norm(a_h))
    ratio = implied / g
    needed = hang_time_for_apex(apex_h, landing_rise, g)
    return Flight(
        takeoff_frame=frame0 + takeoff_s * fps,
        apex_frame=frame0 + (takeoff_s + tau_apex) * fps,
        touchdown_frame=frame0 + touchdown_s * fps,
        hang_time_s=hang,
        apex_height_m=apex_h,
        takeoff_speed_mps=v0,
        horizontal_speed_mps=speed_h,
        horizontal_accel_mps2=accel_h,
        implied_gravity_mps2=implied,
        gravity_ratio=ratio,
        verdict=verdict_for(ratio),
        hang_time_needed_s=needed,
        retime_frames=(needed - hang) * fps,
        apex_for_hang_time_m=apex_for_hang_time(hang, landing_rise, g),
        fit_rms_m=rms,
    )


def arm_swing_timing(t_s, arm_com_m, rest_com_m, arm_mass_fraction, gravity_mps2, search_from_s,
                     takeoff_s, touchdown_s, dt_s, window, order):
    """Peak upward swing of the arms relative to the rest of the body.

    Returns (peak_time_s, body_drop_m): the time of the fastest upward arm swing, and how far the
    rest of the body sinks relative to the CoM parabola because the arms keep rising after
    takeoff (the CoM is fixed in flight, so Δz_rest = −m_arms·Δ(z_arms − z_rest)).
    """
    from .savgol import savgol_derivative

    up = up_axis(gravity_mps2)
    rel = (arm_com_m - rest_com_m) @ up
    v_rel = savgol_derivative(rel, window, order, 1, dt_s)
    # Up to mid-flight: a swing that peaks later is no longer part of the jump (the landing's
    # own arm motion follows).
    sel = np.flatnonzero((t_s >= search_from_s) & (t_s <= 0.5 * (takeoff_s + touchdown_s)))
    if sel.size == 0:
        return float("nan"), 0.0
    peak_i = sel[np.argmax(v_rel[sel])]
    in_air = (t_s >= takeoff_s) & (t_s <= touchdown_s)
    rise = float(rel[in_air].max() - np.interp(takeoff_s, t_s, rel)) if in_air.any() else 0.0
    return float(t_s[peak_i]), arm_mass_fraction * max(rise, 0.0)
