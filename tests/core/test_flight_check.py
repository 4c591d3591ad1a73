"""Ballistic checks of a flight against closed forms."""
import numpy as np
import pytest

from overlap_assist.core.constants import STANDARD_GRAVITY_MPS2
from overlap_assist.core.flight_check import apex_for_hang_time, check_flight, hang_time_for_apex, verdict_for

G_DOWN = np.array([0.0, 0.0, -STANDARD_GRAVITY_MPS2])


def test_standard_gravity_value():
    # 3rd CGPM (1901), Comptes Rendus p. 70: g0 = 9.80665 m/s^2 exactly.
    assert STANDARD_GRAVITY_MPS2 == 9.80665


@pytest.mark.parametrize("g_anim", [9.80665, 4.0, 15.0])
@pytest.mark.parametrize("v0", [2.0, 3.1])
def test_parabola_fit_recovers_gravity_hang_and_apex(g_anim, v0):
    # z = z0 + v t - g t^2/2 (kinematics); h = v^2/2g and T = 2v/g (ballistics).
    fps = 24.0
    hang = 2 * v0 / g_anim
    t = np.arange(-0.2, hang + 0.2, 1 / 96)
    tau = t.clip(0, hang)
    z = 1.0 + v0 * tau - 0.5 * g_anim * tau**2
    pos = np.stack([1.3 * t, np.zeros_like(t), z], axis=1)
    fl = check_flight(t, pos, G_DOWN, 0.0, hang, fps, 0.0)
    assert fl.implied_gravity_mps2 == pytest.approx(g_anim, rel=1e-9)
    assert fl.hang_time_s == pytest.approx(hang)
    assert fl.apex_height_m == pytest.approx(v0**2 / (2 * g_anim), rel=1e-9)
    assert fl.takeoff_speed_mps == pytest.approx(v0, rel=1e-9)
    assert fl.apex_frame == pytest.approx(v0 / g_anim * fps, rel=1e-9)
    assert fl.horizontal_speed_mps == pytest.approx(1.3, rel=1e-9)
    assert fl.gravity_ratio == pytest.approx(g_anim / STANDARD_GRAVITY_MPS2)


@pytest.mark.parametrize("hang_s", [0.3, 0.5, 0.7])
def test_flight_time_height_matches_bosco_1983(hang_s):
    # Bosco, Luhtanen & Komi 1983: h = g T^2 / 8 for equal takeoff and landing heights.
    g = STANDARD_GRAVITY_MPS2
    assert apex_for_hang_time(hang_s, 0.0, g) == pytest.approx(g * hang_s**2 / 8)
    assert hang_time_for_apex(g * hang_s**2 / 8, 0.0, g) == pytest.approx(hang_s)


def test_jump_height_time_table():
    # REFERENCES.md §3 (derived from v = sqrt(2gh), t_f = 2v/g): h 0.20/0.30/0.40/0.50 m ->
    # t_f 0.404/0.495/0.571/0.639 s.
    for h, t_f in [(0.20, 0.404), (0.30, 0.495), (0.40, 0.571), (0.50, 0.639)]:
        assert hang_time_for_apex(h, 0.0, STANDARD_GRAVITY_MPS2) == pytest.approx(t_f, abs=0.0006)


def test_retiming_advice_for_a_floaty_jump():
    # A jump animated at 0.4 g: the apex needs a shorter hang at real gravity, by sqrt(0.4).
    g_anim, v0, fps = 0.4 * STANDARD_GRAVITY_MPS2, 2.0, 24.0
    hang = 2 * v0 / g_anim
    t = np.arange(0, hang + 1e-9, 1 / 96)
    z = v0 * t - 0.5 * g_anim * t**2
    fl = check_flight(t, np.stack([0 * t, 0 * t, z], 1), G_DOWN, 0.0, hang, fps, 0.0)
    assert fl.verdict == "floaty: 0.40 g"
    assert fl.hang_time_needed_s == pytest.approx(hang * np.sqrt(0.4), rel=1e-6)
    assert fl.retime_frames == pytest.approx((hang * np.sqrt(0.4) - hang) * fps, rel=1e-6)
    assert fl.apex_for_hang_time_m == pytest.approx(STANDARD_GRAVITY_MPS2 * hang**2 / 8, rel=1e-6)


def test_horizontal_easing_is_negative_along_travel():
    t = np.arange(0, 0.6, 1 / 96)
    x = 2.0 * t - 0.5 * 3.0 * t**2
    z = 2.9 * t - 0.5 * STANDARD_GRAVITY_MPS2 * t**2
    fl = check_flight(t, np.stack([x, 0 * t, z], 1), G_DOWN, 0.0, t[-1], 24.0, 0.0)
    assert fl.horizontal_accel_mps2 == pytest.approx(-3.0, rel=1e-9)


def test_verdict_words():
    assert verdict_for(1.0) == "ballistic: 1.00 g"
    assert verdict_for(1.6).startswith("heavy")
    assert verdict_for(-1).startswith("not ballistic")
