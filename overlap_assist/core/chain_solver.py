"""Secondary motion of bone chains: coupled multibody chains hanging from an animated body.

Model
-----
A chain of ``n`` links hangs from an animated **anchor** (the head of its first bone). Link
``j`` is a **uniform rigid rod** of length ``L_j`` whose mass goes with its length and its
thickness squared (``thickness_taper`` thins it linearly from root to tip); an optional point
mass hangs at the chain's end (``tip_mass_ratio`` x the chain's mass). The links are joined at
their ends; each turns freely in swing (no twist). The generalised coordinates are the unit
link directions ``d_j``; with ``p_0`` the anchor, link j's centre is
``p_0 + sum_{k<j} L_k d_k + L_j d_j / 2``, so the kinetic energy of the motion relative to the
anchor is ``1/2 sum_jk M_jk d_j' . d_k'`` with the constant symmetric positive-definite matrix

    M_jj = L_j^2 (m_j / 3 + S_j),   M_jk = L_j L_k (m_k / 2 + S_k)  (j < k),

``S_k`` the mass below link k (tip mass included). A uniform felt acceleration ``f`` (gravity
x gravity_scale, minus body_response x the anchor's acceleration, minus air drag x the anchor's
velocity) acts on link j with the generalised force ``b_j f``, ``b_j = L_j (m_j / 2 + S_j)``.
Lagrange's equations with one multiplier per link for ``|d_j| = 1`` (Goldstein, *Classical
Mechanics*, ch. 1-2) are

    sum_k M_jk d_k'' = b_j f - dV/dd_j - [C (d' - d'_anim)]_j - air_drag [M d']_j + lambda_j d_j,

so each link's inertia and everything hanging below it act back on its parent through the joint
(the off-diagonal M_jk): the chain is two-way coupled, conserves energy without damping and
drag, and conserves angular momentum about its anchor in free fall. A single link is the
physical pendulum ``d'' = (3 / 2L) f`` (tangential), period ``2 pi sqrt(2L / 3g)``.

Joint springs pull the chain toward the animated pose: with the deviations ``e_j = d_j - t_j``
from the animated directions, ``V = sum_j k_j / 2 |e_j - e_(j-1)|^2`` (``e_(-1) = 0``: the root
joint pulls toward the anchor's pose). For small angles ``|e_j - e_(j-1)|`` is the bend of joint j
away from its animated bend (exact where the neighbours are animated parallel); its stiffness
matrix ``K_s`` is tridiagonal and constant. ``k_j = kappa (1 - tip_looseness pos_j)^2 M_jj``
(pos_j from 0 at the root to 1 at the tip), and kappa is chosen so that the **lowest mode of the
springs alone** (generalised eigenproblem ``K_s v = w^2 M v``) is ``2 pi frequency_hz``: the
frequency describes the whole chain, not a link. The damper acts on the motion relative to the
animated motion (``d'_anim = w_anim x d``) with the Rayleigh matrix ``C = alpha M + beta K``,
``K = K_s + diag(b_j gravity_scale |g|)`` the stiffness of the chain hanging straight down,
``alpha = zeta w_1``, ``beta = zeta / w_1`` (w_1 the lowest mode of (K, M)): the lowest mode is
damped with exactly ``damping_ratio`` and every higher mode more (Rayleigh damping keeps the
modes uncoupled; Clough & Penzien, *Dynamics of Structures*, Sec. 12-5, from memory).

Each link may not leave a cone of ``bend_limit_rad`` around its animated direction, and its end
is kept out of sphere and capsule colliders and above the ground (``colliders``).

Integration
-----------
Per sub-step ``h`` every chain takes one linearly implicit trapezoidal (average-acceleration)
step, evaluated at the predicted **mid-step** state: the directions are turned half a step ahead
by the current rates (Cayley form), the rates carried there, and the tangential accelerations
``a`` there solve

    (M + h/2 (C + drag M) + h^2/4 (K_s + diag(b_j |f|))) a = Q_mid + lambda d_mid,   d_mid,j . a_j = 0,

``Q_mid`` holding the load, springs and damping at the mid-step state and the centripetal pull
of the other links, ``M (|d'|^2 d)``, with the mean rate predicted from the last step's
acceleration. The constraint is solved by the Schur complement: with ``S^-1`` per chain (once
per frame), one small symmetric ``n x n`` solve per chain gives the multipliers, all chains at
once. The accelerations are carried back to the start's tangents and each direction turns along
the great circle of its mean rate by the Cayley form of the rotation (angle ``2 atan(h w / 2)``),
which keeps ``|d| = 1`` and carries rates and accelerations along. Measured: second order in
``h`` (double pendulum released at 60/30 degrees: 0.10 degrees after 1 s at 60 fps, energy
drift 4e-4 over 10 s; tests/core/test_chain_dynamics.py).

The stiffness on the left bounds the chain's tangent stiffness from above (gravity's pull is
``b_j f . d_j <= b_j |f|``): for a linear system the step keeps a quadratic energy exactly
(determinant 1, Newmark's average-acceleration method; Hairer, Lubich & Wanner 2003) and is
stable for every stiffness, damping and step. The centripetal coupling is explicit, so a step in
which some link would turn by more than ``ROTATION_STEP_MAX`` is split into shorter ones
(decided from the state: deterministic). Sub-steps are added automatically where the chain's
highest mode or damping is too fast for the frame rate to be followed accurately. Contacts and
bend stops change the rates by impulses through the mass matrix (the least change that stops the
motion into the surface: it never adds kinetic energy), and rates re-aimed along moved links are
scaled back to the kinetic energy they had. After every frame the chain's energy is held to the
budget the equations of motion give it (``core.chain_energy``: what it had plus the animation's
work; while the body holds still it can only fall), the excess taken out of the motion.
Arithmetic is fixed-order numpy, so identical input gives bit-identical output.

Pre-roll: the chain starts at rest in the static equilibrium of frame 0 (joint springs against
the frame's felt acceleration, the whole chain at once), moving with the animated motion.
"""
from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from .chain_energy import EnergyBound, chain_energy, no_energy_gain, potential, take_energy
from .chain_setup import initial_state, package, prepare
from .chain_types import ChainInput, ChainMotion, ChainSettings, ChainState, Colliders
from .colliders import dot, project_out
from .link_constraints import _impulse, constrained_solve, limit_bend
from .swing import swing_offsets  # noqa: F401  (part of the solver's public API)

