"""Our reduced bake against Blender's own F-curve decimation at the same true rotation error.

For each rig and rotation mode, in one run:
1. Bake per frame (``bake_offsets`` at tolerance 0: a key on every frame, Blender's automatic
   handles); the per-frame values are the simulated orientation.
2. Ours: bake at ``TOLERANCE_DEG`` (timed, median of 5: the whole ``bake_offsets`` call,
   composition, reduction and writing; the core reducer alone is timed too, median of 11). Its true
   error is measured by evaluating every written curve with ``FCurve.evaluate`` at every frame and
   taking the rotation angle between the orientation those values give and the per-frame one
   (quaternion: normalised;
   Euler: the layer's angles added to the animated angles, as COMBINE does).
3. Blender's: a copy of the per-frame bake action on a copy of the rig, ``graph.decimate``
   (mode 'ERROR') run headless through ``context.temp_override`` with the window's first area
   switched to the Graph Editor, at error margins from 1e-5 to 0.3 (each on a fresh copy of the
   per-frame keys, timed), its true error measured the same way. Its key count at our exact true
   error is interpolated linearly in the error between the two margins that bracket it; its time
   is the mean of the medians of 3 runs at each of those two margins.

Rigs: a Rigify human (the bundled add-on's metarig, generated), 85 of its control bones keyed
every 8 frames and given damped ring-down offsets after four landings (0.5-3 Hz, damping ratio
0.05-0.4, 5-30 degrees; our invented motion), 250 frames; and the demo character with its four
chains simulated on the good jump by our solver. Figures are for animation plausibility.

Run:  .venv/bpy5.3/bin/python bench/bench_keys_vs_host.py
"""
from __future__ import annotations

import math
import os
import pathlib
import sys
import time

import bpy
import numpy as np
import addon_utils  # noqa: E402  (importable once bpy is)

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1]))
from overlap_assist.blender import anim_data, bake, bake_layer, bake_ops, chain_sim, demo_character, pose_read  # noqa: E402
from overlap_assist.core import key_reduce  # noqa: E402
from overlap_assist.core.rotations import euler_to_quat  # noqa: E402

TOLERANCE_DEG = 0.5
N_FRAMES = 250
N_RIGIFY_BONES = 85
MARGINS = np.geomspace(1e-5, 0.3, 16)
FPS = 24.0
DUMP = os.environ.get("BENCH_KEYS_DUMP", "")   # a path prefix: save the reducer's inputs (profiling)


# ---------------------------------------------------------------------------------------------
# Rigs and offsets
# ---------------------------------------------------------------------------------------------

_RIGIFY = {}


def rigify_rig(mode):
    """The generated Rigify rig (built once per process: the add-on does not survive a factory
    reset), its chosen controls set to ``mode`` and keyed afresh."""
    if not _RIGIFY:
        bpy.ops.wm.read_factory_settings(use_empty=False)
        scene = bpy.context.scene
        scene.frame_start, scene.frame_end = 1, N_FRAMES
        addon_utils.enable("rigify", default_set=True)   # default_set registers its rig parameters
        for obj in list(scene.objects):
            bpy.data.objects.remove(obj)
        bpy.ops.object.armature_human_metarig_add()
        meta = bpy.context.object
        bpy.ops.pose.rigify_generate()
        _RIGIFY["rig"] = next(o for o in scene.objects if o.type == 'ARMATURE' and o is not meta)
        meta.hide_set(True)
    rig, scene = _RIGIFY["rig"], bpy.context.scene
    bake_layer.remove_bake(rig)
    rig.animation_data_clear()
    names = [pb.name for pb in rig.pose.bones if not pb.name.startswith(("ORG-", "DEF-", "MCH-", "VIS"))
             and rig.data.bones[pb.name].use_deform is False][:N_RIGIFY_BONES]
    bag = anim_data.active_fcurves(rig, create=True)
    key_frames = np.arange(1, N_FRAMES + 1, 8, dtype=float)
    for i, name in enumerate(names):
        pb = rig.pose.bones[name]
        pb.rotation_mode = mode
        a = 0.3 * np.sin(2 * math.pi * key_frames / 120.0 + i)
        if mode == 'QUATERNION':
            vals, prop = np.stack((np.cos(a / 2), np.sin(a / 2), 0 * a, 0 * a), axis=1), "rotation_quaternion"
        else:
            vals, prop = np.stack((a, 0.5 * a, 0 * a), axis=1), "rotation_euler"
        path = pb.path_from_id(prop)
        for c in range(vals.shape[1]):
            anim_data.write_keys(anim_data.ensure_fcurve(bag, path, c, name), key_frames, vals[:, c], 'BEZIER')
    bpy.context.view_layer.update()
    frames = np.arange(1, N_FRAMES + 1)
    return rig, scene, frames, ring_down_offsets(names, frames)


