"""Animator controls <-> (frequency, damping ratio), checked against the standard second-order
system as scipy computes it (scipy.signal, reference implementation) and the closed forms of
Ogata, *Modern Control Engineering*, 5th ed. 2010, Section 5-3."""
import math

import numpy as np
import pytest
from scipy import signal

from overlap_assist.core import response
from overlap_assist.core.errors import InputError


def scipy_step(zeta, omega, t_end, n=40_001):
    """Unit step response of w^2 / (s^2 + 2 zeta w s + w^2) by scipy.signal (not our formulas)."""
    system = signal.lti([omega**2], [1.0, 2.0 * zeta * omega, omega**2])
    t = np.linspace(0.0, t_end, n)
    t, y = signal.step(system, T=t)
    return t, y


def scipy_settling(zeta, omega, band=0.02):
    """Last time the scipy step response is outside the band; grid resolution returned too."""
    t_end = (8.0 / min(zeta, 1.0) + 8.0 * zeta + 10.0) / omega  # well past the last band exit
    t, y = scipy_step(zeta, omega, t_end)
    last = np.flatnonzero(np.abs(y - 1.0) >= band)[-1]
    return t[last], t[1] - t[0]


# Overshoot table of REFERENCES.md Sec. 5, derived there from Ogata's M_p formula.
OGATA_OVERSHOOT = [(0.1, 0.7292), (0.2, 0.5266), (0.3, 0.3723), (0.4, 0.2538), (0.5, 0.1630),
                   (0.6, 0.0948), (0.7, 0.0460), (0.8, 0.0152), (0.9, 0.0015)]


@pytest.mark.parametrize("zeta, overshoot", OGATA_OVERSHOOT)
def test_bounce_matches_ogata_overshoot_table(zeta, overshoot):
    # Ogata 2010 Sec. 5-3, M_p = exp(-zeta pi / sqrt(1 - zeta^2)); table rounded to 4 digits.
    assert abs(response.bounce_of(zeta) - overshoot) < 5e-5
    # and the inverse zeta = -ln M_p / sqrt(pi^2 + ln^2 M_p) (same section)
    assert response.damping_ratio_from_bounce(response.bounce_of(zeta)) == pytest.approx(zeta, abs=1e-12)


@pytest.mark.parametrize("zeta", [0.1, 0.25, 0.5, 0.75])
def test_bounce_is_the_overshoot_of_scipys_step_response(zeta):
    # scipy.signal.step of the standard second-order system (reference library).
    t, y = scipy_step(zeta, 2.0 * math.pi, 3.0)
    assert response.bounce_of(zeta) == pytest.approx(y.max() - 1.0, abs=1e-6)


@pytest.mark.parametrize("zeta", [0.05, 0.1, 0.2, 0.35, 0.5, 0.7, 0.9, 1.0, 1.3, 2.0])
def test_exact_settling_matches_scipy_step_response(zeta):
    omega = 2.0 * math.pi * 1.5
    reference, grid = scipy_settling(zeta, omega)
    ours = response.settle_time_s(1.5, zeta)
    # The scipy reference is only known to its time grid.
    assert abs(ours - reference) <= 2.0 * grid


def test_settling_check_value_of_references():
    # REFERENCES.md Sec. 5: zeta = 0.5, omega_n = 2 pi: exact 2 % settling 1.285 s, formula 1.273 s.
    assert response.settle_time_s(1.0, 0.5) == pytest.approx(1.285, abs=5e-4)
    assert response.settle_time_estimate_s(1.0, 0.5) == pytest.approx(1.2732, abs=1e-4)


@pytest.mark.parametrize("zeta", [0.05, 0.1, 0.2, 0.3, 0.5, 0.7, 0.9])
def test_textbook_settling_formula_is_an_approximation_within_20_percent(zeta):
    # Ogata 2010 Sec. 5-3: t_s ~ 4 / (zeta omega_n) follows the envelope only; REFERENCES.md
    # Sec. 5 gives "off by up to ~10-20 %" -- this is why the mapping uses the exact value.
    exact = response.settle_time_s(2.0, zeta)
    estimate = response.settle_time_estimate_s(2.0, zeta)
    assert abs(estimate / exact - 1.0) < 0.20