__all__ = ["simulate_chains", "limit_bend", "swing_offsets", "constrained_solve", "chain_energy"]

_TINY = 1e-12

_CHUNK_FRAMES = 32
"""Frames whose sub-step inputs are prepared together (bounds memory for long shots)."""

ROTATION_STEP_MAX = 0.25
"""Largest turn of a link (rad) per step, and largest h x sqrt(tension / inertia) of a link
pulled by the spinning links below it: the centripetal coupling between links is explicit, so
a faster step is split (deterministically, from the state) into shorter ones."""

DAMPER_IMPLICIT = 0.55
"""Weight of the end-of-step rate in the damper (0.5: the trapezoid, 1: backward Euler). The
Rayleigh damping of a chain of short links damps its highest modes very hard, and the pure
trapezoid turns such a mode into a sign-alternating wobble that never decays (factor
-(hc - 2)/(hc + 2) -> -1; a damped chain was measured gaining 23 % energy at 12 fps). 0.55 decays
it by at least 0.82 per sub-step; the price is a first-order damping error of weight 0.05
(tip path of the benchmark 1.35 % of the swing from a converged run; 0.6: 1.98 %, 1: 6.8 %)."""

TENSION_MARGIN = 2.0
"""The pull of the links below a link is bounded for a frame by this multiple of its value at
the frame's start (a sub-step exceeding it is split and re-bounded)."""

TENSION_IMPLICIT_MIN = 0.05
"""Below this h^2 x (largest tension / smallest eigenvalue of M), an upper bound of h^2 w^2 of the
pull's stiffness, the pull stays explicit (stable and more accurate there: h w < 0.23); above
it, it is bounded in the step's matrix."""