def ring_down_offsets(names, frames, seed=0):
    rng = np.random.default_rng(seed)
    t_s = (frames - frames[0]) / FPS
    out = {}
    for name in names:
        angles = np.zeros((frames.shape[0], 3))
        for axis in range(3):
            for landing_s in np.sort(rng.uniform(0.0, t_s[-1], 4)):
                f_hz, zeta = rng.uniform(0.5, 3.0), rng.uniform(0.05, 0.4)
                wn = 2.0 * np.pi * f_hz
                dt = np.clip(t_s - landing_s, 0.0, None)
                kick = np.deg2rad(rng.uniform(5.0, 30.0)) * np.exp(-zeta * wn * dt) * np.sin(wn * np.sqrt(1 - zeta**2) * dt)
                angles[:, axis] += np.where(t_s >= landing_s, kick, 0.0)
        out[name] = euler_to_quat(angles, "XYZ")
    return out


def demo_rig(mode):
    jump = demo_character.DEMO_JUMPS[0]
    scene, rig, _perf = demo_character.build_clip(jump, render_size=(64, 80))
    chains = chain_sim.active_chains(rig)
    sampled = chain_sim.sample_rig(rig, scene, chains, scene.frame_start, scene.frame_end)
    for names in sampled.bone_names:
        for name in names:
            rig.pose.bones[name].rotation_mode = mode
    _motion, offs = chain_sim.solve(sampled, chain_sim.settings_for(rig, scene, chains))
    return rig, scene, sampled.frames.astype(int), bake_ops.offsets_by_bone(sampled, offs)


# ---------------------------------------------------------------------------------------------
# Measuring
# ---------------------------------------------------------------------------------------------

def channel_curves(act, obj, names):
    """{bone: [F-curve or None per component]} of the action's rotation curves."""
    by_key = {(fc.data_path, fc.array_index): fc for fc in anim_data.all_action_fcurves(act)}
    out = {}
    for name in names:
        pb = obj.pose.bones[name]
        prop = "rotation_quaternion" if pb.rotation_mode == 'QUATERNION' else "rotation_euler"
        path = pb.path_from_id(prop)
        out[name] = [by_key.get((path, c)) for c in range(4 if prop == "rotation_quaternion" else 3)]
    return out


def curve_values(curves, frames, rest):
    return np.stack([np.array([fc.evaluate(float(f)) for f in frames]) if fc is not None else np.full(len(frames), r)
                     for fc, r in zip(curves, rest)], axis=1)


def true_error_deg(obj, act, frames, reference, bases, rests):
    """Largest rotation angle (deg) between the action's curves (evaluated by Blender) and the reference."""
    worst = 0.0
    curves = channel_curves(act, obj, reference)
    for name, ref in reference.items():
        got = curve_values(curves[name], frames, rests[name])
        mode = obj.pose.bones[name].rotation_mode
        if mode == 'QUATERNION':
            qa, qb = got, ref
        else:
            qa, qb = euler_to_quat(got + bases[name], mode), euler_to_quat(ref + bases[name], mode)
        qa = qa / np.linalg.norm(qa, axis=1, keepdims=True)
        qb = qb / np.linalg.norm(qb, axis=1, keepdims=True)
        dots = np.clip(np.abs(np.sum(qa * qb, axis=1)), 0.0, 1.0)
        worst = max(worst, float(np.rad2deg(2.0 * np.max(np.arccos(dots)))))
    return worst


def n_keys(act):
    return sum(len(fc.keyframe_points) for fc in anim_data.all_action_fcurves(act))


