"""The Bake panel's stale check: hashing the user's keys at every redraw vs the cached answer.

    .venv/bpy5.3/bin/python bench/bench_stale_check.py

A mocap-sized action (our invented curves): 75 bones x 4 quaternion channels keyed on every frame,
2000 frames (300 F-curves, 600 000 keys), and a small bake on one bone so the panel asks. Prints,
measured in this run: the uncached check (``bake_layer.bake_state``: every key hashed), the
cached one a redraw uses (``stale_state.bake_state``), their ratio, and the first check after a
key edit (one hash again).
"""
import os
import pathlib
import statistics
import sys
import time

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1]))

import bpy  # noqa: E402
import numpy as np  # noqa: E402

import overlap_assist  # noqa: E402
from overlap_assist.blender import anim_data, bake, bake_layer, stale_state  # noqa: E402
from overlap_assist.blender.demo_scene import build_armature  # noqa: E402

N_BONES, N_FRAMES = 75, 2000


def mocap_rig():
    rows = [("root", None, (0, 0, 0), (0, 0.2, 0))]
    rows += [(f"b{i}", "root", (0.1 * i, 0, 1), (0.1 * i, 0.1, 1)) for i in range(N_BONES)]
    obj = build_armature("Mocap", bones=tuple(rows))
    bag = anim_data.active_fcurves(obj, create=True)
    frames = np.arange(1, N_FRAMES + 1, dtype=np.float32)
    channels, cos = [], []
    for i in range(N_BONES):
        path = obj.pose.bones[f"b{i}"].path_from_id("rotation_quaternion")
        angle = 0.3 * np.sin(frames * 0.05 + i)
        quat = np.stack((np.cos(angle / 2), np.sin(angle / 2), 0 * angle, 0 * angle), axis=1)
        for c in range(4):
            channels.append((path, c, f"b{i}"))
            cos.append(np.ascontiguousarray(np.stack((frames, quat[:, c]), axis=1), dtype=np.float32))
    anim_data.write_bezier_curves(anim_data.new_fcurves(bag, channels), cos)
    scene = bpy.context.scene
    scene.frame_start, scene.frame_end = 1, N_FRAMES
    bake_frames = np.arange(1, 11)
    offset = np.tile([1.0, 0.0, 0.0, 0.0], (bake_frames.shape[0], 1))
    offset[:, 1] = 0.01 * np.arange(bake_frames.shape[0])
    offset /= np.linalg.norm(offset, axis=1, keepdims=True)
    bake.bake_offsets(obj, bake_frames, {"b0": offset}, tolerance_deg=0.5, scene=scene)
    return obj


def median_ms(fn, runs):
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return 1e3 * statistics.median(times)


def main():
    overlap_assist.register()
    try:
        bpy.ops.wm.read_factory_settings(use_empty=True)
        obj = mocap_rig()
        assert bake_layer.bake_state(obj) == stale_state.bake_state(obj) == "current"
        uncached = median_ms(lambda: bake_layer.bake_state(obj), 5)
        cached = median_ms(lambda: stale_state.bake_state(obj), 200)
        pb = obj.pose.bones["b3"]
        pb.rotation_quaternion = (0.9, 0.1, 0.3, 0.0)
        pb.keyframe_insert("rotation_quaternion", frame=50)
        bpy.context.view_layer.update()
        t0 = time.perf_counter()
        state = stale_state.bake_state(obj)
        after_edit = 1e3 * (time.perf_counter() - t0)
        print(f"Blender {bpy.app.version_string}: {N_BONES * 4} F-curves x {N_FRAMES} keys")
        print(f"  uncached check (every key hashed), median of 5: {uncached:8.2f} ms")
        print(f"  cached check (a redraw), median of 200:         {cached:8.4f} ms  ({uncached / cached:.0f}x faster)")
        print(f"  first check after a key edit: {after_edit:.2f} ms, says {state!r} (uncached: {bake_layer.bake_state(obj)!r})")
    finally:
        bpy.ops.wm.read_factory_settings(use_empty=True)
        overlap_assist.unregister()
    sys.stdout.flush()


if __name__ == "__main__":
    main()
    os._exit(0)
