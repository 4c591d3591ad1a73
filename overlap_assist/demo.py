"""The demo: the whole job on our invented character, from an empty file to the outputs.

Stages per clip (``run_demo``):
  1. build    scene, rig "Wren" with meshes, four chains from presets, keyed jump, side camera
  1b. fix     (the fixed copy of a flawed clip only) the flight fix on its own NLA layer, the
              camera opened up to frame the corrected, higher arc
  2. analyse  centre-of-mass body source → load curve on the rig, takeoff/apex/touchdown markers
  3. bake     sample → solve → key reduction (0.5°) onto the "Overlap Bake" NLA layer
  4. render   Workbench frames across the jump (baked chains visible) for the contact sheet
Then: one .blend with every clip as a scene, a JSON summary, the HTML report, the contact sheet
(one row per clip: the good jump, the floaty jump, the floaty jump with its flight fixed).

The fixed copy keeps the floaty clip's takeoff and touchdown (``KEEP_CONTACTS``): its keys are the
same, only the fix layer puts the CoM on the 1 g arc, so the row compares like with like. At 1 g
in the same hang time the apex is about 1.3 m higher; the other mode (keep the apex) would sink
the body through the ledges at the contacts it cannot retime, so it is the wrong picture here.

Key counts per chain: all chains of a clip are baked in one call (a re-bake replaces the whole
layer), so ``BakeStats`` covers the clip; per chain, ``keys_after`` is counted from the bake
action's F-curves of that chain's bones and ``keys_before`` is those curves × baked frames (the
same rule ``BakeStats.keys_before`` uses). Their sums equal the clip's ``BakeStats``.
"""
import json
import math
import os
import time

import numpy as np

from .core import readout
from .core.constants import CAUTION, HORIZONTAL_EASE_MPS2

TOLERANCE_DEG = 0.5
FULL = {"tile": (320, 400), "scale": 2}
SMALL = {"tile": (96, 120), "scale": 1}
SHEET_EVENTS = ("crouch", "push-off", "takeoff", "apex", "touchdown", "whip", "settle")
FIXED_CLIPS = ("floaty_jump",)
"""Clips also shown with their flight fixed (a copy of the clip, in its own scene)."""
FIX_MODE = "KEEP_CONTACTS"
FIXED_SUFFIX = "_fixed"


def demo_clips():
    """(DemoJump, fix mode or None) in sheet and report order: each clip, its fixed copy after it."""
    import dataclasses
    from .blender import demo_character
    out = []
    for jump in demo_character.DEMO_JUMPS:
        out.append((jump, None))
        if jump.name in FIXED_CLIPS:
            out.append((dataclasses.replace(jump, name=jump.name + FIXED_SUFFIX, title=jump.title + ", flight fixed"),
                        FIX_MODE))
    return out


def flags_of(result):
    """What the clip gets wrong, in the analysis' own terms (first flight)."""
    if not result.flights:
        return {"flight": False}
    fl = result.flights[0]
    return {"flight": True, "verdict": fl.verdict, "gravity_ratio": fl.gravity_ratio,
            "floaty": fl.verdict.startswith("floaty"), "late_arm_swing": bool(fl.late_arm_swing),
            "arm_swing_offset_frames": fl.arm_swing_offset_frames,
            "horizontal_accel_mps2": fl.horizontal_accel_mps2,
            "horizontal_easing": bool(fl.horizontal_accel_mps2 < -HORIZONTAL_EASE_MPS2),
            "retime_frames": fl.retime_frames}


