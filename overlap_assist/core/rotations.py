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


# ---------------------------------------------------------------------------------------------
# Euler angles in Blender's six rotation orders
# ---------------------------------------------------------------------------------------------
# Order 'XYZ' applies X first, then Y, then Z: R = Rz Ry Rx (column vectors). The formulas follow
# Shoemake K. 1994, "Euler Angle Conversion", Graphics Gems IV, pp. 222-229 (axis permutation
# (i, j, k) and its parity per order), with two solutions per matrix and the one closest to a
# previous rotation chosen, as Blender's rotation math does.

EULER_ORDER_AXES = {
    "XYZ": ((0, 1, 2), False), "XZY": ((0, 2, 1), True), "YXZ": ((1, 0, 2), True),
    "YZX": ((1, 2, 0), False), "ZXY": ((2, 0, 1), False), "ZYX": ((2, 1, 0), True),
}
"""order -> ((i, j, k) axes in application order, odd permutation)."""

# Below this |cos(middle angle)| the first and last axes line up (gimbal lock): the last angle is
# set to 0. The value is 16 float32 epsilons, the threshold Blender's float32 rotation math uses.
_GIMBAL_COS = 16.0 * 2.0**-23


def euler_to_matrix(angles_rad, order: str) -> np.ndarray:
    """Rotation matrices (..., 3, 3) from Euler angles (..., 3) (x, y, z in radians) in ``order``."""
    (i, j, k), odd = EULER_ORDER_AXES[order]
    a = np.asarray(angles_rad, dtype=float)
    sign = -1.0 if odd else 1.0
    ti, tj, th = sign * a[..., i], sign * a[..., j], sign * a[..., k]
    ci, cj, ch = np.cos(ti), np.cos(tj), np.cos(th)
    si, sj, sh = np.sin(ti), np.sin(tj), np.sin(th)
    cc, cs, sc, ss = ci * ch, ci * sh, si * ch, si * sh
    m = np.empty(a.shape[:-1] + (3, 3))
    m[..., i, i] = cj * ch
    m[..., i, j] = sj * sc - cs
    m[..., i, k] = sj * cc + ss
    m[..., j, i] = cj * sh
    m[..., j, j] = sj * ss + cc
    m[..., j, k] = sj * cs - sc
    m[..., k, i] = -sj
    m[..., k, j] = cj * si
    m[..., k, k] = cj * ci
    return m


def euler_to_quat(angles_rad, order: str) -> np.ndarray:
    """Unit quaternions (..., 4) (w, x, y, z) of Euler angles (..., 3) in ``order``: q_k ⊗ q_j ⊗ q_i."""
    return np.moveaxis(_euler_to_quat_cf(np.moveaxis(np.asarray(angles_rad, dtype=float), -1, 0), order), 0, -1)


def _euler_to_quat_cf(a, order):
    """Components first: angles (3, ...) -> quaternion (4, ...), the product q_k ⊗ q_j ⊗ q_i of the
    three half-angle rotations written out (sigma = +1 for a cyclic order, -1 for an odd one)."""
    (i, j, k), odd = EULER_ORDER_AXES[order]
    sigma = -1.0 if odd else 1.0
    half = 0.5 * a
    cos, sin = np.cos(half), np.sin(half)
    ci, cj, ck, si, sj, sk = cos[i], cos[j], cos[k], sin[i], sin[j], sin[k]
    cc, ss, cs, sc = ci * cj, si * sj, ci * sj, si * cj
    out = np.empty((4,) + np.shape(ci))
    out[0] = ck * cc + sigma * (sk * ss)
    out[1 + i] = ck * sc - sigma * (sk * cs)
    out[1 + j] = ck * cs + sigma * (sk * sc)
    out[1 + k] = sk * cc - sigma * (ck * ss)
    return out


def _quat_mul_cf(a, b):
    """Hamilton product a ⊗ b of component sequences (w, x, y, z) (arrays or scalars)."""
    aw, ax, ay, az = a
    bw, bx, by, bz = b
    return [aw * bw - ax * bx - ay * by - az * bz, aw * bx + ax * bw + ay * bz - az * by,
            aw * by - ax * bz + ay * bw + az * bx, aw * bz + ax * by - ay * bx + az * bw]