MAX_SPLIT = 256
"""Most pieces a split step is cut into."""


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
    h = dt_s / n_sub
    shape = (n_chains, n_links)

    def per_chain(arr):  # (T, 3, M) rows -> (T, C, N, 3)
        return np.moveaxis(arr.reshape(arr.shape[0], 3, n_chains, n_links), 1, -1)

    targets = prep["targets"]  # (T, C, N, 3)
    toward = per_chain(prep["toward"])  # (T-1, C, N, 3)
    spin = per_chain(prep["spin"])  # animated angular velocity of each link over each frame
    ang = prep["ang"].reshape(-1, n_chains, n_links)[..., None]  # (T-1, C, N, 1)
    felt = prep["felt_const"][:, 0] - prep["body_response"][:, 0] * prep["anchor_acc"]  # (T, C, 3)
    if bool(np.any(prep["drag"] > 0.0)):
        felt = felt - prep["drag"][:, 0] * prep["anchor_vel"]
    inertia, spring, damping, load = prep["inertia"], prep["spring"], prep["damping"], prep["load"]
    relative = damping - prep["drag"] * inertia  # the damper's share (acts on the relative motion)
    base = inertia + DAMPER_IMPLICIT * h * damping + 0.25 * h * h * spring  # (C, N, N), plus the load's part per frame
    felt_size = np.sqrt(dot(felt, felt))  # (T, C)
    bound = np.maximum(felt_size[:-1], felt_size[1:])  # |f| within a frame is at most its ends' larger
    limit, coll = prep["bend_limited"], prep["colliders"]
    cos_lim, sin_lim = prep["cos_lim"], prep["sin_lim"]
    load3 = load[..., None]
    inv_inertia = np.linalg.inv(inertia)
    lengths = prep["lengths_active"]
    # 1 / smallest eigenvalue of M per chain: bounds the pull's stiffness max(tension) / lambda_min(M).
    inv_min_inertia = 1.0 / np.linalg.eigvalsh(inertia)[:, 0]

    # The step's operator on the stacked [mid-step directions, their rates, centripetal pulls]:
    # -K_s, -(C + drag M) and M side by side, one product per sub-step.
    operator = np.concatenate([-spring, -(relative + prep["drag"] * inertia), inertia], axis=2)  # (C, N, 3N)
    eye = np.eye(n_links)

    broad = _BroadPhase(prep, coll) if coll is not None else None
    d, u = initial_state(prep)  # (C, N, 3)
    if coll is not None:
        d, u, _ = _collide(prep, coll, prep["pivots"][0], 0, 0.0, d, u)
    out = np.empty((n_frames,) + shape + (3,))
    out[0] = d
    energy_bound = EnergyBound(inertia, spring, relative, load, felt, spin, targets, dt_s, cos_lim)
    energy_bound.start(d, u)
    a_last = np.zeros_like(d)  # the last step's tangential accelerations
    contacts = np.zeros(shape, dtype=np.int64)
    s_mid = ((np.arange(n_sub) + 0.5) / n_sub)[None, :, None, None, None]
    s_end = (np.arange(n_sub) + 1.0) / n_sub
    ones = np.ones((3, 1))
    npdot, concat, sqrt, solve = np.matmul, np.concatenate, np.sqrt, _fast_solve()
    minimum, maximum = np.minimum, np.maximum

    def dynamics(d, u, a_last, drive, s_inv, h, uu):
        """One linearly implicit trapezoidal step of length h (see the module docstring).

        ``drive`` (C, N, 3): load, springs' pull toward the animated mid-step directions and the
        damper's animated motion (prepared per sub-step); ``uu`` (C, N, 1): ``|u|^2``."""
        # Mid-step directions (half a step ahead by the current rates) and the rates there.
        # (Cayley half turn: the reflections across d and across d + x, x = h u / 4.)
        xh = (0.25 * h) * u
        sc = 2.0 / (1.0 + (0.0625 * h * h) * uu)
        dxh = d + xh
        mid = sc * dxh - d
        u_mid = u - ((0.25 * h) * sc * uu) * dxh  # u . xh = h |u|^2 / 4
        # The centripetal pull goes with the mean rate's square, |u + h a / 2|^2 ~ |u|^2 + h u . a,
        # predicted with the last step's acceleration (kept within [0, 4 |u|^2]: it must not feed
        # on itself).
        c2 = minimum(maximum(uu + h * npdot(u * a_last, ones), 0.0), 4.0 * uu)
        force = drive + npdot(operator, concat((mid, u_mid, c2 * mid), axis=1))
        # S a = force + lambda mid, mid . a = 0 (Schur complement, one n x n solve per chain).
        r = npdot(s_inv, force)
        gram = s_inv * npdot(mid, mid.transpose(0, 2, 1))
        lam = solve(gram, -npdot(mid * r, ones))
        a_mid = r + npdot(s_inv, lam * mid)
        # ... carried back to the start's tangents by the inverse half turn (the reflections in
        # reverse order), so that the full turn below carries it on by the second half.
        # (With a_mid . mid = 0 and d . dxh = 1 the two reflections reduce to one product.)
        a = a_mid - npdot(a_mid * d, ones) * dxh
        u_new = u + h * a
        x = (0.25 * h) * (u + u_new)
        scale = 2.0 / (1.0 + npdot(x * x, ones))
        dx = d + x
        return scale * dx - d, u_new - (scale * npdot(u_new * x, ones)) * dx, a

    def step_inverse(hh, stiff_diag):
        return np.linalg.inv(inertia + DAMPER_IMPLICIT * hh * damping + 0.25 * hh * hh * spring
                             + (0.25 * hh * hh) * stiff_diag[..., None] * eye)

    for k0 in range(0, n_frames - 1, _CHUNK_FRAMES):
        k1 = min(k0 + _CHUNK_FRAMES, n_frames - 1)
        # Per frame of the chunk: the inverse of the step's matrix (the load's stiffness bound varies).
        s_inv = np.linalg.inv(base + (0.25 * h * h) * (load[None] * bound[k0:k1, :, None])[..., None] * eye)
        # Per sub-step of the chunk: animated mid-step directions (slerp), the load, and what of the
        # springs and the damper depends on the animation only, (K, n_sub, C, N, 3).
        a_c = ang[k0:k1, None]
        t_mid = targets[k0:k1, None] * np.cos(s_mid * a_c) + toward[k0:k1, None] * np.sin(s_mid * a_c)
        f_mid = felt[k0:k1, None] + s_mid[..., 0, :] * (felt[k0 + 1:k1 + 1, None] - felt[k0:k1, None])
        rate_mid = np.cross(spin[k0:k1, None], t_mid)
        drives = (load3 * f_mid[:, :, :, None, :] + np.matmul(spring, t_mid)
                  + np.matmul(relative, rate_mid))
        if limit:
            s_e = s_end[None, :, None, None, None]
            t_end = targets[k0:k1, None] * np.cos(s_e * a_c) + toward[k0:k1, None] * np.sin(s_e * a_c)
        for k in range(k0, k1):
            i = k - k0
            drive_k = drives[i]
            # The pull of the spinning links below each link (a heavy spinning tip pulls the chain
            # taut) is a stiffness too: bounded for the frame and taken into the step's matrix.
            uu = npdot(u * u, ones)
            uu_max = TENSION_MARGIN * float(np.max(uu))
            tension = (inertia @ uu)[..., 0]  # (C, N)
            # ... and so is the joint springs' curvature on the unit spheres, -(d_j . dV/dd_j),
            # which a bent chain can make positive (a weakly damped stiff chain gained 52 %
            # energy at 30 fps while it was left explicit).
            tension = tension + np.maximum(-np.einsum("cni,cni->cn", spring @ (d - targets[k]), d), 0.0)
            if float(np.max(np.max(tension, axis=1) * inv_min_inertia)) * h * h > TENSION_IMPLICIT_MIN:
                sk = step_inverse(h, load * bound[k][:, None] + TENSION_MARGIN * tension)
            else:
                sk = s_inv[i]
                uu_max = max(uu_max, TENSION_IMPLICIT_MIN / (h * h))
            touched_before = contacts.sum(axis=1) if coll is not None else None
            d_frame, u_frame, smooth = d, u, True
            for j in range(n_sub):
                uu = npdot(u * u, ones)
                top = float(np.max(uu))
                if top <= uu_max and h * h * top <= ROTATION_STEP_MAX**2:
                    d, u, a_last = dynamics(d, u, a_last, drive_k[j], sk, h, uu)
                else:
                    # Links spinning by more than ROTATION_STEP_MAX per sub-step, or faster than
                    # the frame's bound (a violent start or snap): shorter steps, with the current
                    # pull in their matrix.
                    done, pieces, smooth = 0.0, 0, False
                    while done < 1.0 - 1e-12:
                        uu = npdot(u * u, ones)
                        fast = h * float(np.sqrt(np.max(uu)))
                        frac = 1.0 / min(max(int(np.ceil(fast / ROTATION_STEP_MAX)), 1), MAX_SPLIT)
                        if pieces >= 4 * MAX_SPLIT:  # guard: finish with the shortest pieces
                            frac = max(frac, 1.0 / MAX_SPLIT)
                        frac = min(frac, 1.0 - done)
                        tension = (inertia @ uu)[..., 0] + np.maximum(
                            -np.einsum("cni,cni->cn", spring @ (d - targets[k]), d), 0.0)
                        sp = step_inverse(h * frac, load * bound[k][:, None] + TENSION_MARGIN * tension)
                        d, u, a_last = dynamics(d, u, a_last, drive_k[j], sp, h * frac, uu)
                        done += frac
                        pieces += 1
                if limit or coll is not None:
                    u_before, d_before = u, d
                if limit:
                    before = d
                    d, u = limit_bend(d, u, t_end[i, j], cos_lim, sin_lim, inv_inertia)
                    if d is not before:
                        smooth = False
                        a_last = np.zeros_like(d)  # the stop broke the smooth motion the prediction needs
                        # Moving links back onto their cones changes the springs' and the load's
                        # energy; what that adds is taken from the motion (a stop must not pump
                        # energy into a chain sliding along its cone).
                        f_ref = load3 * f_mid[i, j][:, None, :]
                        gain = (potential(spring, t_end[i, j], f_ref, d)
                                - potential(spring, t_end[i, j], f_ref, before))
                        u = take_energy(inertia, u, gain)
                if coll is not None and broad.maybe_inside(d, k, float(s_end[j])):
                    pivot = prep["pivots"][k] + s_end[j] * (prep["pivots"][k + 1] - prep["pivots"][k])
                    d, _, touched, normals = _collide(prep, coll, pivot, k, float(s_end[j]), d, u, True)
                    if touched.any():
                        contacts += touched
                        a_last = np.zeros_like(d)
                        u = _contact_impulse(inv_inertia, lengths, d, u - dot(u, d)[..., None] * d, normals)
                if (limit or coll is not None) and d is not d_before:
                    u = no_energy_gain(inertia, u_before, u)
            # The turn keeps |d| = 1 and d . u = 0 exactly but for rounding; wash that out.
            d = d / np.sqrt(dot(d, d))[..., None]
            u = u - dot(u, d)[..., None] * d
            # A frame may not add energy the animation did not give (core.chain_energy).
            touched = None if coll is None else contacts.sum(axis=1) > touched_before
            d, u = energy_bound.end_frame(d, u, k, touched, d_frame, u_frame,
                                          smooth and (touched is None or not touched.any()))
            out[k + 1] = d
    return package(prep, out, u, contacts)


