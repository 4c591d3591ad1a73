"""Findings in animator terms: what each flight and landing says, in words and frames."""
import math

from ..core import readout
from ..core.constants import HORIZONTAL_EASE_MPS2
from .svg_plot import num


def as_float(x) -> float:
    """A float, or NaN for None / missing / non-numeric."""
    try:
        return float(x)
    except (TypeError, ValueError):
        return math.nan


def fmt_fixed(x: float, digits: int) -> str:
    """Fixed decimals for prose; '—' for a missing value (the one rounding: core.readout)."""
    return readout.fixed(x, digits)


def fmt_count(x: float) -> str:
    return str(int(round(x))) if math.isfinite(x) else "—"


# ---------------------------------------------------------------- findings in plain words

def _frames_text(n: float) -> str:
    k = int(round(abs(n)))
    return f"{k} frame" if k == 1 else f"{k} frames"


def verdict_word(fl: dict) -> str:
    return str(fl.get("verdict", "")).split(":")[0].strip()


def verdict_text(fl: dict) -> str:
    """'floaty: 0.45 g', rounded as everywhere else (core.readout)."""
    word, ratio = verdict_word(fl), as_float(fl.get("gravity_ratio"))
    if word in ("floaty", "heavy", "ballistic") and math.isfinite(ratio):
        return f"{word}: {readout.ratio_g(ratio)}"
    return str(fl.get("verdict", "")) or "not checked"


def flight_findings(fl: dict, fps: float, g_scene: float):
    """(kind, text) pairs for one flight; kind is 'fix' for problems, 'note' for information."""
    out = []
    verdict = str(fl.get("verdict", ""))
    word = verdict_word(fl)
    g, ratio = as_float(fl.get("implied_gravity_mps2")), as_float(fl.get("gravity_ratio"))
    hang, apex = as_float(fl.get("hang_time_s")), as_float(fl.get("apex_height_m"))
    v0, vh = as_float(fl.get("takeoff_speed_mps")), as_float(fl.get("horizontal_speed_mps"))
    if word in ("floaty", "heavy") and math.isfinite(ratio):
        feel = ("falls slower than gravity, so it hangs in the air" if word == "floaty"
                else "falls faster than gravity, so it looks rushed and heavy")
        out.append(("fix", f"Reads {word}: {readout.ratio_g(ratio)}. The body {feel} (implied gravity "
                           f"{fmt_fixed(g, 2)} m/s², scene {fmt_fixed(g_scene, 2)} m/s²)."))
        advice = []
        retime = as_float(fl.get("retime_frames"))
        if math.isfinite(retime) and round(abs(retime)) >= 1:
            advice.append(f"{'shorten' if retime < 0 else 'lengthen'} the hang by {_frames_text(retime)} "
                          f"for this apex")
        target = as_float(fl.get("apex_for_hang_time_m"))
        if math.isfinite(target) and math.isfinite(apex):
            advice.append(f"{'raise' if target > apex else 'lower'} the apex to {fmt_fixed(target, 2)} m above "
                          f"takeoff for this hang")
        if advice:
            text = ", or ".join(advice)
            out.append(("fix", text[0].upper() + text[1:] + "."))
    elif word == "ballistic":
        out.append(("note", f"Reads ballistic: {readout.ratio_g(ratio)} (implied gravity {fmt_fixed(g, 2)} m/s², scene {fmt_fixed(g_scene, 2)} m/s²)."))
    else:
        out.append(("fix", f"{verdict[:1].upper()}{verdict[1:]}." if verdict else "The flight could not be checked."))
    if math.isfinite(hang):
        facts = [f"hang time {fmt_fixed(hang, 2)} s ({fmt_fixed(hang * fps, 1)} frames)" if fps > 0 else
                 f"hang time {fmt_fixed(hang, 2)} s"]
        if math.isfinite(apex):
            facts.append(f"apex {fmt_fixed(apex, 2)} m above takeoff")
        if math.isfinite(v0):
            facts.append(f"takeoff speed {fmt_fixed(v0, 2)} m/s up")
        if math.isfinite(vh):
            facts.append(f"forward {fmt_fixed(vh, 2)} m/s")
        text = ", ".join(facts)
        out.append(("note", text[0].upper() + text[1:] + "."))
    ease = as_float(fl.get("horizontal_accel_mps2"))
    if math.isfinite(ease) and abs(ease) > HORIZONTAL_EASE_MPS2:
        how = "slows" if ease < 0 else "speeds up"
        out.append(("fix", f"The forward speed {how} in the air ({fmt_fixed(ease, 2)} m/s²): ballistic flight keeps "
                           f"it constant. Key the travel linear from takeoff to touchdown."))
    offset = as_float(fl.get("arm_swing_offset_frames"))
    if fl.get("late_arm_swing") and math.isfinite(offset):
        drop = as_float(fl.get("arm_swing_body_drop_m"))
        drop_text = f": in the air that pulls the rest of the body {fmt_fixed(100 * drop, 1)} cm down" \
            if math.isfinite(drop) and drop > 0 else ""
        out.append(("fix", f"Late arm swing: the arms swing up hardest {fmt_fixed(offset, 1)} frames after "
                           f"takeoff{drop_text}. Peak the swing before takeoff."))
    elif math.isfinite(offset):
        out.append(("note", f"Arm swing peaks {fmt_fixed(-offset, 1)} frames before takeoff."))
    return out


def landing_finding(landing: dict) -> str:
    return (f"Landing at frame {readout.frame(landing.get('frame'))}: peak load "
            f"{readout.load_g(landing.get('peak_load_g'))} at frame {readout.frame(landing.get('peak_frame'))}; "
            f"the body stops descending {fmt_fixed(as_float(landing.get('decel_frames')), 1)} frames after touchdown.")


def clip_findings(analysis: dict):
    """Findings of one clip: (groups, n_fix, warnings); groups are (heading, [(kind, text)])."""
    fps, g_scene = as_float(analysis.get("fps")), as_float(analysis.get("gravity_mps2"))
    landings = list(analysis.get("landings") or [])
    groups = []
    for k, fl in enumerate(analysis.get("flights") or []):
        items = flight_findings(fl, fps, g_scene)
        td = as_float(fl.get("touchdown_frame"))
        for land in list(landings):
            if abs(as_float(land.get("frame")) - td) < 0.5:
                items.append(("note", landing_finding(land)))
                landings.remove(land)
        if fl.get("kind") == "drop":
            heading = (f"Drop {k + 1}: leaves the support at frame {num(as_float(fl.get('takeoff_frame')), 1)}, "
                       f"touchdown frame {num(td, 1)}")
        else:
            heading = (f"Jump {k + 1}: takeoff frame {num(as_float(fl.get('takeoff_frame')), 1)}, "
                       f"touchdown frame {num(td, 1)}")
        groups.append((heading, items))
    if landings:
        groups.append(("Other landings", [("note", landing_finding(x)) for x in landings]))
    n_fix = sum(kind == "fix" for _, items in groups for kind, _ in items)
    return groups, n_fix, [str(w) for w in analysis.get("warnings") or []]
