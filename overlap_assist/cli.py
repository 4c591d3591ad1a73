"""Headless commands: ``python -m overlap_assist <command> ...`` or ``blender --command overlap_assist ...``.

Files are opened with script auto-execution off. Errors print one line on stderr and exit
non-zero; nothing is written unless the command says so.
"""
import argparse
import contextlib
import json
import os
import sys

from .core.errors import OverlapAssistError

EXIT_INPUT = 2


class CliError(Exception):
    """A problem with the command's input; the message says what to do."""


def build_parser():
    p = argparse.ArgumentParser(prog="python -m overlap_assist",
                                description="Overlap Assist headless commands (figures are for animation "
                                            "plausibility only, not biomechanical or medical assessment)")
    sub = p.add_subparsers(dest="command", required=True)
    a = sub.add_parser("analyze", help="analyse a rig's body motion: load, phases, flight check")
    a.add_argument("file", help=".blend file to read (never modified)")
    a.add_argument("--armature", help="armature object name (default: the only armature)")
    a.add_argument("--body", choices=("root", "com"), help="body source: root bone or centre of mass")
    a.add_argument("--json", action="store_true", help="print one JSON object instead of a summary")
    s = sub.add_parser("simulate", help="simulate chains and print per-chain summaries (nothing is written)")
    s.add_argument("file", help=".blend file to read (never modified)")
    s.add_argument("--armature", help="armature object name (default: the only armature)")
    add_chain_options(s)
    s.add_argument("--json", action="store_true", help="print one JSON object instead of a summary")
    b = sub.add_parser("bake", help="simulate chains and bake them to keys on a separate layer, saved to --out")
    b.add_argument("file", help=".blend file to read")
    b.add_argument("--out", help="where to save the baked file (required unless --in-place)")
    b.add_argument("--in-place", action="store_true", help="overwrite the input file (atomically)")
    b.add_argument("--armature", help="armature object name (default: the only armature)")
    add_chain_options(b)
    b.add_argument("--tolerance-deg", type=float, default=0.5, help="key reduction tolerance in degrees (0 = every frame)")
    b.add_argument("--json", action="store_true", help="print one JSON object instead of a summary")
    t = sub.add_parser("batch", help="process many .blend files (analysis, bake of stored chains, report)")
    t.add_argument("inputs", nargs="+", help=".blend files or globs (quote globs)")
    t.add_argument("--out", required=True, help="output folder")
    t.add_argument("--preset-file", help="chain preset applied to every file's chains (and bakes them)")
    t.add_argument("--jobs", type=int, default=1, help="files processed at once (worker processes)")
    t.add_argument("--fix", action="store_true", help="also fix each flight (CoM on the ballistic arc) and write "
                                                     "<stem>.fixed.blend beside the baked file")
    w = sub.add_parser("process", help="one file of a batch: analysis JSON, report and (with chains) a baked copy")
    w.add_argument("file")
    w.add_argument("--out-dir", required=True)
    w.add_argument("--stem", required=True, help="base name of the outputs")
    w.add_argument("--preset-file")
    w.add_argument("--armature")
    w.add_argument("--fix", action="store_true", help="fix the flights first and save <stem>.fixed.blend")
    d = sub.add_parser("demo", help="build our demo character and jumps, analyse them, write the outputs")
    d.add_argument("--out", default="out/demo", help="output folder (created; existing outputs are replaced)")
    from .cli_flight import add_fix_flight_parser
    add_fix_flight_parser(sub)
    return p


def add_chain_options(p):
    p.add_argument("--chain", action="append", default=[], metavar="BONE[,BONE...]",
                   help="bones of one chain, root to tip (repeat for more chains; default: the chains stored in the file)")
    p.add_argument("--preset", help="chain preset by name (e.g. ponytail)")
    p.add_argument("--preset-file", help="chain preset from a JSON file of ours")
    for flag, help_text in (("--frequency-hz", "natural frequency (Hz); 0 = no spring"),
                            ("--damping-ratio", "damping ratio (1 = no overshoot)"),
                            ("--air-drag", "air drag (1/s)"), ("--gravity-scale", "gravity multiplier (× g)"),
                            ("--body-response", "multiplier of the felt body acceleration")):
        p.add_argument(flag, type=float, help=help_text)


