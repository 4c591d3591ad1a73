"""The flight fix against closed-form ballistics (Halliday, Resnick & Walker, ch. 4 and 9)."""
import math

import numpy as np
import pytest

from overlap_assist.core import body_segments as bs
from overlap_assist.core.constants import STANDARD_GRAVITY_MPS2 as G0
from overlap_assist.core.errors import InputError
from overlap_assist.core.flight_fix import fix_flights, fix_to_dict
from overlap_assist.core.flight_windows import FlightWindow
from overlap_assist.core.jump_curves import JumpSpec, jump_events, jump_position

FPS = 24.0
GRAVITY = np.array([0.0, 0.0, -G0])
MM = 1e-3


def _times(duration_s, per_frame=4):
    return np.arange(0, int(duration_s * FPS * per_frame) + 1) / (FPS * per_frame)


def _ballistic(t, c0, v0):
    """p0 + v0 t + ½ g t² (projectile motion, Halliday et al. ch. 4)."""
    return c0 + np.outer(t, v0) + 0.5 * np.outer(t**2, GRAVITY)


def test_late_arm_swing_lowers_the_trunk_by_the_arms_rise_times_their_mass_share():
    # The rest of the body follows the 1 g parabola of an analytic jump exactly, but the arms
    # swing up by 0.4 m relative to it in flight and back down for the landing, so the CoM
    # leaves the parabola. Conservation (the CoM must stay on it) means the trunk drops by
    # arm mass share x arm rise: with de Leva's male table 2 x (2.71 + 1.62 + 0.61) % = 9.88 %.
    spec = JumpSpec()
    ev = jump_events(spec)
    t = _times(ev["duration_s"])
    rest = jump_position(spec, t)
    share = sum(s.mass_fraction for s in bs.DE_LEVA_MALE.segments if s.name in bs.ARM_SEGMENTS)
    assert share == pytest.approx(0.0988, abs=1e-12)
    tau = np.clip((t - ev["takeoff_s"]) / ev["hang_time_s"], 0.0, 1.0)
    rise = 0.4 * np.sin(np.pi * tau) ** 2
    arms = rest + np.array([0, 0, 0.25]) + rise[:, None] * [0, 0, 1]
    com = (1 - share) * rest + share * arms
    fix = fix_flights(t, com, GRAVITY, [FlightWindow(ev["takeoff_s"], ev["touchdown_s"])])
    inside = (t >= ev["takeoff_s"]) & (t <= ev["touchdown_s"])
    c_to = jump_position(spec, [ev["takeoff_s"]])[0] + [0, 0, 0.25 * share]
    exact = _ballistic(t[inside] - ev["takeoff_s"], c_to, [0, 0, ev["takeoff_speed_mps"]])
    assert np.max(np.abs(fix.corrected_com_m[inside] - exact)) < MM
    drop = -fix.offsets_m[:, 2]
    # 10 um: the arc is anchored by quadratic extrapolation from the 3 samples nearest each contact,
    # exact for ballistic samples but O(dt^3) for the swing's sin^2 (measured 2.8 um).
    np.testing.assert_allclose(drop[inside], share * rise[inside], atol=1e-5)
    assert np.max(drop) == pytest.approx(share * 0.4, rel=1e-3)          # 4.0 cm at the swing's peak
    np.testing.assert_allclose(fix.offsets_m[:, :2], 0.0, atol=1e-12)     # nothing sideways
    (c,) = fix.flights
    assert c.max_offset_m == pytest.approx(share * 0.4, rel=1e-3)


@pytest.fixture(scope="module")
def floaty():
    spec = JumpSpec(flight_gravity_mps2=0.5 * G0, forward_mps=1.5)
    ev = jump_events(spec)
    t = _times(ev["duration_s"])
    return spec, ev, t, jump_position(spec, t)


