"""Analyze Body Motion: sample → core analysis → load curve, markers, summary."""
import json

import bpy
import numpy as np

from ..core.body_analysis import analyse_body, analysis_to_dict
from ..core import readout
from ..core.errors import OverlapAssistError
from . import anim_data
from .selection import OnArmature
from .sample_body import body_samples
from .op_errors import guarded
from .op_progress import progress_bar, report_warnings

LOAD_PROPERTY = "overlap_load_g"
"""Custom property on the armature object whose F-curve shows the load factor."""
LOAD_GROUP = "Overlap Load"
MARKER_EVENTS = (("takeoff_frame", "takeoff"), ("apex_frame", "apex"), ("touchdown_frame", "touchdown"))
DROP_MARKER_EVENTS = (("takeoff_frame", "drop"), ("touchdown_frame", "touchdown"))


def run_analysis(obj, scene, progress=None, sampled=None):
    """Sample the rig and analyse it. Returns (BodyAnalysis, warnings).

    ``sampled``: (frames, heads, tails) of the rig's bones already read at whole frames (the
    chain sampling pass), reused when it covers the analysed frames and bones.
    """
    settings = obj.overlap_assist.body
    samples = None
    if sampled is not None and not settings.spline_blocked_keys:
        from .sample_body import body_plan, keys_are_dense, make_refine, samples_from
        plan = body_plan(obj, scene, settings)
        frames, heads, tails = sampled
        if np.array_equal(np.asarray(frames, float), plan.frames) and all(b in heads for b in plan.bones):
            samples = samples_from(plan, {b: heads[b] for b in plan.bones}, {b: tails[b] for b in plan.bones})
            warnings = plan.warnings
            refine = None
            if plan.feet and not keys_are_dense(obj, plan.frames[0], plan.frames[-1]):
                refine = make_refine(obj, scene, plan, settings.samples_per_frame)
    if samples is None:
        samples, warnings, refine = body_samples(obj, scene, settings, progress)
    result = analyse_body(samples, settings.analysis_settings(), refine=refine)
    return result, warnings + list(result.warnings)


def write_load_curve(obj, result):
    """Key the load factor on a custom property of the object (bone animation is not touched)."""
    if LOAD_PROPERTY not in obj.keys():
        obj[LOAD_PROPERTY] = 1.0
    from .bake_layer import BASE_TRACK_NAME
    ad = obj.animation_data
    base = ad.nla_tracks.get(BASE_TRACK_NAME) if ad is not None and ad.action is None else None
    if base is not None and base.strips:
        # A bake is in place: the user's action sits in the base strip, keep the curve there.
        strip = base.strips[0]
        bag = anim_data.channelbag_for(strip.action, strip.action_slot, create=True)
    else:
        bag = anim_data.active_fcurves(obj, create=True)
    fc = anim_data.ensure_fcurve(bag, f'["{LOAD_PROPERTY}"]', 0, LOAD_GROUP)
    anim_data.write_keys(fc, result.frames, result.load_factor, 'LINEAR')
    return fc


def write_markers(obj, scene, result):
    """Replace this object's earlier event markers with takeoff/apex/touchdown of each flight."""
    settings = obj.overlap_assist.body
    # Ours are recognised by name and frame, so a user's marker that shares a name is kept.
    owned = {tuple(x) for x in json.loads(settings.owned_markers or "[]")}
    for m in list(scene.timeline_markers):
        if (m.name, m.frame) in owned:
            scene.timeline_markers.remove(m)
    names = []
    for k, fl in enumerate(result.flights):
        suffix = "" if len(result.flights) == 1 else f" {k + 1}"
        for attr, label in (DROP_MARKER_EVENTS if fl.kind == "drop" else MARKER_EVENTS):
            name = f"{label}{suffix}"
            frame = int(round(getattr(fl, attr)))
            scene.timeline_markers.new(name, frame=frame)
            names.append((name, frame))
    settings.owned_markers = json.dumps(names)
    return names


BODY_WORDS = {"com": "center of mass", "root": "root bone"}


def summary_line(result):
    if not result.flights:
        return f"No flight found; load {result.load_factor.min():.2f}–{result.load_factor.max():.2f} g"
    parts = [f"body: {BODY_WORDS.get(result.body_source, result.body_source)}; airborne from {result.airborne_from}"]
    for fl in result.flights:
        if fl.kind == "drop":
            parts.append(f"drop {readout.frame(fl.takeoff_frame)}, touchdown {readout.frame(fl.touchdown_frame)}: "
                         f"{fl.hang_time_s:.2f} s in the air, {fl.verdict}")
            continue
        parts.append(f"takeoff {readout.frame(fl.takeoff_frame)}, apex {readout.frame(fl.apex_frame)}, touchdown {readout.frame(fl.touchdown_frame)}: "
                     f"hang {fl.hang_time_s:.2f} s, {fl.verdict}")
    if result.landings:
        parts.append(f"landing peak {readout.load_g(max(x.peak_load_g for x in result.landings))}")
    return "; ".join(parts)


@guarded
class OVERLAP_ASSIST_OT_analyze_motion(OnArmature, bpy.types.Operator):
    """Sample the rig's body motion and show the load it feels, its jump phases and a flight check"""
    bl_idname = "overlap_assist.analyze_motion"
    bl_label = "Analyze Body Motion"

    def execute(self, context):
        obj, scene = context.active_object, context.scene
        try:
            with progress_bar(context) as progress:
                result, warnings = run_analysis(obj, scene, progress)
        except OverlapAssistError as exc:
            self.report({'ERROR'}, str(exc))
            return {'CANCELLED'}
        write_load_curve(obj, result)
        write_markers(obj, scene, result)
        summary = analysis_to_dict(result)
        summary.pop("frames"), summary.pop("load_factor")
        summary["warnings"] = warnings
        obj.overlap_assist.body.last_summary = json.dumps(summary)
        report_warnings(self, warnings)
        self.report({'INFO'}, summary_line(result))
        return {'FINISHED'}


classes = (OVERLAP_ASSIST_OT_analyze_motion,)