def _quat_matrix_element(q, r, c):
    """Element (row r, column c) of the rotation matrix of unit quaternion components q (4, ...)."""
    w, v = q[0], (q[1], q[2], q[3])
    if r == c:
        o1, o2 = v[(r + 1) % 3], v[(r + 2) % 3]
        return 1.0 - 2.0 * (o1 * o1 + o2 * o2)
    t = 3 - r - c   # the third axis
    sign = 1.0 if (c - r) % 3 == 2 else -1.0   # (r, c) = (0, 2), (1, 0), (2, 1): + w v_t
    return 2.0 * (v[r] * v[c] + sign * w * v[t])


def _euler_pair_cf(element, order, turn_equivalent=False):
    """Both Euler solutions, components first (3, ...), from ``element(row, col)`` of the matrices.

    With ``turn_equivalent`` the second solution is given only up to whole turns per component
    (``(a_i + pi, pi - a_j, a_k + pi)`` of the first, no arctan2), for callers that move both
    solutions by whole turns towards a reference anyway.
    """
    (i, j, k), odd = EULER_ORDER_AXES[order]
    m_ii, m_ji, m_kj, m_kk, m_ki = element(i, i), element(j, i), element(k, j), element(k, k), element(k, i)
    cy = np.sqrt(m_ii * m_ii + m_ji * m_ji)   # entries of a rotation matrix: no overflow; np.hypot is ~6x slower
    e1 = np.empty((3,) + np.shape(cy))
    e2 = np.empty_like(e1)
    e1[i] = np.arctan2(m_kj, m_kk)
    e1[j] = np.arctan2(-m_ki, cy)
    e1[k] = np.arctan2(m_ji, m_ii)
    if turn_equivalent:   # arctan2(-y, -x) = arctan2(y, x) + pi and arctan2(y, -x) = pi - arctan2(y, x), mod 2 pi
        e2[i] = e1[i] + np.pi
        e2[j] = np.pi - e1[j]
        e2[k] = e1[k] + np.pi
    else:
        e2[i] = np.arctan2(-m_kj, -m_kk)
        e2[j] = np.arctan2(-m_ki, -cy)
        e2[k] = np.arctan2(-m_ji, -m_ii)
    locked = cy <= _GIMBAL_COS
    if np.any(locked):
        e1[i] = np.where(locked, np.arctan2(-element(j, k), element(j, j)), e1[i])
        e1[k] = np.where(locked, 0.0, e1[k])
        e2[:] = np.where(locked, e1, e2)
    if odd:
        return -e1, -e2
    return e1, e2


_TURN = 2.0 * np.pi


def _moved_towards(angles, reference):
    """``angles`` minus the nearest whole number of turns to ``angles - reference`` (new array).

    The result depends on ``reference`` only through that whole number, so repeating it with a
    slightly different reference gives the same bits (compose_euler's passes rely on it)."""
    return angles - np.rint((angles - reference) * (1.0 / _TURN)) * _TURN


def _pick_compatible_cf(e1, e2, compat):
    """Of two solutions (3, ...), each moved by whole turns towards ``compat``, the one closer to it
    (sum of |differences|; the first on a tie)."""
    c1, c2 = _moved_towards(e1, compat), _moved_towards(e2, compat)
    far = np.abs(c1 - compat).sum(axis=0) > np.abs(c2 - compat).sum(axis=0)
    return np.where(far, c2, c1)


def matrix_to_euler(m, order: str, compatible_rad=None) -> np.ndarray:
    """Euler angles (..., 3) of rotation matrices (..., 3, 3) in ``order``.

    Without ``compatible_rad``: the solution with the smaller sum of |angles|. With it (..., 3):
    each of the two solutions is first moved by whole turns towards it (component-wise, each
    difference beyond half a turn reduced by the nearest whole number of turns),
    then the one with the smaller sum of |differences| is returned.
    """
    m = np.asarray(m, dtype=float)
    e1, e2 = _euler_pair_cf(lambda r, c: m[..., r, c], order, turn_equivalent=compatible_rad is not None)
    if compatible_rad is None:
        pick2 = np.sum(np.abs(e1), axis=0) > np.sum(np.abs(e2), axis=0)
        return np.moveaxis(np.where(pick2, e2, e1), 0, -1)
    compat = np.moveaxis(np.broadcast_to(np.asarray(compatible_rad, dtype=float), m.shape[:-1]), -1, 0)
    return np.moveaxis(_pick_compatible_cf(e1, e2, compat), 0, -1)