def sheet_frames(result, tip_swing, chain_frames, frame_end):
    """Frames for the contact sheet, from the analysis and the simulated tip swing.

    crouch: lowest body point before takeoff; push-off: halfway from there to takeoff; takeoff,
    apex, touchdown: the analysis' events; whip: largest tip swing within 12 frames after
    touchdown; settle: 24 frames after touchdown (or the last frame).
    """
    fl = result.flights[0]
    whole = np.isclose(result.frames, np.round(result.frames))
    f, z = result.frames[whole], result.body_pos_m[whole, 2]
    before = f < fl.takeoff_frame
    crouch = int(f[before][np.argmin(z[before])])
    takeoff = int(round(fl.takeoff_frame))
    td = int(round(fl.touchdown_frame))
    sel = (chain_frames > td) & (chain_frames <= td + 12)
    whip = int(chain_frames[sel][np.argmax(tip_swing[sel])]) if sel.any() else td + 3
    return {"crouch": crouch, "push-off": int(round(0.5 * (crouch + takeoff))), "takeoff": takeoff,
            "apex": int(round(fl.apex_frame)), "touchdown": td, "whip": whip, "settle": min(td + 24, frame_end)}


def per_chain_keys(obj, stats, chain_bones):
    """Split one bake's key counts over its chains (see the module docstring)."""
    import bpy
    from .blender import anim_data
    act = bpy.data.actions[stats.action_name]
    by_bone = {}
    for fc in anim_data.all_action_fcurves(act):
        if fc.data_path.startswith('pose.bones["'):
            bone = fc.data_path.split('"')[1]
            by_bone.setdefault(bone, []).append(len(fc.keyframe_points))
    out = []
    for bones in chain_bones:
        counts = [c for b in bones for c in by_bone.get(b, [])]
        out.append((len(counts) * stats.n_frames, sum(counts)))
    return out


def _apply_fix(scene, rig, mode, progress, name):
    """The flight fix on the rig, the camera opened up to the corrected arc. Returns the JSON record."""
    from .blender import demo_character
    from .blender.flight_jobs import apply_fix
    stats, fix, result, _warnings = apply_fix(rig, scene, mode)
    raise_m = max(max(c.apex_after_m - c.apex_before_m for c in fix.flights), 0.0)
    view_m = demo_character.frame_camera(scene, demo_character.CAMERA_VIEW_HEIGHT_M + raise_m)
    progress(f"{name}: {stats.summary()}")
    return {"mode": mode, "layer": stats.action_name, "bone": stats.bone, "max_offset_m": round(stats.max_offset_m, 5),
            "apex_raise_m": round(raise_m, 5), "view_height_m": round(view_m, 4),
            "advice": [c.advice(result.fps) for c in fix.flights]}


