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

__all__ = ["simulate_chains", "step", "limit_bend", "swing_offsets"]

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
    co = _coefficients(prep, dt_s / n_sub)
    # Component-first layout inside the loop, (3, C, N) seen as (3, C*N): every per-link
    # scalar is kept replicated on the 3 rows, so the kernel needs no broadcasting.
    targets = np.moveaxis(prep["targets"], -1, 1)  # (T, 3, C, N)
    toward = np.moveaxis(prep["toward"], -1, 1)  # (T-1, 3, C, N)
    # Damper reference: animated angular velocity x the damper's share of damping, (T-1, 3, C, N).
    spin = np.moveaxis(prep["spin"], -1, 1) * prep["relative_share"]
    ang = prep["ang"]  # (T-1, C, N)
    acc = prep["anchor_acc"].transpose(0, 2, 1)[..., None]  # (T, 3, C, 1)
    vel = prep["anchor_vel"].transpose(0, 2, 1)[..., None]
    felt_const = prep["felt_const"].transpose(2, 0, 1)  # (3, C, 1)
    br, drag = prep["body_response"][:, :, 0], prep["drag"][:, :, 0]  # (C, 1)
    limit, coll = prep["bend_limited"], prep["colliders"]
    cos_lim, sin_lim = prep["cos_lim"], prep["sin_lim"]
    flat = (3, n_chains * n_links)
    zeros_links = np.zeros((n_sub, 3, n_chains, n_links))

    d, u = initial_state(prep)  # (C, N, 3)
    if coll is not None:
        d, u, _ = _collide(prep, coll, prep["pivots"][0], 0, 0.0, d, u)
    d = np.moveaxis(d, -1, 0).reshape(flat)
    u = np.moveaxis(u, -1, 0).reshape(flat)
    change = np.zeros(flat)
    out = np.empty((n_frames,) + flat)
    out[0] = d
    contacts = np.zeros((n_chains, n_links), dtype=np.int64)
    s_mid = ((np.arange(n_sub) + 0.5) / n_sub)[:, None, None, None]
    s_end = ((np.arange(n_sub) + 1.0) / n_sub)[:, None, None, None]
    for k0 in range(0, n_frames - 1, _CHUNK_FRAMES):
        # Inputs of every sub-step of a chunk of frames, computed at once.
        k1 = min(k0 + _CHUNK_FRAMES, n_frames - 1)
        a_c = ang[k0:k1, None, None]  # (K, 1, 1, C, N)
        t_c = targets[k0:k1, None]
        t_mid = t_c * np.cos(s_mid * a_c) + toward[k0:k1, None] * np.sin(s_mid * a_c)
        t_mid = t_mid.reshape((k1 - k0, n_sub) + flat)
        a0, a1 = acc[k0:k1, None], acc[k0 + 1:k1 + 1, None]
        felt = felt_const - br * (a0 + s_mid * (a1 - a0))  # (K, n_sub, 3, C, 1)
        if co.any_drag:
            v0, v1 = vel[k0:k1, None], vel[k0 + 1:k1 + 1, None]
            felt = felt - drag * (v0 + s_mid * (v1 - v0))
        felt = (felt + zeros_links).reshape((k1 - k0, n_sub) + flat)
        spin_c = spin[k0:k1].reshape((k1 - k0,) + flat)
        spin_a, spin_b = spin_c[:, _I1], spin_c[:, _I2]
        turning = co.any_relative & np.any(a_c != 0.0, axis=(1, 2, 3, 4))
        if limit:
            t_end = t_c * np.cos(s_end * a_c) + toward[k0:k1, None] * np.sin(s_end * a_c)
            t_end = t_end.reshape((k1 - k0, n_sub) + flat)
        for k in range(k0, k1):
            i = k - k0
            spin_rows = (spin_a[i], spin_b[i]) if turning[i] else None
            t_mid_k, felt_k = t_mid[i], felt[i]
            for j in range(n_sub):
                d, u, change = step(d, u, change, t_mid_k[j], spin_rows, felt_k[j], co)
                if limit:
                    d, u = limit_bend(d, u, t_end[i, j], co.cos_lim, co.sin_lim)
                if coll is not None:
                    s = float(s_end[j, 0, 0, 0])
                    pivot = prep["pivots"][k] + s * (prep["pivots"][k + 1] - prep["pivots"][k])
                    # transpose, not moveaxis: same views, without moveaxis' per-call axis checks
                    # (they cost more than the collision itself at this size).
                    d3 = d.reshape(3, n_chains, n_links).transpose(1, 2, 0)
                    u3 = u.reshape(3, n_chains, n_links).transpose(1, 2, 0)
                    d3, u3, touched = _collide(prep, coll, pivot, k, s, d3, u3)
                    d = d3.transpose(2, 0, 1).reshape(flat)
                    u = u3.transpose(2, 0, 1).reshape(flat)
                    contacts += touched
            out[k + 1] = d
        # The Cayley turn keeps |d| = 1 and d . u = 0 exactly but for rounding; wash that out.
        d = d / np.sqrt(_ONES33 @ (d * d))
        u = u - (_ONES33 @ (u * d)) * d
        out[k1] = d
    out = np.moveaxis(out.reshape(n_frames, 3, n_chains, n_links), 1, -1)
    rates = np.moveaxis(u.reshape(3, n_chains, n_links), 0, -1)
    return package(prep, out, rates, contacts)


