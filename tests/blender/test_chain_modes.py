"""The coupled chain in real Blender: a baked double pendulum keeps its two normal modes.

A 2-link chain of two equal 0.25 m bones hangs from a bone that is nudged sideways and then held
still; with the spring off and no damping the chain swings freely. The bake is evaluated by
Blender itself (frame_set, pose matrices) and the link angles are split into the normal modes of
the linearised Lagrangian of two equal uniform rods (Goldstein, Poole & Safko, *Classical
Mechanics*, 3rd ed. 2002, ch. 6; scipy.linalg.eigh): each modal coordinate must oscillate at its
mode's frequency (5.36 and 14.38 rad/s) within 1 %. Preview and bake must give the same pose.
"""
import math

import bpy
import numpy as np
import pytest
from blender_helpers import op, select_bones
from scipy.linalg import eigh

from overlap_assist.blender import bake_layer, preview
from overlap_assist.blender.demo_scene import build_armature, key_location

G0 = 9.80665
L = 0.25
FPS = 60
SECONDS = 8.0
BONES = (
    ("root", None, (0, 0, 0), (0, 0.3, 0)),
    ("holder", "root", (0, 0, 1.5), (0, 0.1, 1.5)),
    ("link.001", "holder", (0, 0, 1.5), (0, 0, 1.5 - L)),
    ("link.002", "link.001", (0, 0, 1.5 - L), (0, 0, 1.5 - 2 * L)),
)
NAMES = ["link.001", "link.002"]


def planar_modes():
    """Linearised M and K of two equal uniform rods (mass 1, length L) hanging from a pivot."""
    m = np.array([[1.0 / 3.0 + 1.0, 0.5], [0.5, 1.0 / 3.0]]) * L * L
    k = np.diag([1.5, 0.5]) * G0 * L
    w2, vec = eigh(k, m)
    return np.sqrt(w2), vec


@pytest.fixture
def pendulum():
    scene = bpy.context.scene
    scene.gravity = (0, 0, -G0)
    scene.render.fps, scene.render.fps_base = FPS, 1.0
    obj = build_armature("Pendulum", bones=BONES)
    n = int(SECONDS * FPS)
    frames = np.arange(1, n + 2, dtype=float)
    t = (frames - 1) / FPS
    # A sideways nudge of the holder by 1 mm over 0.15 s (smooth), then it holds still: swings of a
    # few degrees (the modes' amplitude shift, ~theta^2/16, stays far below the 1 % tolerance).
    bump = np.where(t < 0.15, 0.5 * (1 - np.cos(2 * math.pi * t / 0.15)), 0.0) * 0.001
    pos = np.stack([bump, np.zeros_like(t), np.full_like(t, 1.5)], -1)
    key_location(obj, "holder", frames, pos)
    scene.frame_start, scene.frame_end = 1, n + 1
    select_bones(obj, NAMES)
    op(obj, "add_chains", preset="strap")
    chain = obj.overlap_assist.chains[0]
    chain.response_mode = "PHYSICAL"
    chain.frequency_hz, chain.damping_ratio = 0.0, 0.0
    chain.air_drag, chain.tip_looseness = 0.0, 0.0
    chain.gravity_scale, chain.body_response = 1.0, 1.0
    chain.bend_limit = math.pi
    chain.thickness_taper, chain.tip_mass = 0.0, 0.0
    obj.overlap_assist.bake_tolerance_deg = 0.0
    return obj


def link_angles(obj, frames):
    scene = bpy.context.scene
    out = []
    for f in frames:
        scene.frame_set(int(f))
        row = []
        for name in NAMES:
            pb = obj.pose.bones[name]
            y = np.array(obj.matrix_world.to_3x3() @ pb.matrix.to_3x3().col[1])  # bone axis, head -> tail
            row.append(math.atan2(y[0], -y[2]))
        out.append(row)
    return np.array(out)


def omega_of(x, fps):
    i = np.flatnonzero((x[:-1] > 0.0) & (x[1:] <= 0.0))
    times = (i + x[i] / (x[i] - x[i + 1])) / fps
    assert times.size >= 4
    return 2.0 * math.pi / np.mean(np.diff(times))


def test_baked_double_pendulum_has_both_normal_modes(pendulum):
    obj = pendulum
    assert op(obj, "bake_chains") == {'FINISHED'}
    assert bake_layer.has_bake(obj)
    scene = bpy.context.scene
    frames = np.arange(int(0.3 * FPS) + 1, scene.frame_end + 1)  # after the nudge: free swing
    q = link_angles(obj, frames)
    omegas, vec = planar_modes()
    modal = q @ np.linalg.inv(vec).T  # q = vec @ eta
    assert np.max(np.abs(q)) > math.radians(0.2)  # it does swing
    for r in range(2):
        eta = modal[:, r] - modal[:, r].mean()
        assert np.max(np.abs(eta)) > 1e-4
        measured = omega_of(eta, FPS)
        assert abs(measured / omegas[r] - 1.0) / 0.01 < 1.0, (r, measured, omegas[r])


def test_preview_and_bake_give_the_same_pose(pendulum):
    obj = pendulum
    frames = [5, 30, 77, 200, 400]
    op(obj, "toggle_preview")
    try:
        previewed = link_angles(obj, frames)
    finally:
        op(obj, "toggle_preview")
    assert not preview.PREVIEW.is_on(obj)
    assert op(obj, "bake_chains") == {'FINISHED'}
    baked = link_angles(obj, frames)
    # Key tolerance 0: the bake writes the solve's rotations at every frame; they are stored as
    # float32 keys and normalised by Blender (measured differences up to 1.3e-5 rad).
    np.testing.assert_allclose(baked, previewed, atol=1e-4)
    assert np.max(np.abs(baked)) > 1e-3
