"""How calm each shipped chain preset is on the demo's jumps: a measurement, not a timing.

For every preset and every chain of the demo character (ponytail, scarf end, bag strap, tail) on
both demo jumps, the chain is simulated with the preset's settings and the script prints the
largest and the 90th-percentile turn of the tip link between frames (degrees per frame), the
largest tip swing away from the animated pose, and the key reduction at 0.5°. At 24 fps a tip
that turns much more than ~60° between two frames reads as a pop rather than a whip; the preset
damping ratios were chosen with this table (values are common practice, see the preset files).

Run:  .venv/bpy5.3/bin/python bench/preset_motion.py
"""
from __future__ import annotations

import dataclasses
import pathlib
import sys

import bpy
import numpy as np

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parents[1]))
import overlap_assist  # noqa: E402
from overlap_assist.blender import chain_sim, demo_character  # noqa: E402
from overlap_assist.core.chain_solver import simulate_chains  # noqa: E402
from overlap_assist.core.key_reduce import reduce_quaternion_groups  # noqa: E402
from overlap_assist.core.presets import shipped_presets  # noqa: E402
from overlap_assist.core.swing import swing_offsets  # noqa: E402

TOLERANCE_DEG = 0.5


def sampled_clips():
    """Per demo jump: the sampled chains (inputs, rotations, colliders) and their current settings."""
    clips = []
    for jump in demo_character.DEMO_JUMPS:
        scene, rig, _perf = demo_character.build_clip(jump, render_size=(64, 80))
        chains = chain_sim.active_chains(rig)
        sampled = chain_sim.sample_rig(rig, scene, chains, scene.frame_start, scene.frame_end)
        clips.append((jump.name, sampled, chain_sim.settings_for(rig, scene, chains)))
    return clips


def tip_motion(sampled, index, settings):
    """(max, 90th percentile) tip turn per frame in degrees, max tip swing, % fewer keys."""
    inp = sampled.inputs[index]
    motion = simulate_chains([inp], [settings], sampled.gravity_mps2, sampled.dt_s, sampled.colliders)
    dirs = motion.dirs[0]
    turn = np.degrees(np.arccos(np.clip(np.sum(dirs[1:, -1] * dirs[:-1, -1], axis=-1), -1.0, 1.0)))
    swing = np.degrees(np.arccos(np.clip(np.sum(dirs[:, -1] * inp.target_dirs[:, -1], axis=-1), -1.0, 1.0)))
    offsets = np.moveaxis(swing_offsets(sampled.world_rot[index], inp.target_dirs, dirs), 1, 0)
    curves = reduce_quaternion_groups(sampled.frames.astype(float), offsets, np.deg2rad(TOLERANCE_DEG))
    kept = sum(group[0].n_keys_after for group in curves) / (offsets.shape[0] * offsets.shape[1])
    return float(turn.max()), float(np.percentile(turn, 90)), float(swing.max()), 100.0 * (1.0 - kept)


def main():
    bpy.ops.wm.read_factory_settings(use_empty=True)
    overlap_assist.register()
    try:
        clips = sampled_clips()
        print(f"Blender {bpy.app.version_string}: tip turn per frame (max / p90, deg), max tip swing (deg), "
              f"keys fewer at {TOLERANCE_DEG} deg; demo chains in order {clips[0][1].chain_names}")
        for preset in shipped_presets().values():
            for clip_name, sampled, current in clips:
                cells = []
                for i, base in enumerate(current):
                    probe = dataclasses.replace(base, **preset_settings(preset))
                    top, p90, swing, fewer = tip_motion(sampled, i, probe)
                    cells.append(f"{top:4.0f}/{p90:3.0f} {swing:4.0f} {fewer:3.0f}%")
                print(f"{preset['name']:<13} z={preset['settings']['damping_ratio']:<4} {clip_name:<12} " + " | ".join(cells))
    finally:
        overlap_assist.unregister()
        bpy.ops.wm.read_factory_settings(use_empty=True)


def preset_settings(preset):
    """The preset's values as ChainSettings fields (frequency, damping, looseness, drag, bend, gravity, response)."""
    s = preset["settings"]
    return {"frequency_hz": s["frequency_hz"], "damping_ratio": s["damping_ratio"], "tip_looseness": s["tip_looseness"],
            "air_drag": s["air_drag"], "bend_limit_rad": float(np.radians(s.get("bend_limit_deg", 180.0))),
            "gravity_scale": s["gravity_scale"], "body_response": s["body_response"]}


if __name__ == "__main__":
    main()
