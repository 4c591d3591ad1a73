"""Simulated link directions -> local rotation offsets of the chain's bones (swing only).

For bone ``i`` with animated world rotation ``R_i``, the simulated direction is reached by the
minimal world swing ``S_i`` that turns the animated direction onto the simulated one, so the
new world rotation is ``S_i R_i`` and the animated twist about the bone is kept. The parent's
swing ``S_{i-1}`` already carries bone ``i`` along, so the offset to right-multiply onto the
bone's animated local rotation (Blender pose basis: ``basis' = basis @ O_i``; an NLA layer in
Combine mode does ``q_base @ q_offset``) is

    O_i = R_i^-1 (S_{i-1}^-1 S_i) R_i,     S_{-1} = identity.

Quaternions are (w, x, y, z); the output keeps sign continuity over time (w >= 0 at the first
frame, then the sign that is nearest the previous frame) so that keys interpolate the short way.
"""
from __future__ import annotations

import numpy as np

from .errors import InputError


def quat_multiply(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Hamilton product ``a b`` over the last axis (w, x, y, z); broadcasts."""
    aw, ax, ay, az = np.moveaxis(a, -1, 0)
    bw, bx, by, bz = np.moveaxis(b, -1, 0)
    return np.stack(
        (
            aw * bw - ax * bx - ay * by - az * bz,
            aw * bx + ax * bw + ay * bz - az * by,
            aw * by - ax * bz + ay * bw + az * bx,
            aw * bz + ax * by - ay * bx + az * bw,
        ),
        axis=-1,
    )


def quat_conjugate(q: np.ndarray) -> np.ndarray:
    """Conjugate (the inverse of a unit quaternion)."""
    return q * np.array([1.0, -1.0, -1.0, -1.0])


def swing_between(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Minimal rotation (w, x, y, z) turning unit vectors ``a`` onto ``b`` (..., 3).

    Its axis is perpendicular to both, so it adds no twist about ``a``. For opposite vectors
    the half-turn axis is a fixed perpendicular of ``a``.
    """
    w = 1.0 + np.einsum("...i,...i->...", a, b)
    xyz = np.cross(a, b)
    q = np.concatenate((w[..., None], xyz), axis=-1)
    opposite = w < 1e-12
    if np.any(opposite):
        helper = np.where((np.abs(a[..., 0]) < 0.9)[..., None], [1.0, 0.0, 0.0], [0.0, 1.0, 0.0])
        axis = np.cross(a, helper)
        axis /= np.linalg.norm(axis, axis=-1, keepdims=True)
        half_turn = np.concatenate((np.zeros(w.shape + (1,)), axis), axis=-1)
        q = np.where(opposite[..., None], half_turn, q)
    return q / np.linalg.norm(q, axis=-1, keepdims=True)


def continuous_signs(q: np.ndarray) -> np.ndarray:
    """Flip quaternions (n_frames, ...) so that w >= 0 at frame 0 and each frame is on the
    same side as the one before (q and -q are the same rotation)."""
    q = np.array(q, dtype=np.float64)
    if q.shape[0] == 0:
        return q
    step = np.where(np.einsum("t...i,t...i->t...", q[1:], q[:-1]) < 0.0, -1.0, 1.0)
    first = np.where(q[0, ..., 0] < 0.0, -1.0, 1.0)
    signs = np.concatenate((first[None], step), axis=0)
    return q * np.cumprod(signs, axis=0)[..., None]


def swing_offsets(target_rot_wxyz, target_dirs, sim_dirs) -> np.ndarray:
    """Local rotation offsets that turn each animated bone onto its simulated direction.

    Parameters
    ----------
    target_rot_wxyz : array_like, shape (n_frames, n_links, 4)
        Animated world rotation ``R_i`` of each bone (unit quaternions, w first).
    target_dirs : array_like, shape (n_frames, n_links, 3)
        Animated world direction of each bone (head -> tail), unit.
    sim_dirs : array_like, shape (n_frames, n_links, 3)
        Simulated world direction of each bone, unit.

    Returns
    -------
    ndarray, shape (n_frames, n_links, 4)
        ``O_i`` (w, x, y, z), sign-continuous over time per bone.
    """
    rot = np.array(target_rot_wxyz, dtype=np.float64)
    tgt = np.array(target_dirs, dtype=np.float64)
    sim = np.array(sim_dirs, dtype=np.float64)
    if rot.ndim != 3 or rot.shape[-1] != 4:
        raise InputError(f"the chain bones' animated rotations must be one quaternion per frame and bone, got {rot.shape}")
    if tgt.shape != rot.shape[:-1] + (3,) or sim.shape != tgt.shape:
        raise InputError(
            f"the animated and simulated chain directions must match the rotations {rot.shape[:-1] + (3,)}, "
            f"got {tgt.shape} and {sim.shape}"
        )
    if not (np.all(np.isfinite(rot)) and np.all(np.isfinite(tgt)) and np.all(np.isfinite(sim))):
        raise InputError("Rotations and directions must be finite")
    norm = np.linalg.norm(rot, axis=-1, keepdims=True)
    if np.any(norm < 1e-9):
        raise InputError("the chain bones' animated rotations contain a zero quaternion")
    rot = rot / norm
    tgt = tgt / np.linalg.norm(tgt, axis=-1, keepdims=True)
    sim = sim / np.linalg.norm(sim, axis=-1, keepdims=True)

    swing = swing_between(tgt, sim)  # S_i, (T, N, 4)
    parent = np.concatenate((np.broadcast_to([1.0, 0.0, 0.0, 0.0], swing[:, :1].shape), swing[:, :-1]), axis=1)
    relative = quat_multiply(quat_conjugate(parent), swing)  # S_{i-1}^-1 S_i
    offset = quat_multiply(quat_conjugate(rot), quat_multiply(relative, rot))
    offset /= np.linalg.norm(offset, axis=-1, keepdims=True)
    return continuous_signs(offset)
