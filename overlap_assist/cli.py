"""Headless commands: ``python -m overlap_assist <command> ...`` or ``blender --command overlap_assist ...``.

Files are opened with script auto-execution off. stdout carries only our results, stderr only our
lines (Blender's own log lines are kept out, see :mod:`.streams`). Every problem is one line on
stderr: exit status 2 for something the user can fix (the line says what to do), 3 for an
unexpected error (the line says where its details were saved, to report it). Nothing is written
unless the command says so, and outputs are written atomically.
"""
import argparse
import contextlib
import json
import math
import os
import sys

from . import outputs
from . import streams as streams_mod
from .core import readout
from .core.errors import OverlapAssistError

EXIT_INPUT = 2
EXIT_UNEXPECTED = 3
PREFIX = "overlap_assist: error: "


class CliError(Exception):
    """A problem with the command's input; the message says what to do."""


class _Parser(argparse.ArgumentParser):
    """Usage errors as one line (argparse prints the whole usage block otherwise)."""

    def error(self, message):
        self.exit(EXIT_INPUT, f"{PREFIX}{message} (see {self.prog} --help)\n")


FIX_MODES = {"keep-contacts": "KEEP_CONTACTS", "keep-apex": "KEEP_APEX"}


def add_fix_flight_parser(sub):
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


def build_parser():
    p = _Parser(prog="python -m overlap_assist",
                description="Overlap Assist headless commands (figures are for animation "
                            "plausibility only, not biomechanical or medical assessment)")
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser)
    a = sub.add_parser("analyze", help="analyze a rig's body motion: load, phases, flight check")
    a.add_argument("file", help=".blend file to read (never modified)")
    add_target_options(a, "default: every armature that moves (one JSON line each with --json)")
    add_body_options(a)
    a.add_argument("--json", action="store_true", help="print one JSON object per armature instead of a summary")
    s = sub.add_parser("simulate", help="simulate chains and print per-chain summaries (nothing is written)")
    s.add_argument("file", help=".blend file to read (never modified)")
    add_target_options(s, "default: the armature that has chains (or the --chain bones)")
    add_chain_options(s)
    add_body_options(s)
    s.add_argument("--json", action="store_true", help="print one JSON object instead of a summary")
    b = sub.add_parser("bake", help="simulate chains and bake them to keys on a separate layer, saved to --out")
    b.add_argument("file", help=".blend file to read")
    b.add_argument("--out", help="where to save the baked file (required unless --in-place)")
    b.add_argument("--in-place", action="store_true",
                   help="overwrite the input file (atomically; a symlink's target; not a read-only file)")
    add_target_options(b, "default: the armature that has chains (or the --chain bones)")
    add_chain_options(b)
    b.add_argument("--tolerance-deg", type=float, default=0.5, help="key reduction tolerance in degrees (0 = every frame)")
    add_key_layout_option(b)
    b.add_argument("--json", action="store_true", help="print one JSON object instead of a summary")
    b.add_argument("--check", action="store_true",
                   help="only say whether the file's bake still matches its animation (exit 1 if stale or none)")
    t = sub.add_parser("batch", help="process many .blend files (analysis, bake of stored chains, report)")
    t.add_argument("inputs", nargs="+", help=".blend files or globs (quote globs)")
    t.add_argument("--out", required=True, help="output folder (created; its own outputs are never read as inputs)")
    t.add_argument("--preset-file", help="chain preset applied to every file's chains (and bakes them)")
    add_target_options(t, "default: every armature that moves")
    t.add_argument("--jobs", type=int, default=None,
                   help="files processed at once (worker processes; default and maximum: the CPU count)")
    t.add_argument("--fix", action="store_true", help="also fix each flight (center of mass on the ballistic arc) "
                                                     "and write <stem>.fixed.blend beside the baked file")
    add_key_layout_option(t)
    w = sub.add_parser("process", help="one file of a batch: analysis JSON, report and (with chains) a baked copy")
    w.add_argument("file", help=".blend file to read (never modified)")
    w.add_argument("--out-dir", required=True, help="folder for the outputs")
    w.add_argument("--stem", required=True, help="base name of the outputs")
    w.add_argument("--preset-file", help="chain preset applied to the file's chains")
    add_target_options(w, "default: every armature that moves")
    w.add_argument("--details-file", help=argparse.SUPPRESS)
    w.add_argument("--fix", action="store_true", help="fix the flights first and save <stem>.fixed.blend")
    add_key_layout_option(w)
    d = sub.add_parser("demo", help="build our demo character and jumps, analyze them, write the outputs")
    d.add_argument("--out", default="out/demo", help="output folder (created; existing outputs are replaced)")
    add_fix_flight_parser(sub)
    return p


