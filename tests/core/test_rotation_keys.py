"""Rotation keys bounded by the true rotation angle: Blender's Bézier rule, the error bound on
quaternions and all six Euler orders, flat channels, clip position, determinism.

References used by the checks below
- de Casteljau's algorithm (Farin G. 2002, "Curves and Surfaces for CAGD", 5th ed., ch. 4;
  from memory) with scipy.optimize.brentq solving x(t) = frame: a Bézier F-curve segment
  evaluated directly from its four control points, independently of core.bezier_fit.
- Blender's handle correction (``BKE_fcurve_correct_bezpart`` in blenkernel/intern/fcurve.cc):
  when the two inner handles of a segment together reach further in x than the segment, both
  are pulled towards their keys by length / (|h1.x| + |h2.x|); written out again below.
- numpy.float32: Blender stores keys and handles in single precision.
- scipy.spatial.transform.Rotation (reference library): Euler angles (Blender's order 'XYZ' is
  scipy's extrinsic 'xyz') and the rotation angle between two rotations.
- Ogata K. 2010, "Modern Control Engineering", 5th ed., Sec. 5-3: underdamped second-order response
  (the test motion).
"""
import numpy as np
import pytest
from scipy.optimize import brentq
from scipy.spatial.transform import Rotation

from overlap_assist.core.bezier_fit import evaluate_curves
from overlap_assist.core.errors import InputError
from overlap_assist.core.key_reduce import RotationTrack, reduce_euler_groups, reduce_rotation_keys

ORDERS = ("XYZ", "XZY", "YXZ", "YZX", "ZXY", "ZYX")
TOL_DEG = 0.5


# --------------------------------------------------------------------------------------------
# independent reference evaluation (float32 controls, de Casteljau, brentq, Blender's correction)
# --------------------------------------------------------------------------------------------

def de_casteljau(p0, p1, p2, p3, t):
    a, b, c = p0 + t * (p1 - p0), p1 + t * (p2 - p1), p2 + t * (p3 - p2)
    d, e = a + t * (b - a), b + t * (c - b)
    return d + t * (e - d)


def corrected(p0, p1, p2, p3):
    h1, h2 = p0 - p1, p3 - p2
    total = abs(h1[0]) + abs(h2[0])
    length = p3[0] - p0[0]
    if total > length:
        fac = length / total
        return p0 - fac * h1, p3 - fac * h2
    return p1, p2


def reference_value(kx, ky, left, right, frame):
    """Blender's rule on float32-stored controls: constant outside, key value on a key."""
    kx, ky = np.float32(kx).astype(float), np.float32(ky).astype(float)
    left, right = np.float32(left).astype(float), np.float32(right).astype(float)
    if frame <= kx[0]:
        return ky[0]
    if frame >= kx[-1]:
        return ky[-1]
    j = int(np.searchsorted(kx, frame, side="right") - 1)
    if kx[j] == frame:
        return ky[j]
    p0, p3 = np.array([kx[j], ky[j]]), np.array([kx[j + 1], ky[j + 1]])
    p1, p2 = corrected(p0, right[j], left[j + 1], p3)
    t = brentq(lambda u: de_casteljau(p0, p1, p2, p3, u)[0] - frame, 0.0, 1.0, xtol=1e-15)
    return de_casteljau(p0, p1, p2, p3, t)[1]


def reference_curve(ch, frames, rest):
    if ch is None:
        return np.full(len(frames), rest)
    return np.array([reference_value(ch.frames, ch.values, ch.handle_left, ch.handle_right, f) for f in frames])


def ring_down(n, fps=24.0, amp_deg=20.0, f_hz=1.5, zeta=0.15, start_s=0.3):
    """Ogata 2010 Sec. 5-3 underdamped response after a landing at start_s, radians."""
    t = np.arange(n) / fps
    wn = 2 * np.pi * f_hz
    dt = np.clip(t - start_s, 0.0, None)
    return np.where(t >= start_s, np.deg2rad(amp_deg) * np.exp(-zeta * wn * dt) * np.sin(wn * np.sqrt(1 - zeta**2) * dt), 0.0)


def motion(n, seed):
    rng = np.random.default_rng(seed)
    return np.stack([ring_down(n, amp_deg=rng.uniform(5, 30), f_hz=rng.uniform(0.5, 3), zeta=rng.uniform(0.05, 0.4),
                               start_s=rng.uniform(0, n / 48)) for _ in range(3)], axis=1)


def blender_euler(order, angles):
    """scipy Rotation of Blender Euler angles (x, y, z) in ``order`` (X applied first for 'XYZ'):
    scipy's extrinsic sequence takes the angles in the sequence's own order."""
    return Rotation.from_euler(order.lower(), np.asarray(angles)[..., ["xyz".index(a) for a in order.lower()]])


