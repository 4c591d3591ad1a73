"""Quaternion helpers against scipy.spatial.transform.Rotation (reference library)."""
import numpy as np
from scipy.spatial.transform import Rotation

from overlap_assist.core.rotations import quat_from_matrix, quat_multiply, quat_to_matrix


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