def test_floaty_jump_keep_contacts_lands_on_the_1g_parabola(floaty):
    spec, ev, t, com = floaty
    original = com.copy()
    fix = fix_flights(t, com, GRAVITY, [FlightWindow(ev["takeoff_s"], ev["touchdown_s"])], blend_s=3 / FPS)
    np.testing.assert_array_equal(com, original)                          # input untouched
    T = ev["hang_time_s"]
    c_to = jump_position(spec, [ev["takeoff_s"]])[0]
    c_td = jump_position(spec, [ev["touchdown_s"]])[0]
    v0 = (c_td - c_to - 0.5 * GRAVITY * T**2) / T                         # same contacts at 1 g
    inside = (t >= ev["takeoff_s"]) & (t <= ev["touchdown_s"])
    exact = _ballistic(t[inside] - ev["takeoff_s"], c_to, v0)
    err = np.max(np.abs(fix.corrected_com_m[inside] - exact))
    assert err < MM
    # Contacts unchanged: nothing moves outside the flight, and inside it the offset starts from
    # zero at the contacts (at the first sample in the air it is at most the change of takeoff
    # speed times the time since takeoff).
    np.testing.assert_array_equal(fix.offsets_m[~inside], 0.0)
    idx = np.flatnonzero(inside)
    dv = np.linalg.norm(v0 - [spec.forward_mps, 0, ev["takeoff_speed_mps"]])
    assert np.linalg.norm(fix.offsets_m[idx[0]]) <= dv * (t[idx[0]] - ev["takeoff_s"]) + 1e-9
    assert np.linalg.norm(fix.offsets_m[idx[-1]]) <= dv * (ev["touchdown_s"] - t[idx[-1]]) + 2 * G0 * (t[1] - t[0])**2
    (c,) = fix.flights
    # Same hang time at twice the gravity: the apex doubles (h = g T^2 / 8, Bosco et al. 1983).
    assert c.apex_before_m == pytest.approx(0.5 * G0 * T**2 / 8, rel=1e-9)
    assert c.apex_after_m == pytest.approx(G0 * T**2 / 8, rel=1e-9)
    assert "rises" in c.advice(FPS) and c.takeoff_shift_s == 0.0


def test_floaty_jump_keep_apex_advises_the_retiming(floaty):
    spec, ev, t, com = floaty
    fix = fix_flights(t, com, GRAVITY, [FlightWindow(ev["takeoff_s"], ev["touchdown_s"])], mode="keep_apex")
    (c,) = fix.flights
    h = ev["apex_height_m"]
    assert c.apex_before_m == pytest.approx(h, rel=1e-9) and c.apex_after_m == pytest.approx(h, rel=1e-9)
    half = math.sqrt(2 * h / G0)                                          # time to fall h at 1 g
    assert c.takeoff_shift_s == pytest.approx(ev["hang_time_s"] / 2 - half, abs=1e-9)
    assert c.touchdown_shift_s == pytest.approx(half - ev["hang_time_s"] / 2, abs=1e-9)
    inside = (t >= ev["takeoff_s"]) & (t <= ev["touchdown_s"])
    apex = jump_position(spec, [ev["apex_s"]])[0]
    tau = t[inside] - ev["apex_s"]
    exact_z = apex[2] - 0.5 * G0 * tau**2
    assert np.max(np.abs(fix.corrected_com_m[inside, 2] - exact_z)) < MM
    advice = c.advice(FPS)
    assert "take off" in advice and "later" in advice and "earlier" in advice
    d = fix_to_dict(fix, FPS, 1.0)["flights"][0]
    assert d["touchdown_shift_frames"] == pytest.approx(c.touchdown_shift_s * FPS, abs=1e-3)


def _drop(a_mps2, height_m=0.5, walk_mps=1.2, step_off_s=0.5, after_s=0.5):
    """Walk off a ledge: constant height, then a fall at a_mps2 through height_m, then standing."""
    fall_s = math.sqrt(2 * height_m / a_mps2)
    t = _times(step_off_s + fall_s + after_s)
    tau = np.clip(t - step_off_s, 0.0, fall_s)
    x = walk_mps * np.minimum(t, step_off_s + fall_s)
    z = 1.5 - 0.5 * a_mps2 * tau**2
    return t, np.stack([x, np.zeros_like(t), z], axis=1), step_off_s, fall_s