def _fast_solve():
    """numpy's batched LAPACK solve without the Python-level checks of ``np.linalg.solve`` (the
    same gufunc; ~6 us less per call, which adds up over a shot's sub-steps). The Gram matrices
    solved here are symmetric positive definite by construction."""
    try:
        from numpy.linalg import _umath_linalg

        gufunc = _umath_linalg.solve
        probe = np.eye(2)[None]
        if np.array_equal(gufunc(probe, np.ones((1, 2, 1))), np.ones((1, 2, 1))):
            return gufunc
    except (ImportError, AttributeError, TypeError, ValueError):
        pass
    return np.linalg.solve


def _contact_impulse(inv_inertia, lengths, d, u, normals):
    """Stop every touched link end's motion into its surface, ``n_j . sum_(k<=j) L_k d_k' >= 0``,
    by impulses through the mass matrix (the links above and below share the shock)."""
    n = d.shape[1]
    lower = np.tril(np.ones((n, n)))  # row j: links k <= j
    rows = lower[None, :, :, None] * lengths[:, None, :, None] * normals[:, :, None, :]  # (C, P=N, N, 3)
    speed = np.einsum("cpni,cni->cp", rows, u)
    if not (speed < 0.0).any():
        return u
    return u + _impulse(inv_inertia, d, rows, speed)


