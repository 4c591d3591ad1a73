"""Secondary motion of bone chains: damped links hanging from an animated body.

Model
-----
Each link is a **uniform rigid rod pivoted at its head** (the bone's head), hanging from the
end of its parent link (the first link from the animated pivot). A rod turns about its head
with angular acceleration ``(3 / 2L) d x f`` under a uniform felt acceleration ``f``
(torque ``m f L/2`` over inertia ``m L^2 / 3``), so a single free link swings with the period
of a physical pendulum, ``2 pi sqrt(2L / 3g)``.

The acceleration a link feels at its head is

    f = gravity_scale g - body_response a_anchor - (acceleration of the parent links' ends)
        - air_drag (velocity of its head),

so a chain whose anchor falls freely (``a_anchor = g``) feels no weight and floats, is
dragged on push-off and whips on landing. Air drag on the rod's absolute velocity adds
``-air_drag`` x its own angular velocity. The coupling is one way, root to tip: a link follows
its parent's end but does not pull back on it (the body and the parent links are taken to be
much heavier than what hangs below them). The chain's total energy is therefore not a
conserved quantity of the model; a single link's is.

An angular spring pulls each link toward its animated direction with the link's frequency
``omega_i = 2 pi frequency_hz (1 - tip_looseness i / (n - 1))``; a damper acts on the link's
motion relative to the animated motion with coefficient
``2 damping_ratio sqrt(omega_i^2 + omega_g^2)``, ``omega_g^2 = (3 / 2L) gravity_scale |g|``
(the hanging rod's own pendulum stiffness), so the damping ratio stays meaningful without a
spring. Each link may not leave a cone of ``bend_limit_rad`` around its animated direction,
and its end is kept out of sphere and capsule colliders and above the ground (``colliders``).

Integration
-----------
The state of a link is its direction ``d`` (unit) and its rate ``d'`` (perpendicular to d).
Per sub-step the rate is advanced by the trapezoidal rule, linearised about the current state
(stiffness = the spring plus the felt load's pull where the link hangs along it; damping =
damper + air drag): A-stable, so stable for every stiffness, damping and step, and free of
numerical damping of an undamped spring (Hairer, Lubich & Wanner 2003 discuss the
trapezoidal / Stormer-Verlet family). The direction then turns along the great circle of the
mean rate by the Cayley form of the rotation (angle ``2 atan(h w / 2)``), which keeps ``|d| = 1``
and carries the rate along exactly. Sub-steps are added automatically where a setting is too
stiff for the frame rate to be followed accurately (not needed for stability). Arithmetic is
fixed-order numpy, so identical input gives bit-identical output.

Pre-roll: the chain starts at rest in the static equilibrium of frame 0 (spring against the
frame's felt acceleration, per link), moving with the animated motion.
"""
from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from .chain_setup import ROD_LEVER, SPRING_FLOOR, initial_state, package, prepare
from .chain_types import ChainInput, ChainMotion, ChainSettings, ChainState, Colliders
from .colliders import any_perpendicular, project_out
from .swing import swing_offsets  # noqa: F401  (part of the solver's public API)

__all__ = ["simulate_chains", "limit_bend", "swing_offsets"]

_TINY = 1e-12

_CHUNK_FRAMES = 32
"""Frames whose sub-step inputs are prepared together (bounds memory for long shots)."""