def configure_chains(obj, scene, args):
    """Set up the chains the command works on (temporary, in memory). Returns the chain items."""
    from .core import presets
    settings = obj.overlap_assist
    if args.chain:
        settings.chains.clear()
        for spec in args.chain:
            names = [n.strip() for n in spec.split(",") if n.strip()]
            missing = [n for n in names if n not in obj.data.bones]
            if not names or missing:
                raise CliError(f"--chain {spec}: no bone named {', '.join(missing) or '(empty)'} in '{obj.name}'")
            chain = settings.chains.add()
            chain.name = names[0]
            for n in names:
                chain.bones.add().name = n
    chains = [c for c in settings.chains if not c.mute]
    if not chains:
        raise CliError(f"'{obj.name}' has no chains: name the bones with --chain BONE,BONE,...")
    fps = scene.render.fps / scene.render.fps_base
    doc = None
    if args.preset and args.preset_file:
        raise CliError("use either --preset or --preset-file, not both")
    if args.preset:
        doc = presets.preset_by_name(args.preset)
    elif args.preset_file:
        doc = presets.load_preset_file(args.preset_file)
    overrides = {k: getattr(args, k) for k in ("frequency_hz", "damping_ratio", "air_drag", "gravity_scale",
                                               "body_response") if getattr(args, k) is not None}
    if overrides:
        presets.validate_settings(overrides, "command line")
    for chain in chains:
        if doc:
            chain.apply_preset(doc, fps)
        if overrides:
            chain.response_mode = "PHYSICAL"
            for k, v in overrides.items():
                setattr(chain, k, v)
    return chains


@contextlib.contextmanager
def quiet_stdout():
    """Send Blender's own stdout chatter to stderr; yield a writer for our real output."""
    sys.stdout.flush()
    saved = os.dup(1)
    os.dup2(2, 1)
    out = os.fdopen(os.dup(saved), "w")
    try:
        yield out
    finally:
        out.flush()
        sys.stdout.flush()
        os.dup2(saved, 1)
        os.close(saved)
        out.close()


def import_bpy():
    try:
        import bpy
    except ImportError:
        raise CliError("this command needs Blender's Python module: run it with the project's venv "
                       "(scripts/setup_env.sh) or as 'blender --command overlap_assist ...'") from None
    return bpy


def open_blend(bpy, path):
    """Open ``path`` with embedded scripts disabled."""
    if not os.path.isfile(path):
        raise CliError(f"no such file: {path}")
    try:
        bpy.ops.wm.open_mainfile(filepath=os.path.abspath(path), load_ui=False, use_scripts=False)
    except RuntimeError as exc:
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else "unreadable"
        raise CliError(f"cannot read {path} as a .blend file ({first})") from None


def pick_armature(bpy, name):
    arms = [o for o in bpy.data.objects if o.type == 'ARMATURE']
    if name:
        obj = bpy.data.objects.get(name)
        if obj is None or obj.type != 'ARMATURE':
            raise CliError(f"no armature named '{name}'; armatures in the file: "
                           + (", ".join(sorted(o.name for o in arms)) or "none"))
        return obj
    if len(arms) == 1:
        return arms[0]
    if not arms:
        raise CliError("the file has no armature")
    raise CliError("the file has several armatures, choose one with --armature: "
                   + ", ".join(sorted(o.name for o in arms)))


def addon_registered(bpy):
    """Register the add-on for the command if it is not already (and clean up after)."""
    from .blender import registered
    return registered()


def cmd_analyze(args, out):
    bpy = import_bpy()
    from .blender.analyze import run_analysis, summary_line
    from .core.constants import CAUTION
    from .core.body_analysis import analysis_to_dict
    open_blend(bpy, args.file)
    with addon_registered(bpy):
        obj = pick_armature(bpy, args.armature)
        if args.body:
            obj.overlap_assist.body.body_source = args.body.upper()
        result, warnings = run_analysis(obj, bpy.context.scene)
        if args.json:
            d = analysis_to_dict(result)
            d["armature"] = obj.name
            d["warnings"] = warnings
            from .cli_flight import spin_json
            d["spin"] = spin_json(obj, bpy.context.scene)
            out.write(json.dumps(d) + "\n")
        else:
            out.write(f"{obj.name}: {summary_line(result)}\n")
            for w in warnings:
                out.write(f"warning: {w}\n")
            out.write(CAUTION + "\n")
    return 0


def write_atomic(path, text):
    """Write ``text`` to ``path`` through a temporary file and a rename (no half-written outputs)."""
    tmp = f"{path}.tmp{os.getpid()}"
    with open(tmp, "w", encoding="utf-8") as f:
        f.write(text)
    os.replace(tmp, path)