def add_key_layout_option(p):
    p.add_argument("--shared-key-frames", action="store_true",
                   help="key all rotation channels of a bone on the same frames (more keys, easier to retime by "
                        "hand); default: each channel only where it needs keys (fewest keys)")


def add_body_options(p):
    p.add_argument("--body", choices=("auto", "root", "com"),
                   help="body source: auto (center of mass when every segment is matched, else the root bone; "
                        "the default), root bone or center of mass")
    p.add_argument("--contact", metavar="BONE[,BONE...]",
                   help="bones that touch the ground (default: the feet and toes found by name)")
    p.add_argument("--override", action="append", default=[], metavar="ROLE=BONE",
                   help="bone for a body segment role, e.g. thigh.L=Leg_upper_left (repeat for more)")


def apply_body_options(obj, args):
    """Put --body, --contact and --override on the armature's settings (in memory only)."""
    from .core.body_segments import SIDED_ROLES, SIDES
    roles = {f"{r}.{s}" for r in SIDED_ROLES for s in SIDES} | {"neck", "head", "hips"}
    body = obj.overlap_assist.body
    if getattr(args, "body", None):
        body.body_source = args.body.upper()
    if getattr(args, "contact", None):
        names = [n.strip() for n in args.contact.split(",") if n.strip()]
        missing = [n for n in names if n not in obj.data.bones]
        if missing:
            raise CliError(f"--contact names bones that are not in '{obj.name}': {', '.join(missing)}")
        body.contact_bones = ", ".join(names)
    pairs = []
    for item in getattr(args, "override", None) or []:
        role, sep, bone = (x.strip() for x in item.partition("="))
        if not sep or not role or not bone:
            raise CliError(f"--override '{item}' must be ROLE=BONE, e.g. thigh.L=Leg_upper_left")
        if role not in roles:
            raise CliError(f"--override: unknown role '{role}'; roles are " + ", ".join(sorted(roles)))
        if bone not in obj.data.bones:
            raise CliError(f"--override: bone '{bone}' is not in '{obj.name}'")
        pairs.append(f"{role}={bone}")
    if pairs:
        body.bone_overrides = ", ".join(pairs)


def add_target_options(p, armature_default):
    p.add_argument("--scene", help="scene to work in (default: the scene that holds the armature, "
                                   "the file's active scene first)")
    p.add_argument("--armature", help=f"armature object name ({armature_default})")


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


# ---------------------------------------------------------------- opening and choosing

def import_bpy():
    try:
        import bpy
    except ImportError:
        raise CliError("this command needs Blender's Python module: run it with the project's venv "
                       "(scripts/setup_env.sh) or as 'blender --command overlap_assist ...'") from None
    return bpy


def open_blend(bpy, path):
    """Open ``path`` with embedded scripts disabled."""
    outputs.check_input_file(path)
    try:
        bpy.ops.wm.open_mainfile(filepath=os.path.abspath(path), load_ui=False, use_scripts=False)
    except RuntimeError as exc:
        text = str(exc).strip()
        first = text.splitlines()[-1].replace("Error: ", "").strip() if text else "unreadable"
        raise CliError(f"cannot read {path} as a .blend file ({first})") from None


def _names(objs):
    return ", ".join(sorted(o.name for o in objs)) or "none"


def pick_scene(bpy, name):
    """The scene named ``name`` (None when no --scene was given)."""
    if name is None:
        return None
    scene = bpy.data.scenes.get(name)
    if scene is None:
        raise CliError(f"no scene named '{name}'; scenes in the file: {_names(bpy.data.scenes)}")
    return scene