def test_bounce_zero_is_critical_damping_and_settles_at_5_834_over_omega():
    assert response.damping_ratio_from_bounce(0.0) == 1.0
    assert response.bounce_of(1.0) == 0.0
    # (1 + tau) e^-tau = 0.02 at tau = 5.8339 (closed form of the critically damped step, Ogata Sec. 5-3;
    # root checked with scipy.optimize.brentq)
    from scipy.optimize import brentq

    tau = brentq(lambda x: (1.0 + x) * math.exp(-x) - 0.02, 1.0, 20.0)
    assert response.settle_tau(1.0) == pytest.approx(tau, rel=1e-9)


@pytest.mark.parametrize("bounce, settle_frames, fps", [(0.0, 12, 24), (0.05, 20, 24), (0.2, 12, 24),
                                                        (0.4, 30, 30), (0.6, 48, 60), (0.85, 90, 24)])
def test_bounce_settle_round_trip(bounce, settle_frames, fps):
    freq, zeta = response.response_from_bounce_settle(bounce, settle_frames, fps)
    assert response.bounce_of(zeta) == pytest.approx(bounce, abs=1e-12)
    assert response.settle_frames_of(freq, zeta, fps) == pytest.approx(settle_frames, rel=1e-9)
    # and against scipy's step response of the resulting system
    reference, grid = scipy_settling(zeta, 2.0 * math.pi * freq)
    assert abs(reference * fps - settle_frames) <= 2.0 * grid * fps


@pytest.mark.parametrize("bounce, lag_frames, fps", [(0.0, 2, 24), (0.2, 3, 24), (0.5, 1.5, 30)])
def test_bounce_lag_round_trip(bounce, lag_frames, fps):
    freq, zeta = response.response_from_bounce_lag(bounce, lag_frames, fps)
    assert response.lag_frames_of(freq, zeta, fps) == pytest.approx(lag_frames, rel=1e-12)
    assert response.bounce_of(zeta) == pytest.approx(bounce, abs=1e-12)


def test_lag_check_value_of_references():
    # REFERENCES.md Sec. 5 (Ogata, steady-state error to a ramp): zeta 0.5, f 2 Hz -> 0.0796 s = 1.9 frames @ 24.
    assert response.lag_frames_of(2.0, 0.5, 24.0) / 24.0 == pytest.approx(0.0796, abs=5e-5)


def test_ramp_lag_matches_scipy_simulated_ramp():
    # scipy.signal.lsim of the standard system on a unit ramp: y trails t by 2 zeta / omega_n.
    zeta, freq = 0.4, 1.5
    omega = 2.0 * math.pi * freq
    t = np.linspace(0.0, 8.0, 20_001)
    _, y, _ = signal.lsim(signal.lti([omega**2], [1.0, 2.0 * zeta * omega, omega**2]), U=t, T=t)
    lag_s = response.lag_frames_of(freq, zeta, 1.0)
    assert abs((t[-1] - y[-1]) - lag_s) < 1e-6


def test_no_spring_or_no_damping_never_settles():
    assert math.isinf(response.settle_time_s(0.0, 0.5))
    assert math.isinf(response.settle_time_s(2.0, 0.0))
    assert math.isinf(response.lag_frames_of(0.0, 0.5, 24))


@pytest.mark.parametrize("call", [
    lambda: response.damping_ratio_from_bounce(-0.1),
    lambda: response.damping_ratio_from_bounce(1.0),
    lambda: response.damping_ratio_from_bounce(float("nan")),
    lambda: response.response_from_bounce_settle(0.2, 0.0, 24),
    lambda: response.response_from_bounce_settle(0.2, 12, 0.0),
    lambda: response.response_from_bounce_lag(0.2, -1.0, 24),
    lambda: response.settle_frames_of(-1.0, 0.5, 24),
    lambda: response.bounce_of(-0.5),
])
def test_out_of_range_values_raise_input_error(call):
    with pytest.raises(InputError):
        call()
