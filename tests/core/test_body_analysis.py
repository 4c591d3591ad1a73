"""The whole analysis on analytic jumps whose events and gravity are known exactly.

The jumps are piecewise-constant accelerations (``jump_curves``); checks use Newton's second
law for the load (n = 1 + a_up/g; Linthorne 2001) and ballistics for the flight.
"""
import json

import numpy as np
import pytest

from overlap_assist.core.body_analysis import analyse_body, analysis_to_dict
from overlap_assist.core.body_types import AnalysisSettings, MotionSamples
from overlap_assist.core.constants import STANDARD_GRAVITY_MPS2 as G0
from overlap_assist.core.errors import InputError, RangeTooShortError
from overlap_assist.core.jump_curves import JumpSpec, jump_events, jump_position

G_DOWN = np.array([0.0, 0.0, -G0])


def sample(spec, fps=24.0, spf=4, first_frame=1.0, tail_s=0.0):
    ev = jump_events(spec)
    frames = np.arange(first_frame, first_frame + (ev["duration_s"] + tail_s) * fps + 1e-9, 1.0 / spf)
    pos = jump_position(spec, (frames - first_frame) / fps)
    return MotionSamples(frames, fps, pos, G_DOWN), ev


@pytest.mark.parametrize("fps", [24.0, 30 / 1.001, 60.0, 12.0])
def test_events_and_flight_numbers_of_an_analytic_jump(fps):
    spec = JumpSpec(forward_mps=1.2)
    samples, ev = sample(spec, fps=fps)
    res = analyse_body(samples)
    assert len(res.flights) == 1 and len(res.landings) == 1
    fl = res.flights[0]
    assert fl.takeoff_frame == pytest.approx(1 + ev["takeoff_s"] * fps, abs=0.5)
    assert fl.touchdown_frame == pytest.approx(1 + ev["touchdown_s"] * fps, abs=0.5)
    assert fl.apex_frame == pytest.approx(1 + ev["apex_s"] * fps, abs=0.5)
    assert fl.hang_time_s * fps == pytest.approx(ev["hang_time_s"] * fps, abs=0.5)
    assert fl.implied_gravity_mps2 == pytest.approx(G0, rel=0.02)
    assert fl.apex_height_m == pytest.approx(ev["apex_height_m"], rel=0.02)
    assert fl.horizontal_speed_mps == pytest.approx(1.2, rel=0.01)
    assert fl.verdict.startswith("ballistic")
    names = [p.name for p in res.phases]
    assert names[:7] == ["quiet stance", "unweighting", "braking", "propulsion", "flight", "landing", "recovery"]
    in_flight = (res.frames > fl.takeoff_frame + 1) & (res.frames < fl.touchdown_frame - 1)
    np.testing.assert_allclose(res.load_factor[in_flight], 0.0, atol=1e-6)
    # Load in each phase by Newton's second law: 1 - 0.6 while unweighting, 1 + push_g pushing off.
    quiet = res.frames < 1 + (ev["onset_s"] - 0.1) * fps
    np.testing.assert_allclose(res.load_factor[quiet], 1.0, atol=1e-9)
    assert res.landings[0].peak_load_g == pytest.approx(1 + spec.land_g, rel=0.01)
    assert res.landings[0].decel_frames == pytest.approx((ev["landing_end_s"] - ev["touchdown_s"]) * fps, abs=0.5)


def test_effective_gravity_vanishes_in_flight_and_doubles_under_2g_push():
    samples, ev = sample(JumpSpec(push_g=1.0, push_s=0.3))
    res = analyse_body(samples)
    t = (res.frames - 1) / 24
    fl = (t > ev["takeoff_s"] + 0.05) & (t < ev["touchdown_s"] - 0.05)
    np.testing.assert_allclose(res.effective_g_mps2[fl], 0.0, atol=1e-6)
    push = (t > ev["lowest_s"] + 0.05) & (t < ev["takeoff_s"] - 0.05)
    np.testing.assert_allclose(res.effective_g_mps2[push][:, 2], -2 * G0, rtol=1e-6)


def test_low_gravity_jump_is_floaty_with_retiming_advice():
    spec = JumpSpec(flight_gravity_mps2=0.45 * G0)
    samples, ev = sample(spec)
    fl = analyse_body(samples).flights[0]
    assert fl.verdict.startswith("floaty")
    assert fl.gravity_ratio == pytest.approx(0.45, rel=0.02)
    assert fl.retime_frames < -5  # the hang must get shorter for this apex