def compose_euler(basis_rad, order: str, offsets) -> np.ndarray:
    """Euler angles of ``basis ∘ offset`` per frame, each nearest the previous frame's.

    Parameters
    ----------
    basis_rad : array_like, shape (..., n_frames, 3), animated Euler angles in ``order``
    order : one of EULER_ORDER_AXES
    offsets : array_like, shape (..., n_frames, 4), unit quaternions (w, x, y, z)

    Returns
    -------
    ndarray, shape (..., n_frames, 3): frame k is ``matrix_to_euler(R(basis_k) R(offset_k), order,
    basis_k + (composed_{k-1} - basis_{k-1}))``, frame 0 compatible with ``basis_0``; so
    ``composed - basis`` is a continuous Euler offset.

    The frames depend on each other only through the previous frame's offset. The whole sequence
    is first solved at once, repeated with the previous pass's offsets until no frame changes
    (smooth motion: two passes); if that needs more than ``_PARALLEL_PASSES`` passes, the frames
    from the first still-changing one on are solved one after the other.
    """
    basis_rad = np.asarray(basis_rad, dtype=float)
    offsets = np.asarray(offsets, dtype=float)
    lead, n_frames = basis_rad.shape[:-2], basis_rad.shape[-2]
    basis_rad, offsets = basis_rad.reshape(-1, n_frames, 3), offsets.reshape(-1, n_frames, 4)
    out = np.empty(basis_rad.shape)
    # Sequences in blocks of about _BLOCK_VALUES frames: the temporaries stay small enough for the
    # allocator to reuse them (large ones are returned to the system and faulted in again on
    # every operation; measured ~1.5x slower for 50 x 250 frames in one block).
    block = max(1, _BLOCK_VALUES // max(n_frames, 1))
    for start in range(0, basis_rad.shape[0], block):
        out[start:start + block] = _compose_block(basis_rad[start:start + block], order, offsets[start:start + block])
    return out.reshape(lead + (n_frames, 3))


_BLOCK_VALUES = 6000


def _compose_block(basis_rad, order, offsets):
    """:func:`compose_euler` of (b, n, 3) angles and (b, n, 4) offsets."""
    # Components first and contiguous: every operation below then runs on contiguous rows.
    basis = np.ascontiguousarray(np.moveaxis(basis_rad, -1, 0))    # (3, b, n)
    offsets = np.moveaxis(offsets, -1, 0).copy()                   # (4, b, n), a copy: normalised in place
    offsets /= np.sqrt(offsets[0] * offsets[0] + offsets[1] * offsets[1] + offsets[2] * offsets[2]
                       + offsets[3] * offsets[3])
    q = _quat_mul_cf(_euler_to_quat_cf(basis, order), offsets)
    e1, e2 = _euler_pair_cf(lambda r, c: _quat_matrix_element(q, r, c), order, turn_equivalent=True)

    composed = _pick_compatible_cf(e1, e2, basis)   # every frame as if the previous offset were zero
    for _ in range(_PARALLEL_PASSES):
        compat = basis.copy()
        compat[..., 1:] += composed[..., :-1] - basis[..., :-1]
        new = _pick_compatible_cf(e1, e2, compat)
        changed = np.any(new != composed, axis=tuple(range(new.ndim - 1)))
        composed = new
        if not changed.any():
            return np.moveaxis(composed, 0, -1)
    for k in range(int(np.argmax(changed)), basis.shape[-1]):
        compat = basis[..., k] + (composed[..., k - 1] - basis[..., k - 1] if k else 0.0)
        composed[..., k] = _pick_compatible_cf(e1[..., k], e2[..., k], compat)
    return np.moveaxis(composed, 0, -1)


_PARALLEL_PASSES = 4
