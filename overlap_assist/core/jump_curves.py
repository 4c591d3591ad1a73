"""Analytic jump trajectories: piecewise-constant accelerations integrated exactly.

Used by the tests (whose event times and gravity are then known exactly) and by the demo scene.
The numbers in ``JumpSpec`` defaults are our own invented demo scenario, not measurements.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .constants import STANDARD_GRAVITY_MPS2


@dataclass(frozen=True)
class JumpSpec:
    """A countermovement jump as a sequence of constant-acceleration pieces (z up, x forward)."""
    quiet_s: float = 0.5
    unweight_s: float = 0.25
    unweight_g: float = 0.6          # load drops to 1 - 0.6 = 0.4 g
    brake_g: float = 1.2             # load 2.2 g while braking the fall
    push_s: float = 0.22
    push_g: float = 1.4              # load 2.4 g while pushing off
    flight_gravity_mps2: float = STANDARD_GRAVITY_MPS2
    scene_gravity_mps2: float = STANDARD_GRAVITY_MPS2
    land_g: float = 3.0              # load 4 g while absorbing the landing
    recover_s: float = 0.7
    after_s: float = 0.6
    forward_mps: float = 0.0         # horizontal speed gained in propulsion, kept in flight
    flight_forward_accel_mps2: float = 0.0   # non-zero = easing in flight (a flaw)
    start_height_m: float = 1.0


def _pieces(spec: JumpSpec):
    g = spec.scene_gravity_mps2
    a1 = spec.unweight_g * g
    v1 = -a1 * spec.unweight_s
    a2 = spec.brake_g * g
    t2 = -v1 / a2
    a3 = spec.push_g * g
    v_to = a3 * spec.push_s
    t_f = 2 * v_to / spec.flight_gravity_mps2
    a4 = spec.land_g * g
    t4 = v_to / a4
    # Rise back to the standing height with a symmetric push and ease (accel then decel).
    dip = spec.unweight_s**2 * a1 / 2 + (-v1) * t2 - a2 * t2**2 / 2
    rise_push = spec.push_s**2 * a3 / 2
    land_dip = v_to * t4 - a4 * t4**2 / 2
    height_gap = dip - rise_push + land_dip      # below standing height after landing
    t5 = spec.recover_s / 2
    a5 = height_gap / t5**2 if t5 > 0 else 0.0
    ax_push = spec.forward_mps / spec.push_s
    ax_land = -(spec.forward_mps + spec.flight_forward_accel_mps2 * t_f) / t4
    # (duration, az, ax, name)
    return [
        (spec.quiet_s, 0.0, 0.0, "quiet stance"),
        (spec.unweight_s, -a1, 0.0, "unweighting"),
        (t2, a2, 0.0, "braking"),
        (spec.push_s, a3, ax_push, "propulsion"),
        (t_f, -spec.flight_gravity_mps2, spec.flight_forward_accel_mps2, "flight"),
        (t4, a4, ax_land, "landing"),
        (t5, a5, 0.0, "recovery"),
        (t5, -a5, 0.0, "recovery"),
        (spec.after_s, 0.0, 0.0, "quiet stance"),
    ]


def jump_events(spec: JumpSpec) -> dict:
    """Exact event times (s from the clip start) and flight quantities of ``spec``."""
    pieces = _pieces(spec)
    starts = np.concatenate(([0.0], np.cumsum([p[0] for p in pieces])))
    takeoff, touchdown = starts[4], starts[5]
    v_to = spec.push_g * spec.scene_gravity_mps2 * spec.push_s
    return {
        "onset_s": starts[1], "braking_s": starts[2], "lowest_s": starts[3],
        "takeoff_s": takeoff, "touchdown_s": touchdown, "landing_end_s": starts[6],
        "apex_s": takeoff + v_to / spec.flight_gravity_mps2, "duration_s": starts[-1],
        "hang_time_s": touchdown - takeoff, "takeoff_speed_mps": v_to,
        "apex_height_m": v_to**2 / (2 * spec.flight_gravity_mps2),
    }


def jump_position(spec: JumpSpec, t_s: np.ndarray) -> np.ndarray:
    """Position (n, 3) in metres at times ``t_s``, exact (piecewise quadratic, C1)."""
    t_s = np.asarray(t_s, dtype=float)
    out = np.zeros((t_s.size, 3))
    x, z, vx, vz, t0 = 0.0, spec.start_height_m, 0.0, 0.0, 0.0
    pieces = _pieces(spec)
    for k, (dur, az, ax, _name) in enumerate(pieces):
        last = k == len(pieces) - 1
        sel = (t_s >= t0) & ((t_s < t0 + dur) | last)
        tau = t_s[sel] - t0
        out[sel, 0] = x + vx * tau + 0.5 * ax * tau**2
        out[sel, 2] = z + vz * tau + 0.5 * az * tau**2
        x, z = x + vx * dur + 0.5 * ax * dur**2, z + vz * dur + 0.5 * az * dur**2
        vx, vz = vx + ax * dur, vz + az * dur
        t0 += dur
    return out