def scipy_angle_deg(rot_a, rot_b):
    return np.rad2deg((rot_a.inv() * rot_b).magnitude())


# --------------------------------------------------------------------------------------------
# evaluation
# --------------------------------------------------------------------------------------------

def test_evaluate_curves_matches_de_casteljau_with_free_overlapping_handles():
    """Free handles of any length, some reaching past their neighbours (Blender's correction)."""
    rng = np.random.default_rng(3)
    kx = np.cumsum(rng.integers(2, 20, size=8)).astype(float)
    ky = rng.normal(size=8)
    span = np.diff(kx)
    out_len = np.concatenate((span, span[-1:])) * rng.uniform(0.05, 0.9, size=8)   # some sums exceed 1
    in_len = np.concatenate((span[:1], span)) * rng.uniform(0.05, 0.9, size=8)
    left = np.stack((kx - in_len, ky - rng.normal(size=8) * in_len * 0.1), axis=1)
    right = np.stack((kx + out_len, ky + rng.normal(size=8) * out_len * 0.1), axis=1)
    assert np.any(out_len[:-1] + in_len[1:] > span)           # the correction is exercised
    frames = np.linspace(kx[0] - 3, kx[-1] + 3, 257)
    f32 = lambda a: np.float32(a).astype(float)  # noqa: E731
    got = evaluate_curves(f32(kx), f32(ky), f32(left), f32(right), np.zeros(8, dtype=np.intp), 1, frames)[0]
    expected = np.array([reference_value(kx, ky, left, right, f) for f in frames])
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-12)


# --------------------------------------------------------------------------------------------
# the bound: rotation angle <= tolerance, by the independent evaluation and scipy's rotations
# --------------------------------------------------------------------------------------------

@pytest.mark.parametrize("order", ORDERS)
def test_euler_layer_rotation_error_within_tolerance_every_order(order):
    n = 160
    frames = np.arange(1.0, n + 1)
    rng = np.random.default_rng(11)
    tracks, refs = [], []
    for seed in range(4):
        basis = np.deg2rad(40.0) * np.sin(np.linspace(0, 3, n))[:, None] * rng.uniform(-1, 1, size=3)
        layer = motion(n, seed)                                        # continuous, as the bake writes
        target = blender_euler(order, basis + layer)
        tracks.append(RotationTrack(layer, order, basis, np.zeros(3)))
        refs.append(target)
    result = reduce_rotation_keys(frames, tracks, np.deg2rad(TOL_DEG))
    per_frame = 3 * n * len(tracks)
    assert sum(r.n_keys for r in result) < 0.35 * per_frame
    for track, keys, target in zip(tracks, result, refs):
        got = np.stack([reference_curve(ch, frames, 0.0) for ch in keys.channels], axis=1)
        angle = scipy_angle_deg(blender_euler(order, got + track.basis), target)
        assert angle.max() <= TOL_DEG
        # the reported bound is the measured quantity (up to the float32 evaluation margin)
        assert np.rad2deg(keys.max_error_rad) == pytest.approx(angle.max(), abs=1e-4)


def test_quaternion_rotation_error_within_tolerance():
    n = 200
    frames = np.arange(1.0, n + 1)
    tracks, refs = [], []
    for seed in range(5):
        q = Rotation.from_euler("xyz", motion(n, seed))
        wxyz = np.roll(q.as_quat(), 1, axis=1)
        wxyz *= np.where(wxyz[:, :1] < 0, -1.0, 1.0)
        tracks.append(RotationTrack(wxyz, "QUATERNION", None, np.array([1.0, 0, 0, 0])))
        refs.append(q)
    result = reduce_rotation_keys(frames, tracks, np.deg2rad(TOL_DEG))
    assert sum(r.n_keys for r in result) < 0.35 * 4 * n * len(tracks)
    for keys, target in zip(result, refs):
        got = np.stack([reference_curve(ch, frames, r) for ch, r in zip(keys.channels, [1.0, 0, 0, 0])], axis=1)
        got /= np.linalg.norm(got, axis=1, keepdims=True)   # Blender normalises the evaluated quaternion
        angle = scipy_angle_deg(Rotation.from_quat(np.roll(got, -1, axis=1)), target)
        assert angle.max() <= TOL_DEG