def simulate_chains(
    chains: Sequence[ChainInput],
    settings: Sequence[ChainSettings],
    gravity_mps2,
    dt_s: float,
    colliders: Colliders | None = None,
    initial_states: Sequence[ChainState | None] | None = None,
) -> ChainMotion:
    """Simulate every chain over the frames of its animation.

    Parameters
    ----------
    chains : sequence of ChainInput
        All with the same number of frames (links may differ; shorter chains are padded).
    settings : sequence of ChainSettings
        One per chain.
    gravity_mps2 : array_like, shape (3,)
        Gravity vector, m/s^2 (z up: ``(0, 0, -9.80665)``).
    dt_s : float
        Time between frames, s.
    colliders : Colliders, optional
        Shared by all chains; sampled on the same frames.
    initial_states : sequence of (ChainState or None), optional
        Start a chain from this state at frame 0 instead of the settled pre-roll.

    Returns
    -------
    ChainMotion
    """
    prep = prepare(chains, settings, gravity_mps2, dt_s, colliders, initial_states)
    n_frames, n_sub = prep["n_frames"], prep["n_sub"]
    n_chains, n_links = prep["n_chains"], prep["n_links"]
    co = _Kernel(prep, dt_s / n_sub)
    # Component-first layout inside the loop, (3, C, N) seen as (3, M), M = C*N: every per-link
    # scalar is kept replicated on the 3 rows, so the kernel needs no broadcasting. The inputs
    # are laid out with M last as well (numpy's inner loops then run over M, not over N).
    flat = (3, n_chains * n_links)

    def per_link(arr):  # (T, C, 3) per chain -> (T, 3, M)
        return np.repeat(arr.transpose(0, 2, 1), n_links, axis=-1)

    targets, toward = prep["target_rows"], prep["toward"]  # (T, 3, M), (T-1, 3, M)
    # Damper reference: animated angular velocity x the damper's share of damping, (T-1, 3, M).
    spin = prep["spin"] * prep["relative_share"].reshape(-1)
    # ... in the two component orders the projection product needs: (z, x, y) and (y, z, x).
    spin_rows = np.stack((spin[:, _I2], spin[:, _I1]), axis=1)  # (T-1, 2, 3, M)
    ang = prep["ang"][:, None]  # (T-1, 1, M)
    # Lever x the felt acceleration at each chain's pivot, per frame (varies linearly within one).
    felt = prep["felt_const"][:, 0] - prep["body_response"][:, 0] * prep["anchor_acc"]  # (T, C, 3)
    if co.any_drag:
        felt = felt - prep["drag"][:, 0] * prep["anchor_vel"]
    lever_felt = per_link(felt) * (ROD_LEVER / prep["lengths_safe"]).reshape(-1)
    limit, coll = prep["bend_limited"], prep["colliders"]

    d, u = initial_state(prep)  # (C, N, 3)
    if coll is not None:
        d, u, _ = _collide(prep, coll, prep["pivots"][0], 0, 0.0, d, u)
    d = np.moveaxis(d, -1, 0).reshape(flat)
    u = np.moveaxis(u, -1, 0).reshape(flat)
    rate_change = np.zeros(flat)  # angular acceleration of each link over the last sub-step
    out = np.empty((n_frames,) + flat)
    out[0] = d
    contacts = np.zeros((n_chains, n_links), dtype=np.int64)
    s_mid = ((np.arange(n_sub) + 0.5) / n_sub)[:, None, None]
    s_end = ((np.arange(n_sub) + 1.0) / n_sub)[:, None, None]
    s_end_list = s_end.ravel().tolist()  # the same fractions as Python floats, for the collider calls
    pair = np.empty((2,) + flat)  # the step's new rate and half turn, side by side
    broad = _BroadPhase(prep, coll) if coll is not None else None
    step = co.step
    buffer = np.empty((min(_CHUNK_FRAMES, max(n_frames - 1, 1)), n_sub, _SLOTS) + flat)  # reused per chunk
    for k0 in range(0, n_frames - 1, _CHUNK_FRAMES):
        # Inputs of every sub-step of a chunk of frames, computed at once (see _Kernel.step).
        k1 = min(k0 + _CHUNK_FRAMES, n_frames - 1)
        rows = _sub_step_inputs(buffer[:k1 - k0], targets[k0:k1], toward[k0:k1], ang[k0:k1],
                                lever_felt[k0:k1 + 1], spin_rows[k0:k1], s_mid)
        if limit:  # animated directions at the end of each sub-step: the bend cones' axes
            a_c = ang[k0:k1, None]  # (K, 1, 1, M)
            t_end = targets[k0:k1, None] * np.cos(s_end * a_c) + toward[k0:k1, None] * np.sin(s_end * a_c)
        for k in range(k0, k1):
            i = k - k0
            rows_k = rows[i]
            for j in range(n_sub):
                d, u, rate_change = step(d, u, rate_change, rows_k[j], pair)
                if limit:
                    d, u = limit_bend(d, u, t_end[i, j], co.cos_lim, co.sin_lim)
                if coll is not None and broad.maybe_inside(d, k, s_end_list[j]):
                    d, u, touched = _collide_rows(prep, coll, k, s_end_list[j], d, u)
                    contacts += touched
            out[k + 1] = d
        # The turn keeps |d| = 1 and d . u = 0 exactly but for rounding; wash that out.
        d = d / np.sqrt(_ONES33 @ (d * d))
        u = u - (_ONES33 @ (u * d)) * d
        out[k1] = d
    out = np.moveaxis(out.reshape(n_frames, 3, n_chains, n_links), 1, -1)
    rates = np.moveaxis(u.reshape(3, n_chains, n_links), 0, -1)
    return package(prep, out, rates, contacts)