def home_scene(bpy, obj):
    """The scene to evaluate ``obj`` in: the file's active scene if it holds ``obj``, else the first that does."""
    active = _window_scene(bpy)
    holding = [s for s in bpy.data.scenes if s.objects.get(obj.name) is not None]
    if active is not None and active in holding:
        return active
    if not holding:
        raise CliError(f"armature '{obj.name}' is in no scene: link it to a scene first")
    return holding[0]


def _window_scene(bpy):
    win = bpy.context.window or (bpy.context.window_manager.windows[0]
                                 if bpy.context.window_manager and bpy.context.window_manager.windows else None)
    return win.scene if win is not None else bpy.context.scene


def pick_targets(bpy, args, wanted, what, several=False):
    """[(armature, scene)] the command works on.

    ``wanted(obj)`` says whether an armature qualifies without --armature (it moves, it has chains);
    ``what`` says that in the messages ("with chains"). With ``several`` every qualifying armature is taken,
    otherwise more than one is an error listing the candidates.
    """
    scene = pick_scene(bpy, getattr(args, "scene", None))
    where = f"scene '{scene.name}'" if scene is not None else "the file"
    if scene is not None:
        pool = [o for o in scene.objects if o.type == 'ARMATURE']
    else:
        pool = [o for o in bpy.data.objects if o.type == 'ARMATURE'
                and any(s.objects.get(o.name) is not None for s in bpy.data.scenes)]
    name = getattr(args, "armature", None)
    if name:
        obj = next((o for o in pool if o.name == name), None)
        if obj is None:
            raise CliError(f"no armature named '{name}' in {where}; armatures there: {_names(pool)}")
        return [(obj, scene or home_scene(bpy, obj))]
    if not pool:
        raise CliError(f"{where} has no armature")
    chosen = [o for o in pool if wanted(o)]
    if not chosen:
        if len(pool) == 1:
            chosen = pool  # its own check says what is missing
        else:
            raise CliError(f"no armature in {where} {what}; armatures there: {_names(pool)} "
                           f"(choose one with --armature)")
    if len(chosen) > 1 and not several:
        raise CliError(f"several armatures in {where} {what}, choose one with --armature: {_names(chosen)}")
    return [(o, scene or home_scene(bpy, o)) for o in sorted(chosen, key=lambda o: o.name)]


def moving_targets(bpy, args):
    from .blender.rig_motion import has_motion
    return pick_targets(bpy, args, has_motion, "with motion", several=True)


def chain_targets(bpy, args):
    if args.chain:
        wanted_bones = {n.strip() for spec in args.chain for n in spec.split(",") if n.strip()}
        return pick_targets(bpy, args, lambda o: bool(wanted_bones) and wanted_bones <= set(o.data.bones.keys()),
                            "with the --chain bones")
    return pick_targets(bpy, args, lambda o: any(not c.mute for c in o.overlap_assist.chains), "with chains")


@contextlib.contextmanager
def in_scene(bpy, scene):
    """Evaluate in ``scene`` (the window's scene while inside; the file's active scene is put back)."""
    win = bpy.context.window or (bpy.context.window_manager.windows[0]
                                 if bpy.context.window_manager.windows else None)
    before = win.scene if win is not None else None
    if win is not None and before != scene:
        win.scene = scene
        # Blender 4.5 evaluates a scene that was never the active one only after this (measured:
        # without it frame_set leaves the pose at rest; 5.x does not need it).
        bpy.context.view_layer.update()
    try:
        yield scene
    finally:
        if win is not None and before is not None and win.scene != before:
            win.scene = before


def chain_frame_range(obj, scene):
    """The frames a bake covers (``frame_ranges.chain_range``: the stored bake range, else the scene's)."""
    from .blender.frame_ranges import chain_range
    return chain_range(obj, scene)


