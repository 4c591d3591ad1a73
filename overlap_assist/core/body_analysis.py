"""The body-motion analysis stage: samples -> kinematics -> load -> flights -> phases -> checks.

``analyse_body`` is the one entry point; ``analysis_to_dict`` gives the JSON form the CLI prints.
"""
from __future__ import annotations

import dataclasses

import numpy as np

from .constants import CAUTION
from .body_types import AnalysisSettings, BodyAnalysis, Landing, MotionSamples
from .effective_gravity import body_kinematics, effective_gravity, load_factor, up_axis, window_samples
from .flight_check import arm_swing_timing, check_flight
from .jump_phases import find_flights, jump_phases

ARM_SWING_LEAD_S = 1.0
"""How far before takeoff to look for the arm swing (s): longer than any countermovement."""


def analyse_body(samples: MotionSamples, settings: AnalysisSettings = AnalysisSettings()) -> BodyAnalysis:
    """Effective gravity, load factor, phases, flight and landing checks of one clip.

    Parameters
    ----------
    samples : MotionSamples
        Body positions on a uniform (sub-)frame grid, metres and seconds.
    settings : AnalysisSettings

    Returns
    -------
    BodyAnalysis
    """
    frames = np.asarray(samples.frames, dtype=float)
    pos = np.asarray(samples.body_pos_m, dtype=float)
    g = np.asarray(samples.gravity_mps2, dtype=float)
    fps = float(samples.fps)
    dt = samples.dt_s
    t = samples.times_s
    spf = 1.0 / (frames[1] - frames[0]) if frames.size > 1 else 1.0
    window = window_samples(settings.smoothing_window_frames, spf, settings.smoothing_order)
    vel, acc = body_kinematics(pos, dt, window, settings.smoothing_order)
    load = load_factor(acc, g)
    vz = vel @ up_axis(g)
    events, warnings = find_flights(t, load, vz, window // 2, settings)
    phases, landing_ends = jump_phases(t, load, vz, events, settings, fps, frames[0])
    flights, landings = [], []
    prev_end = float(t[0])
    for ev, land_end in zip(events, landing_ends):
        fl = check_flight(t, pos, g, ev.takeoff_s, ev.touchdown_s, fps, frames[0])
        if samples.arm_com_m is not None and samples.rest_com_m is not None:
            start = max(prev_end, ev.takeoff_s - ARM_SWING_LEAD_S)
            peak_s, drop = arm_swing_timing(t, samples.arm_com_m, samples.rest_com_m, samples.arm_mass_fraction,
                                            g, start, ev.takeoff_s, ev.touchdown_s, dt, window,
                                            settings.smoothing_order)
            if np.isfinite(peak_s):
                offset = (peak_s - ev.takeoff_s) * fps
                fl = dataclasses.replace(fl, arm_swing_peak_frame=frames[0] + peak_s * fps,
                                         arm_swing_offset_frames=offset, late_arm_swing=bool(offset > 0),
                                         arm_swing_body_drop_m=drop)
        flights.append(fl)
        sel = np.flatnonzero((t >= ev.touchdown_s) & (t <= land_end + window * dt))
        if sel.size:
            peak_i = sel[np.argmax(load[sel])]
            landings.append(Landing(frame=fl.touchdown_frame, peak_load_g=float(load[peak_i]),
                                    peak_frame=float(frames[peak_i]),
                                    decel_frames=(land_end - ev.touchdown_s) * fps))
        prev_end = land_end
    if not events:
        warnings.append("no flight found: the load curve is still shown (lower the flight threshold "
                        "if the feet do leave the ground)")
    return BodyAnalysis(
        frames=frames, fps=fps, unit_scale=samples.unit_scale, gravity_mps2=g, body_source=samples.body_source,
        body_pos_m=pos, velocity_mps=vel, accel_mps2=acc, effective_g_mps2=effective_gravity(acc, g),
        load_factor=load, phases=tuple(phases), flights=tuple(flights), landings=tuple(landings),
        warnings=tuple(warnings))


def analysis_to_dict(result: BodyAnalysis, per_frame_only: bool = True) -> dict:
    """JSON-ready summary. Per-sample arrays are reduced to whole frames when ``per_frame_only``."""
    frames = result.frames
    keep = np.isclose(frames, np.round(frames)) if per_frame_only else np.ones(frames.size, bool)
    g = float(np.linalg.norm(result.gravity_mps2))

    def clean(d):
        return {k: (None if isinstance(v, float) and not np.isfinite(v) else v) for k, v in d.items()}

    return {
        "fps": result.fps,
        "unit_scale": result.unit_scale,
        "gravity_mps2": g,
        "body_source": result.body_source,
        "frames": [float(f) for f in frames[keep]],
        "load_factor": [round(float(x), 5) for x in result.load_factor[keep]],
        "phases": [dataclasses.asdict(p) for p in result.phases],
        "flights": [clean(dataclasses.asdict(f)) for f in result.flights],
        "landings": [dataclasses.asdict(x) for x in result.landings],
        "warnings": list(result.warnings),
        "caution": CAUTION,
    }
