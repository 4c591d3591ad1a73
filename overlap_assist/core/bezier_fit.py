"""Bézier F-curve segments: Blender's evaluation rule, and least-squares handle fitting.

Evaluation (what Blender does with a Bézier segment, written independently in numpy)
------------------------------------------------------------------------------------
A segment between keys ``(x0, y0)`` and ``(x1, y1)`` with the right handle of the first key
``(hx0, hy0)`` and the left handle of the second ``(hx1, hy1)`` is the 2-D cubic Bézier curve with
those four control points. Time is its x coordinate: Blender first shrinks the two handles
towards their keys by one common factor when their x extents together exceed the segment
(``BKE_fcurve_correct_bezpart``: factor = segment length / (|x0 - hx0| + |x1 - hx1|)), then
solves x(t) = frame for the parameter t and returns y(t). A frame on a key returns the key value;
before the first and after the last key the curve holds the end values (constant extrapolation).
Keys and handles are stored as float32: :func:`round_float32` gives the stored values.

Fitting (what the reducer asks of a segment)
--------------------------------------------
The key values stay the sampled values; the handle heights are fitted. With both handles at one
third of the segment in x, x(t) is linear and the parameter of every sampled frame is known
exactly (no reparameterisation as in Schneider 1990, whose least-squares step this is with the
handle x extents fixed): the curve is the cubic Hermite polynomial in the frame and the two end
slopes enter linearly, so the least-squares slopes over the segment's interior frames are one
2 x 2 solve. A small ridge term towards the data's own slopes (three-point finite differences,
Fornberg 1988) keeps segments with one or two interior frames well posed.

References
----------
Schneider P.J. 1990, "An algorithm for automatically fitting digitized curves", in Glassner A.S.
(ed.), Graphics Gems, Academic Press, pp. 612-626 (least-squares handle lengths for fixed
parameters and end tangents).
Fornberg B. 1988, "Generation of finite difference formulas on arbitrarily spaced grids",
Mathematics of Computation 51(184):699-706.
"""
from __future__ import annotations

import numpy as np

__all__ = ["round_float32", "correct_handles", "evaluate_segments", "evaluate_curves", "evaluate_pairs",
           "data_slopes_at"]


def round_float32(a) -> np.ndarray:
    """The float64 value of each element as Blender stores it (float32)."""
    return np.asarray(a, dtype=np.float64).astype(np.float32).astype(np.float64)


def correct_handles(x0, y0, hx0, hy0, hx1, hy1, x1, y1):
    """Blender's handle correction of one segment: (hx0, hy0, hx1, hy1) after shrinking both inner
    handles towards their keys by a common factor when their x extents overlap."""
    len0 = np.abs(x0 - hx0)
    len1 = np.abs(x1 - hx1)
    total = len0 + len1
    length = x1 - x0
    fac = np.where(total > length, length / np.where(total > 0.0, total, 1.0), 1.0)
    return (x0 - fac * (x0 - hx0), y0 - fac * (y0 - hy0), x1 - fac * (x1 - hx1), y1 - fac * (y1 - hy1))