def configure_chains(obj, scene, args):
    """Set up the chains the command works on (temporary, in memory). Returns the chain items."""
    from .blender.chain_sim import active_chains
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
    if not any(not c.mute for c in settings.chains):
        raise CliError(f"'{obj.name}' has no chains: name the bones with --chain BONE,BONE,...")
    chains = active_chains(obj)  # a stored chain naming a missing bone is refused by name
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
    for k, v in overrides.items():  # in the command line's own words (the flag, not the setting's key)
        lo, hi = presets.SETTING_RANGES[k]
        if not (math.isfinite(v) and lo <= v <= hi):
            raise CliError(f"--{k.replace('_', '-')} {v:g} is outside {lo:g}–{hi:g}")
    for chain in chains:
        if doc:
            chain.apply_preset(doc, fps)
        if overrides:
            chain.response_mode = "PHYSICAL"
            for k, v in overrides.items():
                setattr(chain, k, v)
    return chains


def addon_registered(bpy):
    """Register the add-on for the command if it is not already (and clean up after)."""
    from .blender import registered
    return registered()


# ---------------------------------------------------------------- commands

def cmd_analyze(args, io):
    bpy = import_bpy()
    from .blender.analyze import run_analysis, summary_line
    from .core.body_analysis import analysis_to_dict
    from .core.constants import CAUTION
    open_blend(bpy, args.file)
    with addon_registered(bpy):
        targets = moving_targets(bpy, args)
        for obj, scene in targets:
            with in_scene(bpy, scene):
                apply_body_options(obj, args)
                result, warnings = run_analysis(obj, scene)
                if args.json:
                    from .cli_flight import spin_json
                    spin = spin_json(obj, scene)
            if args.json:
                d = analysis_to_dict(result)
                d["armature"], d["scene"] = obj.name, scene.name
                d["warnings"] = warnings
                d["spin"] = spin
                io.out.write(json.dumps(d) + "\n")
            else:
                io.out.write(f"{obj.name} (scene {scene.name}): {summary_line(result)}\n")
                for w in warnings:
                    io.out.write(f"warning: {w}\n")
        if not args.json:
            io.out.write(CAUTION + "\n")
    return 0


def write_atomic(path, text):
    """Write ``text`` to ``path`` through a temporary file and a rename (no half-written outputs)."""
    outputs.write_text_atomic(path, text)


def cmd_demo(args, io):
    import_bpy()
    from .demo import CAUTION, run_demo
    out = io.out
    result = run_demo(args.out, progress=lambda line: (io.err.write(line + "\n"), io.err.flush()))
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
    start, end = chain_frame_range(obj, scene)
    extra = ()
    try:
        from .blender.sample_body import body_plan
        extra = tuple(body_plan(obj, scene, obj.overlap_assist.body).bones)
    except OverlapAssistError:  # the chain summary stands without a body analysis
        pass
    sampled = chain_sim.sample_rig(obj, scene, chains, start, end, extra_bones=extra)
    motion, _ = chain_sim.solve(sampled, chain_sim.settings_for(obj, scene, chains))
    touchdown = None
    try:
        body, _ = run_analysis(obj, scene, sampled=sampled.extra)
        if body.flights:
            touchdown = body.flights[-1].touchdown_frame
    except OverlapAssistError:  # the chain summary stands without a body analysis
        pass
    rows = []
    for chain, inp, dirs, contacts in zip(chains, sampled.inputs, motion.dirs, motion.contact_counts):
        name = chain.name
        ang = swing_angles(inp.target_dirs, dirs)
        settle = None
        if touchdown is not None:
            k = settle_index(ang[:, -1], int(np.ceil(touchdown - sampled.frames[0])))
            settle = None if k is None else float(sampled.frames[k])
        rows.append({"chain": name, "bones": len(inp.lengths_m),
                     "max_swing_deg": round(math.degrees(float(ang.max())), 3),
                     "settle_frame_after_landing": settle, "last_touchdown_frame": touchdown,
                     "collider_contacts": int(np.sum(contacts)), "driven_by": chain_sim.chain_notes(obj, chain)})
    return rows, (start, end)


