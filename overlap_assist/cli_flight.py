"""Headless flight physics: the ``fix-flight`` command and the spin check in ``analyze --json``.

Kept apart from ``cli.py`` (which only registers the command) so the flight tools stay in one place.
"""
import json

FIX_MODES = {"keep-contacts": "KEEP_CONTACTS", "keep-apex": "KEEP_APEX"}


def add_fix_flight_parser(sub):
    from .cli import add_body_options, add_target_options
    f = sub.add_parser("fix-flight", help="put the body's center of mass on the ballistic arc in every flight, "
                                          "on its own removable NLA layer, saved to --out")
    f.add_argument("file", help=".blend file to read")
    f.add_argument("--out", help="where to save the fixed file (required unless --in-place)")
    f.add_argument("--in-place", action="store_true",
                   help="overwrite the input file (atomically; a symlink's target; not a read-only file)")
    add_target_options(f, "default: the armature that moves")
    add_body_options(f)
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


def cmd_fix_flight(args, io):
    from . import outputs
    from .cli import (CliError, addon_registered, apply_body_options, import_bpy, in_scene, open_blend,
                      pick_targets, save_blend_atomic)
    from .blender import flight_fix_layer, flight_jobs
    from .core.constants import CAUTION
    if args.in_place and args.out:
        raise CliError("use either --in-place or --out, not both")
    if not args.out and not args.in_place:
        raise CliError("say where to save the result with --out OUT.blend (or --in-place to overwrite the input)")
    if not 0 <= args.blend_frames <= 12:
        raise CliError(f"--blend-frames {args.blend_frames} is outside 0–12")
    outputs.check_input_file(args.file)
    target = outputs.in_place_target(args.file) if args.in_place else outputs.out_file_target(args.out, [args.file])
    compress = outputs.is_compressed(args.file)
    bpy = import_bpy()
    from .blender.rig_motion import has_motion
    open_blend(bpy, args.file)
    with addon_registered(bpy):
        ((obj, scene),) = pick_targets(bpy, args, has_motion, "with motion")
        with in_scene(bpy, scene):
            apply_body_options(obj, args)
            stats, fix, result, warnings = flight_jobs.apply_fix(obj, scene, FIX_MODES[args.mode], args.blend_frames)
        saved = save_blend_atomic(bpy, target, compress)
        summary = flight_jobs.fix_summary(obj)
        if args.json:
            io.out.write(json.dumps({"armature": obj.name, "scene": scene.name, "out": saved,
                                     "layer": flight_fix_layer.FIX_TRACK_NAME, "bone": stats.bone,
                                     "frames": stats.n_frames, "max_offset_m": round(stats.max_offset_m, 5),
                                     "compressed": compress, **summary, "warnings": warnings,
                                     "caution": CAUTION}) + "\n")
        else:
            io.out.write(f"{obj.name} (scene {scene.name}): {stats.summary()}\n")
            for c in fix.flights:
                io.out.write(f"  {c.advice(result.fps)}\n")
            for w in warnings:
                io.out.write(f"warning: {w}\n")
            io.out.write(f"wrote {saved}\n{CAUTION}\n")
    return 0


def process_fix(obj, scene):
    """Batch worker step: the report's flight extras, then the fix layer written on ``obj``.

    Returns (report clip extras, summary text, whether a fix layer was written).
    """
    from .blender import flight_jobs
    from .core.errors import OverlapAssistError
    extras = flight_jobs.report_extras(obj, scene)
    try:
        stats, _fix, _result, _warnings = flight_jobs.apply_fix(obj, scene)
    except OverlapAssistError as exc:
        return extras, f"flight not fixed: {exc}", False
    return extras, stats.summary(), True