def test_quaternion_budget_weights_equalise_each_components_effect_on_the_angle():
    """An error of (weight x d) in any one component of a unit quaternion turns the normalised
    result by the same angle, 2 d for small d (scipy's rotation angle as the reference)."""
    from overlap_assist.core.key_reduce import _QUAT_WEIGHT_MAX, _quaternion_budget_weights
    rng = np.random.default_rng(11)
    quats = Rotation.random(40, random_state=rng).as_quat()            # (x, y, z, w), unit
    weights = _quaternion_budget_weights(quats)
    d = 1e-5
    uncapped = weights < _QUAT_WEIGHT_MAX
    assert uncapped.mean() > 0.9
    for i in range(4):
        moved = quats.copy()
        moved[:, i] += weights[:, i] * d
        angle = (Rotation.from_quat(quats).inv() * Rotation.from_quat(moved)).magnitude()   # normalises
        np.testing.assert_allclose(angle[uncapped[:, i]], 2 * d, rtol=1e-3)
        assert np.all(angle[~uncapped[:, i]] <= 2 * d * (1 + 1e-3))   # capped: a smaller effect
    # w of a small rotation (near 1) may move ~8x further than x, y, z for the same angle
    near_identity = _quaternion_budget_weights(np.array([[np.cos(0.01), np.sin(0.01), 0.0, 0.0]]))[0]
    assert near_identity[0] == _QUAT_WEIGHT_MAX and near_identity[2] == 1.0


def test_keys_start_on_the_prominent_turning_points():
    """A damped oscillation (Ogata 2010 Sec. 5-3) gets a key on each extreme that stands out from
    the budget; a small fast ripple (well inside the budget) gets none."""
    n = 240
    frames = np.arange(1.0, n + 1)
    angle = ring_down(n, amp_deg=25.0, f_hz=1.0, zeta=0.1, start_s=0.2)
    ripple = np.deg2rad(0.02) * np.sin(np.arange(n) * 2.9)                # 1/25 of the tolerance
    values = np.stack((angle + ripple, np.zeros(n), np.zeros(n)), axis=1)
    keys = reduce_rotation_keys(frames, [RotationTrack(values, "XYZ", None, np.zeros(3))], np.deg2rad(TOL_DEG))[0]
    x = keys.channels[0]
    d = np.diff(angle)
    extremes = np.flatnonzero((d[:-1] * d[1:] < 0) & (np.abs(angle[1:-1]) > np.deg2rad(2.0))) + 1
    assert extremes.size >= 5
    keyed = set(np.asarray(x.frames, dtype=int) - 1)
    near = [min(abs(k - e) for k in keyed) for e in extremes]
    assert max(near) == 0, (extremes, sorted(keyed))   # on the sampled extreme itself
    assert x.n_keys < 3 * extremes.size                 # the ripple's turning points are not keyed
    got = reference_curve(x, frames, 0.0)
    assert np.rad2deg(np.max(np.abs(got - values[:, 0]))) <= TOL_DEG


def test_per_channel_tolerance_was_not_a_rotation_bound():
    """The old per-axis reduction at 0.5 deg exceeds 0.5 deg of rotation; the new one does not.
    The same swing on all three axes: per-axis errors of one sign add up (near the identity the
    rotation angle of equal axis errors d is about sqrt(3) d)."""
    n = 200
    frames = np.arange(1.0, n + 1)
    eulers = np.stack([np.repeat(ring_down(n, amp_deg=a, f_hz=f)[:, None], 3, axis=1)
                       for a, f in ((20.0, 1.5), (30.0, 1.0), (12.0, 2.5))])
    old = reduce_euler_groups(frames, eulers, np.deg2rad(TOL_DEG))
    worst_old = 0.0
    for e, curves in zip(eulers, old):
        got = np.stack([np.array([reference_value(c.key_frames, c.key_values, c.handle_left, c.handle_right, f)
                                  for f in frames]) for c in curves], axis=1)
        worst_old = max(worst_old, scipy_angle_deg(Rotation.from_euler("xyz", got), Rotation.from_euler("xyz", e)).max())
    assert worst_old > TOL_DEG   # the failure the issue reports
    new = reduce_rotation_keys(frames, [RotationTrack(e, "XYZ", np.zeros((n, 3)), np.zeros(3)) for e in eulers],
                               np.deg2rad(TOL_DEG))
    assert max(np.rad2deg(k.max_error_rad) for k in new) <= TOL_DEG


# --------------------------------------------------------------------------------------------
# flat channels, shared frames, clip position, determinism, input checks
# --------------------------------------------------------------------------------------------

def test_flat_channels_get_one_key_or_none():
    n = 120
    frames = np.arange(1.0, n + 1)
    moving = motion(n, 1)[:, 0]
    layer = np.stack((moving, np.zeros(n), np.full(n, 0.2)), axis=1)   # y: no offset; z: constant
    keys = reduce_rotation_keys(frames, [RotationTrack(layer, "XYZ", np.zeros((n, 3)), np.zeros(3))],
                                np.deg2rad(TOL_DEG))[0]
    assert keys.channels[1] is None                    # the pose already holds 0 there: no curve
    assert keys.channels[2].n_keys == 1 and keys.channels[2].values[0] == pytest.approx(0.2)
    assert keys.channels[0].n_keys > 2
    identity = np.tile([1.0, 0, 0, 0], (n, 1))
    q = reduce_rotation_keys(frames, [RotationTrack(identity, "QUATERNION", None, np.array([1.0, 0, 0, 0]))], 0.01)[0]
    assert q.channels == (None, None, None, None) and q.max_error_rad == 0.0
    absolute = reduce_rotation_keys(frames, [RotationTrack(identity, "QUATERNION", None, None)], 0.01)[0]
    assert [c.n_keys for c in absolute.channels] == [1, 1, 1, 1]   # into the action: always a curve