def evaluate_segments(x0, y0, hx0, hy0, hx1, hy1, x1, y1, frame) -> np.ndarray:
    """y at ``frame`` on Bézier segments (arrays broadcast together), x0 <= frame <= x1, handles
    already corrected. x(t) = frame is solved by Newton steps kept inside a shrinking bracket
    (bisection when a step leaves it), in coordinates relative to x0."""
    p1, p2, p3 = hx0 - x0, hx1 - x0, x1 - x0
    u = frame - x0
    c = 3.0 * p1
    b = 3.0 * p2 - 6.0 * p1
    a = p3 - 3.0 * p2 + 3.0 * p1
    a, b, c, u, p3 = np.broadcast_arrays(a, b, c, u, p3)
    t = np.minimum(np.maximum(u / p3, 0.0), 1.0)
    lo = np.zeros_like(t)
    hi = np.ones_like(t)
    tol = 4e-16 * (np.abs(p3) + np.abs(u)) + 1e-300
    active = np.arange(t.shape[0]) if t.ndim == 1 else None
    if active is None:   # scalars or n-d: one pass over everything
        t, lo, hi, a, b, c, u, tol = (np.ravel(v).copy() for v in (t, lo, hi, a, b, c, u, tol))
        active = np.arange(t.shape[0])
    # First step on every element (most need exactly one: handles at about a third make x(t)
    # nearly linear); converged elements keep their t, so this equals the step of the loop below.
    f = ((a * t + b) * t + c) * t - u
    open_ = np.abs(f) > tol
    stepped = bool(open_.any())
    if stepped:
        hi = np.where(f > 0.0, t, hi)
        lo = np.where(f > 0.0, lo, t)
        d = (3.0 * a * t + 2.0 * b) * t + c
        with np.errstate(divide="ignore", invalid="ignore"):
            step = t - f / d
        t = np.where(open_, np.where((d > 0.0) & (step > lo) & (step < hi), step, 0.5 * (lo + hi)), t)
    ta, la, ha, aa, ba, ca, ua, tola = t, lo, hi, a, b, c, u, tol
    for _ in range(59 if stepped else 0):
        f = ((aa * ta + ba) * ta + ca) * ta - ua
        open_ = np.abs(f) > tola
        if not open_.any():
            break
        if not open_.all():   # keep iterating only where not yet converged
            t[active] = ta
            active = active[open_]
            ta, la, ha, aa, ba, ca, ua, tola, f = (v[open_] for v in (ta, la, ha, aa, ba, ca, ua, tola, f))
        ha = np.where(f > 0.0, ta, ha)
        la = np.where(f > 0.0, la, ta)
        d = (3.0 * aa * ta + 2.0 * ba) * ta + ca
        with np.errstate(divide="ignore", invalid="ignore"):
            step = ta - f / d
        ta = np.where((d > 0.0) & (step > la) & (step < ha), step, 0.5 * (la + ha))
    if ta is not t:
        t[active] = ta
    t = t.reshape(np.shape(frame - x0)) if np.ndim(frame - x0) != 1 else t
    om = 1.0 - t
    return (y0 * om * om * om + 3.0 * hy0 * t * om * om + 3.0 * hy1 * t * t * om + y1 * t * t * t)


def evaluate_curves(key_x, key_y, left, right, curve_of_key, n_curves, frames) -> np.ndarray:
    """Blender's evaluation of many Bézier F-curves at the same frames.

    Parameters
    ----------
    key_x, key_y : (K,) keys of all curves, concatenated curve after curve, x increasing per curve
    left, right : (K, 2) left and right handles (frame, value)
    curve_of_key : (K,) int, non-decreasing, the curve each key belongs to (every curve has >= 1 key)
    n_curves : int
    frames : (n,) frames

    Returns
    -------
    (n_curves, n) values.
    """
    frames = np.asarray(frames, dtype=np.float64)
    n = frames.shape[0]
    return evaluate_pairs(key_x, key_y, left, right, curve_of_key, n_curves, np.repeat(np.arange(n_curves), n),
                          np.tile(frames, n_curves)).reshape(n_curves, n)


