"""Benchmark of the bake writer against Blender's own baker, same bones and frames, one run.

Rig: a root and 10 chains of 5 bones (50 baked bones), base animation keyed on every chain bone's
rotation every 8 frames, 250 frames. Ours: ``bake.bake_offsets`` with damped-swing offsets
(composition with the animated pose, reduction, NLA layer), at tolerance 0 (a key on every frame,
the same density as Blender's baker) and at the default 0.5°. Blender's: ``bpy_extras.anim_utils
.bake_action`` baking the rotations of the same bones (its signature ``bake_action(obj, *, action,
frames, bake_options)`` and ``BakeOptions`` fields are the same in 4.5, 5.2 and 5.3). Throughput is
per-frame channel values per second (bones x channels x frames / s), i.e. keys/s at per-frame
density. Quaternion bones need the action's own rotation per frame (the layer sits under the
user's action and holds U ∘ offset ∘ U⁻¹); Euler bones need their animated angles per frame (read with ``FCurve.evaluate`` here, where plain F-curves of
the active action are all that animate them; the scene is evaluated frame by frame otherwise), so
they are timed separately. Both bakers write Bézier keys; at tolerance 0 ours keep Blender's
automatic handles, as Blender's baker does, and at 0.5° the reduced keys carry ALIGNED handles.

Run:  .venv/bpy5.3/bin/python bench/bench_bake.py
"""
from __future__ import annotations

import pathlib
import statistics
import sys
import time

import bpy
import numpy as np
from bpy_extras import anim_utils

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1]))
from overlap_assist.blender import anim_data, bake, bake_layer  # noqa: E402
from overlap_assist.blender.demo_scene import build_armature  # noqa: E402

SKIN_VERTICES = 20000
N_CHAINS, CHAIN_LEN, N_FRAMES, RUNS = 10, 5, 250, 7   # each timing: one untimed warm-up run, then the median of RUNS


def build(mode, skin_vertices=0):
    bpy.ops.wm.read_factory_settings(use_empty=True)
    scene = bpy.context.scene
    scene.frame_start, scene.frame_end = 1, N_FRAMES
    rows = [("root", None, (0, 0, 0), (0, 0.3, 0))]
    for c in range(N_CHAINS):
        parent = "root"
        for k in range(CHAIN_LEN):
            name = f"ch{c}_{k}"
            x = 0.1 * c
            rows.append((name, parent, (x, 0, 1.5 - 0.2 * k), (x, 0, 1.3 - 0.2 * k)))
            parent = name
    obj = build_armature("Bench", bones=tuple(rows))
    bag = anim_data.active_fcurves(obj, create=True)
    key_frames = np.arange(1, N_FRAMES + 1, 8)
    names = [r[0] for r in rows[1:]]
    for i, name in enumerate(names):
        pb = obj.pose.bones[name]
        pb.rotation_mode = mode
        t = key_frames / N_FRAMES
        if mode == "QUATERNION":
            a = 0.5 * np.sin(3 * t + i)
            vals = np.stack((np.cos(a), np.sin(a), 0 * a, 0 * a), axis=1)
            prop = "rotation_quaternion"
        else:
            vals = np.stack((0.5 * np.sin(3 * t + i), 0.2 * t, 0 * t), axis=1)
            prop = "rotation_euler"
        for c in range(vals.shape[1]):
            anim_data.write_keys(anim_data.ensure_fcurve(bag, pb.path_from_id(prop), c, name), key_frames, vals[:, c], 'BEZIER')
    if skin_vertices:
        add_skinned_mesh(obj, skin_vertices)
    frames = np.arange(1, N_FRAMES + 1)
    tt = (frames - 1) / 24.0
    offsets = {}
    for i, name in enumerate(names):
        ang = np.deg2rad(20) * np.exp(-1.4 * tt) * np.sin(9.4 * tt + i)
        offsets[name] = np.stack((np.cos(ang / 2), np.sin(ang / 2), 0 * ang, 0 * ang), axis=1)
    return obj, frames, offsets


def add_skinned_mesh(obj, n_vertices):
    """A grid of about ``n_vertices`` vertices over the chains, each vertex bound with weight 1 to
    its nearest chain bone through an Armature modifier: the deformation a character's body mesh
    adds to every evaluation of the scene."""
    nx = int(np.sqrt(n_vertices / 2))
    xs, zs = np.linspace(-0.05, 0.1 * (N_CHAINS - 1) + 0.05, 2 * nx), np.linspace(0.5, 1.5, nx)
    gx, gz = np.meshgrid(xs, zs)   # (nx, 2 nx)
    verts = np.stack((gx.ravel(), np.zeros(gx.size), gz.ravel()), axis=1)
    cols = 2 * nx
    faces = [(r * cols + c, r * cols + c + 1, (r + 1) * cols + c + 1, (r + 1) * cols + c)
             for r in range(nx - 1) for c in range(cols - 1)]
    mesh = bpy.data.meshes.new("BenchSkin")
    mesh.from_pydata(verts.tolist(), [], faces)
    skin = bpy.data.objects.new("BenchSkin", mesh)
    bpy.context.scene.collection.objects.link(skin)
    chain = np.clip(np.rint(verts[:, 0] / 0.1), 0, N_CHAINS - 1).astype(int)
    link = np.clip(((1.5 - verts[:, 2]) / 0.2).astype(int), 0, CHAIN_LEN - 1)
    for c in range(N_CHAINS):
        for k in range(CHAIN_LEN):
            members = np.flatnonzero((chain == c) & (link == k)).tolist()
            skin.vertex_groups.new(name=f"ch{c}_{k}").add(members, 1.0, 'REPLACE')
    skin.modifiers.new("Armature", 'ARMATURE').object = obj
    skin.parent = obj
    return skin


