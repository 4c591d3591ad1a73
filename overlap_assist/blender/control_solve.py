"""Solving for key-bone rotations that give the simulated pose where constraints sit in between.

For chains whose bones are moved through constraints (``rig_drive``), the offsets the solver
gives in each chain bone's own frame would not reach the mesh. Here, per frame, Blender itself
evaluates the rig: root to tip, the chain bone's evaluated direction is compared with the
simulated one, the minimal armature-space swing between them is applied to the key bone's
armature-space rotation (``basis' = basis ∘ C⁻¹ S C``, C the key bone's evaluated rotation), and
the rig is evaluated again before the next bone. This is exact in one pass when the key bone's
rotation turns the chain bone rigidly (Copy Transforms, Copy Rotation mixed before/after, Child
Of); aims (Stretch To) are repeated until the directions agree. A bone still more than
``RESIDUAL_LIMIT_DEG`` off is refused, naming it. Returns offsets per key bone (``animated ∘
offset`` = the solved rotation), which the bake writes like any other offsets.

Runs with the bake layer muted and the preview held off (``chain_sim.animated_pose_only``); the
key bones' rotations and the current frame are restored afterwards.
"""
import bpy
import numpy as np
from mathutils import Euler, Matrix, Quaternion

from ..core.errors import InvalidChainError
from ..core.swing import swing_between

CONVERGED_DEG = 0.005
"""A pass that turns no bone by more than this is the last."""
MAX_PASSES = 4
RESIDUAL_LIMIT_DEG = 0.5
"""Largest direction error left after the passes; above it the chain is refused (the brief asks
for the deform pose within 1°, the key tolerance comes on top)."""


def _rotation(pb):
    if pb.rotation_mode == 'QUATERNION':
        return Quaternion(pb.rotation_quaternion).normalized()
    if pb.rotation_mode == 'AXIS_ANGLE':
        angle, *axis = pb.rotation_axis_angle
        return Quaternion(axis, angle)
    return Euler(pb.rotation_euler, pb.rotation_mode).to_quaternion()


def _set_rotation(pb, q):
    if pb.rotation_mode == 'QUATERNION':
        pb.rotation_quaternion = q
    elif pb.rotation_mode == 'AXIS_ANGLE':
        axis, angle = q.to_axis_angle()
        pb.rotation_axis_angle = (angle, *axis)
    else:
        pb.rotation_euler = q.to_euler(pb.rotation_mode, pb.rotation_euler)


def _direction(pb):
    y = np.array(pb.matrix.col[1][:3], dtype=np.float64)
    return y / np.linalg.norm(y)


def _armature_rotation(pb):
    m = Matrix(pb.matrix).to_3x3()
    for i in range(3):
        m.col[i] = m.col[i].normalized()
    return m.to_quaternion()


def _restore(pose, saved):
    for k, (_mode, quat, euler, axis_angle) in saved.items():
        pb = pose[k]
        pb.rotation_quaternion, pb.rotation_euler, pb.rotation_axis_angle = quat, euler, axis_angle


def solve_steps(obj, scene, frames, chains_drives, sim_dirs_world, every=4):
    """Generator: yields the fraction done; returns ({key bone: (n, 4) offsets}, {bone: max error deg}).

    chains_drives : per chain, [rig_drive.Drive] root to tip
    sim_dirs_world : per chain, (n, links, 3) simulated world directions
    """
    from .chain_sim import animated_pose_only
    pose = obj.pose.bones
    keys = [d.key_bone for drives in chains_drives for d in drives]
    saved = {k: (pose[k].rotation_mode, tuple(pose[k].rotation_quaternion), tuple(pose[k].rotation_euler),
                 tuple(pose[k].rotation_axis_angle)) for k in keys}
    offsets = {k: np.empty((len(frames), 4)) for k in keys}
    worst = {d.bone: 0.0 for drives in chains_drives for d in drives}
    levels = max(len(d) for d in chains_drives)
    view_layer = bpy.context.view_layer
    frame_back = (scene.frame_current, scene.frame_subframe)
    with animated_pose_only(obj):
        try:
            for fi, f in enumerate(frames):
                _restore(pose, saved)   # channels nothing animates would keep the last frame's solution
                scene.frame_set(int(f))
                animated = {k: _rotation(pose[k]) for k in keys}
                current = dict(animated)
                to_armature = np.linalg.inv(np.array(obj.matrix_world, dtype=np.float64)[:3, :3])
                wanted = []
                for dirs in sim_dirs_world:
                    w = dirs[fi] @ to_armature.T
                    wanted.append(w / np.linalg.norm(w, axis=-1, keepdims=True))
                for _pass in range(MAX_PASSES):
                    largest = 0.0
                    for level in range(levels):
                        moved = False
                        for c, drives in enumerate(chains_drives):
                            if level >= len(drives):
                                continue
                            d = drives[level]
                            swing = swing_between(_direction(pose[d.bone]), wanted[c][level])
                            angle = 2.0 * np.degrees(np.arccos(min(1.0, abs(float(swing[0])))))
                            largest = max(largest, angle)
                            if angle < 1e-6:
                                continue
                            cq = _armature_rotation(pose[d.key_bone])
                            local = cq.inverted() @ Quaternion(swing) @ cq
                            current[d.key_bone] = current[d.key_bone] @ local
                            _set_rotation(pose[d.key_bone], current[d.key_bone])
                            moved = True
                        if moved:
                            view_layer.update()
                    if largest < CONVERGED_DEG:
                        break
                for c, drives in enumerate(chains_drives):   # what is left, on Blender's evaluation
                    for level, d in enumerate(drives):
                        err = np.degrees(np.arccos(np.clip(float(_direction(pose[d.bone]) @ wanted[c][level]), -1, 1)))
                        worst[d.bone] = max(worst[d.bone], err)
                for k in keys:
                    q = animated[k].inverted() @ current[k]
                    offsets[k][fi] = (q.w, q.x, q.y, q.z)
                if fi % every == every - 1:
                    yield (fi + 1) / len(frames)
        finally:
            _restore(pose, saved)
            scene.frame_set(frame_back[0], subframe=frame_back[1])
    for drives in chains_drives:
        for d in drives:
            if worst[d.bone] > RESIDUAL_LIMIT_DEG:
                raise InvalidChainError(
                    f"bone {d.bone} cannot be brought to the simulated pose through {d.key_bone} "
                    f"({worst[d.bone]:.1f}° left): its constraints work against it; pick the bones "
                    "animators key for it (the chain's FK controls)")
    return offsets, worst