def evaluate_pairs(key_x, key_y, left, right, curve_of_key, n_curves, curve_q, frame_q) -> np.ndarray:
    """:func:`evaluate_curves` at arbitrary (curve, frame) pairs: curve ``curve_q[i]`` at frame
    ``frame_q[i]``, (m,) each; returns (m,) values."""
    frame_q = np.asarray(frame_q, dtype=np.float64)
    curve_q = np.asarray(curve_q, dtype=np.intp)
    counts = np.bincount(curve_of_key, minlength=n_curves)
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    last = starts + counts - 1
    # Position of every (curve, frame) among the keys: keys are sorted by (curve, frame).
    span = float(np.max(frame_q) - np.min(frame_q)) + float(np.max(key_x) - np.min(key_x)) + 4.0
    origin = min(float(np.min(frame_q)), float(np.min(key_x))) - 1.0
    key_code = curve_of_key * span + (key_x - origin)
    query = curve_q * span + (frame_q - origin)
    seg = np.searchsorted(key_code, query, side="right") - 1
    first_q, last_q = starts[curve_q], last[curve_q]
    seg = np.minimum(np.maximum(seg, first_q), last_q)
    on_key = key_x[seg] == frame_q
    before = frame_q <= key_x[first_q]
    after = frame_q >= key_x[last_q]
    seg = np.minimum(seg, np.maximum(last_q - 1, first_q))
    nxt = np.minimum(seg + 1, last_q)
    out = key_y[seg].copy()
    inside = ~(on_key | before | after) & (nxt > seg)
    if inside.any():
        s, e = seg[inside], nxt[inside]
        x0, y0, x1, y1 = key_x[s], key_y[s], key_x[e], key_y[e]
        hx0, hy0, hx1, hy1 = right[s, 0], right[s, 1], left[e, 0], left[e, 1]
        overlap = np.abs(x0 - hx0) + np.abs(x1 - hx1) > x1 - x0
        if overlap.any():   # only there does Blender's correction change anything
            hx0, hy0, hx1, hy1 = correct_handles(x0, y0, hx0, hy0, hx1, hy1, x1, y1)
        out[inside] = evaluate_segments(x0, y0, hx0, hy0, hx1, hy1, x1, y1, frame_q[inside])
    out = np.where(before, key_y[first_q], out)
    return np.where(after, key_y[last_q], out)


def data_slopes_at(frames, flat_values, group, index, n_frames) -> np.ndarray:
    """Slopes d(value)/d(frame) of the samples at frame ``index`` of ``group``: the three-point
    finite differences of Fornberg 1988 (one-sided at the ends; a chord for two frames).

    flat_values : (c, g * n_frames), group-major; group, index : (m,) ints. Returns (c, m).
    """
    flat_values = np.asarray(flat_values)
    if n_frames == 1:
        return np.zeros((flat_values.shape[0], np.shape(index)[0]))
    base = group * n_frames
    if n_frames == 2:
        return (flat_values[:, base + 1] - flat_values[:, base]) / (frames[1] - frames[0])
    centre = np.minimum(np.maximum(index, 1), n_frames - 2)
    xm, x0, xp = frames[centre - 1], frames[centre], frames[centre + 1]
    h1, h2 = x0 - xm, xp - x0
    ym = flat_values[:, base + centre - 1]
    y0 = flat_values[:, base + centre]
    yp = flat_values[:, base + centre + 1]
    mid = _centred(_centred_weights(frames), flat_values, base, centre)
    first = -(2.0 * h1 + h2) / (h1 * (h1 + h2)) * ym + (h1 + h2) / (h1 * h2) * y0 - h1 / (h2 * (h1 + h2)) * yp
    last = h2 / (h1 * (h1 + h2)) * ym - (h1 + h2) / (h1 * h2) * y0 + (2.0 * h2 + h1) / (h2 * (h1 + h2)) * yp
    return np.where(index == 0, first, np.where(index == n_frames - 1, last, mid))


def _centred_weights(frames):
    """Weights (previous, own, next sample) of the centred three-point slope at every frame
    (Fornberg 1988; rows 0 .. 2, shape (3, n), first and last column unused)."""
    weights = np.zeros((3, frames.shape[0]))
    if frames.shape[0] >= 3:
        h1, h2 = frames[1:-1] - frames[:-2], frames[2:] - frames[1:-1]
        weights[:, 1:-1] = (-h2 / (h1 * (h1 + h2)), (h2 - h1) / (h1 * h2), h1 / (h2 * (h1 + h2)))
    return weights


def _centred(weights, flat_values, base, centre):
    """Centred three-point slopes at frames ``centre`` (1 .. n - 2) of the groups starting at flat
    index ``base``, (c, m); ``weights`` from :func:`_centred_weights`."""
    at = base + centre
    return (weights[0, centre] * flat_values[:, at - 1] + weights[1, centre] * flat_values[:, at]
            + weights[2, centre] * flat_values[:, at + 1])


# ---------------------------------------------------------------------------------------------
# Fitting: recursive splitting with least-squares handle heights
# ---------------------------------------------------------------------------------------------