def cmd_simulate(args, io):
    bpy = import_bpy()
    open_blend(bpy, args.file)
    with addon_registered(bpy):
        ((obj, scene),) = chain_targets(bpy, args)
        with in_scene(bpy, scene):
            chains = configure_chains(obj, scene, args)
            apply_body_options(obj, args)
            rows, (start, end) = simulate_summary(obj, scene, chains)
        if args.json:
            io.out.write(json.dumps({"armature": obj.name, "scene": scene.name, "frame_start": start,
                                     "frame_end": end, "chains": rows}) + "\n")
        else:
            for r in rows:
                settle = "not settled" if r["settle_frame_after_landing"] is None else \
                    f"settles at frame {r['settle_frame_after_landing']:.0f}"
                io.out.write(f"{r['chain']}: {r['bones']} bones, max swing {r['max_swing_deg']:.1f}°, {settle}, "
                             f"{r['collider_contacts']} collider contacts\n")
                for note in r["driven_by"]:
                    io.out.write(f"  {note}\n")
    return 0


def save_blend_atomic(bpy, path, compress=False):
    """Save the open file to ``path`` through a temporary file in the same folder and a rename.

    ``compress``: write it compressed (Blender's Zstandard), as a compressed input was. A replaced
    file keeps its permission bits. Checks of the target are the caller's (:mod:`.outputs`).
    """
    path = os.path.abspath(path)
    outputs.check_folder_writable(os.path.dirname(path))
    tmp = outputs.temporary_beside(path, ".blend")
    try:
        bpy.ops.wm.save_as_mainfile(filepath=tmp, copy=True, compress=bool(compress))
        outputs.replace_keeping_mode(tmp, path)
    except RuntimeError as exc:
        text = str(exc).strip()
        raise CliError(f"cannot save {path}: {text.splitlines()[-1] if text else 'Blender refused'}") from None
    finally:
        if os.path.exists(tmp):
            os.remove(tmp)
    return path


def output_target(args):
    """(file to write, compress like the input) for a command that saves the file it read.

    ``--out`` and ``--in-place`` exclude each other and one is needed; the input and the output are
    checked before any work (outputs.py), so a refusal changes nothing.
    """
    if args.in_place and args.out:
        raise CliError("use either --in-place or --out, not both")
    if not args.out and not args.in_place:
        raise CliError("say where to save the result with --out OUT.blend (or --in-place to overwrite the input)")
    outputs.check_input_file(args.file)
    target = outputs.in_place_target(args.file) if args.in_place else outputs.out_file_target(args.out, [args.file])
    return target, outputs.is_compressed(args.file)


def cmd_bake(args, io):
    if args.check:
        return check_bake(import_bpy(), args, io.out)
    if not 0 <= args.tolerance_deg <= 10:
        raise CliError(f"--tolerance-deg {args.tolerance_deg} is outside 0–10")
    target, compress = output_target(args)
    bpy = import_bpy()
    from .blender import bake_layer
    from .blender.bake_ops import bake_chains
    open_blend(bpy, args.file)
    with addon_registered(bpy):
        ((obj, scene),) = chain_targets(bpy, args)
        with in_scene(bpy, scene):
            chains = configure_chains(obj, scene, args)
            start, end = chain_frame_range(obj, scene)
            stats, sampled, motion = bake_chains(obj, scene, chains, start, end, args.tolerance_deg,
                                                 shared_frames=args.shared_key_frames)
            obj.overlap_assist.last_bake = f"{readout.count(len(chains), 'chain')}: {stats.summary()}"
        saved = save_blend_atomic(bpy, target, compress)
        if args.json:
            io.out.write(json.dumps({"armature": obj.name, "scene": scene.name, "out": saved,
                                     "chains": [c.name for c in chains], "bones": list(stats.bones),
                                     "frames": stats.n_frames, "keys_before": stats.keys_before,
                                     "keys_written": stats.keys_written,
                                     "reduction_percent": round(stats.reduction_percent, 2),
                                     "max_error_deg": stats.max_error_deg, "compressed": compress,
                                     "layer": bake_layer.BAKE_TRACK_NAME}) + "\n")
        else:
            io.out.write(f"{obj.name} (scene {scene.name}): {readout.count(len(chains), 'chain')}, {stats.summary()}\n"
                         f"wrote {saved}\n")
    return 0


