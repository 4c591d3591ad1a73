"""Headless flight physics: the ``fix-flight`` command and the spin check in ``analyze --json``.

Kept apart from ``cli.py`` (which only registers the command) so the flight tools stay in one place.
"""
import json
import os

FIX_MODES = {"keep-contacts": "KEEP_CONTACTS", "keep-apex": "KEEP_APEX"}


def add_fix_flight_parser(sub):
    f = sub.add_parser("fix-flight", help="put the body's centre of mass on the ballistic arc in every flight, "
                                          "on its own removable NLA layer, saved to --out")
    f.add_argument("file", help=".blend file to read")
    f.add_argument("--out", help="where to save the fixed file (required unless --in-place)")
    f.add_argument("--in-place", action="store_true", help="overwrite the input file (atomically)")
    f.add_argument("--armature", help="armature object name (default: the only armature)")
    f.add_argument("--mode", choices=tuple(FIX_MODES), default="keep-contacts",
                   help="keep takeoff and touchdown (the apex moves) or keep the apex (retiming is advised)")
    f.add_argument("--blend-frames", type=float, default=3.0, help="frames to fade the correction in and out")
    f.add_argument("--json", action="store_true", help="print one JSON object instead of a summary")
    return f


def spin_json(obj, scene):
    """The spin check as JSON (a dict with ``flights``, or ``error`` when the rig lacks segments)."""
    from .blender import flight_jobs
    from .core.angular_momentum import spin_to_dict
    from .core.errors import OverlapAssistError
    try:
        _result, checks, _warnings = flight_jobs.run_spin_check(obj, scene)
    except OverlapAssistError as exc:
        return {"error": str(exc)}
    return {"flights": spin_to_dict(checks)}


def cmd_fix_flight(args, out):
    from .cli import CliError, addon_registered, import_bpy, open_blend, pick_armature, save_blend_atomic
    from .blender import flight_fix_layer, flight_jobs
    from .core.constants import CAUTION
    bpy = import_bpy()
    if not args.out and not args.in_place:
        raise CliError("say where to save the result with --out OUT.blend (or --in-place to overwrite the input)")
    target = os.path.abspath(args.file if args.in_place else args.out)
    if not args.in_place and os.path.abspath(args.file) == target:
        raise CliError("--out is the input file: pass --in-place to overwrite it on purpose")
    if not 0 <= args.blend_frames <= 12:
        raise CliError(f"--blend-frames {args.blend_frames} is outside 0-12")
    open_blend(bpy, args.file)
    with addon_registered(bpy):
        obj = pick_armature(bpy, args.armature)
        scene = bpy.context.scene
        stats, fix, result, warnings = flight_jobs.apply_fix(obj, scene, FIX_MODES[args.mode], args.blend_frames)
        saved = save_blend_atomic(bpy, target)
        summary = flight_jobs.fix_summary(obj)
        if args.json:
            out.write(json.dumps({"armature": obj.name, "out": saved, "layer": flight_fix_layer.FIX_TRACK_NAME,
                                  "bone": stats.bone, "frames": stats.n_frames,
                                  "max_offset_m": round(stats.max_offset_m, 5), **summary,
                                  "warnings": warnings, "caution": CAUTION}) + "\n")
        else:
            out.write(f"{obj.name}: {stats.summary()}\n")
            for c in fix.flights:
                out.write(f"  {c.advice(result.fps)}\n")
            for w in warnings:
                out.write(f"warning: {w}\n")
            out.write(f"wrote {saved}\n{CAUTION}\n")
    return 0


def process_fix(obj, scene, out_dir, stem, outputs):
    """Batch worker step: report extras, then the fix layer, saved as ``<stem>.fixed.blend``.

    Returns (report clip extras, summary text); appends the file name to ``outputs``.
    """
    from .blender import flight_jobs
    from .cli import save_blend_atomic
    from .core.errors import OverlapAssistError
    extras = flight_jobs.report_extras(obj, scene)
    try:
        stats, _fix, _result, _warnings = flight_jobs.apply_fix(obj, scene)
    except OverlapAssistError as exc:
        return extras, f"flight not fixed: {exc}"
    name = stem + ".fixed.blend"
    save_blend_atomic(__import__("bpy"), os.path.join(out_dir, name))
    outputs.append(name)
    return extras, stats.summary()