_ONES33 = np.ones((3, 3))
"""``_ONES33 @ (a * b)``: the dot product of a and b, replicated on all three rows."""

_ONES66 = np.kron(np.eye(2), _ONES33)
"""The same for two stacked products of vectors, (6, M)."""

_I1 = np.array([1, 2, 0])
_I2 = np.array([2, 0, 1])

_SLOTS = 5
"""Rows of a sub-step's inputs: animated direction, lever x felt load at the pivot, (lever x
felt load at the link's head, filled in by the step), damper spin (z, x, y), (y, z, x)."""


def _projections() -> np.ndarray:
    """(12, 15) matrix turning the products ``rows * d`` (seen as (15, M)) into
    [target . d, lever felt_pivot . d, lever felt_head . d] (each on three rows) and
    spin x d: a dot product is a sum of component products, and a cross product a signed
    permutation of them, so one matrix product gives all four."""
    a = np.zeros((12, 3 * _SLOTS))
    for slot in range(3):
        a[3 * slot:3 * slot + 3, 3 * slot:3 * slot + 3] = 1.0
    # (w x d)_x = w_y d_z - w_z d_y, ...: slot 3 holds (w_z, w_x, w_y), slot 4 (w_y, w_z, w_x).
    for row, plus, minus in ((0, 2, 1), (1, 0, 2), (2, 1, 0)):
        a[9 + row, 9 + plus] = 1.0
        a[9 + row, 12 + minus] = -1.0
    return a


_PROJECT = _projections()

_DENSE_TRANSFER_MAX = 160
"""Up to this many (padded) links in all, the parent-to-child transfer is one dense matrix
product; above it, one small product per chain (the dense one grows with the square)."""


def _along_chains(blocks: np.ndarray) -> np.ndarray:
    """Per-chain (C, N, N) matrices as one operator on (3, M) rows (links of a chain consecutive):
    the block-diagonal (M, M) matrix up to _DENSE_TRANSFER_MAX links, else the blocks themselves."""
    n_chains, n_links = blocks.shape[:2]
    if n_chains * n_links > _DENSE_TRANSFER_MAX:
        return blocks
    dense = np.zeros((n_chains * n_links,) * 2)
    for c in range(n_chains):
        sl = slice(c * n_links, (c + 1) * n_links)
        dense[sl, sl] = blocks[c]
    return dense


def _times_along_chains(rows: np.ndarray, matrix: np.ndarray) -> np.ndarray:
    """``rows`` (3, M) times an operator from :func:`_along_chains`."""
    if matrix.ndim == 2:
        return np.dot(rows, matrix)
    n_chains, n_links = matrix.shape[:2]
    return (rows.reshape(3, n_chains, 1, n_links) @ matrix).reshape(rows.shape)