def graph_area():
    win = bpy.context.window_manager.windows[0]
    area = max(win.screen.areas, key=lambda a: a.width * a.height)
    return win, area


def decimate(host, act_src, margin):
    """Fresh copy of the per-frame keys on ``host``, decimated at ``margin``: (action, seconds)."""
    act = act_src.copy()
    host.animation_data.action = act
    host.animation_data.action_slot = act.slots[0]
    for fc in anim_data.all_action_fcurves(act):
        fc.select = True
        n = len(fc.keyframe_points)
        fc.keyframe_points.foreach_set("select_control_point", np.ones(n, dtype=bool))
    win, area = graph_area()
    old = area.ui_type
    area.ui_type = 'FCURVES'
    try:
        space = area.spaces.active
        space.dopesheet.show_only_selected = True
        space.dopesheet.show_hidden = True
        region = next(r for r in area.regions if r.type == 'WINDOW')
        with bpy.context.temp_override(window=win, area=area, region=region, active_object=host,
                                       selected_objects=[host]):
            t0 = time.perf_counter()
            bpy.ops.graph.decimate(mode='ERROR', remove_error_margin=float(margin))
            seconds = time.perf_counter() - t0
    finally:
        area.ui_type = old
    return act, seconds


def compare(label, obj, scene, frames, offsets):
    names = list(offsets)
    pose = obj.pose.bones
    animated = anim_data.animated_paths(obj)
    euler_names = [n for n in names if pose[n].rotation_mode != 'QUATERNION'
                   and pose[n].path_from_id("rotation_euler") in animated]
    bases_sampled = pose_read.sample_rotations(obj, scene, frames, euler_names) if euler_names else {}
    statics = {n: np.array(getattr(pose[n], "rotation_quaternion" if pose[n].rotation_mode == 'QUATERNION'
                                   else "rotation_euler"), dtype=float) for n in names}
    # Per frame
    bake.bake_offsets(obj, frames, offsets, tolerance_deg=0.0, scene=scene)
    per_frame_act = bake_layer.find_bake(obj)[2]
    absolute = set(bake_layer.unbaked_static_rotations(obj))
    reference = {n: curve_values(c, frames, [0.0] * len(c)) for n, c in channel_curves(per_frame_act, obj, names).items()}
    bases, rests = {}, {}
    for n in names:
        c = 4 if pose[n].rotation_mode == 'QUATERNION' else 3
        if pose[n].rotation_mode == 'QUATERNION':
            bases[n] = None
            rests[n] = statics[n] if n in absolute else np.array([1.0, 0.0, 0.0, 0.0])
        else:
            bases[n] = np.zeros((len(frames), 3)) if n in absolute else bases_sampled[n]
            rests[n] = statics[n] if n in absolute else np.zeros(3)
        assert reference[n].shape[1] == c
    keys_per_frame = n_keys(per_frame_act)
    frozen = per_frame_act.copy()   # the per-frame keys, for decimation
    frozen.use_fake_user = True
    # Ours (median of 5 full bakes; the reducer alone, median of 11: a call of a few ms on the demo,
    # where 3 calls let one burst of the shared machine's load set the median)
    times = []
    for _ in range(5):
        t0 = time.perf_counter()
        stats = bake.bake_offsets(obj, frames, offsets, tolerance_deg=TOLERANCE_DEG, scene=scene)
        times.append(time.perf_counter() - t0)
    ours_s = float(np.median(times))
    ours_act = bake_layer.find_bake(obj)[2]
    ours_keys = n_keys(ours_act)
    ours_err = true_error_deg(obj, ours_act, frames, reference, bases, rests)
    tracks = [key_reduce.RotationTrack(reference[n], 'QUATERNION' if bases[n] is None else pose[n].rotation_mode,
                                       bases[n], rests[n]) for n in names]
    core_times = []
    for _ in range(11):
        t0 = time.perf_counter()
        key_reduce.reduce_rotation_keys(frames.astype(float), tracks, np.deg2rad(TOLERANCE_DEG))
        core_times.append(time.perf_counter() - t0)
    core_s = float(np.median(core_times))
    if DUMP:
        np.savez(DUMP + f"_{label.split()[0]}_{pose[names[0]].rotation_mode}.npz", frames=frames,
                 **{f"v{i}": t.values for i, t in enumerate(tracks)},
                 **{f"b{i}": t.basis for i, t in enumerate(tracks) if t.basis is not None},
                 **{f"r{i}": t.rest for i, t in enumerate(tracks)}, mode=pose[names[0]].rotation_mode)
    # Blender's decimation on a copy of the rig holding the per-frame keys
    host = obj.copy()
    scene.collection.objects.link(host)
    host.animation_data_clear()
    host.animation_data_create()
    for o in scene.objects:
        o.select_set(o is host)
    bpy.context.view_layer.objects.active = host
    for b in list(host.data.bones) + list(host.pose.bones):   # 5.x: selection on pose bones
        if hasattr(b, "select"):
            b.select = True
    rows = []
    for margin in MARGINS:
        act, seconds = decimate(host, frozen, margin)
        rows.append((margin, n_keys(act), true_error_deg(host, act, frames, reference, bases, rests), seconds))
        host.animation_data.action = None
        bpy.data.actions.remove(act)
    errs = np.array([r[2] for r in rows])
    k = int(np.searchsorted(errs, ours_err))   # errors grow with the margin
    if k == 0 or k >= len(rows):
        raise RuntimeError(f"{label}: decimate margins {MARGINS[0]}..{MARGINS[-1]} do not bracket {ours_err:.4f} deg")
    (m0, n0, e0, s0), (m1, n1, e1, s1) = rows[k - 1], rows[k]
    w = (ours_err - e0) / (e1 - e0) if e1 > e0 else 0.0
    host_keys = n0 + w * (n1 - n0)
    # Decimate's time at the two bracketing margins: median of 3 runs each (the first above and
    # two more; same keys every run), then their mean. One run each let a burst of load on the
    # shared machine move the ratio by 1.5x.
    repeats = {m0: [s0], m1: [s1]}
    for margin in (m0, m1):
        for _ in range(2):
            act, seconds = decimate(host, frozen, margin)
            repeats[margin].append(seconds)
            host.animation_data.action = None
            bpy.data.actions.remove(act)
    host_s = 0.5 * (float(np.median(repeats[m0])) + float(np.median(repeats[m1])))
    bpy.data.objects.remove(host)
    print(f"{label:24s} per-frame {keys_per_frame:6d} | ours {ours_keys:6d} keys, true error {ours_err:.3f} deg "
          f"(reported {stats.max_error_deg:.3f}), bake {1e3 * ours_s:7.1f} ms (reducer {1e3 * core_s:6.1f} ms) | "
          f"decimate {host_keys:8.0f} keys at that error (margins {m0:.2g}/{m1:.2g}: {n0}/{n1} keys, "
          f"{e0:.3f}/{e1:.3f} deg), {1e3 * host_s:7.1f} ms | keys ratio {ours_keys / host_keys:.2f}, "
          f"time ratio 1/{host_s / ours_s:.0f} (reducer 1/{host_s / core_s:.0f})")
    return ours_keys, host_keys, ours_s, host_s


def main():
    print(f"Blender {bpy.app.version_string}, tolerance {TOLERANCE_DEG} deg, {N_FRAMES} frames")
    for mode in ('QUATERNION', 'XYZ'):
        rig, scene, frames, offsets = rigify_rig(mode)
        compare(f"Rigify {len(offsets)} bones {mode}", rig, scene, frames, offsets)
    from overlap_assist.blender import registered
    with registered():   # the demo character's chains live in the add-on's properties
        for mode in ('QUATERNION', 'XYZ'):
            rig, scene, frames, offsets = demo_rig(mode)
            compare(f"demo {len(offsets)} bones {mode}", rig, scene, frames, offsets)
        bpy.ops.wm.read_factory_settings(use_empty=True)
    # Rigify's generated rig registers its UI classes, which Blender 4.5 cannot unregister at exit
    # (it hangs there): everything is printed, leave without the interpreter's teardown.
    sys.stdout.flush()
    os._exit(0)


if __name__ == "__main__":
    main()
