"""Swing offsets checked with scipy.spatial.transform.Rotation (reference implementation of
quaternion composition; scipy stores quaternions x, y, z, w)."""
import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from overlap_assist.core.errors import InputError
from overlap_assist.core.swing import swing_offsets

BONE_AXIS = np.array([0.0, 1.0, 0.0])  # a Blender bone points along its local +Y


def wxyz(rot):
    q = rot.as_quat()
    return np.concatenate([q[..., 3:], q[..., :3]], axis=-1)


def from_wxyz(q):
    return Rotation.from_quat(np.concatenate([q[..., 1:], q[..., :1]], axis=-1))


def random_case(seed, n_frames=6, n_links=4):
    rng = np.random.default_rng(seed)
    rots = Rotation.random(n_frames * n_links, random_state=seed)
    target = rots.apply(BONE_AXIS).reshape(n_frames, n_links, 3)
    sim = target + rng.normal(0.0, 0.4, target.shape)
    sim /= np.linalg.norm(sim, axis=-1, keepdims=True)
    return rots, wxyz(rots).reshape(n_frames, n_links, 4), target, sim


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_offsets_turn_each_bone_onto_its_simulated_direction(seed):
    rots, rot_q, target, sim = random_case(seed)
    off = swing_offsets(rot_q, target, sim)
    n_frames, n_links = target.shape[:2]
    for f in range(n_frames):
        parent_swing = Rotation.identity()
        for i in range(n_links):
            r_i = rots[f * n_links + i]
            o_i = from_wxyz(off[f, i])
            # The parent's swing carries bone i along: new world rotation = S_{i-1} R_i O_i.
            new_world = parent_swing * r_i * o_i
            assert np.allclose(new_world.apply(BONE_AXIS), sim[f, i], atol=1e-12)
            # Swing only: new_world R_i^-1 turns the animated direction without twist about it.
            swing = new_world * r_i.inv()
            assert abs(np.dot(swing.as_rotvec(), target[f, i])) < 1e-9
            parent_swing = swing


def test_no_deviation_gives_identity_offsets():
    _, rot_q, target, _ = random_case(4)
    off = swing_offsets(rot_q, target, target)
    assert np.allclose(off, [1.0, 0.0, 0.0, 0.0], atol=1e-12)


def test_quaternion_signs_are_continuous_over_time():
    n = 40
    angle = np.linspace(0.0, 3.5 * np.pi, n)  # the offset turns past 180 degrees
    rot_q = np.tile([1.0, 0.0, 0.0, 0.0], (n, 1, 1))
    target = np.tile(BONE_AXIS, (n, 1, 1))
    sim = np.stack([np.sin(0.45 * angle), np.cos(0.45 * angle), np.zeros(n)], -1)[:, None, :]
    off = swing_offsets(rot_q, target, sim)
    assert off[0, 0, 0] >= 0.0
    assert np.all(np.einsum("fli,fli->fl", off[1:], off[:-1]) > 0.0)


def test_opposite_direction_is_a_half_turn():
    rot_q = np.array([[[1.0, 0.0, 0.0, 0.0]]])
    off = swing_offsets(rot_q, [[BONE_AXIS]], [[-BONE_AXIS]])
    assert np.allclose(from_wxyz(off[0, 0]).apply(BONE_AXIS), -BONE_AXIS, atol=1e-12)


def test_bad_shapes_raise_input_error():
    with pytest.raises(InputError):
        swing_offsets(np.zeros((2, 3, 4)), np.zeros((2, 3, 3)), np.zeros((2, 2, 3)))
    with pytest.raises(InputError):
        swing_offsets(np.zeros((2, 3, 4)), np.ones((2, 3, 3)), np.ones((2, 3, 3)))
