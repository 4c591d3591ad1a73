"""Live preview cost: per frame change (cached solve) and after a setting edit (re-solve).

    .venv/bpy5.3/bin/python bench/bench_preview.py

A character-sized case: 12 chains x 8 links hanging from the hips of the demo rig, 250 frames.
Prints, measured in this run: the handler's own cost per frame change with a warm cache (goal
< 1 ms), the cost of a frame change with the handler vs without it (ratio), the re-solve after a
chain-setting edit, and the re-sample after an animation edit.
"""
import pathlib
import statistics
import sys
import time

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1]))

import bpy  # noqa: E402
import numpy as np  # noqa: E402

import overlap_assist  # noqa: E402
from overlap_assist.blender import preview  # noqa: E402
from overlap_assist.blender.demo_scene import HUMANOID_BONES, build_armature, key_jump  # noqa: E402
from overlap_assist.core.jump_curves import JumpSpec  # noqa: E402

N_CHAINS, N_LINKS = 12, 8


def rig():
    rows = list(HUMANOID_BONES)
    for c in range(N_CHAINS):
        parent = "hips"
        ang = 2 * np.pi * c / N_CHAINS
        for k in range(N_LINKS):
            name = f"strand{c}.{k:03d}"
            r0, r1 = 0.12 + 0.05 * k, 0.12 + 0.05 * (k + 1)
            rows.append((name, parent, (r0 * np.cos(ang), r0 * np.sin(ang), 1.0 - 0.04 * k),
                         (r1 * np.cos(ang), r1 * np.sin(ang), 1.0 - 0.04 * (k + 1))))
            parent = name
    obj = build_armature("Bench", bones=tuple(rows))
    key_jump(obj, JumpSpec(forward_mps=1.0, after_s=7.0))
    for c in range(N_CHAINS):
        chain = obj.overlap_assist.chains.add()
        chain.name = f"strand{c}"
        for k in range(N_LINKS):
            chain.bones.add().name = f"strand{c}.{k:03d}"
    return obj


def median_ms(fn, runs):
    out = []
    for _ in range(runs):
        t0 = time.perf_counter()
        fn()
        out.append(time.perf_counter() - t0)
    return 1e3 * statistics.median(out)


def main():
    bpy.ops.wm.read_factory_settings(use_empty=True)
    overlap_assist.register()
    try:
        scene = bpy.context.scene
        obj = rig()
        scene.frame_end = scene.frame_start + 249
        frames = list(range(scene.frame_start, scene.frame_end + 1))
        it = iter(frames * 100)

        def step():
            scene.frame_set(next(it))

        plain = median_ms(step, 200)
        with bpy.context.temp_override(active_object=obj, object=obj):
            bpy.ops.overlap_assist.toggle_preview()
        with_preview = median_ms(step, 200)
        handler = []
        for f in frames[:200]:
            scene.frame_set(f)
            handler.append(1e3 * preview.PREVIEW.last_cost_s)
        handler_ms = statistics.median(handler)
        cache = preview.PREVIEW.caches[obj.name]

        def resolve():
            preview.mark_dirty(settings_only=True)
            preview.PREVIEW.ensure_solved(obj, scene)

        def resample():
            preview.mark_dirty()
            preview.PREVIEW.ensure_solved(obj, scene)

        solve_ms = median_ms(resolve, 5)
        sample_ms = median_ms(resample, 3)
        print(f"Blender {bpy.app.version_string}, numpy {np.__version__}: {N_CHAINS} chains x {N_LINKS} links, "
              f"{len(frames)} frames, substeps used {cache.motion.substeps}")
        print(f"  frame change without preview {plain:6.2f} ms, with preview {with_preview:6.2f} ms "
              f"(ratio {with_preview / plain:4.2f}x)")
        print(f"  preview handler per frame change (warm cache) {handler_ms:6.3f} ms  (goal < 1 ms)")
        print(f"  re-solve after a setting edit {solve_ms:7.1f} ms;  re-sample + solve after an animation edit "
              f"{sample_ms:7.1f} ms")
        with bpy.context.temp_override(active_object=obj, object=obj):
            bpy.ops.overlap_assist.toggle_preview()
    finally:
        overlap_assist.unregister()
        bpy.ops.wm.read_factory_settings(use_empty=True)


if __name__ == "__main__":
    main()