def check_bake(bpy, args, out):
    """``bake --check``: is the file's bake current, stale (the animation changed after it) or missing?"""
    from .blender import bake_layer
    open_blend(bpy, args.file)
    with addon_registered(bpy):
        ((obj, scene),) = pick_targets(bpy, args, bake_layer.has_bake, "with an Overlap bake")
        state = bake_layer.bake_state(obj)
        line = {None: f"no {bake_layer.BAKE_TRACK_NAME} layer: bake first",
                "current": "the bake is current",
                "stale": "the bake is stale: the animation changed after the bake; bake again"}[state]
        if args.json:
            out.write(json.dumps({"armature": obj.name, "bake": state or "none"}) + "\n")
        else:
            out.write(f"{obj.name}: {line}\n")
    return 0 if state == "current" else 1


def cmd_batch(args, io):
    from .batch import cpu_count, run_batch
    if args.jobs is not None and args.jobs < 1:
        raise CliError("--jobs must be at least 1")
    jobs = args.jobs or cpu_count()
    if jobs > cpu_count():
        io.out.write(f"note: --jobs {jobs} lowered to {cpu_count()}, the number of CPUs\n")
        jobs = cpu_count()
    if args.preset_file:
        from .core import presets
        presets.load_preset_file(args.preset_file)  # refuse a bad preset before any work
    out_dir = outputs.out_folder_target(args.out)
    _, status = run_batch(args.inputs, out_dir, os.path.abspath(args.preset_file) if args.preset_file else None,
                          jobs, io.out, scene=args.scene, armature=args.armature, fix=args.fix,
                          shared_frames=args.shared_key_frames)
    return status


def cmd_process(args, io):
    """Worker: analyze one file, bake its chains if it has any, write outputs atomically, print a JSON line.

    Every armature that moves (or the one named) is analyzed in its scene; one report holds them all.
    Outputs: ``<stem>.analysis.json`` (``<stem>.<armature>.analysis.json`` each when there are several),
    ``<stem>.report.html``, when chains were baked ``<stem>.baked.blend`` and, with ``--fix``,
    ``<stem>.fixed.blend`` (the flight-fix layer; the baked file then holds the fix and the chains
    baked on the corrected body).
    """
    bpy = import_bpy()
    from .blender.analyze import run_analysis, summary_line
    from .blender.bake_ops import bake_chains
    from .blender.chain_sim import active_chains
    from .blender.report_data import baked_keys_by_chain, clip_dict
    from .core import presets
    from .report import write_report
    out_dir = outputs.out_folder_target(args.out_dir)
    compress = outputs.is_compressed(args.file)
    open_blend(bpy, args.file)
    with addon_registered(bpy):
        targets = moving_targets(bpy, args)
        several = len(targets) > 1
        doc = presets.load_preset_file(args.preset_file) if args.preset_file else None
        clips, summaries, outs, baked = [], [], [], False
        extras, fix_lines = {}, {}
        if args.fix:   # fix every flight first: the chains below are then simulated on the corrected body
            from .cli_flight import process_fix
            fixed = False
            for obj, scene in targets:
                with in_scene(bpy, scene):
                    extras[obj.name], fix_lines[obj.name], done = process_fix(obj, scene)
                    fixed = fixed or done
            if fixed:   # the fix layer alone; the baked file beside it holds the fix and the bake
                name = args.stem + ".fixed.blend"
                save_blend_atomic(bpy, os.path.join(out_dir, name), compress)
                outs.append(name)
        from .blender.flight_jobs import fix_muted
        for obj, scene in targets:
            with in_scene(bpy, scene):
                with fix_muted(obj):   # the analysis is of the animation as keyed
                    result, warnings = run_analysis(obj, scene)
                summary = summary_line(result)
                if obj.name in fix_lines:
                    summary += f"; {fix_lines[obj.name]}"
                sampled = motion = None
                keys = {}
                if any(not c.mute for c in obj.overlap_assist.chains):
                    chains = active_chains(obj)
                    if doc:
                        fps = scene.render.fps / scene.render.fps_base
                        for c in chains:
                            c.apply_preset(doc, fps)
                    start, end = chain_frame_range(obj, scene)
                    stats, sampled, motion = bake_chains(obj, scene, chains, start, end, 0.5,
                                                         shared_frames=args.shared_key_frames)
                    obj.overlap_assist.last_bake = f"{readout.count(len(chains), 'chain')}: {stats.summary()}"
                    keys = baked_keys_by_chain(obj, sampled, stats.n_frames)
                    summary += f"; {stats.summary()}"
                    baked = True
            name = f"{obj.name} (scene {scene.name})" if several else args.stem
            clip = clip_dict(name, result, sampled, motion, keys)
            clip.update(extras.get(obj.name, {}))
            clip["analysis"]["warnings"] = warnings
            clip["analysis"]["armature"], clip["analysis"]["scene"] = obj.name, scene.name
            clips.append(clip)
            summaries.append(f"{obj.name}: {summary}" if several else summary)
            analysis_name = f"{args.stem}.{_safe(obj.name)}.analysis.json" if several else f"{args.stem}.analysis.json"
            write_atomic(os.path.join(out_dir, analysis_name), json.dumps(clip["analysis"], indent=1))
            outs.append(analysis_name)
        if baked:
            blend = args.stem + ".baked.blend"
            save_blend_atomic(bpy, os.path.join(out_dir, blend), compress)
            outs.insert(0, blend)
        report_name = args.stem + ".report.html"
        write_report(os.path.join(out_dir, report_name), clips)
        outs.append(report_name)
        io.out.write(json.dumps({"outputs": outs, "summary": " | ".join(summaries),
                                 "armatures": [o.name for o, _ in targets]}) + "\n")
    return 0


