"""Quaternion and Euler helpers against scipy.spatial.transform.Rotation (reference library)."""
import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from overlap_assist.core.rotations import (
    EULER_ORDER_AXES,
    compose_euler,
    euler_to_matrix,
    euler_to_quat,
    matrix_to_euler,
    quat_from_matrix,
    quat_multiply,
    quat_to_matrix,
)


def _wxyz(r):
    q = r.as_quat()  # scipy: (x, y, z, w)
    q = np.concatenate([q[..., 3:], q[..., :3]], axis=-1)
    return q * np.where(q[..., :1] < 0, -1, 1)


def test_matrix_to_quaternion_matches_scipy_including_half_turns():
    rng = np.random.default_rng(0)
    r = Rotation.random(500, random_state=1)
    half_turns = Rotation.from_rotvec(np.pi * rng.normal(size=(20, 3)) / np.linalg.norm(rng.normal(size=(20, 3)), axis=1, keepdims=True))
    for rot in (r, half_turns):
        ours = quat_from_matrix(rot.as_matrix())
        ref = _wxyz(rot)
        # q and -q are the same rotation: compare up to sign.
        assert np.min([np.abs(ours - ref).max(axis=1), np.abs(ours + ref).max(axis=1)], axis=0).max() < 1e-9


def test_scaled_matrices_and_round_trip():
    r = Rotation.random(50, random_state=2)
    m = r.as_matrix() * np.array([2.0, 0.5, 3.0])[None, None, :]
    np.testing.assert_allclose(quat_to_matrix(quat_from_matrix(m)), r.as_matrix(), atol=1e-9)


def test_product_matches_scipy_composition():
    a, b = Rotation.random(30, random_state=3), Rotation.random(30, random_state=4)
    ours = quat_multiply(_wxyz(a), _wxyz(b))
    ref = _wxyz(a * b)  # scipy: a * b applies b first
    ours *= np.where(ours[:, :1] < 0, -1, 1)
    np.testing.assert_allclose(ours, ref, atol=1e-12)


# ---------------------------------------------------------------------------------------------
# Euler orders (scipy's extrinsic lowercase sequences: 'xyz' applies x first, R = Rz Ry Rx)
# ---------------------------------------------------------------------------------------------

ORDERS = tuple(EULER_ORDER_AXES)


@pytest.mark.parametrize("order", ORDERS)
def test_euler_matrix_and_quaternion_match_scipy(order):
    angles = np.random.default_rng(5).uniform(-7.0, 7.0, (200, 3))
    ref = Rotation.from_euler(order.lower(), angles[:, ["XYZ".index(a) for a in order]])
    np.testing.assert_allclose(euler_to_matrix(angles, order), ref.as_matrix(), atol=1e-12)
    ours = euler_to_quat(angles, order)
    ours *= np.where(ours[:, :1] < 0, -1, 1)
    np.testing.assert_allclose(ours, _wxyz(ref), atol=1e-12)


@pytest.mark.parametrize("order", ORDERS)
def test_matrix_to_euler_reproduces_the_rotation(order):
    r = Rotation.random(300, random_state=6)
    angles = matrix_to_euler(r.as_matrix(), order)
    np.testing.assert_allclose(euler_to_matrix(angles, order), r.as_matrix(), atol=1e-12)
    assert np.all(np.abs(angles) <= np.pi + 1e-12)
    # With a compatible reference the result is the same rotation and within half a turn of it.
    near = angles + np.random.default_rng(7).normal(scale=0.3, size=angles.shape) + 2 * np.pi
    moved = matrix_to_euler(r.as_matrix(), order, near)
    np.testing.assert_allclose(euler_to_matrix(moved, order), r.as_matrix(), atol=1e-12)
    np.testing.assert_allclose(moved, angles + 2 * np.pi, atol=1e-9)