def cmd_demo(args, out):
    import_bpy()
    from .demo import CAUTION, run_demo
    result = run_demo(args.out, progress=lambda line: print(line, file=sys.stderr))
    for line in result["summary_lines"]:
        out.write(line + "\n")
    for name, flags in result["flags"].items():
        bake = result["bake"][name]
        out.write(f"{name}: arm swing {'after' if flags.get('late_arm_swing') else 'before'} takeoff, "
                  f"flight easing {'yes' if flags.get('horizontal_easing') else 'no'}; baked {bake['keys_written']} "
                  f"keys ({bake['reduction_percent']:.0f} % fewer than per frame): "
                  + ", ".join(f"{c['chain']} {c['keys_after']}" for c in result["chains"][name]) + "\n")
    for key in ("blend", "json", "report", "contact_sheet"):
        out.write(f"wrote {result[key]}\n")
    out.write(f"took {result['timings_s']['total_s']:.1f} s\n{CAUTION}\n")
    return 0


def simulate_summary(obj, scene, chains):
    """Solve the chains; per-chain read-outs (max swing, settle frame after the last landing, contacts)."""
    import math

    import numpy as np

    from .blender import chain_sim
    from .blender.analyze import run_analysis
    from .core.chain_summary import settle_index, swing_angles
    sampled = chain_sim.sample_rig(obj, scene, chains, scene.frame_start, scene.frame_end)
    motion, _ = chain_sim.solve(sampled, chain_sim.settings_for(obj, scene, chains))
    touchdown = None
    try:
        body, _ = run_analysis(obj, scene)
        if body.flights:
            touchdown = body.flights[-1].touchdown_frame
    except Exception:  # noqa: BLE001 - the chain summary stands without a body analysis
        pass
    rows = []
    for name, inp, dirs, contacts in zip(sampled.chain_names, sampled.inputs, motion.dirs, motion.contact_counts):
        ang = swing_angles(inp.target_dirs, dirs)
        settle = None
        if touchdown is not None:
            k = settle_index(ang[:, -1], int(np.ceil(touchdown - sampled.frames[0])))
            settle = None if k is None else float(sampled.frames[k])
        rows.append({"chain": name, "bones": len(inp.lengths_m),
                     "max_swing_deg": round(math.degrees(float(ang.max())), 3),
                     "settle_frame_after_landing": settle, "last_touchdown_frame": touchdown,
                     "collider_contacts": int(np.sum(contacts))})
    return rows


def cmd_simulate(args, out):
    bpy = import_bpy()
    open_blend(bpy, args.file)
    with addon_registered(bpy):
        obj = pick_armature(bpy, args.armature)
        scene = bpy.context.scene
        chains = configure_chains(obj, scene, args)
        rows = simulate_summary(obj, scene, chains)
        if args.json:
            out.write(json.dumps({"armature": obj.name, "frame_start": scene.frame_start,
                                  "frame_end": scene.frame_end, "chains": rows}) + "\n")
        else:
            for r in rows:
                settle = "not settled" if r["settle_frame_after_landing"] is None else \
                    f"settles at frame {r['settle_frame_after_landing']:.0f}"
                out.write(f"{r['chain']}: {r['bones']} bones, max swing {r['max_swing_deg']:.1f}°, {settle}, "
                          f"{r['collider_contacts']} collider contacts\n")
    return 0


