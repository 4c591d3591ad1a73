"""Error-bounded key reduction: per-frame channel values -> a few Bézier keys with explicit handles.

Why the error check can be exact without Blender
-------------------------------------------------
Blender evaluates an F-curve Bézier segment between keys ``(x0, y0)`` and ``(x1, y1)`` by solving
``x(t) = frame`` for the curve parameter ``t`` and returning ``y(t)``. When the right handle of the
first key sits at ``x0 + (x1 - x0)/3`` and the left handle of the second key at ``x1 - (x1 - x0)/3``,
``x(t)`` is linear in ``t`` and the segment is exactly the cubic Hermite polynomial in the frame
with end slopes ``(h0R.y - y0) / ((x1 - x0)/3)`` and ``(y1 - h1L.y) / ((x1 - x0)/3)``. Every curve
written here has its handles at those thirds, so :func:`evaluate_keys` computes what Blender's
``FCurve.evaluate`` computes, up to Blender's float32 storage (see ``FLOAT32_MARGIN_REL``).

Algorithm
---------
1. Slopes at every input frame from the data: second-order finite differences (the local
   quadratic through three neighbouring samples, also on uneven frame spacing; ``numpy.gradient``
   with ``edge_order=2``).
2. Keys at the first and last frame; then recursive splitting: a segment whose Hermite curve misses
   any interior frame by more than the tolerance is split at the frame of largest error, in the
   spirit of Ramer (1972) and Douglas & Peucker (1973), but with cubic Hermite segments instead of
   chords and the value error at each frame instead of a perpendicular distance. The accepted
   error is the tolerance less a small allowance for Blender's float32 evaluation. All pending
   segments of all curves are tested together, one numpy pass per level of the split tree.
3. Every key keeps its exact sample value and its data slope on both sides, so the curve is C1
   and the handles can be ``ALIGNED``.
4. The result is re-evaluated with :func:`evaluate_keys` at every input frame; a curve that fails
   (not expected; rounding only) falls back to a key on every frame.

References
----------
Ramer U. 1972, "An iterative procedure for the polygonal approximation of plane curves",
Computer Graphics and Image Processing 1(3):244-256.
Douglas D. & Peucker T. 1973, "Algorithms for the reduction of the number of points required to
represent a digitized line or its caricature", The Canadian Cartographer 10(2):112-122.
Fornberg B. 1988, "Generation of finite difference formulas on arbitrarily spaced grids",
Mathematics of Computation 51(184):699-706 (the three-point slope weights used by numpy.gradient).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .bezier_fit import data_slopes_at, evaluate_pairs, fit_keys, round_float32
from .errors import InputError
from .rotations import euler_to_quat

__all__ = [
    "ReducedCurve",
    "evaluate_keys",
    "reduce_curves",
    "reduce_quaternion_curves",
    "reduce_euler_curves",
    "reduce_quaternion_groups",
    "reduce_euler_groups",
    "FLOAT32_MARGIN_REL",
    "RotationTrack",
    "ChannelKeys",
    "RotationKeys",
    "reduce_rotation_keys",
]

# Part of the tolerance reserved for Blender storing keys and handles as float32 and solving
# x(t) = frame in single precision: the margin is FLOAT32_MARGIN_REL x (value scale + largest
# slope x largest |frame|), the second term because a handle frame is rounded to float32 and
# shifts the solved t. Measured on bpy 4.5.15 and 5.2.3 (reduced damped sines, frames 0..100400):
# |FCurve.evaluate - evaluate_keys| <= 0.82 x 2**-24 x that scale, so 2**-20 leaves ~20x.
FLOAT32_MARGIN_REL = 2.0**-20

# Relative tolerance for "handles sit at one third of the segment" in evaluate_keys: float32
# key storage rounds a handle frame near 1000 by ~6e-5 frames, so allow 1e-4 of a segment.
_THIRD_PLACEMENT_RTOL = 1e-4

_HANDLE_TYPES = ("ALIGNED", "FREE")


@dataclass(frozen=True, slots=True)
class ReducedCurve:
    """One F-curve after reduction: Bézier keys with explicit handles at one third of each segment.

    Write with interpolation ``'BEZIER'`` and ``handle_left_type = handle_right_type = handle_type``.
    Arrays are read-only copies.
    """

    key_frames: np.ndarray
    """shape (n_keys,), frames of the keys, strictly increasing."""
    key_values: np.ndarray
    """shape (n_keys,), values at the keys (channel units: radians, quaternion component, ...)."""
    handle_left: np.ndarray
    """shape (n_keys, 2), left handle of each key as (frame, value)."""
    handle_right: np.ndarray
    """shape (n_keys, 2), right handle of each key as (frame, value)."""
    handle_type: str
    """'ALIGNED' when left handle, key and right handle lie on one line (C1 curve), else 'FREE'."""
    n_keys_before: int
    """Number of per-frame samples the curve was reduced from."""
    max_error: float
    """max |evaluate_keys(curve, frames) - values| over the input frames, in channel units."""

    def __post_init__(self) -> None:
        arrays = {}
        for name, ndim in (("key_frames", 1), ("key_values", 1), ("handle_left", 2), ("handle_right", 2)):
            arr = np.array(getattr(self, name), dtype=np.float64)  # copy: never alias caller data
            if arr.ndim != ndim:
                raise InputError(f"ReducedCurve.{name} must have {ndim} dimension(s), got shape {arr.shape}")
            arr.flags.writeable = False
            arrays[name] = arr
        n_keys = arrays["key_frames"].shape[0]
        if n_keys < 1:
            raise InputError("ReducedCurve needs at least one key")
        if arrays["key_values"].shape != (n_keys,) or any(
            arrays[h].shape != (n_keys, 2) for h in ("handle_left", "handle_right")
        ):
            raise InputError("ReducedCurve arrays disagree on the number of keys")
        if np.any(np.diff(arrays["key_frames"]) <= 0.0):
            raise InputError("ReducedCurve.key_frames must be strictly increasing")
        if self.handle_type not in _HANDLE_TYPES:
            raise InputError(f"handle_type must be one of {_HANDLE_TYPES}, got {self.handle_type!r}")
        for name, arr in arrays.items():
            object.__setattr__(self, name, arr)

    @classmethod
    def _trusted(cls, key_frames, key_values, handle_left, handle_right, handle_type, n_keys_before, max_error):
        """Build from read-only float64 arrays already in the documented shapes (no checks, no copies)."""
        curve = object.__new__(cls)
        for name, value in (("key_frames", key_frames), ("key_values", key_values), ("handle_left", handle_left),
                            ("handle_right", handle_right), ("handle_type", handle_type),
                            ("n_keys_before", n_keys_before), ("max_error", max_error)):
            object.__setattr__(curve, name, value)
        return curve

    @property
    def n_keys_after(self) -> int:
        """Number of keys written."""
        return int(self.key_frames.shape[0])

    @property
    def reduction(self) -> float:
        """Fraction of keys removed, 0 (none) .. just under 1."""
        return 1.0 - self.n_keys_after / self.n_keys_before


# ---------------------------------------------------------------------------------------------
# Evaluation (what Blender computes for third-placed handles)
# ---------------------------------------------------------------------------------------------

def _hermite(s, h, y0, m0, y1, m1):
    """Cubic Hermite on s in [0, 1] over a segment of h frames; y*, m* broadcast against s."""
    one_minus_s = 1.0 - s
    h00 = (1.0 + 2.0 * s) * one_minus_s * one_minus_s
    h10 = s * one_minus_s * one_minus_s
    h01 = s * s * (3.0 - 2.0 * s)
    h11 = s * s * (s - 1.0)
    return h00 * y0 + h10 * h * m0 + h01 * y1 + h11 * h * m1


def evaluate_keys(curve: ReducedCurve, frames) -> np.ndarray:
    """Evaluate a reduced curve the way Blender evaluates the written F-curve.

    Parameters
    ----------
    curve : ReducedCurve
        Keys whose handles sit at one third of each neighbouring segment (checked).
    frames : array_like, shape (n,)
        Frames at which to evaluate (any floats).

    Returns
    -------
    ndarray, shape (n,)
        Values. Inside the key range: the cubic Hermite polynomial of each segment, slopes taken
        from the handles; exactly the key value on a key frame. Outside: the first or last key
        value (Blender's default constant extrapolation).

    Raises
    ------
    InputError
        If a handle is not at one third of its segment: then Blender's x(t) is not linear and this
        evaluation would not match Blender's.
    """
    x_keys = curve.key_frames
    y_keys = curve.key_values
    frames = np.asarray(frames, dtype=np.float64)
    if x_keys.shape[0] == 1:
        return np.full(frames.shape, y_keys[0])
    h = np.diff(x_keys)
    right_dx = curve.handle_right[:-1, 0] - x_keys[:-1]
    left_dx = x_keys[1:] - curve.handle_left[1:, 0]
    third = h / 3.0
    off_third = np.maximum(np.abs(right_dx - third), np.abs(left_dx - third))
    if np.any(off_third > _THIRD_PLACEMENT_RTOL * third):
        raise InputError("evaluate_keys needs handles at one third of each segment")
    slope_out = (curve.handle_right[:-1, 1] - y_keys[:-1]) / third  # slope leaving key j
    slope_in = (y_keys[1:] - curve.handle_left[1:, 1]) / third      # slope arriving at key j+1

    seg = np.clip(np.searchsorted(x_keys, frames, side="right") - 1, 0, x_keys.shape[0] - 2)
    s = (frames - x_keys[seg]) / h[seg]
    out = _hermite(s, h[seg], y_keys[seg], slope_out[seg], y_keys[seg + 1], slope_in[seg])
    out = np.where(frames <= x_keys[0], y_keys[0], out)
    out = np.where(frames >= x_keys[-1], y_keys[-1], out)
    nearest = np.minimum(np.searchsorted(x_keys, frames), x_keys.shape[0] - 1)
    return np.where(x_keys[nearest] == frames, y_keys[nearest], out)


# ---------------------------------------------------------------------------------------------
# Errors between an evaluated group of channels and the samples, per frame (channels first)
# ---------------------------------------------------------------------------------------------

def _abs_error(evaluated: np.ndarray, target: np.ndarray) -> np.ndarray:
    """Largest absolute component error, shape (c, m) -> (m,)."""
    diff = np.abs(evaluated - target)
    return diff[0] if diff.shape[0] == 1 else np.max(diff, axis=0)


def _quaternion_angle_error(evaluated: np.ndarray, target: np.ndarray) -> np.ndarray:
    """Rotation angle (rad) between normalised evaluated quaternions and unit targets, (4, m) -> (m,).

    Equals 2 acos(|q_eval/|q_eval| . q|); computed as 4 atan2(|a - b|, |a + b|) with b on a's
    hemisphere, which keeps full precision for small angles where acos does not. Rows are the
    components, so every operation runs on contiguous (m,) arrays.
    """
    a0, a1, a2, a3 = evaluated
    inv_norm = 1.0 / np.maximum(np.sqrt(a0 * a0 + a1 * a1 + a2 * a2 + a3 * a3), 1e-300)
    a0, a1, a2, a3 = a0 * inv_norm, a1 * inv_norm, a2 * inv_norm, a3 * inv_norm
    b0, b1, b2, b3 = target
    d0, d1, d2, d3 = a0 - b0, a1 - b1, a2 - b2, a3 - b3
    s0, s1, s2, s3 = a0 + b0, a1 + b1, a2 + b2, a3 + b3
    minus = d0 * d0 + d1 * d1 + d2 * d2 + d3 * d3   # |a - b|^2 = 2 - 2 a.b for unit a, b
    plus = s0 * s0 + s1 * s1 + s2 * s2 + s3 * s3    # |a + b|^2 = 2 + 2 a.b
    # b on a's hemisphere (a.b >= 0) is the smaller of the two: no sign flip needed.
    return 4.0 * np.arctan2(np.sqrt(np.minimum(minus, plus)), np.sqrt(np.maximum(minus, plus)))


def _quaternion_half_tan_sq(evaluated: np.ndarray, target: np.ndarray) -> np.ndarray:
    """tan^2(angle / 4) of the rotation between normalised evaluated quaternions and unit targets,
    (4, m) -> (m,): an increasing function of :func:`_quaternion_angle_error`'s angle, so it picks
    the same worst frames and passes the same tolerance tests (``_HALF_TAN_SQ``), at a seventh of
    the cost (no square roots of differences, no arctangent).

    With n = |a| and c = |a . b|, the angle between a/n and b is 2 acos(c / n), and
    tan^2(angle / 4) = (1 - cos(angle / 2)) / (1 + cos(angle / 2)) = (n - c) / (n + c). The
    difference n - c is exact to ~1e-16, i.e. to ~1e-10 rad of angle at 1e-5 rad.
    """
    a0, a1, a2, a3 = evaluated
    b0, b1, b2, b3 = target
    c = np.abs(a0 * b0 + a1 * b1 + a2 * b2 + a3 * b3)
    n = np.sqrt(a0 * a0 + a1 * a1 + a2 * a2 + a3 * a3)
    return np.where(n > 0.0, (n - c) / np.maximum(n + c, 1e-300), 1.0)


_HALF_TAN_SQ = (lambda angle: np.tan(0.25 * np.minimum(angle, np.pi)) ** 2,
                lambda measure: 4.0 * np.arctan(np.sqrt(measure)))
"""(angle -> tan^2(angle / 4), its inverse): tolerances into the measure, the measure back to angles."""


# ---------------------------------------------------------------------------------------------
# Reduction
# ---------------------------------------------------------------------------------------------

def _check_frames_tolerance(frames, tolerance) -> tuple[np.ndarray, float]:
    frames = np.array(frames, dtype=np.float64)
    if frames.ndim != 1 or frames.shape[0] < 1:
        raise InputError(f"frames must be a non-empty 1-D array, got shape {frames.shape}")
    if not np.all(np.isfinite(frames)) or np.any(np.diff(frames) <= 0.0):
        raise InputError("frames must be finite and strictly increasing")
    tolerance = float(tolerance)
    if not (np.isfinite(tolerance) and tolerance >= 0.0):
        raise InputError(f"tolerance must be finite and >= 0, got {tolerance}")
    return frames, tolerance


def _validate(frames, values, tolerance, name: str) -> tuple[np.ndarray, np.ndarray, float]:
    frames, tolerance = _check_frames_tolerance(frames, tolerance)
    values = np.array(values, dtype=np.float64)
    if values.shape[1:2] != frames.shape:
        raise InputError(f"{name} has shape {values.shape}; its frame axis must match {frames.shape[0]} frames")
    if not np.all(np.isfinite(values)):
        raise InputError(f"{name} contains NaN or infinite values")
    return frames, values, tolerance


def _data_slopes(frames: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Slopes d(value)/d(frame) along axis 1, values shape (g, n, c); Fornberg 1988 3-point weights."""
    n = frames.shape[0]
    if n == 1:
        return np.zeros_like(values)
    return np.gradient(values, frames, axis=1, edge_order=2 if n >= 3 else 1)


def _split_keys(frames, values, slopes, tol_eff, error_fn) -> list[np.ndarray]:
    """Recursive max-error splitting of Hermite segments, all groups and segments per numpy pass.

    Parameters
    ----------
    frames : shape (n,)
    values, slopes : shape (g, n, c), a group of c channels shares its keys
    tol_eff : shape (g,), largest accepted error per group
    error_fn : (c, m), (c, m) -> (m,) per-frame error

    Returns
    -------
    list of g int arrays, sorted key frame indices per group (always first and last frame).
    """
    n_groups, n_frames, n_channels = values.shape
    # Channels first: each channel is one contiguous row over all groups' frames.
    flat_values = np.ascontiguousarray(values.transpose(2, 0, 1).reshape(n_channels, -1))
    flat_slopes = np.ascontiguousarray(slopes.transpose(2, 0, 1).reshape(n_channels, -1))
    groups = np.arange(n_groups)
    key_g = [groups, groups]
    key_i = [np.zeros(n_groups, dtype=np.intp), np.full(n_groups, n_frames - 1, dtype=np.intp)]
    seg_g, seg_lo, seg_hi = groups, key_i[0], key_i[1]
    while seg_g.size:
        n_inner = seg_hi - seg_lo - 1
        has_inner = n_inner > 0
        seg_g, seg_lo, seg_hi, n_inner = seg_g[has_inner], seg_lo[has_inner], seg_hi[has_inner], n_inner[has_inner]
        if not seg_g.size:
            break
        # Interior frames of all segments, concatenated; sid maps each back to its segment.
        starts = np.concatenate(([0], np.cumsum(n_inner)[:-1]))
        sid = np.repeat(np.arange(seg_g.size), n_inner)
        pos = np.arange(sid.size)
        idx = (seg_lo + 1 - starts)[sid] + pos              # frame index of each interior frame
        base = seg_g * n_frames
        lo_flat, hi_flat = (base + seg_lo)[sid], (base + seg_hi)[sid]
        x0 = frames[seg_lo]
        h_seg = frames[seg_hi] - x0
        h = h_seg[sid]
        s = (frames[idx] - x0[sid]) / h
        # Cubic Hermite basis per frame (shared by the channels), slopes scaled by the segment length.
        one_minus_s = 1.0 - s
        w00 = (1.0 + 2.0 * s) * one_minus_s * one_minus_s
        w10 = s * one_minus_s * one_minus_s * h
        w01 = s * s * (3.0 - 2.0 * s)
        w11 = s * s * (s - 1.0) * h
        take = np.take   # np.take along axis 1 gathers several times faster than fancy indexing
        fitted = (w00 * take(flat_values, lo_flat, axis=1) + w10 * take(flat_slopes, lo_flat, axis=1)
                  + w01 * take(flat_values, hi_flat, axis=1) + w11 * take(flat_slopes, hi_flat, axis=1))
        err = error_fn(fitted, take(flat_values, (base + seg_lo + 1 - starts)[sid] + pos, axis=1))
        seg_max = np.maximum.reduceat(err, starts)
        bad = seg_max > tol_eff[seg_g]
        if not bad.any():
            break
        first_max = np.minimum.reduceat(np.where(err == seg_max[sid], pos, pos.size), starts)
        split = idx[first_max[bad]]
        key_g.append(seg_g[bad])
        key_i.append(split)
        seg_g = np.concatenate((seg_g[bad], seg_g[bad]))
        seg_lo, seg_hi = np.concatenate((seg_lo[bad], split)), np.concatenate((split, seg_hi[bad]))
    flat = np.unique(np.concatenate(key_g) * n_frames + np.concatenate(key_i))
    g_of, i_of = np.divmod(flat, n_frames)
    return np.split(i_of, np.searchsorted(g_of, np.arange(1, n_groups)))


def _build_groups(frames, values, slopes, key_sets, error_fn):
    """Keys with handles at thirds for every group at once, evaluated at every input frame.

    Parameters
    ----------
    frames : (n,); values, slopes : (g, n, c); key_sets : g sorted int arrays of frame indices

    Returns
    -------
    (key_frames (K,), key_values (c, K), handle_left (c, K, 2), handle_right (c, K, 2),
     starts (g,), counts (g,), channel_error (g, c), group_error (g,)), K the total number of keys;
    group g owns keys ``starts[g] : starts[g] + counts[g]``. The evaluation is, element by element,
    the arithmetic of :func:`evaluate_keys` (so the errors equal what it would give).
    """
    n_groups, n_frames, n_channels = values.shape
    counts = np.array([k.shape[0] for k in key_sets], dtype=np.intp)
    key_i = np.concatenate(key_sets).astype(np.intp)
    key_g = np.repeat(np.arange(n_groups), counts)
    starts = np.concatenate(([0], np.cumsum(counts)[:-1])).astype(np.intp)
    last = starts + counts - 1
    every_frame = bool(np.all(counts == n_frames))   # a key on every frame: exact by construction
    target = values.transpose(2, 0, 1).reshape(n_channels, -1)   # (c, g*n)
    if every_frame:
        x = np.tile(frames, n_groups)
        y = np.ascontiguousarray(target)                       # (c, K)
        m = slopes.transpose(2, 0, 1).reshape(n_channels, -1)
    else:
        x = frames[key_i]
        y = np.ascontiguousarray(values[key_g, key_i].T)
        m = np.ascontiguousarray(slopes[key_g, key_i].T)
    # Segment lengths to the next / from the previous key; outer handles mirror the inner ones,
    # a lone key gets 1/3 frame (irrelevant to evaluation).
    gap = np.diff(x)
    h_next = np.concatenate((gap, [1.0]))
    h_prev = np.concatenate(([1.0], gap))
    multi = counts > 1
    h_next[last[multi]] = h_prev[last[multi]]
    h_prev[starts[multi]] = h_next[starts[multi]]
    h_next[last[~multi]] = h_prev[starts[~multi]] = 1.0
    left_dx, right_dx = h_prev / 3.0, h_next / 3.0
    handle_left = np.empty((n_channels, x.shape[0], 2))
    handle_right = np.empty((n_channels, x.shape[0], 2))
    handle_left[:, :, 0] = x - left_dx
    handle_left[:, :, 1] = y - m * left_dx
    handle_right[:, :, 0] = x + right_dx
    handle_right[:, :, 1] = y + m * right_dx

    if every_frame:
        zeros = np.zeros(n_groups)
        return x, y, handle_left, handle_right, starts, counts, np.zeros((n_groups, n_channels)), zeros
    else:
        # Segment of every (group, frame): the group's last key at or before the frame, but never
        # its last key (evaluate_keys clips likewise); key frames take the key value exactly.
        key_flat = key_g * n_frames + key_i
        query = np.arange(n_groups * n_frames)
        seg = np.searchsorted(key_flat, query, side="right") - 1
        on_key = key_flat[seg] == query
        seg = np.where(seg == last[query // n_frames], seg - 1, seg)
        nxt = seg + 1
        h = x[nxt] - x[seg]
        third = h / 3.0
        y0, y1 = np.take(y, seg, axis=1), np.take(y, nxt, axis=1)
        slope_out = (np.take(handle_right[:, :, 1], seg, axis=1) - y0) / third
        slope_in = (y1 - np.take(handle_left[:, :, 1], nxt, axis=1)) / third
        s = (frames[query % n_frames] - x[seg]) / h
        evaluated = _hermite(s, h, y0, slope_out, y1, slope_in)
        evaluated = np.where(on_key, target, evaluated)
    channel_error = np.max(np.abs(evaluated - target).reshape(n_channels, n_groups, n_frames), axis=2).T
    group_error = np.max(error_fn(evaluated, target).reshape(n_groups, n_frames), axis=1)
    return x, y, handle_left, handle_right, starts, counts, channel_error, group_error


def _reduce_groups(frames, values, tolerance, margin, error_fn, slopes=None, measure=None):
    """Shared driver: values (g, n, c) -> (per group c curves sharing their key frames, group errors (g,)).

    ``measure``: optional (forward, inverse) pair when ``error_fn`` returns an increasing function
    of the error rather than the error itself; tolerances go through ``forward``, the reported
    group errors come back through ``inverse``.
    """
    n_groups, n_frames, n_channels = values.shape
    forward, inverse = measure if measure is not None else (lambda v: v, lambda v: v)
    if slopes is None:
        slopes = _data_slopes(frames, values)
    all_frames = np.arange(n_frames)
    if tolerance == 0.0:
        key_sets = [all_frames] * n_groups
    else:
        key_sets = list(_split_keys(frames, values, slopes, forward(np.maximum(tolerance - margin, 0.0)), error_fn))
    built = _build_groups(frames, values, slopes, key_sets, error_fn)
    failed = (built[-1] > forward(tolerance)) & (built[5] < n_frames)
    if failed.any():  # guarantee: not expected to happen, rounding only
        key_sets = [all_frames if failed[g] else key_sets[g] for g in range(n_groups)]
        built = _build_groups(frames, values, slopes, key_sets, error_fn)
    x, y, handle_left, handle_right, starts, counts, channel_error, group_error = built
    group_error = inverse(group_error)
    for arr in (x, y, handle_left, handle_right):
        arr.flags.writeable = False
    result = []
    for g in range(n_groups):
        lo, hi = starts[g], starts[g] + counts[g]
        key_frames = x[lo:hi]
        result.append([ReducedCurve._trusted(key_frames, y[c, lo:hi], handle_left[c, lo:hi], handle_right[c, lo:hi],
                                             "ALIGNED", n_frames, float(channel_error[g, c]))
                       for c in range(n_channels)])
    return result, group_error


def _float32_margin(frames: np.ndarray, values: np.ndarray, slopes: np.ndarray | None = None) -> np.ndarray:
    """Allowance for Blender's float32 evaluation per group, values shape (g, n, c) -> (g,)."""
    if slopes is None:
        slopes = _data_slopes(frames, values)
    value_scale = np.max(np.abs(values), axis=(1, 2)) + np.max(np.ptp(values, axis=1), axis=-1)
    slope_scale = np.max(np.abs(slopes), axis=(1, 2))
    return FLOAT32_MARGIN_REL * (value_scale + slope_scale * (np.max(np.abs(frames)) + 1.0))


def reduce_curves(frames, values, tolerance: float) -> list[ReducedCurve]:
    """Reduce per-frame samples of independent channels to Bézier keys within a value tolerance.

    Parameters
    ----------
    frames : array_like, shape (n_frames,)
        Sample frames, strictly increasing (usually consecutive integers).
    values : array_like, shape (n_curves, n_frames)
        Sampled channel values.
    tolerance : float
        Largest allowed |curve - sample| at every input frame, in the channel's units (>= 0).
        0 keeps a key on every frame. A tolerance below what Blender's float32 evaluation can
        hold (see ``FLOAT32_MARGIN_REL``) also keeps (nearly) every frame.

    Returns
    -------
    list of ReducedCurve, one per row of ``values``.

    Raises
    ------
    InputError
        On wrong shapes, non-increasing frames, NaN/inf values or a negative tolerance.

    References
    ----------
    Ramer 1972; Douglas & Peucker 1973 (split at the largest error); see the module docstring.
    """
    frames, values, tolerance = _validate(frames, values, tolerance, "values")
    if values.ndim != 2:
        raise InputError(f"values must have shape (n_curves, n_frames), got {values.shape}")
    grouped = values[:, :, None]
    slopes = _data_slopes(frames, grouped)
    curves, _errors = _reduce_groups(frames, grouped, tolerance, _float32_margin(frames, grouped, slopes), _abs_error,
                                     slopes)
    return [group[0] for group in curves]


def reduce_euler_curves(frames, eulers, tolerance_rad: float) -> list[ReducedCurve]:
    """Reduce an Euler rotation (x, y, z) with one shared set of key frames.

    Parameters
    ----------
    frames : array_like, shape (n_frames,)
    eulers : array_like, shape (n_frames, 3), radians
    tolerance_rad : float
        Largest allowed error of each axis at every input frame, radians.

    Returns
    -------
    list of 3 ReducedCurve (x, y, z) with identical ``key_frames``.
    """
    eulers = np.asarray(eulers, dtype=np.float64)
    if eulers.ndim != 2 or eulers.shape[1] != 3:
        raise InputError(f"eulers must have shape (n_frames, 3), got {eulers.shape}")
    return reduce_euler_groups(frames, eulers[None], tolerance_rad)[0]


def reduce_euler_groups(frames, eulers, tolerance_rad: float, *, with_errors: bool = False):
    """:func:`reduce_euler_curves` for many rotations at once, eulers shape (n_rotations, n_frames, 3).

    With ``with_errors=True`` returns ``(curves, errors)``, errors shape (n_rotations,): the largest
    per-axis error of each rotation at the input frames (radians).
    """
    frames, grouped, tolerance_rad = _validate_groups(frames, eulers, 3, tolerance_rad, "eulers")
    slopes = _data_slopes(frames, grouped)
    curves, errors = _reduce_groups(frames, grouped, tolerance_rad, _float32_margin(frames, grouped, slopes),
                                    _abs_error, slopes)
    return (curves, errors) if with_errors else curves


def _validate_groups(frames, values, n_channels, tolerance, name):
    """Checked (frames, values (g, n, c) float64, tolerance) for the grouped entry points."""
    frames, tolerance = _check_frames_tolerance(frames, tolerance)
    values = np.array(values, dtype=np.float64)
    if values.ndim != 3 or values.shape[2] != n_channels:
        raise InputError(f"{name} must have shape (n_rotations, n_frames, {n_channels}), got {values.shape}")
    if values.shape[0] < 1 or values.shape[1] != frames.shape[0]:
        raise InputError(f"{name} has shape {values.shape}; it needs at least one rotation and "
                         f"{frames.shape[0]} frames")
    if not np.all(np.isfinite(values)):
        raise InputError(f"{name} contains NaN or infinite values")
    return frames, values, tolerance


def reduce_quaternion_curves(frames, quats, tolerance_rad: float) -> list[ReducedCurve]:
    """Reduce a quaternion rotation (w, x, y, z) with shared key frames and an angular error bound.

    The samples are normalised and, where needed, negated so consecutive frames lie on the same
    hemisphere (q and -q are the same rotation; interpolating across a sign flip would not be).
    The written curves then stay within ``tolerance_rad`` of the samples as rotations:
    2 acos(|q_eval / |q_eval| . q|) <= tolerance_rad at every frame, Blender normalising the
    evaluated quaternion as it does for the pose.

    Parameters
    ----------
    frames : array_like, shape (n_frames,)
    quats : array_like, shape (n_frames, 4), (w, x, y, z), non-zero
    tolerance_rad : float
        Largest allowed rotation angle between curve and sample at every input frame, radians.

    Returns
    -------
    list of 4 ReducedCurve (w, x, y, z) with identical ``key_frames``; their ``key_values`` are
    the normalised, hemisphere-continuous samples.
    """
    quats = np.asarray(quats, dtype=np.float64)
    if quats.ndim != 2 or quats.shape[1] != 4:
        raise InputError(f"quats must have shape (n_frames, 4), got {quats.shape}")
    return reduce_quaternion_groups(frames, quats[None], tolerance_rad)[0]


def reduce_quaternion_groups(frames, quats, tolerance_rad: float, *, with_errors: bool = False):
    """:func:`reduce_quaternion_curves` for many rotations at once (one numpy pass per split level).

    Parameters
    ----------
    frames : array_like, shape (n_frames,)
    quats : array_like, shape (n_rotations, n_frames, 4), (w, x, y, z), non-zero
    tolerance_rad : float
    with_errors : bool
        Also return each rotation's largest rotation-angle error at the input frames (radians).

    Returns
    -------
    list (per rotation) of 4 ReducedCurve sharing their key frames; with ``with_errors`` the tuple
    ``(curves, errors)``, errors shape (n_rotations,).
    """
    frames, q, tolerance_rad = _validate_groups(frames, quats, 4, tolerance_rad, "quats")
    norm = np.linalg.norm(q, axis=2, keepdims=True)
    if np.any(norm < 1e-6):
        raise InputError("quats contains a zero-length quaternion")
    q = q / norm
    flips = np.concatenate((np.zeros((q.shape[0], 1), bool), np.sum(q[:, 1:] * q[:, :-1], axis=2) < 0.0), axis=1)
    q = q * np.where(np.cumsum(flips, axis=1) % 2 == 1, -1.0, 1.0)[:, :, None]
    slopes = _data_slopes(frames, q)
    # An error e in each of the 4 components moves the quaternion by at most 2e and the rotation
    # angle by about twice that.
    margin_rad = 4.0 * _float32_margin(frames, q, slopes)
    curves, errors = _reduce_groups(frames, q, tolerance_rad, margin_rad, _quaternion_half_tan_sq, slopes,
                                    measure=_HALF_TAN_SQ)
    return (curves, errors) if with_errors else curves


# ---------------------------------------------------------------------------------------------
# Rotation keys bounded by the true rotation angle (the bake's entry point)
# ---------------------------------------------------------------------------------------------
# The tolerance is the rotation angle between the orientation Blender evaluates from the written
# curves and the simulated orientation, at every frame, for quaternions and every Euler order.
# Channels are fitted separately, each within a share of the tolerance (its budget, in channel
# units); the written keys are then evaluated the way Blender evaluates them (float32 keys and
# handles, x(t) = frame solved, core.bezier_fit) and the rotation angle is measured at every frame.
# Where it exceeds the tolerance, the budgets of that bone's channels are lowered on the segments
# around those frames and the bone is fitted again; a bone that still fails after a few rounds
# gets a key on every frame (exact at the frames). Nothing is written that was not measured.

_BUDGET_SHARE = {"QUATERNION": 0.35, "EULER": 0.75}
"""First budget of each channel as a fraction of the tolerance. Quaternion components: times the
weights of :func:`_quaternion_budget_weights`; Euler axes: the rotation angle is at most the sum
of the three axis errors (the angle between rotations is a metric invariant under composition)
and typically about their root sum of squares. Any share is safe because every bone is measured;
these are a trade between keys and rounds (each round that refits failed bones costs a fit and a
measurement, nearly fixed costs on a short clip). Measured on the bench's inputs (demo, Rigify
rig): quaternion 0.32 / 0.35 / 0.38 left 362 / 350 / 339 keys on the demo, the last in two
rounds (1.5x the time); Euler 0.75 / 0.8 left 319 / 314 on the demo and 8 237 / 8 106 on the
Rigify rig, 0.8 in two rounds on the demo (1.5x the time). Before the weights, quaternion 0.45
was the best share for keys (and needed three rounds)."""

_BUDGET_SHARE_SHARED = {"QUATERNION": 0.45, "EULER": 0.8}
"""The same with every component of a bone keyed on the same frames: a segment of the bone ends
where its worst component needs a key, so the others are mostly well inside their budgets and
larger shares pay. Measured (bench inputs): Q 0.35 / 0.45 / 0.55 left 812 / 740 / 712 keys on the
demo, 19 988 / 18 696 / 18 488 on the Rigify rig, but 0.55 took 1.7x the time there (more rounds);
Euler 0.75 / 0.8 / 0.9: 14 775 / 14 502 / 14 004 on the Rigify rig, 0.9 in 1.7x the time."""

_QUAT_WEIGHT_MAX = 8.0
"""Largest quaternion budget weight (a component at +-1: only a change of length, which the
normalisation removes, but its neighbours' weights are finite). Measured on the bench's inputs
(share 0.35, fits from the whole clip): 8 left 9 % fewer keys than no weights (1) on the Rigify
rig, 4 left 7 % fewer, 16 the same as 8."""


def _quaternion_budget_weights(quats: np.ndarray) -> np.ndarray:
    """Budget weights of unit quaternions' components (any layout, elementwise), from the geometry of
    the normalisation Blender applies before a quaternion is used.

    The rotation angle between unit q and (q + e) / |q + e| is 2 asin(|e_perp| / |q + e|), where
    e_perp is the part of e orthogonal to q (for small e, about 2 |e_perp|). An error e_i in
    component i alone has |e_perp| = |e_i| sqrt(1 - q_i^2): a component near +-1 (w of a small
    rotation) can move far more than one near 0 for the same angle. The weights 1 / sqrt(1 - q_i^2),
    at most ``_QUAT_WEIGHT_MAX``, equalise the components' effect on the angle; they are >= 1, so the
    share above is the budget of the components that matter most."""
    return 1.0 / np.sqrt(np.maximum(1.0 - quats * quats, 1.0 / _QUAT_WEIGHT_MAX**2))


_MAX_ROUNDS = 8
_SHRINK_MIN, _SHRINK_MAX = 0.3, 0.8

# Blender evaluates in float32 (t rounded, y(t) in single precision): a channel can differ from
# the float64 evaluation of its float32 controls by a few float32 ulps of its largest control
# value and of 3 x its largest handle height (|dy/dt|); 2**-20 leaves a factor of ~8. The rotation
# angle moves by at most twice the sum of the component changes.
_F32_MARGIN_REL = 2.0**-20

_EVAL_CHUNK = 1 << 13   # channel-frames evaluated per pass when checking (bounds the temporaries;
# measured: passes of 8k-16k values keep them in the CPU caches, 20-25 % faster than 64k)


@dataclass(frozen=True, slots=True)
class RotationTrack:
    """One bone's rotation channel as the bake writes it.

    values : (n, c) what the written curves must evaluate to at each frame (quaternion (w, x, y, z)
        or Euler (x, y, z) radians)
    mode : 'QUATERNION' or an Euler order ('XYZ', ...)
    basis : (n, 3) Euler angles Blender adds the curves to (a COMBINE layer over the animated pose),
        or None (the curves are the channel: absolute values)
    rest : (c,) the value of a component that gets no curve, or None: every component keeps a curve
    """

    values: np.ndarray
    mode: str
    basis: object = None
    rest: object = None


@dataclass(frozen=True, slots=True)
class ChannelKeys:
    """Keys of one F-curve: write with interpolation BEZIER; handle types 'ALIGNED' where
    ``aligned`` else 'FREE' (both sides of a key)."""

    frames: np.ndarray          # (k,)
    values: np.ndarray          # (k,)
    handle_left: np.ndarray     # (k, 2) (frame, value)
    handle_right: np.ndarray    # (k, 2)
    aligned: np.ndarray         # (k,) bool

    @property
    def n_keys(self) -> int:
        return int(self.frames.shape[0])

    def handle_types(self) -> np.ndarray:
        return np.where(self.aligned, "ALIGNED", "FREE")


@dataclass(frozen=True, slots=True)
class RotationKeys:
    """The curves of one track: one entry per component, None where no curve is needed."""

    channels: tuple
    max_error_rad: float
    """Largest rotation angle between the evaluated curves and the targets over the frames."""

    @property
    def n_keys(self) -> int:
        return sum(ch.n_keys for ch in self.channels if ch is not None)


# Curves of many tracks are handled as flat arrays: curve ``curve0[t] + i`` is component i of
# track t; a curve's plan is its kind (_NO_CURVE, _ONE_KEY or _SEGMENTS) and, for _SEGMENTS, its
# Hermite segments (curve, lo, hi, slope_out, slope_in) sorted by (curve, lo). All bookkeeping of a
# round (plans, keys, budgets) is one set of numpy operations over every curve, not a loop over them.

_NO_CURVE, _ONE_KEY, _SEGMENTS = 0, 1, 2


@dataclass(frozen=True, slots=True)
class _Segments:
    curve: np.ndarray     # (S,) int
    lo: np.ndarray        # (S,) frame index of the key starting the segment
    hi: np.ndarray        # (S,) frame index of the key ending it
    s_out: np.ndarray     # (S,) slope leaving lo
    s_in: np.ndarray      # (S,) slope arriving at hi

    def take(self, mask) -> "_Segments":
        return _Segments(self.curve[mask], self.lo[mask], self.hi[mask], self.s_out[mask], self.s_in[mask])

    def code(self, n_frames) -> np.ndarray:
        return self.curve.astype(np.int64) * n_frames + self.lo

    @staticmethod
    def merged(parts, n_frames) -> "_Segments":
        curve, lo, hi, s_out, s_in = (np.concatenate([getattr(p, f) for p in parts])
                                      for f in ("curve", "lo", "hi", "s_out", "s_in"))
        order = np.argsort(curve.astype(np.int64) * n_frames + lo, kind="stable")
        return _Segments(curve[order], lo[order], hi[order], s_out[order], s_in[order])


_NO_SEGMENTS = _Segments(*(np.zeros(0, dtype=np.intp),) * 3, np.zeros(0), np.zeros(0))


@dataclass(frozen=True, slots=True)
class _FlatKeys:
    """Keys of many curves, curve after curve (curve ids increasing), handles at thirds."""

    curve: np.ndarray     # (K,) int
    x: np.ndarray         # (K,)
    y: np.ndarray         # (K,)
    left: np.ndarray      # (K, 2)
    right: np.ndarray     # (K, 2)
    aligned: np.ndarray   # (K,) bool

    def channel(self, a, b) -> ChannelKeys:
        return ChannelKeys(self.x[a:b], self.y[a:b], self.left[a:b], self.right[a:b], self.aligned[a:b])


def _flat_keys(frames, values_flat, segs, const_curve, const_value) -> _FlatKeys:
    """Keys of segmented curves (on their segments' ends, the sample values) and of one-key curves
    (``const_value`` at the first frame, flat handles one frame either side)."""
    n = frames.shape[0]
    first = np.ones(segs.curve.shape[0], dtype=bool)
    first[1:] = segs.curve[1:] != segs.curve[:-1]
    last = np.ones(segs.curve.shape[0], dtype=bool)
    last[:-1] = first[1:]
    arrive = np.empty_like(segs.s_in)   # slope arriving at each segment's first key
    arrive[1:] = segs.s_in[:-1]
    arrive = np.where(first, segs.s_out, arrive)
    k_curve = np.concatenate((segs.curve, segs.curve[last], const_curve))
    k_idx = np.concatenate((segs.lo, segs.hi[last], np.zeros(const_curve.shape[0], dtype=np.intp)))
    k_out = np.concatenate((segs.s_out, segs.s_in[last], np.zeros(const_curve.shape[0])))
    k_in = np.concatenate((arrive, segs.s_in[last], np.zeros(const_curve.shape[0])))
    k_y = np.concatenate((values_flat[segs.curve, segs.lo], values_flat[segs.curve[last], segs.hi[last]],
                          np.asarray(const_value, dtype=np.float64)))
    order = np.argsort(k_curve.astype(np.int64) * n + k_idx, kind="stable")
    k_curve, k_idx, k_out, k_in, y = k_curve[order], k_idx[order], k_out[order], k_in[order], k_y[order]
    x = frames[k_idx]
    same_next = np.zeros(x.shape[0], dtype=bool)
    same_next[:-1] = k_curve[1:] == k_curve[:-1]
    same_prev = np.zeros(x.shape[0], dtype=bool)
    same_prev[1:] = same_next[:-1]
    gap = np.diff(x)
    gap_next = np.concatenate((gap, [3.0]))
    gap_prev = np.concatenate(([3.0], gap))
    # End keys mirror their one neighbouring segment; a lone key gets handles one frame either side.
    h_next = np.where(same_next, gap_next, np.where(same_prev, gap_prev, 3.0)) / 3.0
    h_prev = np.where(same_prev, gap_prev, np.where(same_next, gap_next, 3.0)) / 3.0
    left = np.stack((x - h_prev, y - k_in * h_prev), axis=1)
    right = np.stack((x + h_next, y + k_out * h_next), axis=1)
    aligned = np.abs(k_in - k_out) <= 1e-12 * (1.0 + np.abs(k_in))
    return _FlatKeys(k_curve, x, y, left, right, aligned)


def _angle_between(qa, qb):
    """Rotation angle (rad) between quaternions (components first, (4, n)); qa need not be unit."""
    return _quaternion_angle_error(qa, qb / np.linalg.norm(qb, axis=0, keepdims=True))


def _measure(frames, plans, track_ids, keys, top_eval, selection=None):
    """Per track of ``track_ids``: (rotation angle between Blender's evaluation of the keys and the
    targets at the selected frames, float32 allowance in rad for Blender's own arithmetic).

    ``selection``: {track: frame indices} to evaluate (default: every frame). Curves without keys
    hold their rest values. ``top_eval`` (C,), the largest |value| evaluated so far per curve, is
    raised in place (the allowance uses it: frames not evaluated again keep their old values).
    Tracks are evaluated in batches of about ``_EVAL_CHUNK`` channel-frames."""
    n = frames.shape[0]
    every = np.arange(n)
    bounds = np.searchsorted(keys.curve, np.arange(plans.rest.shape[0] + 1))
    counts_all = np.diff(bounds)
    heights = np.maximum(np.abs(keys.left[:, 1] - keys.y), np.abs(keys.right[:, 1] - keys.y))
    out = []
    batch, size = [], 0
    for pos, t in enumerate(track_ids):
        sel = every if selection is None or selection.get(t) is None else selection[t]
        batch.append((t, sel))
        size += 4 * sel.shape[0]
        if size >= _EVAL_CHUNK or pos == len(track_ids) - 1:
            out.extend(_batch_errors(frames, plans, batch, keys, bounds, counts_all, heights, top_eval))
            batch, size = [], 0
    return out


def _batch_errors(frames, plans, batch, keys, bounds, counts_all, heights, top_eval):
    tracks, curve0, rest_flat = plans.tracks, plans.curve0, plans.rest
    n_comp = np.array([tracks[t].values.shape[1] for t, _sel in batch])
    first_row = np.cumsum(n_comp) - n_comp                                              # per track
    rows = np.repeat(curve0[[t for t, _sel in batch]] - first_row, n_comp) + np.arange(first_row[-1] + n_comp[-1])
    track_width = np.array([sel.shape[0] for _t, sel in batch])
    widths = np.repeat(track_width, n_comp)                                             # per row
    row_start = np.cumsum(widths) - widths
    frame_idx = np.concatenate([sel for t, sel in batch for _c in range(tracks[t].values.shape[1])])
    row_of = np.repeat(np.arange(rows.shape[0]), widths)
    evaluated = rest_flat[rows][row_of]                                                 # (M,)
    live = np.flatnonzero(counts_all[rows] > 0)
    if live.size:
        n_keys = counts_all[rows[live]]
        key_start = np.cumsum(n_keys) - n_keys
        key_sel = np.repeat(bounds[rows[live]] - key_start, n_keys) + np.arange(key_start[-1] + n_keys[-1])
        compact = np.full(rows.shape[0], -1, dtype=np.intp)
        compact[live] = np.arange(live.size)
        q = compact[row_of] >= 0
        evaluated[q] = evaluate_pairs(round_float32(keys.x[key_sel]), round_float32(keys.y[key_sel]),
                                      round_float32(keys.left[key_sel]), round_float32(keys.right[key_sel]),
                                      np.repeat(np.arange(live.size), n_keys), live.size,
                                      compact[row_of[q]], frames[frame_idx[q]])
    # Float32 allowance per component: largest value, 3 x largest handle height, largest basis angle.
    top = np.maximum(top_eval[rows], np.maximum.reduceat(np.abs(evaluated), row_start))
    top_eval[rows] = top
    top = top.copy()
    if live.size:
        top[live] += 3.0 * np.maximum.reduceat(heights[key_sel], key_start)
    out = [None] * len(batch)
    by_mode = {}
    for j, (t, _sel) in enumerate(batch):
        by_mode.setdefault(tracks[t].mode, []).append(j)
    for mode, members in by_mode.items():
        c = 4 if mode == "QUATERNION" else 3
        fr, w = first_row[members], track_width[members]
        col = np.repeat(np.arange(len(members)), w)                   # member of each column
        col_start = np.cumsum(w) - w
        at = row_start[fr][col] + np.arange(col.shape[0]) - col_start[col]
        got = evaluated[at + np.arange(c)[:, None] * w[col]]                            # (c, M)
        ids = [batch[j][0] for j in members]
        want = np.concatenate([tracks[t].values[batch[j][1]].T for t, j in zip(ids, members)], axis=1)
        scale = 1.0 + top[fr[:, None] + np.arange(c)]                                   # (T, c)
        if mode != "QUATERNION":
            basis = np.concatenate([tracks[t].basis[batch[j][1]].T if tracks[t].basis is not None
                                    else np.zeros((c, batch[j][1].shape[0])) for t, j in zip(ids, members)], axis=1)
            scale = scale + plans.basis_top[ids]
            got = euler_to_quat((got + basis).T, mode).T
            want = euler_to_quat((want + basis).T, mode).T
        angles = _angle_between(got, want)
        margins = 2.0 * _F32_MARGIN_REL * np.sum(scale, axis=1)
        for j, part, margin in zip(members, np.split(angles, (col_start + w)[:-1]), margins):
            out[j] = (part, float(margin))
    return out


def _segments_holding(segs, n_frames, curves, frame_idx) -> np.ndarray:
    """Index (into ``segs``) of the segment of each ``curves[i]`` holding frame ``frame_idx[i]``
    (a frame on a key belongs to the segment starting there; the last frame to the last segment)."""
    return np.searchsorted(segs.code(n_frames), curves.astype(np.int64) * n_frames + frame_idx, side="right") - 1


def _bad_pairs(bad_frames, tracks_failed, curve0, n_comp, kind, want_kind):
    """(curve, frame) pairs: every bad frame of each failed track, for its curves of kind ``want_kind``
    (or of any other kind with ``want_kind`` negative: -1 - kind)."""
    curves, frames_ = [], []
    for t in tracks_failed:
        own = np.arange(curve0[t], curve0[t] + n_comp[t])
        own = own[kind[own] == want_kind] if want_kind >= 0 else own[kind[own] != -1 - want_kind]
        curves.append(np.repeat(own, bad_frames[t].shape[0]))
        frames_.append(np.tile(bad_frames[t], own.shape[0]))
    if not curves:
        return np.zeros(0, dtype=np.intp), np.zeros(0, dtype=np.intp)
    return np.concatenate(curves), np.concatenate(frames_)


_TURN_PROMINENCE = 2.0
"""A turning point of a curve's data seeds a key when its value differs from both neighbouring
turning points (or the curve's ends) by more than this many budgets. The fit then starts from the
ranges between such points instead of the whole clip: a key on an extreme is where most segments
would put one after a few splits (and where animators put keys: common practice), and the fit
needs fewer passes. Measured on the bench's inputs (Rigify rig, demo): 1 left 5-6 % fewer keys
than no seeds, 2 left 7-10 % fewer, 4 about as many as 2 on the Rigify rig; the fit takes about
2/3 of the time. Seeds only choose where the fit starts; every segment is still fitted and every
bone measured."""


def _turning_point_ranges(values, budget, curves, n):
    """Initial fit ranges (curve, lo, hi) of ``curves``: from the first to the last frame, split
    at the turning points of the data that stand out (``_TURN_PROMINENCE``)."""
    if not curves.size:
        return curves, np.zeros(0, dtype=np.intp), np.zeros(0, dtype=np.intp)
    parts = [_turning_point_block(values, budget, curves[rows], n) for rows in _row_blocks(curves.shape[0], n)]
    return tuple(np.concatenate(p) for p in zip(*parts))   # blocks of rows: bounded temporaries


def _turning_point_block(values, budget, curves, n):
    v = values[curves]
    d = np.diff(v, axis=1)
    turn = np.zeros(v.shape, dtype=bool)
    turn[:, 1:-1] = d[:, :-1] * d[:, 1:] < 0.0     # strict sign changes of the slope
    turn[:, 0] = turn[:, -1] = True
    ci, fi = np.nonzero(turn)                      # by curve, then frame
    val = v[ci, fi]
    limit = _TURN_PROMINENCE * budget[curves[ci], fi]
    same_prev = np.concatenate(([False], ci[1:] == ci[:-1]))
    same_next = np.concatenate((ci[1:] == ci[:-1], [False]))
    step_prev = np.abs(val - np.concatenate(([0.0], val[:-1])))
    step_next = np.abs(val - np.concatenate((val[1:], [0.0])))
    end = (fi == 0) | (fi == n - 1)
    keep = end | (same_prev & (step_prev > limit) & same_next & (step_next > limit))
    ci, fi = ci[keep], fi[keep]
    starts = np.flatnonzero(ci[1:] == ci[:-1])     # a range from each kept point to the next
    return curves[ci[starts]], fi[starts].astype(np.intp), fi[starts + 1].astype(np.intp)


def _row_blocks(n_rows, n_frames):
    """Slices of rows holding about ``_EVAL_CHUNK`` values each (at least one row)."""
    step = max(1, _EVAL_CHUNK // max(n_frames, 1))
    return [slice(a, min(a + step, n_rows)) for a in range(0, n_rows, step)]


class _Plans:
    """Every curve's plan and the flat inputs of the fit (see the comment above ``_NO_CURVE``)."""

    def __init__(self, frames, tracks, tolerance_rad, shared_frames=False):
        n = frames.shape[0]
        self.frames, self.tracks, self.n = frames, tracks, n
        self.n_comp = np.array([t.values.shape[1] for t in tracks], dtype=np.intp)
        self.curve0 = np.concatenate(([0], np.cumsum(self.n_comp)[:-1])).astype(np.intp)
        self.track_of = np.repeat(np.arange(len(tracks)), self.n_comp)
        self.values = np.concatenate([t.values.T for t in tracks])                     # (C, n)
        self.has_rest = np.repeat([t.rest is not None for t in tracks], self.n_comp)
        self.rest = np.concatenate([t.rest if t.rest is not None else np.zeros(c)
                                    for t, c in zip(tracks, self.n_comp)]).astype(np.float64)
        self.is_quat = np.repeat([t.mode == "QUATERNION" for t in tracks], self.n_comp)
        # The float32 allowance of Euler tracks uses the largest |angle| their curves are added to.
        self.basis_top = np.zeros((len(tracks), 3))
        for t, track in enumerate(tracks):
            if track.mode != "QUATERNION" and track.basis is not None:
                self.basis_top[t] = np.maximum(track.basis.max(axis=0), -track.basis.min(axis=0))
        shares = _BUDGET_SHARE_SHARED if shared_frames else _BUDGET_SHARE
        self.budget = np.empty((self.values.shape[0], n), dtype=np.float32)   # float32: only compared
        self.budget[~self.is_quat] = np.float32(shares["EULER"] * tolerance_rad)
        quat_rows = np.flatnonzero(self.is_quat).reshape(-1, 4)               # a track's four rows
        for block in _row_blocks(quat_rows.shape[0], 4 * n):   # blocks of tracks: bounded temporaries
            rows = quat_rows[block].ravel()
            q = self.values[rows].reshape(-1, 4, n)
            q = q / np.maximum(np.linalg.norm(q, axis=1, keepdims=True), 1e-300)
            self.budget[rows] = ((shares["QUATERNION"] * tolerance_rad) * _quaternion_budget_weights(q)).reshape(-1, n)
        self.kind = np.zeros(self.values.shape[0], dtype=np.int8)
        self.const = np.zeros(self.values.shape[0])
        self.segs = _NO_SEGMENTS

    def curves_of(self, track_ids) -> np.ndarray:
        return np.concatenate([np.arange(self.curve0[t], self.curve0[t] + self.n_comp[t]) for t in track_ids])

    def fit(self, track_ids, shared_frames, partial, bad_frames):
        """New plans for the curves of ``track_ids`` (increasing). With ``partial`` (a later round,
        separate frames), segmented curves refit only their segments holding ``bad_frames``
        ({track: frame indices}); the other curves are planned afresh from their budgets.

        Returns None, or with ``partial`` {track: frame indices whose values may have changed, or
        None for every frame}; a track not listed is unchanged."""
        n = self.n
        curves = self.curves_of(track_ids)
        kind = self.kind[curves]
        decide = (kind != _SEGMENTS) if partial else np.ones(curves.shape[0], dtype=bool)
        b_min, off_rest, spread = (np.empty(curves.shape[0]) for _ in range(3))
        for rows in _row_blocks(curves.shape[0], n):   # blocks of rows: bounded temporaries
            v = self.values[curves[rows]]
            b_min[rows] = np.min(self.budget[curves[rows]], axis=1)
            off_rest[rows] = np.max(np.abs(v - self.rest[curves[rows], None]), axis=1)
            spread[rows] = v.max(axis=1) - v.min(axis=1)
        b_min = b_min.astype(np.float32)
        near = self.has_rest[curves] & (off_rest <= b_min)
        starts = np.concatenate(([0], np.cumsum(self.n_comp[track_ids])[:-1]))   # each track's first curve
        whole = np.repeat(np.logical_and.reduceat(near, starts), self.n_comp[track_ids])
        near = np.where(self.is_quat[curves], whole, near)   # a quaternion keeps all four curves or none
        flat = (spread <= 2.0 * b_min) & ~near
        fresh = decide & ~near & ~flat
        if shared_frames:
            any_fit = np.repeat(np.logical_or.reduceat(fresh, starts), self.n_comp[track_ids])
            fresh = any_fit & ~near
        redo = curves[decide]
        was_kind, was_const = self.kind[curves].copy(), self.const[curves].copy()
        new_kind = np.where(near, _NO_CURVE, np.where(flat, _ONE_KEY, _SEGMENTS)).astype(np.int8)
        new_kind[fresh] = _SEGMENTS
        self.kind[redo] = new_kind[decide]
        one = curves[decide & (new_kind == _ONE_KEY)]
        self.const[one] = 0.5 * (np.max(self.values[one], axis=1) + np.min(self.values[one], axis=1))
        redo_mask = np.zeros(self.values.shape[0], dtype=bool)
        redo_mask[redo] = True
        keep = ~redo_mask[self.segs.curve]
        # Curves planned afresh start from their turning points (separate frames; shared frames fit
        # every component of a track together, from its first to its last frame).
        if shared_frames:
            range_curve = [curves[fresh]]
            range_lo = [np.zeros(int(fresh.sum()), dtype=np.intp)]
            range_hi = [np.full(int(fresh.sum()), n - 1, dtype=np.intp)]
        else:
            rc0, rlo0, rhi0 = _turning_point_ranges(self.values, self.budget, curves[fresh], n)
            range_curve, range_lo, range_hi = [rc0], [rlo0], [rhi0]
        if partial:
            pc, pf = _bad_pairs(bad_frames, track_ids, self.curve0, self.n_comp, self.kind, _SEGMENTS)
            pc, pf = pc[~redo_mask[pc]], pf[~redo_mask[pc]]
            held = np.unique(_segments_holding(self.segs, n, pc, pf))
            keep[held] = False
            range_curve.append(self.segs.curve[held])
            range_lo.append(self.segs.lo[held])
            range_hi.append(self.segs.hi[held])
        parts = [self.segs.take(keep)]
        if shared_frames:
            parts.extend(self._fit_shared(curves[fresh], fit_keys))
        else:
            rc, rlo, rhi = np.concatenate(range_curve), np.concatenate(range_lo), np.concatenate(range_hi)
            if rc.size:   # every curve is a group of the flat arrays (views: nothing copied)
                order = np.lexsort((rlo, rc))
                seg_g, seg_lo, seg_hi, s_out, s_in = fit_keys(
                    self.frames, self.values.reshape(1, -1), self.budget.reshape(1, -1), self.values.shape[0], n,
                    ranges=(rc[order], rlo[order], rhi[order]))
                parts.append(_Segments(seg_g, seg_lo, seg_hi, s_out[0], s_in[0]))
        self.segs = _Segments.merged(parts, n)
        if not partial:
            return None
        # Frames whose values can have changed: the refit ranges, every frame of a re-planned curve.
        replanned = decide & ((self.kind[curves] != was_kind) | (self.const[curves] != was_const))
        selection = {}
        for t in np.unique(self.track_of[curves[replanned]]):
            selection[int(t)] = None
        if range_curve[1].size:
            rt = self.track_of[range_curve[1]]
            mark = np.zeros((len(self.tracks), n + 1), dtype=np.int32)
            np.add.at(mark, (rt, range_lo[1]), 1)
            np.add.at(mark, (rt, range_hi[1] + 1), -1)
            inside = np.cumsum(mark, axis=1)[:, :n] > 0
            for t in np.unique(rt):
                selection.setdefault(int(t), np.flatnonzero(inside[t]))
        return selection

    def _fit_shared(self, fresh_curves, fit_keys):
        """Segments of curves keyed together per track (groups of equal width fitted together)."""
        n = self.n
        by_track = {}
        for c in fresh_curves:
            by_track.setdefault(int(self.track_of[c]), []).append(int(c))
        by_width = {}
        for t, cs in by_track.items():
            by_width.setdefault(len(cs), []).append(cs)
        parts = []
        for width, groups in by_width.items():
            matrix = np.array(groups, dtype=np.intp)                                   # (G, w)
            flat_values = self.values[matrix].transpose(1, 0, 2).reshape(width, -1)
            flat_budget = self.budget[matrix].transpose(1, 0, 2).reshape(width, -1)
            seg_g, seg_lo, seg_hi, s_out, s_in = fit_keys(self.frames, flat_values, flat_budget, len(groups), n)
            parts.extend(_Segments(matrix[seg_g, w], seg_lo, seg_hi, s_out[w], s_in[w]) for w in range(width))
        return parts

    def keys(self, track_ids) -> _FlatKeys:
        mask = np.zeros(self.values.shape[0], dtype=bool)
        mask[self.curves_of(track_ids)] = True
        one = np.flatnonzero(mask & (self.kind == _ONE_KEY))
        return _flat_keys(self.frames, self.values, self.segs.take(mask[self.segs.curve]), one, self.const[one])

    def shrink(self, failed, bad_frames, factors):
        """Lower the budget of every component of the failed tracks on the segments holding their
        bad frames (all frames for a component with one key or none), by the track's factor."""
        n = self.n
        f32 = {t: np.float32(f) for t, f in zip(failed, factors)}
        for t in failed:
            own = np.arange(self.curve0[t], self.curve0[t] + self.n_comp[t])
            whole = own[self.kind[own] != _SEGMENTS]
            self.budget[whole] *= f32[t]
        pc, pf = _bad_pairs(bad_frames, failed, self.curve0, self.n_comp, self.kind, _SEGMENTS)
        if not pc.size:
            return
        held = _segments_holding(self.segs, n, pc, pf)
        rows = np.unique(pc)
        slot = np.searchsorted(rows, pc)
        lo, hi = self.segs.lo[held], self.segs.hi[held]
        scale = np.array([f32[int(t)] for t in self.track_of[rows]], dtype=np.float32)
        for part in _row_blocks(rows.shape[0], n):   # blocks of rows: bounded temporaries
            pick = (slot >= part.start) & (slot < part.stop)
            mark = np.zeros((part.stop - part.start, n + 1), dtype=np.int32)
            np.add.at(mark, (slot[pick] - part.start, lo[pick]), 1)
            np.add.at(mark, (slot[pick] - part.start, hi[pick] + 1), -1)
            inside = np.cumsum(mark, axis=1)[:, :n] > 0
            block = self.budget[rows[part]]
            self.budget[rows[part]] = np.where(inside, block * scale[part, None], block)

    def rotation_keys(self, t, keys, bounds, max_error) -> RotationKeys:
        chans = []
        for c in range(self.curve0[t], self.curve0[t] + self.n_comp[t]):
            chans.append(None if self.kind[c] == _NO_CURVE else keys.channel(bounds[c], bounds[c + 1]))
        return RotationKeys(tuple(chans), max_error)


def _every_frame_segments(frames, values_flat, curves) -> _Segments:
    """A key on every frame with the data's slopes (exact at the frames), for ``curves``."""
    n = frames.shape[0]
    idx = np.arange(n)
    slopes = data_slopes_at(frames, values_flat[curves].reshape(1, -1), np.repeat(np.arange(curves.shape[0]), n),
                            np.tile(idx, curves.shape[0]), n)[0].reshape(curves.shape[0], n)
    lo = np.tile(idx[:-1], curves.shape[0])
    return _Segments(np.repeat(curves, n - 1), lo, lo + 1, slopes[:, :-1].ravel(), slopes[:, 1:].ravel())


def reduce_rotation_keys(frames, tracks, tolerance_rad: float, *, shared_frames: bool = False) -> list:
    """Fewest keys within a rotation-angle tolerance: one :class:`RotationKeys` per track.

    Parameters
    ----------
    frames : array_like, shape (n,), increasing, n >= 2
    tracks : sequence of RotationTrack
    tolerance_rad : float > 0
        Largest rotation angle between the orientation Blender evaluates from the written curves
        (float32 keys and handles) and the target orientation, at every frame.
    shared_frames : bool
        Key every component of a track on the same frames (the layout some animators prefer;
        more keys). Default False: each component gets the keys it needs.

    Returns
    -------
    list of RotationKeys; ``max_error_rad`` of each is the measured rotation angle bound.
    """
    frames, tolerance_rad = _check_frames_tolerance(frames, tolerance_rad)
    if frames.shape[0] < 2:
        raise InputError("reduce_rotation_keys needs at least two frames")
    if tolerance_rad <= 0.0:
        raise InputError("reduce_rotation_keys needs a tolerance above 0 (0 means a key on every frame)")
    checked = []
    for t in tracks:
        v = np.asarray(t.values, dtype=np.float64)
        c = 4 if t.mode == "QUATERNION" else 3
        if v.shape != (frames.shape[0], c) or not np.isfinite(v).all():
            raise InputError(f"a {t.mode} track needs finite values of shape ({frames.shape[0]}, {c}), got {v.shape}")
        basis = None if t.basis is None else np.asarray(t.basis, dtype=np.float64)
        rest = None if t.rest is None else np.asarray(t.rest, dtype=np.float64)
        checked.append(RotationTrack(v, t.mode, basis, rest))
    tracks = checked
    if not tracks:
        return []
    plans = _Plans(frames, tracks, tolerance_rad, shared_frames)
    n_curves = plans.values.shape[0]
    out = [None] * len(tracks)
    todo = list(range(len(tracks)))
    bad_frames, errors = {}, {}
    top_eval = np.zeros(n_curves)   # largest |evaluated value| per curve (float32 allowance)
    for round_ in range(_MAX_ROUNDS):
        if not todo:
            break
        selection = plans.fit(todo, shared_frames, round_ > 0 and not shared_frames, bad_frames)
        if selection is None:
            top_eval[plans.curves_of(todo)] = 0.0
        keys = plans.keys(todo)
        bounds = np.searchsorted(keys.curve, np.arange(n_curves + 1))
        # Later rounds evaluate only the frames whose values can have changed (the others keep
        # their measured angles: their segments, keys and handles are the same).
        measured = _measure(frames, plans, todo, keys, top_eval, selection)
        again, factors = [], []
        for i, (err, margin) in zip(todo, measured):
            if selection is not None and selection.get(i) is not None:
                full = errors[i]
                full[selection[i]] = err
                err = full
            errors[i] = err
            limit = tolerance_rad - margin
            worst = float(err.max())
            if worst <= limit:
                out[i] = plans.rotation_keys(i, keys, bounds, worst)
                continue
            bad_frames[i] = np.flatnonzero(err > limit)
            factors.append(float(np.clip(0.9 * limit / worst, _SHRINK_MIN, _SHRINK_MAX)))
            again.append(i)
        if again:
            plans.shrink(again, bad_frames, factors)
        todo = again
    if todo:   # still over after the last round: a key on every frame
        curves = plans.curves_of(todo)
        plans.kind[curves] = _SEGMENTS
        plans.segs = _Segments.merged([plans.segs.take(~np.isin(plans.segs.curve, curves)),
                                       _every_frame_segments(frames, plans.values, curves)], plans.n)
        keys = plans.keys(todo)
        bounds = np.searchsorted(keys.curve, np.arange(n_curves + 1))
        top_eval[curves] = 0.0
        for i, (err, _margin) in zip(todo, _measure(frames, plans, todo, keys, top_eval)):
            out[i] = plans.rotation_keys(i, keys, bounds, float(np.max(err)))
    return out