def time_ours(obj, frames, offsets, tol):
    times, stats = [], None
    for _ in range(RUNS + 1):
        t0 = time.perf_counter()
        stats = bake.bake_offsets(obj, frames, offsets, tolerance_deg=tol)
        times.append(time.perf_counter() - t0)
        bake_layer.remove_bake(obj)
    return statistics.median(times[1:]), stats


def time_writer(obj, frames, offsets):
    """The key writer alone: every frame's offset keys of all bones into one new action, as the bake
    writes them (``anim_data.new_fcurves`` + ``write_bezier_curves``: co, both handles, ALIGNED types)."""
    times, n_keys = [], 0
    channels = [(obj.pose.bones[name].path_from_id("rotation_quaternion"), c, name) for name in offsets for c in range(4)]
    keys = []
    for q in offsets.values():
        for c in range(4):
            co = np.ascontiguousarray(np.stack((frames, q[:, c]), 1), dtype=np.float32)
            left, right = co.copy(), co.copy()
            left[:, 0] -= 1 / 3
            right[:, 0] += 1 / 3
            keys.append((co, left, right))
    for _ in range(RUNS + 1):
        t0 = time.perf_counter()
        act = bpy.data.actions.new("writer")
        slot = act.slots.new(id_type='OBJECT', name=obj.name)
        bag = anim_data.channelbag_for(act, slot, create=True)
        anim_data.write_bezier_curves(anim_data.new_fcurves(bag, channels), *zip(*keys), 'ALIGNED')
        times.append(time.perf_counter() - t0)
        n_keys = sum(len(fc.keyframe_points) for fc in anim_data.all_action_fcurves(act))
        bpy.data.actions.remove(act)
    return statistics.median(times[1:]), n_keys


def time_blender(obj, frames):
    base = obj.animation_data.action
    slot = obj.animation_data.action_slot
    opts = anim_utils.BakeOptions(
        only_selected=False, do_pose=True, do_object=False, do_visual_keying=False,
        do_constraint_clear=False, do_parents_clear=False, do_clean=False, do_location=False,
        do_rotation=True, do_scale=False, do_bbone=False, do_custom_props=False)
    times, n_keys = [], 0
    for _ in range(RUNS + 1):
        t0 = time.perf_counter()
        act = anim_utils.bake_action(obj, action=None, frames=range(int(frames[0]), int(frames[-1]) + 1),
                                     bake_options=opts)
        times.append(time.perf_counter() - t0)
        n_keys = sum(len(fc.keyframe_points) for fc in anim_data.all_action_fcurves(act)
                     if '"root"' not in fc.data_path)  # root is baked too; count only the chain bones
        obj.animation_data.action = base
        obj.animation_data.action_slot = slot
        bpy.data.actions.remove(act)
    return statistics.median(times[1:]), n_keys


def main():
    print(f"Blender {bpy.app.version_string}, Python {sys.version.split()[0]}, numpy {np.__version__}")
    print(f"{N_CHAINS * CHAIN_LEN} bones x {N_FRAMES} frames, median of {RUNS} after a warm-up run")
    for mode in ("QUATERNION", "XYZ"):
        obj, frames, offsets = build(mode)
        t_bl, keys_bl = time_blender(obj, frames)
        t0, s0 = time_ours(obj, frames, offsets, 0.0)
        t5, s5 = time_ours(obj, frames, offsets, 0.5)
        values = s0.keys_before
        if mode == "QUATERNION":
            tw, kw = time_writer(obj, frames, offsets)
            print(f"[writer] per-frame keys with handles: {tw * 1e3:.1f} ms, {kw} keys, "
                  f"{kw / tw:,.0f} keys/s, ratio {(kw / tw) / (keys_bl / t_bl):.1f}x over bake_action")
        print(f"[{mode}] Blender bake_action: {t_bl * 1e3:.1f} ms, {keys_bl} keys, {keys_bl / t_bl:,.0f} keys/s")
        print(f"[{mode}] ours tol 0:   {t0 * 1e3:.1f} ms, {s0.keys_written} keys, {values / t0:,.0f} keys/s, "
              f"ratio {t_bl / t0:.1f}x")
        print(f"[{mode}] ours tol 0.5: {t5 * 1e3:.1f} ms, {s5.keys_written} keys ({s5.reduction_percent:.1f} % fewer, "
              f"max error {s5.max_error_deg:.3f} deg), {values / t5:,.0f} frame values/s, ratio {t_bl / t5:.1f}x")
    # The same bones and frames with a body mesh deformed by them (the scene Blender's baker
    # evaluates every frame; ours reads the F-curves and does not evaluate it).
    obj, frames, offsets = build("XYZ", skin_vertices=SKIN_VERTICES)
    n_verts = len(bpy.data.objects["BenchSkin"].data.vertices)
    t_bl, keys_bl = time_blender(obj, frames)
    t0, s0 = time_ours(obj, frames, offsets, 0.0)
    t5, s5 = time_ours(obj, frames, offsets, 0.5)
    print(f"[XYZ + {n_verts}-vertex skinned mesh] Blender bake_action: {t_bl * 1e3:.1f} ms, {keys_bl} keys; "
          f"ours tol 0: {t0 * 1e3:.1f} ms, ratio {t_bl / t0:.1f}x; ours tol 0.5: {t5 * 1e3:.1f} ms, ratio {t_bl / t5:.1f}x")
    bpy.ops.wm.read_factory_settings(use_empty=True)


if __name__ == "__main__":
    main()