def save_blend_atomic(bpy, path):
    """Save the open file to ``path`` through a temporary file in the same folder and a rename."""
    path = os.path.abspath(path)
    folder = os.path.dirname(path)
    if not os.path.isdir(folder):
        raise CliError(f"output folder does not exist: {folder}")
    tmp = os.path.join(folder, f".{os.path.basename(path)}.tmp{os.getpid()}.blend")
    try:
        bpy.ops.wm.save_as_mainfile(filepath=tmp, copy=True, compress=False)
        os.replace(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.remove(tmp)
    return path


def cmd_bake(args, out):
    bpy = import_bpy()
    from .blender import bake_layer
    from .blender.bake_ops import bake_chains
    if not args.out and not args.in_place:
        raise CliError("say where to save the result with --out OUT.blend (or --in-place to overwrite the input)")
    target = os.path.abspath(args.file if args.in_place else args.out)
    if not args.in_place and os.path.exists(args.file) and os.path.abspath(args.file) == target:
        raise CliError("--out is the input file: pass --in-place to overwrite it on purpose")
    if not 0 <= args.tolerance_deg <= 10:
        raise CliError(f"--tolerance-deg {args.tolerance_deg} is outside 0–10")
    open_blend(bpy, args.file)
    with addon_registered(bpy):
        obj = pick_armature(bpy, args.armature)
        scene = bpy.context.scene
        chains = configure_chains(obj, scene, args)
        stats, sampled, motion = bake_chains(obj, scene, chains, scene.frame_start, scene.frame_end,
                                             args.tolerance_deg)
        obj.overlap_assist.last_bake = f"{len(chains)} chains: {stats.summary()}"
        saved = save_blend_atomic(bpy, target)
        if args.json:
            out.write(json.dumps({"armature": obj.name, "out": saved, "chains": [c.name for c in chains],
                                  "bones": list(stats.bones), "frames": stats.n_frames,
                                  "keys_before": stats.keys_before, "keys_written": stats.keys_written,
                                  "reduction_percent": round(stats.reduction_percent, 2),
                                  "max_error_deg": stats.max_error_deg, "layer": bake_layer.BAKE_TRACK_NAME}) + "\n")
        else:
            out.write(f"{obj.name}: {len(chains)} chains, {stats.summary()}\nwrote {saved}\n")
    return 0


def cmd_batch(args, out):
    from .batch import run_batch
    if args.jobs < 1:
        raise CliError("--jobs must be at least 1")
    if args.preset_file:
        from .core import presets
        presets.load_preset_file(args.preset_file)  # refuse a bad preset before any work
    _, status = run_batch(args.inputs, args.out, os.path.abspath(args.preset_file) if args.preset_file else None,
                          args.jobs, out, fix=args.fix)
    return status


def cmd_process(args, out):
    """Worker: analyse one file, bake its chains if it has any, write outputs atomically, print a JSON line."""
    bpy = import_bpy()
    from .blender.analyze import run_analysis, summary_line
    from .blender.bake_ops import bake_chains
    from .blender.report_data import baked_keys_by_chain, clip_dict
    from .core import presets
    from .report import write_report
    open_blend(bpy, args.file)
    os.makedirs(args.out_dir, exist_ok=True)
    with addon_registered(bpy):
        obj = pick_armature(bpy, args.armature)
        scene = bpy.context.scene
        result, warnings = run_analysis(obj, scene)
        outputs, summary = [], summary_line(result)
        extras = {}
        if args.fix:   # the chains below are then simulated on the corrected body
            from .cli_flight import process_fix
            extras, line = process_fix(obj, scene, args.out_dir, args.stem, outputs)
            summary += f"; {line}"
        chains = [c for c in obj.overlap_assist.chains if not c.mute]
        sampled = motion = None
        keys = {}
        if chains:
            if args.preset_file:
                doc = presets.load_preset_file(args.preset_file)
                fps = scene.render.fps / scene.render.fps_base
                for c in chains:
                    c.apply_preset(doc, fps)
            stats, sampled, motion = bake_chains(obj, scene, chains, scene.frame_start, scene.frame_end, 0.5)
            keys = baked_keys_by_chain(obj, sampled, stats.n_frames)
            blend = args.stem + ".baked.blend"
            save_blend_atomic(bpy, os.path.join(args.out_dir, blend))
            outputs.append(blend)
            summary += f"; {stats.summary()}"
        clip = clip_dict(args.stem, result, sampled, motion, keys)
        clip.update(extras)
        clip["analysis"]["warnings"] = warnings
        analysis_name = args.stem + ".analysis.json"
        write_atomic(os.path.join(args.out_dir, analysis_name), json.dumps(clip["analysis"], indent=1))
        report_name = args.stem + ".report.html"
        write_report(os.path.join(args.out_dir, report_name), [clip])
        outputs += [analysis_name, report_name]
        out.write(json.dumps({"outputs": outputs, "summary": summary}) + "\n")
    return 0


def cmd_fix_flight(args, out):
    from .cli_flight import cmd_fix_flight as run
    return run(args, out)


COMMANDS = {"analyze": cmd_analyze, "simulate": cmd_simulate, "bake": cmd_bake, "batch": cmd_batch,
            "process": cmd_process, "demo": cmd_demo, "fix-flight": cmd_fix_flight}


def main(argv=None):
    args = build_parser().parse_args(argv)
    with quiet_stdout() as out:
        try:
            return COMMANDS[args.command](args, out)
        except (CliError, OverlapAssistError) as exc:
            print(f"overlap_assist: error: {exc}", file=sys.stderr)
            return EXIT_INPUT
        finally:
            _leave_blender_clean()


def _leave_blender_clean():
    """Blender 4.5 hangs at exit after a Python driver ran: reset to an empty file first."""
    bpy = sys.modules.get("bpy")
    if bpy is not None:
        try:
            bpy.ops.wm.read_factory_settings(use_empty=True)
        except Exception:  # noqa: BLE001 - best effort at exit
            pass


def blender_command(argv):
    """Entry point for ``blender --command overlap_assist ...``."""
    return main(list(argv))