_CHUNK_FRAMES = 1 << 14
"""Interior frames evaluated per numpy pass: bounds the temporaries whatever the clip length
(measured: 16k keeps them in the CPU caches, ~20 % faster than 64k on the bench's Rigify inputs)."""

_RIDGE = 1e-3
"""Weight of the pull towards the data's slopes, relative to the mean of the normal matrix's
diagonal: negligible with many interior frames, decisive with one."""


def _interior(lo, hi):
    """Interior frame indices of segments (lo, hi) concatenated: (starts, segment id, frame index)."""
    n_inner = hi - lo - 1
    ends = n_inner.cumsum()
    starts = ends - n_inner
    sid = np.arange(lo.shape[0]).repeat(n_inner)
    idx = (lo + 1 - starts).take(sid) + np.arange(sid.shape[0])
    return starts, sid, idx


def _segment_pass(frames, flat_values, budget, n_frames, g, lo, hi, slopes=None, data_ends=None):
    """Fit (or, with ``slopes`` given, only evaluate) Hermite segments of the groups' channels.

    flat_values, budget : (c, G * n_frames); g, lo, hi : (S,) segments with >= 1 interior frame;
    slopes : optional (slope_out at lo, slope_in at hi), each (c, S); data_ends : for a fit, the
    data's slopes (at lo, at hi), each (c, S).
    Returns (largest error / budget per segment (S,), frame of it (S,), slope_out (c, S), slope_in (c, S));
    with ``slopes`` given only the first, the others None.
    """
    starts, sid, idx = _interior(lo, hi)
    c = flat_values.shape[0]
    n_seg = g.shape[0]
    base = g * n_frames
    x0 = frames.take(lo)
    h = frames.take(hi) - x0
    s = (frames.take(idx) - x0.take(sid)) / h.take(sid)
    om = 1.0 - s
    w00 = (1.0 + 2.0 * s) * om * om
    w01 = s * s * (3.0 - 2.0 * s)
    w10 = s * om * om
    w11 = -s * s * om
    ends_idx = np.concatenate((base + lo, base + hi))
    y_ends = flat_values.take(ends_idx, axis=1)   # (c, 2S): values at lo, then at hi
    flat_idx = base.take(sid) + idx
    r = flat_values.take(flat_idx, axis=1) - y_ends.take(sid, axis=1) * w00 - y_ends.take(n_seg + sid, axis=1) * w01
    allowed = budget.take(flat_idx, axis=1)
    if slopes is None:
        a_d, b_d = h * data_ends[0], h * data_ends[1]
        # Every sum of the normal equations in one segmented reduction.
        terms = np.empty((3 + 2 * c, sid.shape[0]))
        np.multiply(w10, w10, out=terms[0])
        np.multiply(w10, w11, out=terms[1])
        np.multiply(w11, w11, out=terms[2])
        np.multiply(r, w10, out=terms[3:3 + c])
        np.multiply(r, w11, out=terms[3 + c:])
        sums = np.add.reduceat(terms, starts, axis=1)
        s11, s12, s22, r1, r2 = sums[0], sums[1], sums[2], sums[3:3 + c], sums[3 + c:]
        mu = _RIDGE * 0.5 * (s11 + s22) + 1e-300
        d11, d22 = s11 + mu, s22 + mu
        det = d11 * d22 - s12 * s12
        q1, q2 = r1 + mu * a_d, r2 + mu * b_d
        a = (d22 * q1 - s12 * q2) / det
        b = (d11 * q2 - s12 * q1) / det
    else:
        a, b = h * slopes[0], h * slopes[1]
    e = np.abs(r - a.take(sid, axis=1) * w10 - b.take(sid, axis=1) * w11)
    e /= allowed
    ratio = e[0] if c == 1 else e.max(axis=0)
    seg_max = np.maximum.reduceat(ratio, starts)
    if slopes is not None:   # evaluation only: the largest error is all that is asked
        return seg_max, None, None, None
    pos = np.arange(sid.shape[0])
    first = np.minimum.reduceat(np.where(ratio == seg_max.take(sid), pos, pos.shape[0]), starts)
    return seg_max, idx.take(first), a / h, b / h