class _BroadPhase:
    """A cheap test whether any link end may be inside a collider at a sub-step's end.

    Link ends from one product with a cumulative-length matrix; spheres are tested as they are,
    capsules by a bounding sphere (half the longest axis + radius), the ground as a plane; all
    inflated by each chain's thickness. Only when something may be inside does the exact
    projection (``colliders.project_out``, several passes) run. The test is conservative: it
    admits every case the projection would treat (it has no surface slack).
    """

    def __init__(self, prep: dict, coll: Colliders):
        n_links = prep["n_links"]
        length = prep["lengths_active"]  # (C, N)
        self.pivots = prep["pivots"]  # (T, C, 3)
        self.last = self.pivots.shape[0] - 1
        # reach[c, j, i] = length of link i of chain c if it is link j or above it.
        self.reach = np.tril(np.ones((n_links, n_links)))[None] * length[:, None, :]
        thick = np.broadcast_to(prep["link_radius"], length.shape)  # (C, N)
        centres = [np.zeros((self.last + 1, 0, 3))]
        radii = [np.zeros(0)]
        if coll.sphere_radii_m.size:
            centres.append(coll.sphere_centres_m)
            radii.append(coll.sphere_radii_m)
        if coll.capsule_radii_m.size:
            centres.append(0.5 * (coll.capsule_a_m + coll.capsule_b_m))
            half = 0.5 * np.linalg.norm(coll.capsule_b_m - coll.capsule_a_m, axis=-1).max(axis=0)
            radii.append(half + coll.capsule_radii_m)
        self.centres = np.concatenate(centres, axis=1)  # (T, B, 3)
        self.reach_sq = (np.concatenate(radii)[None, None, :] + thick[..., None]) ** 2  # (C, N, B)
        self.any_bounds = self.reach_sq.shape[-1] > 0
        self.plane = None if coll.ground_height_m is None else coll.ground_height_m + thick

    def maybe_inside(self, d: np.ndarray, k: int, s: float) -> bool:
        k1 = min(k + 1, self.last)
        pivot = self.pivots[k] + s * (self.pivots[k1] - self.pivots[k])  # (C, 3)
        tips = pivot[:, None, :] + self.reach @ d  # (C, N, 3)
        if self.plane is not None and bool(np.any(tips[..., 2] < self.plane)):
            return True
        if self.any_bounds:
            centre = self.centres[k] + s * (self.centres[k1] - self.centres[k])  # (B, 3)
            rel = tips[:, :, None, :] - centre  # (C, N, B, 3)
            return bool(np.any((rel * rel).sum(axis=-1) < self.reach_sq))
        return False


def _collide(prep, coll, pivot, k, s, d, u, with_normals=False):
    def at(arr):
        if arr.shape[1] == 0:
            return np.zeros((0, 3))
        return arr[k] + s * (arr[min(k + 1, arr.shape[0] - 1)] - arr[k])

    return project_out(
        pivot, d, u, prep["lengths_active"], prep["link_radius"],
        at(coll.sphere_centres_m), coll.sphere_radii_m,
        at(coll.capsule_a_m), at(coll.capsule_b_m), coll.capsule_radii_m,
        coll.ground_height_m, prep["n_links"] + 2, with_normals,
    )