def test_floaty_drop_keep_contacts_and_keep_start():
    t, com, t0, fall_s = _drop(0.6 * G0)
    w = [FlightWindow(t0, t0 + fall_s, kind="drop")]
    inside = (t >= t0) & (t <= t0 + fall_s)
    # Same contacts at 1 g: the body must first rise a little (v0z = (dz + ½ g T²)/T > 0).
    fix = fix_flights(t, com, GRAVITY, w)
    v0 = np.array([1.2, 0.0, (-0.5 + 0.5 * G0 * fall_s**2) / fall_s])
    exact = _ballistic(t[inside] - t0, com[0] + [1.2 * t0, 0, 0], v0)
    assert np.max(np.abs(fix.corrected_com_m[inside] - exact)) < MM
    # A drop has no apex in the air: keep_apex keeps the step-off and advises landing earlier.
    fix = fix_flights(t, com, GRAVITY, w, mode="keep_apex")
    exact = _ballistic(t[inside] - t0, com[0] + [1.2 * t0, 0, 0], [1.2, 0, 0])
    assert np.max(np.abs(fix.corrected_com_m[inside] - exact)) < MM
    (c,) = fix.flights
    assert c.touchdown_shift_s == pytest.approx(math.sqrt(2 * 0.5 / G0) - fall_s, abs=1e-9)
    assert c.takeoff_shift_s == 0.0 and "touch down" in c.advice(FPS) and "earlier" in c.advice(FPS)


def test_keep_apex_fades_the_contact_offset_in_and_out():
    # keep_apex on the floaty jump moves the body at the contacts: the offset must fade in before
    # takeoff and out after touchdown over the blend, smoothly (no step between samples larger
    # than the smoothstep's steepest slope 1.5 x value / blend x sample spacing), zero beyond.
    spec = JumpSpec(flight_gravity_mps2=0.5 * G0)
    ev = jump_events(spec)
    t = _times(ev["duration_s"])
    blend = 4 / FPS
    fix = fix_flights(t, jump_position(spec, t), GRAVITY, [FlightWindow(ev["takeoff_s"], ev["touchdown_s"])],
                      mode="keep_apex", blend_s=blend)
    o = fix.offsets_m[:, 2]
    dt = t[1] - t[0]
    before = (t >= ev["takeoff_s"] - blend) & (t < ev["takeoff_s"])
    after = (t > ev["touchdown_s"]) & (t <= ev["touchdown_s"] + blend)
    far = (t < ev["takeoff_s"] - blend) | (t > ev["touchdown_s"] + blend)
    np.testing.assert_array_equal(o[far], 0.0)
    # At both contacts the 1 g arc through the kept apex is h - ½ g (T/2)^2 off the takeoff height.
    contact = ev["apex_height_m"] - 0.5 * G0 * (ev["hang_time_s"] / 2) ** 2
    assert contact < -0.5                                  # the apex mode does move the body here (m)
    for sel in (before, after):
        steps = np.abs(np.diff(o[sel]))
        assert steps.max() <= 1.5 * abs(contact) / blend * dt * 1.01
        assert np.all(np.sign(o[sel][np.abs(o[sel]) > 0]) == np.sign(contact))


def test_bad_input_is_refused_with_a_message():
    t, com, t0, fall_s = _drop(0.6 * G0)
    w = FlightWindow(t0, t0 + fall_s)
    with pytest.raises(InputError, match="mode"):
        fix_flights(t, com, GRAVITY, [w], mode="sideways")
    with pytest.raises(InputError, match="no flight"):
        fix_flights(t, com, GRAVITY, [])
    with pytest.raises(InputError, match="overlap"):
        fix_flights(t, com, GRAVITY, [w, FlightWindow(t0 + 0.1, t0 + fall_s + 0.1)])
    with pytest.raises(InputError, match="end after"):
        FlightWindow(1.0, 0.5)