def _chunked(frames, flat_values, budget, n_frames, g, lo, hi, slopes=None, data_ends=None):
    """:func:`_segment_pass` over segments in chunks of about ``_CHUNK_FRAMES`` interior frames."""
    n_inner = hi - lo - 1
    ends = n_inner.cumsum()
    if ends[-1] <= _CHUNK_FRAMES:   # one chunk: no copies into the outputs
        return _segment_pass(frames, flat_values, budget, n_frames, g, lo, hi, slopes, data_ends)
    c = flat_values.shape[0]
    fit = slopes is None
    seg_max = np.empty(g.shape[0])
    if fit:
        worst = np.empty(g.shape[0], dtype=np.intp)
        out = np.empty((c, g.shape[0]))
        inn = np.empty((c, g.shape[0]))
    i = 0
    while i < g.shape[0]:
        j = int(np.searchsorted(ends, (ends[i - 1] if i else 0) + _CHUNK_FRAMES, side="right"))
        j = max(j, i + 1)
        part = slice(i, j)
        sl = None if slopes is None else (slopes[0][:, part], slopes[1][:, part])
        de = None if data_ends is None else (data_ends[0][:, part], data_ends[1][:, part])
        got = _segment_pass(frames, flat_values, budget, n_frames, g[part], lo[part], hi[part], sl, de)
        seg_max[part] = got[0]
        if fit:
            worst[part], out[:, part], inn[:, part] = got[1:]
        i = j
    return (seg_max, worst, out, inn) if fit else (seg_max, None, None, None)


def fit_keys(frames, flat_values, budget, n_groups, n_frames, align=True, ranges=None):
    """Key frames and fitted end slopes of every segment, for groups of channels sharing their keys.

    Parameters
    ----------
    frames : (n_frames,) float64, increasing
    flat_values : (c, n_groups * n_frames), group-major samples (c channels share a group's keys)
    budget : (c, n_groups * n_frames), largest allowed |curve - sample| at every frame (> 0)
    ranges : optional (g, lo, hi) int arrays: fit only these frame ranges (a key stays on both
        ends of each); default: every group from its first to its last frame
    align : bool
        Afterwards, give a key one slope on both sides (ALIGNED handles) wherever both neighbouring
        segments then stay within budget (two passes, every other key at a time).

    Returns
    -------
    (seg_g, seg_lo, seg_hi, slope_out (c, S), slope_in (c, S)): the S segments sorted by group and
    frame; slope_out is the slope leaving key ``seg_lo``, slope_in the slope arriving at ``seg_hi``.
    Each segment stays within budget at its interior frames, evaluated as a cubic Hermite segment
    (handles at thirds), unless it has no interior frame.
    """
    c = flat_values.shape[0]
    if n_frames < 2:
        raise ValueError("fit_keys needs at least two frames")
    if ranges is None:
        pend_g = np.arange(n_groups, dtype=np.intp)
        pend_lo = np.zeros(n_groups, dtype=np.intp)
        pend_hi = np.full(n_groups, n_frames - 1, dtype=np.intp)
    else:
        pend_g, pend_lo, pend_hi = (np.asarray(r, dtype=np.intp) for r in ranges)
    # Pending segments as rows (group, lo, hi); the data's slopes at their ends (not at every frame:
    # memory) as rows (c at lo, c at hi), carried from a segment to the two it splits into (only
    # the split frames, always interior, get new ones). Segments without interior frames wait for
    # their chords until the end.
    pend = np.stack((pend_g, pend_lo, pend_hi))
    ends = data_slopes_at(frames, flat_values, np.concatenate((pend_g, pend_g)), np.concatenate((pend_lo, pend_hi)),
                          n_frames)
    d_ends = np.concatenate((ends[:, :pend_g.shape[0]], ends[:, pend_g.shape[0]:]))
    centred = _centred_weights(frames)
    acc, shorts = [], []
    while True:
        short = pend[2] - pend[1] < 2
        if short.any():
            shorts.append(pend[:, short])
            pend, d_ends = pend[:, ~short], d_ends[:, ~short]
        if not pend.shape[1]:
            break
        seg_max, worst, s_out, s_in = _chunked(frames, flat_values, budget, n_frames, pend[0], pend[1], pend[2],
                                               data_ends=(d_ends[:c], d_ends[c:]))
        ok = seg_max <= 1.0
        acc.append((pend[:, ok], s_out[:, ok], s_in[:, ok]))
        bad = ~ok
        n_bad = int(np.count_nonzero(bad))
        split = worst[bad]
        pend = np.concatenate((pend[:, bad], pend[:, bad]), axis=1)
        pend[2, :n_bad] = split
        pend[1, n_bad:] = split
        d_split = _centred(centred, flat_values, pend[0, :n_bad] * n_frames, split)
        d_ends = np.concatenate((d_ends[:, bad], d_ends[:, bad]), axis=1)
        d_ends[c:, :n_bad] = d_split
        d_ends[:c, n_bad:] = d_split
    if shorts:
        g, lo, hi = np.concatenate(shorts, axis=1)
        chord = ((np.take(flat_values, g * n_frames + hi, axis=1) - np.take(flat_values, g * n_frames + lo, axis=1))
                 / (frames[hi] - frames[lo]))
        acc.append((np.stack((g, lo, hi)), chord, chord))
    segs = np.concatenate([a[0] for a in acc], axis=1)
    slope_out = np.concatenate([a[1] for a in acc], axis=1).reshape(c, -1)
    slope_in = np.concatenate([a[2] for a in acc], axis=1).reshape(c, -1)
    del acc   # memory: the pieces are no longer needed
    order = np.argsort(segs[0] * n_frames + segs[1], kind="stable")
    seg_g, seg_lo, seg_hi = segs[0, order], segs[1, order], segs[2, order]
    del segs
    slope_out, slope_in = slope_out[:, order], slope_in[:, order]
    if align:
        _align(frames, flat_values, budget, n_frames, seg_g, seg_lo, seg_hi, slope_out, slope_in)
    return seg_g, seg_lo, seg_hi, slope_out, slope_in


