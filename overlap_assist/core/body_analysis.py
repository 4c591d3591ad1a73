"""The body-motion analysis stage: samples -> kinematics -> load -> airborne phases -> phases -> checks.

Airborne phases come from the feet when the rig has planted feet (``foot_contact``), else from
the body's path (``ballistic_path``). ``analyse_body`` is the one entry point;
``analysis_to_dict`` gives the JSON form the CLI prints.
"""
from __future__ import annotations

import dataclasses

import numpy as np

from .constants import CAUTION
from .body_types import AnalysisSettings, BodyAnalysis, Landing, MotionSamples
from .effective_gravity import body_kinematics, effective_gravity, load_factor, up_axis, window_samples
from .ballistic_path import DROP_MAX_TAKEOFF_SPEED_MPS, ballistic_stretches
from .errors import InputError
from .flight_check import arm_swing_timing, check_flight
from .foot_contact import ContactTolerances, airborne_from_contact, foot_contact
from .jump_phases import FlightEvents, jump_phases

ARM_SWING_LEAD_S = 1.0
"""How far before takeoff to look for the arm swing (s): longer than any countermovement."""


def airborne_phases(samples: MotionSamples, t, load, g, settings, refine=None):
    """(list of (takeoff_s, touchdown_s), warnings, 'feet' | 'body path', foot names used)."""
    warnings = []
    up = up_axis(g)
    if samples.foot_points_m is not None:
        tol = ContactTolerances.for_leg(samples.leg_length_m, float(np.linalg.norm(g)))
        fp = np.asarray(samples.foot_points_m, dtype=float)
        names = list(samples.foot_names) or [f"foot {k + 1}" for k in range(fp.shape[0])]
        feet, keep = [], []
        for k, name in enumerate(names):
            f = foot_contact(name, t, fp[k], up, tol)
            if f is not None:
                feet.append(f)
                keep.append(k)
        if feet:
            fine = None
            if refine is not None:
                def fine(t_a, t_b):
                    tf, pts = refine(t_a, t_b)
                    return tf, np.stack([np.min(np.asarray(pts[k]) @ up, axis=0) for k in keep])
            events, w = airborne_from_contact(t, feet, tol, settings.min_flight_s, fine)
            return [(e.takeoff_s, e.touchdown_s) for e in events], warnings + w, "feet", tuple(f.name for f in feet)
        warnings.append("the feet (" + ", ".join(names) + ") are never planted (they move with the body): "
                        "airborne phases come from the body's path; set Contact bones if other bones touch "
                        "the ground")
    z = np.asarray(samples.body_pos_m, dtype=float) @ up
    stretches, w = ballistic_stretches(t, z, load, float(np.linalg.norm(g)), settings.flight_load_max,
                                       settings.min_flight_s)
    return [(s.takeoff_s, s.touchdown_s) for s in stretches], warnings + w, "body path", ()


def analyse_body(samples: MotionSamples, settings: AnalysisSettings = AnalysisSettings(),
                 refine=None) -> BodyAnalysis:
    """Effective gravity, load factor, phases, flight and landing checks of one clip.

    Parameters
    ----------
    samples : MotionSamples
        Body positions on a uniform (sub-)frame grid, metres and seconds (whole frames suffice:
        keyed samples are differentiated as they are).
    settings : AnalysisSettings
    refine : callable(t_from_s, t_to_s) -> (t (m,), foot points (n_feet, k, m, 3)), optional
        Foot points sampled densely between two sample times (clip seconds), to place takeoff and
        touchdown between frames.

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
    spans, warnings, airborne_from, feet_used = airborne_phases(samples, t, load, g, settings, refine)
    checked = []
    for t_to, t_td in spans:
        try:
            fl = check_flight(t, pos, g, t_to, t_td, fps, frames[0])
        except InputError:
            warnings.append(f"an airborne phase at frame {frames[0] + t_to * fps:.1f} lasts "
                            f"{(t_td - t_to) * fps:.1f} frames only: too short to check")
            continue
        if fl.takeoff_speed_mps < DROP_MAX_TAKEOFF_SPEED_MPS:
            fl = dataclasses.replace(fl, kind="drop", apex_frame=fl.takeoff_frame, apex_height_m=0.0,
                                     retime_frames=float("nan"), apex_for_hang_time_m=float("nan"),
                                     hang_time_needed_s=float("nan"))
        checked.append(fl)
    events = [FlightEvents(t_to, t_td, fl.kind) for (t_to, t_td), fl in
              zip([((f.takeoff_frame - frames[0]) / fps, (f.touchdown_frame - frames[0]) / fps) for f in checked],
                  checked)]
    phases, landing_ends = jump_phases(t, load, vz, events, settings, fps, frames[0])
    flights, landings = [], []
    prev_end = float(t[0])
    for ev, land_end, fl in zip(events, landing_ends, checked):
        if fl.kind == "jump" and samples.arm_com_m is not None and samples.rest_com_m is not None:
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
        warnings.append("no flight found: the load curve is still shown (set Contact bones if the feet "
                        "do leave the ground but were not found)")
    return BodyAnalysis(
        frames=frames, fps=fps, unit_scale=samples.unit_scale, gravity_mps2=g, body_source=samples.body_source,
        body_pos_m=pos, velocity_mps=vel, accel_mps2=acc, effective_g_mps2=effective_gravity(acc, g),
        load_factor=load, phases=tuple(phases), flights=tuple(flights), landings=tuple(landings),
        warnings=tuple(warnings), airborne_from=airborne_from, contact_feet=feet_used)


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
        "airborne_from": result.airborne_from,
        "contact_feet": list(result.contact_feet),
        "frames": [float(f) for f in frames[keep]],
        "load_factor": [round(float(x), 5) for x in result.load_factor[keep]],
        "phases": [dataclasses.asdict(p) for p in result.phases],
        "flights": [clean(dataclasses.asdict(f)) for f in result.flights],
        "landings": [dataclasses.asdict(x) for x in result.landings],
        "warnings": list(result.warnings),
        "caution": CAUTION,
    }