@pytest.mark.parametrize("order", ORDERS)
def test_compose_euler_is_basis_times_offset_and_continuous(order):
    """scipy: R(composed) = R(basis) R(offset) per frame; offsets without jumps for smooth input,
    also where the basis crosses +-180 degrees; the one-frame-at-a-time path gives the same."""
    n = 240
    t = np.linspace(0.0, 1.0, n)
    basis = np.stack((2.6 + 1.3 * t, 0.4 * np.sin(5 * t), -0.3 * np.cos(3 * t)), axis=1)
    angle = 0.6 * np.exp(-2 * t) * np.sin(25 * t)
    axis = np.array([0.3, -0.5, 0.8]) / np.linalg.norm([0.3, -0.5, 0.8])
    offsets = np.concatenate((np.cos(angle / 2)[:, None], np.sin(angle / 2)[:, None] * axis), axis=1)
    composed = compose_euler(basis, order, offsets)
    expected = (Rotation.from_matrix(euler_to_matrix(basis, order)) * Rotation.from_quat(np.roll(offsets, -1, axis=1)))
    np.testing.assert_allclose(euler_to_matrix(composed, order), expected.as_matrix(), atol=1e-12)
    step = np.abs(np.diff(composed - basis, axis=0))
    assert step.max() < 0.2   # the offset moves < 0.1 rad per frame here; a flip would be ~pi or 2 pi
    # The same frames solved sequentially (the reference definition, frame k from frame k - 1).
    seq = np.empty_like(composed)
    prev = np.zeros(3)
    target = expected.as_matrix()
    for k in range(n):
        seq[k] = matrix_to_euler(target[k], order, basis[k] + prev)
        prev = seq[k] - basis[k]
    np.testing.assert_allclose(composed, seq, atol=1e-12)


def test_compose_euler_sequential_fallback_matches_the_definition():
    """Random rotations every frame defeat the parallel passes; the result still follows the
    frame-by-frame definition exactly."""
    rng = np.random.default_rng(8)
    basis = rng.uniform(-3, 3, (2, 60, 3))
    offsets = Rotation.random(120, random_state=9).as_quat().reshape(2, 60, 4)
    offsets = np.roll(offsets, 1, axis=-1)   # (w, x, y, z)
    composed = compose_euler(basis, "YZX", offsets)
    for b in range(2):
        target = euler_to_matrix(basis[b], "YZX") @ Rotation.from_quat(np.roll(offsets[b], -1, axis=1)).as_matrix()
        prev = np.zeros(3)
        for k in range(60):
            ref = matrix_to_euler(target[k], "YZX", basis[b, k] + prev)
            np.testing.assert_allclose(composed[b, k], ref, atol=1e-12)
            prev = ref - basis[b, k]


def test_compose_euler_in_blocks_equals_one_sequence_at_a_time_and_leaves_inputs_alone():
    """Many sequences are composed in blocks (several here); each result equals the composition of
    that sequence alone, and scipy's R(basis) R(offset); the caller's arrays are not modified."""
    rng = np.random.default_rng(10)
    n_seq, n = 31, 400   # more sequences than one block holds at this length
    t = np.linspace(0.0, 1.0, n)
    basis = rng.uniform(-3, 3, (n_seq, 1, 3)) + np.sin(np.outer(rng.uniform(1, 4, n_seq), t))[:, :, None]
    angle = 0.5 * np.exp(-2 * t)[None] * np.sin(np.outer(rng.uniform(10, 30, n_seq), t))
    axis = rng.normal(size=(n_seq, 1, 3))
    axis /= np.linalg.norm(axis, axis=2, keepdims=True)
    offsets = np.concatenate((np.cos(angle / 2)[..., None], np.sin(angle / 2)[..., None] * axis), axis=2) * 1.5
    basis_copy, offsets_copy = basis.copy(), offsets.copy()
    composed = compose_euler(basis, "ZXY", offsets)
    assert np.array_equal(basis, basis_copy) and np.array_equal(offsets, offsets_copy)
    for b in (0, 14, 15, 30):
        np.testing.assert_array_equal(composed[b], compose_euler(basis[b], "ZXY", offsets[b]))
    expected = (Rotation.from_matrix(euler_to_matrix(basis.reshape(-1, 3), "ZXY"))
                * Rotation.from_quat(np.roll(offsets.reshape(-1, 4), -1, axis=1)))
    np.testing.assert_allclose(euler_to_matrix(composed.reshape(-1, 3), "ZXY"), expected.as_matrix(), atol=1e-12)
