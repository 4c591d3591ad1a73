"""Analysis time for a 500-frame clip: sampling the evaluated rig vs the core analysis.

    .venv/bpy5.3/bin/python bench/bench_analysis.py

Prints the median of several runs of each stage, measured in this run, and the ratios against
the clip's own playback time (how many times faster than real time) and sampling vs analysis.
"""
import pathlib
import statistics
import sys
import time

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1]))

import bpy  # noqa: E402
import numpy as np  # noqa: E402

import overlap_assist  # noqa: E402
from overlap_assist.blender.demo_scene import build_armature, key_location  # noqa: E402
from overlap_assist.blender.sample_body import body_samples  # noqa: E402
from overlap_assist.core.body_analysis import analyse_body  # noqa: E402
from overlap_assist.core.jump_curves import JumpSpec, jump_events, jump_position  # noqa: E402

FRAMES = 500
RUNS = 5


def main():
    bpy.ops.wm.read_factory_settings(use_empty=True)
    overlap_assist.register()
    try:
        scene = bpy.context.scene
        obj = build_armature("Bench")
        spec = JumpSpec(forward_mps=1.0)
        dur = jump_events(spec)["duration_s"]
        frames = np.arange(1, FRAMES + 1, dtype=float)
        t = (frames - 1) / 24.0
        pos = jump_position(spec, np.mod(t, dur))  # repeated jumps
        pos[:, 0] += np.floor(t / dur) * pos[-1, 0]
        pos += np.array(obj.data.bones["hips"].head_local) - np.array([0, 0, spec.start_height_m])
        key_location(obj, "hips", frames, pos)
        scene.frame_start, scene.frame_end = 1, FRAMES
        results = {}
        for source in ("ROOT", "COM"):
            obj.overlap_assist.body.body_source = source
            t_sample, t_analyse = [], []
            for _ in range(RUNS):
                t0 = time.perf_counter()
                samples, _, _ = body_samples(obj, scene, obj.overlap_assist.body)
                t1 = time.perf_counter()
                res = analyse_body(samples)
                t2 = time.perf_counter()
                t_sample.append(t1 - t0)
                t_analyse.append(t2 - t1)
            results[source] = (statistics.median(t_sample), statistics.median(t_analyse), len(res.flights),
                               samples.frames.size)
        clip_s = FRAMES / 24.0
        print(f"Blender {bpy.app.version_string}, numpy {np.__version__}; {FRAMES} frames, "
              f"sampled at whole frames, median of {RUNS}")
        for source, (ts, ta, nf, ns) in results.items():
            total = ts + ta
            print(f"  body={source:4s} sampling {ts * 1e3:7.1f} ms  analysis {ta * 1e3:6.1f} ms  "
                  f"total {total * 1e3:7.1f} ms  = {clip_s / total:5.0f}x faster than playback  "
                  f"(sampling/analysis {ts / ta:4.1f}x; {nf} flights, {ns} samples)")
    finally:
        overlap_assist.unregister()
        bpy.ops.wm.read_factory_settings(use_empty=True)


if __name__ == "__main__":
    main()
