"""Rotation helpers on arrays: quaternions are (w, x, y, z), matrices act on column vectors.

References
----------
Shepperd S.W. (1978), "Quaternion from rotation matrix", J. Guidance and Control 1(3):223-224
(choose the largest of w, x, y, z to divide by, for accuracy).
"""
from __future__ import annotations

import numpy as np


def quat_from_matrix(m: np.ndarray) -> np.ndarray:
    """Unit quaternions from rotation matrices, shape (..., 3, 3) -> (..., 4), w >= 0.

    Columns are normalised first, so matrices with (uniform or per-axis) scale are accepted.
    """
    m = np.asarray(m, dtype=float)
    m = m / np.linalg.norm(m, axis=-2, keepdims=True)
    shape = m.shape[:-2]
    m = m.reshape(-1, 3, 3)
    tr = m[:, 0, 0] + m[:, 1, 1] + m[:, 2, 2]
    cand = np.stack([tr, m[:, 0, 0], m[:, 1, 1], m[:, 2, 2]], axis=1)
    pick = np.argmax(cand, axis=1)
    q = np.empty((m.shape[0], 4))
    # Case w largest.
    s = np.sqrt(np.maximum(1.0 + tr, 1e-300)) * 2
    c0 = pick == 0
    q[c0] = np.stack([0.25 * s, (m[:, 2, 1] - m[:, 1, 2]) / s, (m[:, 0, 2] - m[:, 2, 0]) / s,
                      (m[:, 1, 0] - m[:, 0, 1]) / s], axis=1)[c0]
    for axis in (1, 2, 3):
        i = axis - 1
        j, k = (i + 1) % 3, (i + 2) % 3
        sel = pick == axis
        if not sel.any():
            continue
        mm = m[sel]
        s = np.sqrt(np.maximum(1.0 + mm[:, i, i] - mm[:, j, j] - mm[:, k, k], 1e-300)) * 2
        qq = np.empty((mm.shape[0], 4))
        qq[:, 0] = (mm[:, k, j] - mm[:, j, k]) / s
        qq[:, 1 + i] = 0.25 * s
        qq[:, 1 + j] = (mm[:, j, i] + mm[:, i, j]) / s
        qq[:, 1 + k] = (mm[:, k, i] + mm[:, i, k]) / s
        q[sel] = qq
    q *= np.where(q[:, :1] < 0, -1.0, 1.0)
    q /= np.linalg.norm(q, axis=1, keepdims=True)
    return q.reshape(*shape, 4)


def quat_multiply(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Hamilton product a ⊗ b (apply b, then a), broadcasting over leading axes."""
    aw, ax, ay, az = np.moveaxis(np.asarray(a, dtype=float), -1, 0)
    bw, bx, by, bz = np.moveaxis(np.asarray(b, dtype=float), -1, 0)
    return np.stack([aw * bw - ax * bx - ay * by - az * bz,
                     aw * bx + ax * bw + ay * bz - az * by,
                     aw * by - ax * bz + ay * bw + az * bx,
                     aw * bz + ax * by - ay * bx + az * bw], axis=-1)


def quat_to_matrix(q: np.ndarray) -> np.ndarray:
    """Rotation matrices (..., 3, 3) from unit quaternions (..., 4)."""
    q = np.asarray(q, dtype=float)
    q = q / np.linalg.norm(q, axis=-1, keepdims=True)
    w, x, y, z = np.moveaxis(q, -1, 0)
    return np.stack([
        np.stack([1 - 2 * (y * y + z * z), 2 * (x * y - w * z), 2 * (x * z + w * y)], -1),
        np.stack([2 * (x * y + w * z), 1 - 2 * (x * x + z * z), 2 * (y * z - w * x)], -1),
        np.stack([2 * (x * z - w * y), 2 * (y * z + w * x), 1 - 2 * (x * x + y * y)], -1),
    ], -2)