def _clip(jump, sizes, progress, fix_mode=None):
    """Build, (fix,) analyse, bake and render one clip. Returns (record for JSON, report clip, tiles)."""
    from .blender import demo_character
    from .blender.analyze import run_analysis, summary_line, write_load_curve, write_markers
    from .blender.bake_ops import bake_chains
    from .blender.chain_sim import active_chains
    from .blender.contact_sheet import render_frames
    from .core.body_analysis import analysis_to_dict
    from .core.chain_summary import swing_angles
    timings = {}
    t0 = time.perf_counter()
    scene, rig, _perf = demo_character.build_clip(jump, render_size=sizes["tile"])
    timings["build_s"] = time.perf_counter() - t0
    fixed = None
    if fix_mode:
        t0 = time.perf_counter()
        fixed = _apply_fix(scene, rig, fix_mode, progress, jump.name)
        timings["fix_s"] = time.perf_counter() - t0

    t0 = time.perf_counter()
    result, warnings = run_analysis(rig, scene)
    write_load_curve(rig, result)
    write_markers(rig, scene, result)
    timings["analyse_s"] = time.perf_counter() - t0
    line = f"{jump.name}: {summary_line(result)}"
    progress(line)

    t0 = time.perf_counter()
    chains = active_chains(rig)
    stats, sampled, motion = bake_chains(rig, scene, chains, scene.frame_start, scene.frame_end, TOLERANCE_DEG)
    rig.overlap_assist.last_bake = f"{readout.count(len(chains), 'chain')}: {stats.summary()}"
    timings["simulate_and_bake_s"] = time.perf_counter() - t0
    progress(f"{jump.name}: {readout.count(len(chains), 'chain')}, {stats.summary()}")

    swings = [np.degrees(swing_angles(inp.target_dirs, dirs)[:, -1]) for inp, dirs in zip(sampled.inputs, motion.dirs)]
    keys = per_chain_keys(rig, stats, sampled.bone_names)
    chain_rows, report_chains = [], []
    for c, bones, sw, (before, after) in zip(chains, sampled.bone_names, swings, keys):
        chain_rows.append({"chain": c.name, "preset": c.preset, "bones": bones, "keys_before": before,
                           "keys_after": after, "max_tip_swing_deg": round(float(sw.max()), 2)})
        report_chains.append({"chain": c.name, "frames": sampled.frames.tolist(),
                              "tip_swing_deg": [round(float(x), 3) for x in sw],
                              "keys_before": before, "keys_after": after})

    t0 = time.perf_counter()
    events = sheet_frames(result, np.max(swings, axis=0), sampled.frames, scene.frame_end)
    tiles = render_frames(scene, list(events.values()))
    timings["render_s"] = time.perf_counter() - t0

    analysis = analysis_to_dict(result)
    analysis["warnings"] = warnings
    whole = np.isclose(result.frames, np.round(result.frames))
    record = {"scene": scene.name, "armature": rig.name, "title": jump.title, "summary": line,
              "flags": flags_of(result), "sheet_frames": events, "chains": chain_rows,
              "bake": {"layer": "Overlap Bake", "action": stats.action_name, "frames": stats.n_frames,
                       "keys_before": stats.keys_before, "keys_written": stats.keys_written,
                       "reduction_percent": round(stats.reduction_percent, 2),
                       "max_error_deg": round(stats.max_error_deg, 4), "tolerance_deg": TOLERANCE_DEG,
                       "key_split": "one bake per clip; per-chain counts from the bake action's F-curves"},
              "analysis": analysis, "timings_s": {k: round(v, 3) for k, v in timings.items()}}
    report_clip = {"name": f"{jump.title} ({jump.name})", "analysis": analysis,
                   "body_height": {"frames": result.frames[whole].tolist(),
                                   "height_m": result.body_pos_m[whole, 2].tolist()},
                   "chains": report_chains,
                   "images": {f"contact sheet, {jump.title.lower()}": f"strip_{jump.name}.png"}}
    from .blender.flight_jobs import report_extras
    report_clip.update(report_extras(rig, scene))   # spin per flight, CoM arc before/after the fix
    record["flight_physics"] = {k: report_clip[k] for k in ("spin", "flight_fix") if k in report_clip}
    if fixed is not None:
        record["fix_applied"] = fixed
    return record, report_clip, (events, tiles)


def _row_title(jump, flags, fixed=None):
    if not flags.get("flight"):
        return f"{jump.title}: no flight found"
    parts = [f"{jump.title}: {flags['verdict']}"]
    if fixed is not None:
        parts.append(f"apex {fixed['apex_raise_m'] * 100:+.0f} cm (view {fixed['view_height_m']:.1f} m tall)")
    off = flags["arm_swing_offset_frames"]
    if off is not None:
        parts.append(f"arms {abs(off):.1f} f {'after' if off > 0 else 'before'} takeoff")
    parts.append(f"flight accel {round(flags['horizontal_accel_mps2'], 1) + 0.0:+.1f} m/s2")   # no "-0.0"
    return ", ".join(parts)