class _Kernel:
    """The step of all links of all chains, with its per-link constants for a sub-step ``h``.

    Arrays are component-first, ``(3, M)`` for the M = C*N (padded) links of C chains (the
    links of a chain consecutive), each per-link value replicated on the three rows; scalars
    are kept as arrays too (multiplying by an array is cheaper than by a Python float).
    """

    def __init__(self, prep: dict, h: float):
        n_chains, n_links = prep["n_chains"], prep["n_links"]
        m = n_chains * n_links

        def rows(x):
            x = np.broadcast_to(np.asarray(x, dtype=np.float64), (n_chains, n_links)).reshape(1, -1)
            return np.ascontiguousarray(np.broadcast_to(x, (3, m)))

        k = prep["stiffness"]  # omega_i^2, (C, N)
        damp = prep["damping"]  # total damping coefficient incl. air drag, (C, N)
        length = prep["lengths_active"]
        lever = ROD_LEVER / prep["lengths_safe"]
        self.n_chains, self.n_links = n_chains, n_links
        self.stacked = (3 * _SLOTS, m)
        self.any_drag = bool(np.any(prep["drag"] > 0.0))
        self.drag = rows(prep["drag"][:, :, 0])
        self.k2 = rows(2.0 * k)
        self.damp = rows(damp)
        self.den = rows(1.0 + 0.5 * h * damp)
        self.h = rows(h)
        self.half_h = rows(0.5 * h)
        self.quarter_h = rows(0.25 * h)
        self.quarter_h2 = rows(0.25 * h * h)
        self.two = rows(2.0)
        self.one = rows(1.0)
        self.floor = rows(SPRING_FLOOR)
        self.zero = rows(0.0)
        self.cos_lim = rows(prep["cos_lim"])
        self.sin_lim = rows(prep["sin_lim"])
        # transfer[i, j]: how much of link i's end acceleration (per unit length) reaches the
        # angular acceleration of link j below it in the same chain: length_i x lever_j.
        self.transfer = _along_chains(np.triu(np.ones((n_links, n_links)), 1)[None]
                                      * length[:, :, None] * lever[:, None, :])
        self.dense = self.transfer.ndim == 2

        self.step = self._step_function()

    def _step_function(self):
        """The step as a closure over the constants (local names: the cheapest lookups)."""
        # np.dot, not the @ operator: the same BLAS product with less call overhead on 2-D arrays.
        npdot, ones33, ones66, project = np.dot, _ONES33, _ONES66, _PROJECT
        subtract, add, multiply, maximum = np.subtract, np.add, np.multiply, np.maximum
        any_drag, dense, drag, transfer = self.any_drag, self.dense, self.drag, self.transfer
        stacked_pair = (6, self.n_chains * self.n_links)
        stacked, k2, one, two, floor, zero = self.stacked, self.k2, self.one, self.two, self.floor, self.zero
        damp, den, h, half_h, quarter_h, quarter_h2 = (
            self.damp, self.den, self.h, self.half_h, self.quarter_h, self.quarter_h2)

        def step(d, u, rate_change, rows, pair):
            """Advance all links by one sub-step (returns new arrays; writes ``rows[2]``, ``pair``).

            Parameters
            ----------
            d, u, rate_change : ndarray, shape (3, M)
                Directions (unit), their rates (1/s, perpendicular to d) and the rates' change
                per second over the last sub-step (1/s^2).
            rows : ndarray, shape (5, 3, M)
                ``rows[0]``: animated directions at mid-step; ``rows[1]``: lever x the felt
                acceleration at each chain's pivot (gravity, anchor motion, drag); ``rows[2]`` is
                overwritten with lever x the felt acceleration at each link's head; ``rows[3]``,
                ``rows[4]``: components (z, x, y) and (y, z, x) of the damper's reference angular
                velocity (the animated one x the relative share of damping).
            pair : ndarray, shape (2, 3, M)
                Scratch space.

            Returns
            -------
            d, u, rate_change : ndarray, shape (3, M)
            """
            target, felt_head = rows[0], rows[2]
            # Acceleration of each link's end relative to its head (tangential, centripetal, air
            # drag), per unit length; summed down the chain it is what the parent links add to
            # the felt acceleration at a link's head.
            end = rate_change - npdot(ones33, u * u) * d
            if any_drag:
                end = end + drag * u
            # (dense: np.dot inline, the common case, without a helper call on the hot path)
            subtract(rows[1], npdot(end, transfer) if dense else _times_along_chains(end, transfer), out=felt_head)
            proj = npdot(project, (rows * d).reshape(stacked))
            c = proj[0:3]  # cos of the angle to the animated direction
            # Angular acceleration: felt load on the rod + spring toward the animated direction.
            # The spring's moment k 2 tan(a/2) has the stiffness 2k / (1 + cos a), its own gain.
            gain = k2 / maximum(one + c, floor)
            load = (felt_head + gain * target) - (proj[6:9] + gain * c) * d
            # Trapezoidal rule, linearised: stiffness = spring + the pull of the chain's felt load
            # (fixed in direction over the step) where the link hangs along it. Taken no lower
            # than the true stiffness in any direction, the step cannot gain energy. What the
            # parent links add turns with them, so it has no such stiffness and stays explicit.
            stiff = gain + maximum(proj[3:6], zero)
            rel = u - proj[9:12]  # the damper acts on the motion relative to the animation's turn
            rate_change = (load - (damp + half_h * stiff) * rel) / (den + quarter_h2 * stiff)
            # Turn along the great circle of the mean rate m by the Cayley form of the rotation
            # (angle 2 atan(|x|), x = h m / 2, consistent with the trapezoid): the half-turn about
            # d + x after the half-turn about d; the new rate is carried along by the same
            # rotation. The scale uses |x| only (not |d + x|), so a rounding drift of |d| cannot
            # grow.
            u_new, x = pair[0], pair[1]
            add(u, h * rate_change, out=u_new)
            multiply(quarter_h, u + u_new, out=x)
            sizes = npdot(ones66, (pair * x).reshape(stacked_pair))  # [u_new . x, |x|^2], 3 rows each
            turn = (two / (one + sizes[3:6])) * (d + x)
            return turn - d, u_new - sizes[0:3] * turn, rate_change

        return step