def test_two_jumps_in_one_clip():
    spec = JumpSpec()
    ev = jump_events(spec)
    fps, spf = 24.0, 4
    frames = np.arange(1, 1 + 2 * ev["duration_s"] * fps, 1 / spf)
    t = (frames - 1) / fps
    pos = np.where((t < ev["duration_s"])[:, None], jump_position(spec, t),
                   jump_position(spec, t - ev["duration_s"]))
    res = analyse_body(MotionSamples(frames, fps, pos, G_DOWN))
    assert len(res.flights) == 2
    second = res.flights[1]
    assert second.takeoff_frame == pytest.approx(1 + (ev["duration_s"] + ev["takeoff_s"]) * fps, abs=0.5)
    assert [p.name for p in res.phases].count("flight") == 2


def test_clip_without_flight_still_has_a_load_curve():
    frames = np.arange(1, 60, 0.25)
    t = (frames - 1) / 24
    pos = np.stack([t, 0 * t, 1 + 0.05 * np.sin(2 * np.pi * t)], 1)
    res = analyse_body(MotionSamples(frames, 24.0, pos, G_DOWN))
    assert res.flights == () and res.phases == ()
    assert res.load_factor.shape == frames.shape
    assert any("no flight" in w for w in res.warnings)
    # a_up = -0.05 (2π)^2 sin(2πt): n = 1 + a_up/g
    np.testing.assert_allclose(res.load_factor[8:-8], 1 - 0.05 * (2 * np.pi) ** 2 * np.sin(2 * np.pi * t[8:-8]) / G0,
                               atol=2e-3)


def test_late_arm_swing_is_flagged_with_body_drop():
    spec = JumpSpec()
    samples, ev = sample(spec)
    t = samples.times_s
    # Arms (8 % of mass) rise 0.3 m relative to the rest, centred 0.05 s after (late) or 0.15 s before (good) takeoff.
    for centre, late in ((ev["takeoff_s"] + 0.08, True), (ev["takeoff_s"] - 0.15, False)):
        rel = 0.3 / (1 + np.exp(-(t - centre) / 0.03))
        rest = samples.body_pos_m.copy()
        arm = rest + np.stack([0 * t, 0 * t, rel], 1)
        s2 = MotionSamples(samples.frames, samples.fps, samples.body_pos_m, G_DOWN, "com",
                           arm_com_m=arm, rest_com_m=rest, arm_mass_fraction=0.1)
        fl = analyse_body(s2).flights[0]
        assert fl.late_arm_swing is late
        assert fl.arm_swing_peak_frame == pytest.approx(1 + centre * 24, abs=0.5)
        if late:
            assert fl.arm_swing_body_drop_m > 0.01


def test_json_summary_has_the_documented_keys():
    samples, _ = sample(JumpSpec())
    d = json.loads(json.dumps(analysis_to_dict(analyse_body(samples))))
    for key in ("fps", "unit_scale", "gravity_mps2", "body_source", "frames", "load_factor", "phases",
                "flights", "landings", "warnings"):
        assert key in d
    for key in ("takeoff_frame", "apex_frame", "touchdown_frame", "hang_time_s", "apex_height_m",
                "takeoff_speed_mps", "horizontal_speed_mps", "implied_gravity_mps2", "gravity_ratio",
                "late_arm_swing"):
        assert key in d["flights"][0]
    assert len(d["frames"]) == len(d["load_factor"])
    assert all(float(f).is_integer() for f in d["frames"])


def test_bad_input_is_refused_clearly():
    with pytest.raises(InputError, match="shape"):
        MotionSamples(np.arange(10.0), 24.0, np.zeros((9, 3)), G_DOWN)
    with pytest.raises(InputError, match="NaN"):
        MotionSamples(np.arange(10.0), 24.0, np.full((10, 3), np.nan), G_DOWN)
    with pytest.raises(InputError, match="gravity"):
        MotionSamples(np.arange(10.0), 24.0, np.zeros((10, 3)), np.zeros(3))
    with pytest.raises(RangeTooShortError):
        analyse_body(MotionSamples(np.arange(2.0), 24.0, np.zeros((2, 3)), G_DOWN))
    with pytest.raises(InputError):
        AnalysisSettings(smoothing_order=0)