class _Coefficients:
    """Per-link constants of the step kernel for one sub-step length ``h``.

    Arrays have shape (3, C*N): each per-link value replicated on three rows.
    """

    __slots__ = (
        "h", "half_h", "shape", "length", "length_per_h", "length_drag", "any_drag", "any_relative", "lever",
        "k2", "damp", "one_plus_damp", "quarter_h2", "q_scale", "q2_scale", "cos_lim", "sin_lim",
    )


def _coefficients(prep: dict, h: float) -> _Coefficients:
    n_chains, n_links = prep["n_chains"], prep["n_links"]

    def rows(x):
        x = np.broadcast_to(np.asarray(x, dtype=np.float64), (n_chains, n_links)).reshape(1, -1)
        return np.ascontiguousarray(np.broadcast_to(x, (3, x.shape[1])))

    co = _Coefficients()
    k = prep["stiffness"]  # omega_i^2, (C, N)
    damp = prep["damping"]  # total damping coefficient incl. air drag, (C, N)
    lever = ROD_LEVER / prep["lengths_safe"]
    co.h = h
    co.half_h = 0.5 * h
    co.shape = (3, n_chains, n_links)
    co.length = rows(prep["lengths_active"])
    co.length_per_h = co.length / h
    co.length_drag = co.length * rows(prep["drag"][:, :, 0])
    co.any_drag = bool(np.any(prep["drag"] > 0.0))
    co.any_relative = bool(np.any(prep["relative_share"] > 0.0))
    co.lever = rows(lever)
    co.k2 = rows(2.0 * k)
    co.damp = rows(damp)
    co.one_plus_damp = rows(1.0 + 0.5 * h * damp)
    co.quarter_h2 = 0.25 * h * h
    co.q_scale = (0.25 * h) ** 2
    co.q2_scale = 2.0 * (0.25 * h) ** 2
    co.cos_lim = rows(prep["cos_lim"])
    co.sin_lim = rows(prep["sin_lim"])
    return co


_ONES33 = np.ones((3, 3))
"""``_ONES33 @ (a * b)``: the dot product of a and b, replicated on all three rows."""


_I1 = np.array([1, 2, 0])
_I2 = np.array([2, 0, 1])
def step(d, u, change, target, spin_rows, felt, co):
    """Advance all links of all chains by one sub-step (pure: returns new arrays).

    Arrays are component-first, ``(3, M)`` for the M = C*N (padded) links of C chains; the
    links of a chain are consecutive.

    Parameters
    ----------
    d, u, change : ndarray, shape (3, M)
        Directions (unit), their rates (1/s, perpendicular to d) and the rates' change over
        the last sub-step (1/s).
    target : ndarray, shape (3, M)
        Animated directions at mid-step.
    spin_rows : tuple of two ndarray (3, M), or None
        Rows (y, z, x) and (z, x, y) of the damper's reference angular velocity (the animated
        one x the relative share of damping); None when nothing turns.
    felt : ndarray, shape (3, M)
        Felt acceleration at each chain's pivot (gravity, anchor motion, drag), m/s^2.
    co : _Coefficients

    Returns
    -------
    d, u, change : ndarray, shape (3, M)
    """
    dot = _ONES33.__matmul__
    # Felt acceleration at each link's head: the chain pivot's, minus what the parent ends add.
    parent = co.length_per_h * change - (co.length * dot(u * u)) * d
    if co.any_drag:
        parent = parent + co.length_drag * u
    f = (felt + parent) - parent.reshape(co.shape).cumsum(2).reshape(parent.shape)
    fd = dot(f * d)
    c = dot(target * d)
    # Angular acceleration: felt load on the rod + spring toward the animated direction. The
    # spring's moment k 2 tan(a/2) has the stiffness 2k / (1 + cos a), its own gain.
    gain = co.k2 / np.maximum(1.0 + c, SPRING_FLOOR)
    load = co.lever * (f - fd * d) + gain * (target - c * d)
    # Trapezoidal rule, linearised: stiffness = spring + the pull of the chain's felt load (fixed
    # in direction over the step) where the link hangs along it. Taken no lower than the true
    # stiffness in any direction, the step cannot gain energy. What the parent links add turns
    # with them, so it has no such stiffness and stays explicit.
    stiff = gain + np.maximum(co.lever * dot(felt * d), 0.0)
    hden = co.h / (co.one_plus_damp + co.quarter_h2 * stiff)
    rel = u
    if spin_rows is not None:  # damper reference: turning with the animation
        rel = u - (spin_rows[0] * d[_I2] - spin_rows[1] * d[_I1])
    u_new = u + hden * (load - (co.damp + co.half_h * stiff) * rel)
    change = u_new - u
    # Turn along the great circle of the mean rate (Cayley form of the rotation: the angle is
    # 2 atan(h |mean| / 2), consistent with the trapezoid), carrying the new rate along.
    mean = u + u_new  # twice the mean rate
    q = co.q_scale * dot(mean * mean)  # (h |mean rate| / 2)^2
    inv = 1.0 / (1.0 + q)
    d_new = (d * (1.0 - q) + co.half_h * mean) * inv
    u_new = u_new - (dot(u_new * mean) * inv) * (co.q2_scale * mean + co.half_h * d)
    return d_new, u_new, change


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
