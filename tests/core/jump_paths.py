"""Body and foot paths for the analysis tests, built from physics the project did not invent.

* ``piecewise``: piecewise-constant vertical accelerations integrated exactly (kinematics).
* ``force_curve_jump``: a vertical ground-reaction force F(t) shaped as in the force-plate
  literature (quiet stance, unweighting dip, braking and propulsion peaks of 2-2.5 body weights,
  zero in flight, a landing spike of 3-6 body weights within ~50 ms), integrated twice with
  a = F/m - g (impulse-momentum method, Linthorne 2001, Am. J. Phys. 69(11):1198; velocity zero
  in quiet stance, Owen et al. 2014, J. Strength Cond. Res. 28(6):1552). Takeoff and touchdown are
  the 20 N threshold crossings (Harry et al. 2020, Med. Sci. Sports Exerc.), flight time and jump
  height follow h = v^2/2g and h = g T^2/8 (Bosco, Luhtanen & Komi 1983).
* ``feet_for``: foot points that stay on their support while in contact and move with the body
  (relative to a straight line between its heights at takeoff and touchdown) in the air.
The shapes' numbers (peak heights, durations) are our own choices inside the published ranges.
"""
from __future__ import annotations

import numpy as np

from overlap_assist.core.constants import STANDARD_GRAVITY_MPS2 as G0


def piecewise(pieces, t_s, z0=1.0, v0=0.0):
    """Height at ``t_s`` of a path made of (duration_s, accel_mps2) pieces; returns z, piece starts."""
    t_s = np.asarray(t_s, float)
    z = np.zeros(t_s.size)
    zc, vc, t0 = z0, v0, 0.0
    starts = []
    for k, (dur, acc) in enumerate(pieces):
        starts.append(t0)
        last = k == len(pieces) - 1
        sel = (t_s >= t0) & ((t_s < t0 + dur) | last)
        tau = t_s[sel] - t0
        z[sel] = zc + vc * tau + 0.5 * acc * tau**2
        zc, vc = zc + vc * dur + 0.5 * acc * dur**2, vc + acc * dur
        t0 += dur
    starts.append(t0)
    return z, np.array(starts)


def stand_up_pieces(rise_m, rise_s):
    """Rise ``rise_m`` in ``rise_s`` from rest to rest: accelerate, then decelerate (two halves)."""
    a = 4 * rise_m / rise_s**2
    return [(rise_s / 2, a), (rise_s / 2, -a)]


