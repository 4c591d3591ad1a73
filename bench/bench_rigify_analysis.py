"""Analysis and simulate cost on a generated Rigify human rig, against the bare frame-stepping floor.

    .venv/bpy5.3/bin/python bench/bench_rigify_analysis.py

The rig is generated with Blender's bundled Rigify (human metarig) and three jumps are keyed on
its controls (torso, IK feet, IK hands) per frame. Measured in this one run, median of RUNS:

* floor     = ``scene.frame_set`` + one ``pose.bones.foreach_get('matrix')`` per frame;
* analyze   = ``run_analysis`` (sampling, contact, phases, checks);
* simulate  = the CLI's ``simulate_summary`` (chain sampling with the body's bones in the same
  pass, solve, analysis on the reused samples).

Prints analyze/floor and simulate/floor (goal: both <= 1.5x).
"""
import pathlib
import statistics
import sys
import time

ROOT = pathlib.Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import bpy  # noqa: E402
import numpy as np  # noqa: E402
from mathutils import Vector  # noqa: E402

import overlap_assist  # noqa: E402
from overlap_assist.blender import anim_data  # noqa: E402
from overlap_assist.core.jump_curves import JumpSpec, jump_events, jump_position  # noqa: E402

RUNS = 7
JUMPS = 3


def key_control(rig, name, frames, offsets_m):
    """Key a control so its head moves by world offsets (Blender's own space conversion)."""
    pb = rig.pose.bones[name]
    rest = rig.data.bones[name].matrix_local.copy()

    def local_loc(d):
        m = rest.copy()
        m.translation = rest.translation + Vector(d)
        return np.array(rig.convert_space(pose_bone=pb, matrix=m, from_space='POSE', to_space='LOCAL').translation)
    base = local_loc((0, 0, 0))
    cols = np.stack([local_loc(e) - base for e in np.eye(3)], axis=1)
    locs = base + offsets_m @ cols.T
    bag = anim_data.active_fcurves(rig, create=True)
    for axis in range(3):
        fc = anim_data.ensure_fcurve(bag, pb.path_from_id("location"), axis, name)
        anim_data.write_keys(fc, frames, locs[:, axis], 'BEZIER')


GENERATE_RIGIFY = """
import bpy, addon_utils, os, sys
bpy.ops.wm.read_factory_settings(use_empty=True)
addon_utils.enable("rigify", default_set=True, persistent=False)
bpy.ops.object.armature_human_metarig_add()
bpy.ops.pose.rigify_generate()
bpy.ops.wm.save_as_mainfile(filepath=sys.argv[-1])
os._exit(0)   # Rigify's classes stay registered (Blender 4.5 would hang at exit)
"""


def build():
    """Generate the rig in its own process, open it with scripts off (no Rigify UI registered)."""
    import subprocess
    import tempfile
    path = str(pathlib.Path(tempfile.mkdtemp()) / "rigify_human.blend")
    subprocess.run([sys.executable, "-c", GENERATE_RIGIFY, path], check=True, capture_output=True, timeout=600)
    bpy.ops.wm.open_mainfile(filepath=path, load_ui=False, use_scripts=False)
    scene = bpy.context.scene
    scene.render.fps = 24
    rig = bpy.data.objects["rig"]
    spec = JumpSpec()
    ev = jump_events(spec)
    dur = ev["duration_s"]
    frames = 1.0 + np.arange(int(JUMPS * dur * 24))
    t = (frames - 1) / 24
    tau = np.mod(t, dur)
    body = jump_position(spec, tau) - [0, 0, spec.start_height_m]
    air = (tau > ev["takeoff_s"]) & (tau < ev["touchdown_s"])
    feet = np.zeros_like(body)
    z_to = jump_position(spec, np.array([ev["takeoff_s"]]))[0, 2] - spec.start_height_m
    feet[air, 2] = body[air, 2] - z_to
    key_control(rig, "torso", frames, body)
    for side in ("L", "R"):
        key_control(rig, f"foot_ik.{side}", frames, feet)
        key_control(rig, f"hand_ik.{side}", frames, body)
    scene.frame_start, scene.frame_end = 1, int(frames[-1])
    chain = rig.overlap_assist.chains.add()
    chain.name = "ear"
    for n in ("DEF-ear.L", "DEF-ear.L.001", "DEF-ear.L.002", "DEF-ear.L.003", "DEF-ear.L.004"):
        chain.bones.add().name = n
    return scene, rig


def floor(scene, rig):
    pb = rig.pose.bones
    buf = np.empty(len(pb) * 16, dtype=np.float32)
    for f in range(scene.frame_start, scene.frame_end + 1):
        scene.frame_set(f)
        pb.foreach_get("matrix", buf)


def main():
    bpy.ops.wm.read_factory_settings(use_empty=True)
    overlap_assist.register()
    try:
        scene, rig = build()
        from overlap_assist.blender.analyze import run_analysis
        from overlap_assist.cli import simulate_summary
        chains = list(rig.overlap_assist.chains)
        jobs = {"floor": lambda: floor(scene, rig), "analyze": lambda: run_analysis(rig, scene),
                "simulate": lambda: simulate_summary(rig, scene, chains)}
        for job in jobs.values():  # warm-up
            job()
        times = {k: [] for k in jobs}
        for _ in range(RUNS):
            for name, job in jobs.items():
                t0 = time.perf_counter()
                job()
                times[name].append(time.perf_counter() - t0)
        med = {k: statistics.median(v) for k, v in times.items()}
        result, _ = run_analysis(rig, scene)
        n_frames = scene.frame_end - scene.frame_start + 1
        n_con = sum(len(p.constraints) for p in rig.pose.bones)
        print(f"Blender {bpy.app.version_string}, numpy {np.__version__}; Rigify rig: {len(rig.data.bones)} bones, "
              f"{n_con} constraints; {n_frames} frames, {JUMPS} jumps; median of {RUNS}")
        print(f"  body {result.body_source}, airborne from {result.airborne_from}, "
              f"{len(result.flights)} flights: " + ", ".join(f"{f.takeoff_frame:.2f}-{f.touchdown_frame:.2f}"
                                                            for f in result.flights))
        for name in ("floor", "analyze", "simulate"):
            print(f"  {name:8s} {med[name] * 1e3:8.1f} ms  = {med[name] / med['floor']:4.2f}x floor")
    finally:
        overlap_assist.unregister()
        bpy.ops.wm.read_factory_settings(use_empty=True)


if __name__ == "__main__":
    main()