def run_demo(out_dir, small=False, progress=print):
    """Build the two demo clips, run the whole pipeline, write the outputs into ``out_dir``.

    Parameters
    ----------
    out_dir : folder (created); existing outputs of the same names are replaced
    small : tiny renders for tests (the clips and the analysis are the same)
    progress : callable(str) for one-line progress messages

    Returns
    -------
    dict with the output paths ("blend", "json", "report", "contact_sheet", "strips"), the
    summary lines, per-clip flags, the contact sheet size and timings.
    """
    import bpy
    from .blender import demo_character
    from .blender.contact_sheet import SheetLayout, compose_sheet, write_png
    from .report.html_report import write_report
    sizes = SMALL if small else FULL
    out_dir = os.path.abspath(out_dir)
    os.makedirs(out_dir, exist_ok=True)
    t_start = time.perf_counter()
    bpy.ops.wm.read_factory_settings(use_empty=True)
    placeholder = bpy.context.window.scene
    records, report_clips, rows, lines, strips = {}, [], [], [], {}
    from .blender import registered
    with registered():
        for jump, fix_mode in demo_clips():
            record, report_clip, (events, tiles) = _clip(jump, sizes, progress, fix_mode)
            records[jump.name] = record
            report_clips.append(report_clip)
            lines.append(record["summary"])
            row = (_row_title(jump, record["flags"], record.get("fix_applied")),
                   [(f"{name} {frame}", tile) for (name, frame), tile in zip(events.items(), tiles)])
            rows.append(row)
            strip = os.path.join(out_dir, f"strip_{jump.name}.png")
            write_png(strip, compose_sheet([row], *sizes["tile"], sizes["scale"]))
            strips[jump.name] = strip

        t0 = time.perf_counter()
        sheet_path = os.path.join(out_dir, "contact_sheet.png")
        sheet = compose_sheet(rows, *sizes["tile"], sizes["scale"],
                              footer="Wren, our demo character. " + CAUTION.split(",")[0])
        write_png(sheet_path, sheet)
        layout = SheetLayout(len(rows), len(SHEET_EVENTS), *sizes["tile"], sizes["scale"])

        bpy.context.window.scene = bpy.data.scenes[demo_character.DEMO_JUMPS[0].name]
        if placeholder.name not in records:
            bpy.data.scenes.remove(placeholder)
        blend = os.path.join(out_dir, "overlap_demo.blend")
        tmp = os.path.join(out_dir, f".overlap_demo.tmp{os.getpid()}.blend")
        try:
            bpy.ops.wm.save_as_mainfile(filepath=tmp, copy=True)
            os.replace(tmp, blend)
        finally:
            if os.path.exists(tmp):
                os.remove(tmp)
        report = os.path.join(out_dir, "overlap_report.html")
        write_report(report, report_clips, title="Overlap Assist demo: Wren jumps a gap")
        timings = {"outputs_s": round(time.perf_counter() - t0, 3),
                   "total_s": round(time.perf_counter() - t_start, 3)}
        summary = {"caution": CAUTION, "scenario": "invented: character, jumps and numbers are ours",
                   "tolerance_deg": TOLERANCE_DEG, "clips": records, "timings_s": timings,
                   "outputs": {"blend": blend, "report": report, "contact_sheet": sheet_path, "strips": strips}}
        json_path = os.path.join(out_dir, "overlap_demo.json")
        tmp = f"{json_path}.tmp{os.getpid()}"
        with open(tmp, "w", encoding="utf-8") as f:
            json.dump(summary, f, indent=1, default=_json_default)
        os.replace(tmp, json_path)
    return {"blend": blend, "json": json_path, "report": report, "contact_sheet": sheet_path, "strips": strips,
            "clips": list(records), "fixes": {k: r["fix_applied"] for k, r in records.items() if "fix_applied" in r},
            "sheet_size": layout.size, "tile_size": sizes["tile"], "summary_lines": lines,
            "flags": {k: r["flags"] for k, r in records.items()},
            "chains": {k: r["chains"] for k, r in records.items()},
            "bake": {k: r["bake"] for k, r in records.items()},
            "sheet_frames": {k: r["sheet_frames"] for k, r in records.items()}, "timings_s": timings}


def _json_default(x):
    if isinstance(x, np.generic):
        v = x.item()
        return None if isinstance(v, float) and not math.isfinite(v) else v
    if isinstance(x, np.ndarray):
        return x.tolist()
    raise TypeError(f"not JSON serialisable: {type(x).__name__}")