def test_shared_frames_keys_components_together_with_more_keys():
    n = 200
    frames = np.arange(1.0, n + 1)
    tracks = [RotationTrack(motion(n, s), "XYZ", np.zeros((n, 3)), np.zeros(3)) for s in range(4)]
    separate = reduce_rotation_keys(frames, tracks, np.deg2rad(TOL_DEG))
    shared = reduce_rotation_keys(frames, tracks, np.deg2rad(TOL_DEG), shared_frames=True)
    for track, keys in zip(tracks, shared):
        live = [c for c in keys.channels if c is not None]
        assert all(np.array_equal(c.frames, live[0].frames) for c in live)
        assert np.rad2deg(keys.max_error_rad) <= TOL_DEG
        got = np.stack([reference_curve(ch, frames, 0.0) for ch in keys.channels], axis=1)   # independent
        assert scipy_angle_deg(blender_euler("XYZ", got), blender_euler("XYZ", track.values)).max() <= TOL_DEG
    assert sum(k.n_keys for k in separate) < sum(k.n_keys for k in shared)


def test_key_count_does_not_depend_on_where_the_clip_sits():
    """Same motion at frames 1-250 and 20001-20250: same keys within 2 % (issue 15)."""
    n = 250
    tracks = [RotationTrack(motion(n, s), "ZXY", np.zeros((n, 3)), np.zeros(3)) for s in range(8)]
    counts = []
    for first in (1.0, 20001.0):
        frames = np.arange(first, first + n)
        result = reduce_rotation_keys(frames, tracks, np.deg2rad(TOL_DEG))
        counts.append(sum(r.n_keys for r in result))
        for track, keys in zip(tracks[:3], result):   # float32 handle frames near 20000 included
            got = np.stack([reference_curve(ch, frames, 0.0) for ch in keys.channels], axis=1)
            assert scipy_angle_deg(blender_euler("ZXY", got), blender_euler("ZXY", track.values)).max() <= TOL_DEG
    assert abs(counts[1] - counts[0]) <= 0.02 * counts[0]


def test_peak_memory_bounded_on_a_long_clip():
    """Issue 15's bound: the reducer's peak memory (tracemalloc, numpy's buffers included) stays
    within 4x its input values on a long clip (64 Euler bones x 3000 frames, a COMBINE layer).
    A version that kept one array over every track and frame in the measurement reached 9.7x."""
    import tracemalloc
    n = 3000
    tracks = [RotationTrack(motion(n, s), "XYZ", np.zeros((n, 3)), np.zeros(3)) for s in range(64)]
    input_bytes = sum(t.values.nbytes for t in tracks)
    frames = np.arange(1.0, n + 1)
    tracemalloc.start()
    try:
        result = reduce_rotation_keys(frames, tracks, np.deg2rad(TOL_DEG))
        _now, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert sum(r.n_keys for r in result) < 0.1 * 3 * n * len(tracks)
    assert peak <= 4.0 * input_bytes, f"peak {peak / input_bytes:.2f}x the input"


def test_deterministic_and_inputs_untouched():
    n = 90
    frames = np.arange(1.0, n + 1)
    values = motion(n, 5)
    before = values.copy()
    track = RotationTrack(values, "YZX", np.zeros((n, 3)), np.zeros(3))
    a = reduce_rotation_keys(frames, [track], np.deg2rad(TOL_DEG))[0]
    b = reduce_rotation_keys(frames, [track], np.deg2rad(TOL_DEG))[0]
    for ca, cb in zip(a.channels, b.channels):
        for name in ("frames", "values", "handle_left", "handle_right", "aligned"):
            assert np.array_equal(getattr(ca, name), getattr(cb, name))
    assert np.array_equal(values, before)


def test_bad_input_is_refused():
    frames = np.arange(1.0, 11)
    with pytest.raises(InputError):
        reduce_rotation_keys(frames, [RotationTrack(np.zeros((9, 3)), "XYZ")], 0.01)
    with pytest.raises(InputError):
        reduce_rotation_keys(frames, [RotationTrack(np.full((10, 3), np.nan), "XYZ")], 0.01)
    with pytest.raises(InputError):
        reduce_rotation_keys(frames, [RotationTrack(np.zeros((10, 3)), "XYZ")], 0.0)
