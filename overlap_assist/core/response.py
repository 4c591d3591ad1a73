"""Animator controls (Lag, Settle, Bounce) <-> physical response (frequency, damping ratio).

Every link of a chain reacts to a disturbance like the standard second-order system

    x'' + 2 zeta omega_n x' + omega_n^2 x = omega_n^2 u

(Ogata, *Modern Control Engineering*, 5th ed. 2010, Section 5-3): a step in the load it
feels (the body starts pushing, stops, lands) or a release from a deflected pose is followed
by an overshoot of ``bounce`` and a decay into a 2 % band after ``settle``.

How three controls map onto two parameters
------------------------------------------
* **Bounce** alone sets the damping ratio, through the overshoot relation
  ``M_p = exp(-zeta pi / sqrt(1 - zeta^2))`` and its inverse
  ``zeta = -ln M_p / sqrt(pi^2 + ln^2 M_p)``. Bounce 0 means critically damped (zeta = 1),
  the fastest response that does not swing past the pose.
* The user picks which of **Settle** or **Lag** drives the natural frequency; the other one
  is derived and shown read-only (``settle_frames_of`` / ``lag_frames_of``).

  - Settle: the exact 2 % settling time of the step response. The textbook estimate
    ``t_s ~ 4 / (zeta omega_n)`` (``settle_time_estimate_s``) only follows the decay
    envelope and is off by up to 10-20 % either side (and it is meaningless at zeta >= 1),
    so the mapping inverts the exact settling time found from the analytic step response.
    At bounce 0 (zeta = 1) the exact settling time is 5.834 / omega_n.
  - Lag: the delay of the response behind a steadily growing input, ``2 zeta / omega_n``
    (Ogata, steady-state error to a ramp). In the solver the damper acts relative to the
    animated motion, so a link follows its animated pose without steady lag; the lag shows
    where the chain is driven by a load that builds up (the drag on a push-off, a turn that
    speeds up): its deflection trails the load by this delay.

In the chain solver ``frequency_hz`` is the angular spring of a link toward its animated
pose without gravity; the mapping here is exact for that case. Gravity stiffens a chain
that hangs along it (see ``chain_solver``).
"""
from __future__ import annotations

import math

import numpy as np

from .errors import InputError

SETTLE_BAND = 0.02
"""2 % settling band (Ogata 2010, Section 5-3 states the 2 % and 5 % criteria)."""

MAX_BOUNCE = 0.99
"""Largest accepted bounce fraction: zeta would be 0.003, settling near-endless."""

_GRID_POINTS_PER_PERIOD = 256
"""Sampling of the analytic step response before the final bisection (reason: the last
band crossing must fall in the last grid cell; 256 points per period resolves it)."""


def damping_ratio_from_bounce(bounce: float) -> float:
    """Damping ratio whose step response overshoots by ``bounce`` (fraction, 0 -> 1.0).

    References
    ----------
    Ogata 2010, Section 5-3: zeta = -ln M_p / sqrt(pi^2 + ln^2 M_p).
    """
    _check_bounce(bounce)
    if bounce == 0.0:
        return 1.0
    log_b = math.log(bounce)
    return -log_b / math.sqrt(math.pi**2 + log_b**2)


def bounce_of(damping_ratio: float) -> float:
    """Overshoot fraction of the step response, ``exp(-zeta pi / sqrt(1 - zeta^2))``; 0 at zeta >= 1."""
    _check_damping(damping_ratio)
    if damping_ratio >= 1.0:
        return 0.0
    return math.exp(-damping_ratio * math.pi / math.sqrt(1.0 - damping_ratio**2))


def settle_time_estimate_s(frequency_hz: float, damping_ratio: float) -> float:
    """Textbook 2 % settling estimate ``4 / (zeta omega_n)`` (Ogata 2010, Section 5-3).

    An envelope approximation for 0 < zeta < 1 (error up to 10-20 %); use ``settle_time_s``
    for the exact value.
    """
    omega = 2.0 * math.pi * frequency_hz
    if omega <= 0.0 or damping_ratio <= 0.0:
        return math.inf
    return 4.0 / (damping_ratio * omega)


def step_error(tau: np.ndarray, damping_ratio: float) -> np.ndarray:
    """``1 - y`` of the unit step response at dimensionless times ``tau = omega_n t``.

    Parameters
    ----------
    tau : ndarray, any shape
        Time in units of ``1 / omega_n``.
    damping_ratio : float
        zeta >= 0.

    Returns
    -------
    ndarray, same shape as ``tau``
        The remaining error; 1 at tau = 0.

    References
    ----------
    Ogata 2010, Section 5-3 (underdamped, critically damped and overdamped step responses).
    """
    tau = np.asarray(tau, dtype=np.float64)
    z = float(damping_ratio)
    if z < 1.0:
        beta = math.sqrt(1.0 - z * z)
        return np.exp(-z * tau) * (np.cos(beta * tau) + (z / beta) * np.sin(beta * tau))
    if z == 1.0:
        return np.exp(-tau) * (1.0 + tau)
    root = math.sqrt(z * z - 1.0)
    r_slow, r_fast = z - root, z + root
    return (r_fast * np.exp(-r_slow * tau) - r_slow * np.exp(-r_fast * tau)) / (r_fast - r_slow)