def limit_bend(d, u, target, cos_lim, sin_lim):
    """Keep each direction within its cone around the animated direction; stop outward motion.

    Arrays ``(3, M)`` as in ``step``; ``cos_lim``, ``sin_lim`` (3, M): cosine and sine of each
    link's cone half-angle.
    """
    dot = _ONES33.__matmul__
    c = dot(target * d)
    over = c < cos_lim
    if not over.any():
        return d, u
    side = d - c * target
    size = np.sqrt(dot(side * side))
    fallback = any_perpendicular(target.T).T
    side = np.where(size > _TINY, side / np.maximum(size, _TINY), fallback)
    d = np.where(over, target * cos_lim + side * sin_lim, d)
    u = u - dot(u * d) * d
    away = dot(target * d) * d - target
    away = away / np.maximum(np.sqrt(dot(away * away)), _TINY)
    outward = np.maximum(dot(u * away), 0.0) * over
    return d, u - outward * away


class _BroadPhase:
    """A cheap test whether any link end may be inside a collider at a sub-step's end.

    Link ends come from one product with a cumulative-length matrix; spheres are tested as they
    are, capsules by a bounding sphere (half the longest axis + radius), the ground as a plane;
    all inflated by each link's thickness. Only when something may be inside does the exact
    projection (``colliders.project_out``, several passes) run. The test is conservative: it
    admits every case the projection would treat (it has no surface slack).
    """

    def __init__(self, prep: dict, coll: Colliders):
        n_links = prep["n_links"]
        length = prep["lengths_active"]
        self.pivots = np.repeat(prep["pivots"].transpose(0, 2, 1), n_links, axis=-1)  # (T, 3, M)
        self.last = self.pivots.shape[0] - 1
        # reach[i, j] = length of link i if it is link j or above it in the same chain.
        self.reach = _along_chains(np.triu(np.ones((n_links, n_links)))[None] * length[:, :, None])
        thick = np.repeat(prep["link_radius"][:, 0], n_links)  # (M,)
        centres = [np.zeros((self.last + 1, 0, 3))]
        radii = [np.zeros(0)]
        if coll.sphere_radii_m.size:
            centres.append(coll.sphere_centres_m)
            radii.append(coll.sphere_radii_m)
        if coll.capsule_radii_m.size:
            centres.append(0.5 * (coll.capsule_a_m + coll.capsule_b_m))
            half = 0.5 * np.linalg.norm(coll.capsule_b_m - coll.capsule_a_m, axis=-1).max(axis=0)
            radii.append(half + coll.capsule_radii_m)
        self.centres = np.concatenate(centres, axis=1).transpose(0, 2, 1)[..., None]  # (T, 3, B, 1)
        self.reach_sq = (np.concatenate(radii)[:, None] + thick) ** 2  # (B, M)
        self.any_bounds = self.reach_sq.shape[0] > 0
        self.plane = None if coll.ground_height_m is None else coll.ground_height_m + thick

    def maybe_inside(self, d: np.ndarray, k: int, s: float) -> bool:
        k1 = min(k + 1, self.last)
        pivot = self.pivots[k] + s * (self.pivots[k1] - self.pivots[k])
        tips = pivot + _times_along_chains(d, self.reach)
        if self.plane is not None and bool(np.any(tips[2] < self.plane)):
            return True
        if self.any_bounds:
            centre = self.centres[k] + s * (self.centres[k1] - self.centres[k])  # (3, B, 1)
            rel = tips[:, None, :] - centre  # (3, B, M)
            return bool(np.any((rel * rel).sum(axis=0) < self.reach_sq))
        return False