def _safe(name):
    """An object name as part of a file name."""
    return "".join(ch if ch.isalnum() or ch in "-_." else "_" for ch in name) or "armature"


def cmd_fix_flight(args, io):
    from .blender import flight_fix_layer, flight_jobs
    from .core.constants import CAUTION
    if not 0 <= args.blend_frames <= 12:
        raise CliError(f"--blend-frames {args.blend_frames} is outside 0–12")
    target, compress = output_target(args)
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


COMMANDS = {"analyze": cmd_analyze, "simulate": cmd_simulate, "bake": cmd_bake, "batch": cmd_batch,
            "process": cmd_process, "demo": cmd_demo, "fix-flight": cmd_fix_flight}


def _os_error_line(exc: OSError) -> str:
    where = f" {exc.filename}" if exc.filename else ""
    return f"cannot use{where}: {exc.strerror or exc}"


def main(argv=None, restore_streams=True):
    """Run one command; returns the exit status. ``restore_streams=False`` when the process exits next."""
    argv = list(sys.argv[1:] if argv is None else argv)
    args = build_parser().parse_args(argv)
    with streams_mod.captured(restore=restore_streams) as io:
        try:
            return COMMANDS[args.command](args, io)
        except (CliError, OverlapAssistError, outputs.OutputError) as exc:
            io.err.write(f"{PREFIX}{exc}\n")
            return EXIT_INPUT
        except OSError as exc:
            io.err.write(f"{PREFIX}{_os_error_line(exc)}\n")
            return EXIT_INPUT
        except KeyboardInterrupt:
            io.err.write(f"{PREFIX}interrupted: nothing more was written\n")
            return 130
        except Exception as exc:  # noqa: BLE001 - the catch-all: one line, details to a file
            text = streams_mod.details_text(exc, ["overlap_assist", *argv], io.log_tail())
            try:
                where = streams_mod.write_details(text, getattr(args, "details_file", None))
                hint = f"details saved in {where}"
            except OSError:
                hint = "no details could be saved"
            io.err.write(f"{PREFIX}unexpected problem ({streams_mod.short_text(exc)}); this is a bug in "
                         f"Overlap Assist: please report it with the file and the details ({hint})\n")
            return EXIT_UNEXPECTED
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
    return main(list(argv), restore_streams=False)
