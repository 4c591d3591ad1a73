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
    d = sub.add_parser("demo", help="build our demo character and jumps, analyse them, write the outputs")
    d.add_argument("--out", default="out/demo", help="output folder (created; existing outputs are replaced)")
    return p


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


@contextlib.contextmanager
def addon_registered(bpy):
    """Register the add-on for the command if it is not already (and clean up after)."""
    if hasattr(bpy.types.Object, "overlap_assist"):
        yield
        return
    from . import register, unregister
    register()
    try:
        yield
    finally:
        unregister()


def cmd_analyze(args, out):
    bpy = import_bpy()
    from .blender.analyze import CAUTION, run_analysis, summary_line
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
    bpy = import_bpy()
    from .blender.analyze import CAUTION, run_analysis, summary_line, write_load_curve, write_markers
    from .blender.demo_scene import DEMO_CLIPS, build_demo_scene
    from .core.body_analysis import analysis_to_dict
    os.makedirs(args.out, exist_ok=True)
    bpy.ops.wm.read_factory_settings(use_empty=True)
    with addon_registered(bpy):
        report = {}
        for clip in DEMO_CLIPS:
            scene, obj = build_demo_scene(clip)
            result, warnings = run_analysis(obj, scene)
            write_load_curve(obj, result)
            write_markers(obj, scene, result)
            d = analysis_to_dict(result)
            d["warnings"] = warnings
            report[clip.name] = d
            out.write(f"{clip.name}: {summary_line(result)}\n")
        blend = os.path.abspath(os.path.join(args.out, "overlap_demo.blend"))
        tmp = blend + ".tmp.blend"
        bpy.ops.wm.save_as_mainfile(filepath=tmp, copy=True)
        os.replace(tmp, blend)
        summary = os.path.join(args.out, "overlap_demo.json")
        write_atomic(summary, json.dumps(report, indent=1))
        out.write(f"wrote {blend}\nwrote {summary}\n{CAUTION}\n")
    return 0


COMMANDS = {"analyze": cmd_analyze, "demo": cmd_demo}


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