def _sub_step_inputs(rows, targets, toward, ang, lever_felt, spin_rows, s_mid):
    """Fill ``rows`` (K, n_sub, 5, 3, M) with every sub-step's inputs for K frames (see _SLOTS).

    targets, toward (K, 3, M): animated direction at each frame and the unit tangent it turns
    along, by ``ang`` (K, 1, M) over the frame; lever_felt (K + 1, 3, M), linear within a frame;
    spin_rows (K, 2, 3, M); s_mid (n_sub, 1, 1): the sub-steps' mid-points as fractions of a frame.
    """
    n_sub = s_mid.shape[0]
    # Animated directions at mid-sub-step (slerp), by turning on in steps of a / n_sub
    # (angle-sum recurrence: two sines and cosines per chunk instead of two per sub-step).
    cos_j, sin_j = np.cos(s_mid[0] * ang), np.sin(s_mid[0] * ang)  # (K, 1, M)
    cos_inc, sin_inc = np.cos(ang / n_sub), np.sin(ang / n_sub)
    for j in range(n_sub):
        if j:
            cos_j, sin_j = cos_j * cos_inc - sin_j * sin_inc, sin_j * cos_inc + cos_j * sin_inc
        np.multiply(targets, cos_j, out=rows[:, j, 0])
        rows[:, j, 0] += toward * sin_j
    g0, g1 = lever_felt[:-1, None], lever_felt[1:, None]
    np.multiply(s_mid, g1 - g0, out=rows[:, :, 1])
    rows[:, :, 1] += g0
    rows[:, :, 3:5] = spin_rows[:, None]
    return rows


def _collide_rows(prep, coll, k, s, d, u):
    """``_collide`` at fraction ``s`` of frame k for (3, M) rows; returns d, u (3, M) and touched."""
    n_chains, n_links = prep["n_chains"], prep["n_links"]
    pivot = prep["pivots"][k] + s * (prep["pivots"][k + 1] - prep["pivots"][k])
    # transpose, not moveaxis: same views, without moveaxis' per-call axis checks
    # (they cost more than the collision itself at this size).
    d3 = d.reshape(3, n_chains, n_links).transpose(1, 2, 0)
    u3 = u.reshape(3, n_chains, n_links).transpose(1, 2, 0)
    d3, u3, touched = _collide(prep, coll, pivot, k, s, d3, u3)
    return d3.transpose(2, 0, 1).reshape(d.shape), u3.transpose(2, 0, 1).reshape(u.shape), touched


def _collide(prep, coll, pivot, k, s, d, u):
    def at(arr):
        if arr.shape[1] == 0:
            return np.zeros((0, 3))
        return arr[k] + s * (arr[min(k + 1, arr.shape[0] - 1)] - arr[k])

    return project_out(
        pivot, d, u, prep["lengths_active"], prep["link_radius"],
        at(coll.sphere_centres_m), coll.sphere_radii_m,
        at(coll.capsule_a_m), at(coll.capsule_b_m), coll.capsule_radii_m,
        coll.ground_height_m, prep["n_links"] + 2,
    )