def _align(frames, flat_values, budget, n_frames, seg_g, seg_lo, seg_hi, slope_out, slope_in):
    """In place: one slope on both sides of a key where both neighbouring segments allow it."""
    junction = np.flatnonzero((seg_g[1:] == seg_g[:-1]) & (seg_lo[1:] == seg_hi[:-1]))   # segment j | j + 1
    if not junction.size:
        return
    for parity in (0, 1):
        j = junction[parity::2]
        differs = (slope_in[:, j] != slope_out[:, j + 1]).any(axis=0)
        j = j[differs]
        if not j.size:
            continue
        h_l = frames[seg_hi[j]] - frames[seg_lo[j]]
        h_r = frames[seg_hi[j + 1]] - frames[seg_lo[j + 1]]
        common = (slope_in[:, j] * h_l + slope_out[:, j + 1] * h_r) / (h_l + h_r)
        # Both neighbouring segments of every junction (those with interior frames), in one pass.
        left = seg_hi[j] - seg_lo[j] > 1
        right = seg_hi[j + 1] - seg_lo[j + 1] > 1
        seg = np.concatenate((j[left], j[right] + 1))
        ok = np.ones(j.size, dtype=bool)
        if seg.size:
            new_out = np.concatenate((slope_out[:, j[left]], common[:, right]), axis=1)
            new_in = np.concatenate((common[:, left], slope_in[:, j[right] + 1]), axis=1)
            seg_ok = _chunked(frames, flat_values, budget, n_frames, seg_g[seg], seg_lo[seg], seg_hi[seg],
                              (new_out, new_in))[0] <= 1.0
            n_left = int(np.count_nonzero(left))
            ok[left] &= seg_ok[:n_left]
            ok[right] &= seg_ok[n_left:]
        j, common = j[ok], common[:, ok]
        slope_in[:, j] = common
        slope_out[:, j + 1] = common
