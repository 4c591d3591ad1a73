"""The spin check and the flight fix as jobs on one rig: sample -> core -> (write), shared by the
operators and the command line.

Both read the flights from the body analysis as it stands (``core.flight_windows``) and the
segments from ``sample_segments``. The fix is computed on the body *without* an existing fix
layer (it is muted while sampling), so running it again replaces it instead of stacking.
"""
import contextlib
import json

import numpy as np

from ..core.angular_momentum import check_spin, spin_to_dict
from ..core.errors import InputError
from ..core.flight_fix import fix_flights, fix_to_dict
from ..core.flight_windows import flight_windows
from . import flight_fix_layer
from .analyze import run_analysis
from .sample_segments import segment_motion

SPIN_PROPERTY = "overlap_spin_summary"
"""Custom property on the armature object: JSON of the last spin check (shown in the panel)."""
MODES = {"KEEP_CONTACTS": "keep_contacts", "KEEP_APEX": "keep_apex"}


@contextlib.contextmanager
def fix_muted(obj):
    """Evaluate the rig without its flight-fix layer (the track's mute is put back)."""
    found = flight_fix_layer.find_fix(obj)
    if found is None:
        yield
        return
    track = found[0]
    was = track.mute
    track.mute = True
    try:
        yield
    finally:
        track.mute = was


def run_spin_check(obj, scene, progress=None):
    """(BodyAnalysis, tuple of SpinCheck, warnings) of the rig as it plays (fix layer included)."""
    result, warnings = run_analysis(obj, scene, progress)
    windows = flight_windows(result)
    if not windows:
        raise InputError("no flight found, so there is no spin to check (lower the flight threshold "
                         "if the feet do leave the ground)")
    motion, _com = segment_motion(obj, scene, obj.overlap_assist.body)
    return result, check_spin(motion, windows), warnings


def store_spin_summary(obj, checks):
    obj[SPIN_PROPERTY] = json.dumps({"flights": spin_to_dict(checks)})


def spin_summary_line(checks):
    if not checks:
        return "No flight long enough to check its spin"
    parts = []
    for c in checks:
        parts.append(c.finding or f"flight {c.takeoff_frame:.0f}-{c.touchdown_frame:.0f}: spin kept "
                                  f"(change {abs(c.change_deg_s):.0f}°/s, within {c.threshold_deg_s:.0f}°/s)")
    return "; ".join(parts)


def compute_fix(obj, scene, mode="KEEP_CONTACTS", blend_frames=3.0, progress=None):
    """The fix for the rig without its fix layer.

    Returns (FlightFix, BodyAnalysis, frames (n,), warnings).
    """
    if mode not in MODES:
        raise InputError(f"mode must be one of {', '.join(MODES)}")
    settings = obj.overlap_assist.body
    with fix_muted(obj):
        result, warnings = run_analysis(obj, scene, progress)
        windows = flight_windows(result)
        if not windows:
            raise InputError("no flight found, so there is nothing to fix (lower the flight threshold "
                             "if the feet do leave the ground)")
        try:
            _motion, com = segment_motion(obj, scene, settings, frames=result.frames)
        except InputError as exc:
            com = result.body_pos_m
            warnings = warnings + [f"{exc}; the fix uses the body source ('{result.body_source}') instead of "
                                   "the whole-body center of mass"]
    frames = np.asarray(result.frames, dtype=float)
    t = (frames - frames[0]) / result.fps
    fix = fix_flights(t, com, result.gravity_mps2, windows, MODES[mode], blend_frames / result.fps)
    return fix, result, frames, warnings


def apply_fix(obj, scene, mode="KEEP_CONTACTS", blend_frames=3.0, influence=1.0, progress=None):
    """Compute and write the fix layer, store ``mode`` and ``blend_frames`` on the armature's body
    settings (the panel's choices). Returns (FixStats, FlightFix, BodyAnalysis, warnings)."""
    flight_fix_layer.check_object(obj)
    fix, result, frames, warnings = compute_fix(obj, scene, mode, blend_frames, progress)
    whole = np.isclose(frames, np.round(frames))
    bone = flight_fix_layer.fix_bone(obj, obj.overlap_assist.body.body_bone)
    summary = fix_to_dict(fix, result.fps, float(frames[0]))
    details = {"mode": mode, "blend_frames": float(blend_frames), "summary": json.dumps(summary)}
    stats = flight_fix_layer.write_fix(obj, scene, np.round(frames[whole]), fix.offsets_m[whole], bone,
                                       influence, details)
    settings = obj.overlap_assist.body      # the choices the layer was made with: saved with the file
    settings.fix_mode, settings.fix_blend_frames = mode, float(blend_frames)
    if flight_fix_layer.find_bake(obj) is not None:
        warnings = warnings + ["the chains were baked on the body before this fix: bake them again so they "
                               "follow the fixed flight"]
    return stats, fix, result, warnings


def fix_summary(obj):
    """The stored summary of the object's fix layer (dict, empty without one)."""
    info = flight_fix_layer.fix_info(obj)
    return json.loads(info["summary"]) if info.get("summary") else {}


def report_extras(obj, scene):
    """The report's optional "spin" and "flight_fix" entries for this rig (nothing is written).

    Either is left out, with its reason in ``notes``, when the rig cannot provide it (no flight,
    no matched segments).
    """
    from ..core.effective_gravity import up_axis
    from ..core.errors import OverlapAssistError
    out, notes = {}, []
    try:
        _result, checks, _w = run_spin_check(obj, scene)
        out["spin"] = spin_to_dict(checks)
    except OverlapAssistError as exc:
        notes.append(f"spin check: {exc}")
    try:
        fix, result, frames, _w = compute_fix(obj, scene)
        whole = np.isclose(frames, np.round(frames))
        up = up_axis(result.gravity_mps2)
        before = (fix.corrected_com_m - fix.offsets_m)[whole] @ up
        after = fix.corrected_com_m[whole] @ up
        out["flight_fix"] = {"frames": [float(f) for f in frames[whole]],
                             "height_before_m": [round(float(v), 5) for v in before],
                             "height_after_m": [round(float(v), 5) for v in after],
                             "flights": fix_to_dict(fix, result.fps, float(frames[0]))["flights"]}
    except OverlapAssistError as exc:
        notes.append(f"flight fix: {exc}")
    if notes:
        out["flight_notes"] = notes
    return out