def settle_tau(damping_ratio: float, band: float = SETTLE_BAND) -> float:
    """Exact dimensionless settling time: the last ``tau`` with ``|1 - y(tau)| >= band``.

    ``settle_time_s = settle_tau / omega_n``. Infinite at zeta = 0.
    """
    _check_damping(damping_ratio)
    if not 0.0 < band < 1.0:
        raise InputError(f"Settling band must be between 0 and 1, got {band}")
    z = float(damping_ratio)
    if z == 0.0:
        return math.inf
    if z < 1.0:
        beta = math.sqrt(1.0 - z * z)
        # |1 - y| <= exp(-z tau) / beta, so nothing leaves the band after tau_end.
        tau_end = max(math.log(1.0 / (band * beta)) / z, 1e-9)
        n = int(math.ceil(tau_end * beta / (2.0 * math.pi) * _GRID_POINTS_PER_PERIOD)) + 64
    else:
        root = math.sqrt(z * z - 1.0)
        r_slow = z - root if z > 1.0 else 1.0
        # Monotone decay; (1 + tau) e^-tau <= 2 e^(-tau/2) bounds the critical case.
        tau_end = (math.log(4.0 / band) + 2.0) / (0.5 * r_slow)
        n = 4096
    tau = np.linspace(0.0, tau_end, n)
    outside = np.abs(step_error(tau, z)) >= band
    last = int(np.flatnonzero(outside)[-1])
    if last == n - 1:
        return float(tau[-1])
    lo, hi = float(tau[last]), float(tau[last + 1])
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        if abs(float(step_error(np.array(mid), z))) >= band:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)


def settle_time_s(frequency_hz: float, damping_ratio: float, band: float = SETTLE_BAND) -> float:
    """Exact 2 % settling time in seconds of the step response (inf without spring or damping)."""
    _check_frequency(frequency_hz)
    if frequency_hz == 0.0:
        return math.inf
    return settle_tau(damping_ratio, band) / (2.0 * math.pi * frequency_hz)


def settle_frames_of(frequency_hz: float, damping_ratio: float, fps: float) -> float:
    """Settle (frames) shown for a physical response: exact 2 % settling time x fps."""
    _check_fps(fps)
    return settle_time_s(frequency_hz, damping_ratio) * fps


def lag_frames_of(frequency_hz: float, damping_ratio: float, fps: float) -> float:
    """Lag (frames) shown for a physical response: ramp delay ``2 zeta / omega_n`` x fps."""
    _check_fps(fps)
    _check_frequency(frequency_hz)
    _check_damping(damping_ratio)
    if frequency_hz == 0.0:
        return math.inf
    return 2.0 * damping_ratio / (2.0 * math.pi * frequency_hz) * fps


def response_from_bounce_settle(bounce: float, settle_frames: float, fps: float) -> tuple[float, float]:
    """(frequency_hz, damping_ratio) that overshoot by ``bounce`` and settle in ``settle_frames``.

    Parameters
    ----------
    bounce : float
        Overshoot fraction, 0 <= bounce <= 0.99 (the UI shows percent).
    settle_frames : float
        Exact 2 % settling time in frames, > 0.
    fps : float
        Frames per second, > 0.
    """
    _check_fps(fps)
    if not (math.isfinite(settle_frames) and settle_frames > 0.0):
        raise InputError(f"Settle must be a positive number of frames, got {settle_frames}")
    zeta = damping_ratio_from_bounce(bounce)
    omega = settle_tau(zeta) / (settle_frames / fps)
    return omega / (2.0 * math.pi), zeta


def response_from_bounce_lag(bounce: float, lag_frames: float, fps: float) -> tuple[float, float]:
    """(frequency_hz, damping_ratio) that overshoot by ``bounce`` with ramp delay ``lag_frames``."""
    _check_fps(fps)
    if not (math.isfinite(lag_frames) and lag_frames > 0.0):
        raise InputError(f"Lag must be a positive number of frames, got {lag_frames}")
    zeta = damping_ratio_from_bounce(bounce)
    omega = 2.0 * zeta / (lag_frames / fps)
    return omega / (2.0 * math.pi), zeta


def _check_bounce(bounce: float) -> None:
    if not (math.isfinite(bounce) and 0.0 <= bounce <= MAX_BOUNCE):
        raise InputError(f"Bounce must be between 0 and {MAX_BOUNCE * 100:.0f} %, got {bounce * 100:.4g} %")


def _check_damping(damping_ratio: float) -> None:
    if not (math.isfinite(damping_ratio) and damping_ratio >= 0.0):
        raise InputError(f"Damping ratio must be 0 or more, got {damping_ratio}")


def _check_frequency(frequency_hz: float) -> None:
    if not (math.isfinite(frequency_hz) and frequency_hz >= 0.0):
        raise InputError(f"Frequency must be 0 Hz or more, got {frequency_hz}")


def _check_fps(fps: float) -> None:
    if not (math.isfinite(fps) and fps > 0.0):
        raise InputError(f"Frame rate must be positive, got {fps}")