def force_curve_jump(kind="cmj", mass_kg=75.0, rate_hz=2000.0, g=G0):
    """Force-plate-style jump. Returns dict with t, F (N), z (m), v, events (threshold crossings)."""
    bw = mass_kg * g
    dt = 1.0 / rate_hz
    t = np.arange(0.0, 3.5, dt)
    f = np.full(t.size, bw)
    t_on = 0.6
    if kind == "cmj":
        # Unweighting dip to 0.35 BW (0.30 s), then braking/propulsion: two peaks 2.2 and 2.4 BW.
        dip = (t >= t_on) & (t < t_on + 0.30)
        f[dip] = bw * (1 - 0.65 * np.sin(np.pi * (t[dip] - t_on) / 0.30) ** 2)
        t_push = t_on + 0.30
    else:
        t_push = t_on  # squat jump: propulsion straight from a held crouch
    push_s = 0.42 if kind == "cmj" else 0.36
    u = (t >= t_push) & (t < t_push + push_s)
    x = (t[u] - t_push) / push_s
    peaks = (1.25 * np.exp(-((x - 0.30) / 0.16) ** 2) + 1.45 * np.exp(-((x - 0.68) / 0.14) ** 2))
    # From 1 BW up to the peaks, then down to 0 BW at the end of the push (a smooth toe-off).
    f[u] = bw * ((1 - x**4) ** 0.5 * (1 + peaks))
    f[t >= t_push + push_s] = 0.0
    # Integrate until touchdown: a = F/m - g; quiet stance has v = 0 (Owen et al. 2014).
    a = f / mass_kg - g
    v = np.concatenate(([0.0], np.cumsum(0.5 * (a[1:] + a[:-1]) * dt)))
    z = 1.0 + np.concatenate(([0.0], np.cumsum(0.5 * (v[1:] + v[:-1]) * dt)))
    end_push = t_push + push_s
    # Touchdown when the body is back at its takeoff height (same posture at landing).
    i_to = int(np.searchsorted(t, end_push))
    z_to = z[i_to]
    i_td = i_to + 1 + int(np.flatnonzero(z[i_to + 1:] < z_to)[0])
    t_td = t[i_td]
    # Landing: a spike peaking 12 ms after touchdown that takes 80 % of the landing impulse, the
    # rest spread over a slow bump while the force returns to 1 BW; the impulse brings the body
    # to rest (momentum balance: the integral of F - BW equals m |v_td|).
    w = t >= t_td
    s = t[w] - t_td
    shape = (s / 0.012) * np.exp(1 - s / 0.012)
    tail = np.exp(-s / 0.03)
    v_td = v[i_td]
    base = bw * (1 - tail)
    need = -v_td * mass_kg - np.sum((base - bw) * dt)
    k = 0.8 * need / np.sum(shape * dt)
    bump = np.exp(-((s - 0.15) / 0.06) ** 2)
    c = 0.2 * need / np.sum(bump * dt)
    f[w] = base + k * shape + c * bump
    a = f / mass_kg - g
    v = np.concatenate(([0.0], np.cumsum(0.5 * (a[1:] + a[:-1]) * dt)))
    # The trapezoid rule differs from the sums above by a sliver: the bump takes it up.
    f[w] += bump * (-v[-1] * mass_kg / np.sum(bump * dt))
    a = f / mass_kg - g
    v = np.concatenate(([0.0], np.cumsum(0.5 * (a[1:] + a[:-1]) * dt)))
    z = 1.0 + np.concatenate(([0.0], np.cumsum(0.5 * (v[1:] + v[:-1]) * dt)))
    thr = 20.0
    below = f < thr
    i_a = int(np.flatnonzero(below)[0])
    i_b = i_a + int(np.flatnonzero(~below[i_a:])[0])
    takeoff = t[i_a - 1] + dt * (f[i_a - 1] - thr) / (f[i_a - 1] - f[i_a])
    touchdown = t[i_b - 1] + dt * (thr - f[i_b - 1]) / (f[i_b] - f[i_b - 1])
    v_to = float(np.interp(takeoff, t, v))
    return {"t": t, "F": f, "bw": bw, "z": z, "v": v, "takeoff_s": float(takeoff), "touchdown_s": float(touchdown),
            "hang_s": float(touchdown - takeoff), "v_to": v_to, "h_v": v_to**2 / (2 * g),
            "h_T": g * (touchdown - takeoff) ** 2 / 8, "end_s": float(t[-1])}


def feet_for(t_s, body_z, events, supports, spread_m=0.2, foot_len_m=0.2):
    """Foot points (2 feet, 2 points: heel and toe, n, 3) for airborne ``events`` [(t_to, t_td)],
    with ``supports`` [(h_before, h_after)] the ground heights under the feet at each event."""
    t_s = np.asarray(t_s, float)
    zb = np.interp(t_s, t_s, body_z)
    fz = np.full(t_s.size, float(supports[0][0]) if supports else 0.0)
    for (t_to, t_td), (h0, h1) in zip(events, supports):
        z_to = np.interp(t_to, t_s, zb)
        z_td = np.interp(t_td, t_s, zb)
        fz[t_s >= t_to] = h1
        air = (t_s > t_to) & (t_s < t_td)
        u = (t_s[air] - t_to) / (t_td - t_to)
        line = z_to + (z_td - z_to) * u
        fz[air] = zb[air] - line + h0 + (h1 - h0) * u
    pts = np.zeros((2, 2, t_s.size, 3))
    for side, y in enumerate((spread_m / 2, -spread_m / 2)):
        pts[side, 0, :, 1] = y
        pts[side, 1, :, 1] = y
        pts[side, 1, :, 0] = -foot_len_m
        pts[side, :, :, 2] = fz[None, :]
        pts[side, 0, :, 2] += 0.0   # heel and toe level: a flat foot
    return pts
