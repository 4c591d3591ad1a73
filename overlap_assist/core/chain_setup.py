"""Chain solver set-up: padding chains into shared arrays, per-link constants, pre-roll, output.

Everything here runs once per simulation (vectorised over frames); the time loop and the step
kernel are in ``chain_solver``.
"""
from __future__ import annotations

import functools
import math

import numpy as np

from .chain_types import MAX_SUBSTEPS, ChainInput, ChainMotion, ChainSettings, ChainState
from .colliders import any_perpendicular, dot, unit_or
from .errors import InputError

OMEGA_STEP_MAX = 0.7
"""Automatic sub-stepping keeps h x (lowest mode frequency of the chain hanging at its nominal
load) below this, for accuracy of the motion one sees: the trapezoid's frequency error is
(h w)^2 / 12 < 4 %. The higher modes of a chain of short links can be far faster; the step is
stable for them (implicit) and the Rayleigh damping calms them more than the lowest mode."""

DAMP_STEP_MAX = 4.0
"""Automatic sub-stepping keeps h x (the lowest mode's damping coefficient 2 zeta w_1, plus air
drag) below this: the trapezoidal rule turns a very stiff damper into a sign-alternating decay
(factor -(hc-2)/(hc+2)); 4 -> -1/3."""

HIGH_MODE_DAMP_STEP_MAX = 8.0
"""Cap of h x (the highest mode's damping coefficient): the trapezoid then decays that mode by
a factor 0.6 per sub-step (-(hc - 2) / (hc + 2)) instead of freezing it near -1."""

_TURN_TINY = 1e-12
"""Below this sine a frame's turn of a link counts as none (or, near 180 degrees, as a flip)."""

FELT_NONE_MPS2 = 1e-6
"""Felt accelerations below this count as none in the pre-roll: finite differences of a ballistic
path leave ~1e-10 m/s^2 of rounding, which must not pick a hanging direction for a free link."""

LOOSE_SHAPE_FLOOR = 0.05
"""Least joint stiffness (per unit of what the joint carries) relative to the root's, at tip
looseness 1: a joint without spring would give the springs a zero mode, and the lowest mode
could not be set to the requested frequency."""

CALIBRATE_ZETA_MIN = 0.01
"""Below this damping ratio a chain is not calibrated to the second-order step response (it
would take ~1 / zeta periods to settle; the lowest mode keeps the ratio as given)."""

SETTLE_ITERATIONS = 200
"""Most Newton iterations of the pre-roll's static equilibrium (converges in ~5-30)."""

SETTLE_STEP_MAX = 0.5
"""Largest turn (rad, tangent length) of a link per pre-roll iteration: keeps Newton on the
equilibrium reached from the animated pose."""


def chain_mechanics(lengths_m, settings: ChainSettings, g_size_mps2: float) -> dict:
    """Linearised mechanics of one chain (see ``chain_solver``'s docstring for the model).

    Masses are relative (the chain's links sum to 1): only ratios matter, since the springs
    are derived from the requested frequency.

    Returns
    -------
    dict with
        ``mass`` (n,) link masses; ``tip_mass``; ``inertia`` (n, n) the mass matrix M of the
        link directions (``T = 1/2 sum M_jk d_j' . d_k'`` for a still anchor); ``load`` (n,)
        ``b_j``: a uniform felt acceleration f gives the generalised force ``b_j f`` (and the
        anchor's velocity couples to ``d_j'`` through ``b_j``); ``joint_k`` (n,) joint
        stiffnesses; ``spring`` (n, n) the tridiagonal stiffness K_s of the joint springs;
        ``gravity_stiffness`` (n,) ``b_j gravity_scale |g|`` (hanging straight down);
        ``damping`` (n, n) the Rayleigh damping C of the motion relative to the animation;
        ``omega_spring``, ``omega_hanging`` lowest mode frequencies (rad/s) of (K_s, M) and
        (K_s + K_g, M); ``omega_max``, ``damp_max``: largest mode frequency and modal damping
        coefficient (for automatic sub-steps).
    """
    lengths = np.asarray(lengths_m, dtype=np.float64)
    n = lengths.size
    pos = np.arange(n) / (n - 1) if n > 1 else np.zeros(1)
    thick = 1.0 - float(settings.thickness_taper) * pos
    mass = lengths * thick * thick
    mass = mass / mass.sum()
    tip_mass = float(settings.tip_mass_ratio)
    below = np.concatenate([np.cumsum(mass[::-1])[::-1][1:], [0.0]]) + tip_mass  # S_{j+1}
    share = 0.5 * mass + below  # first moment of link j and below about link j's head, per L_j
    # M_jk (j < k) = L_j L_k (m_k / 2 + S_{k+1}); M_jj = L_j^2 (m_j / 3 + S_{j+1}).
    upper = np.triu(np.ones((n, n)), 1) * (lengths[:, None] * lengths[None, :] * share[None, :])
    inertia = upper + upper.T + np.diag(lengths**2 * (mass / 3.0 + below))
    load = lengths * share
    # What joint j carries: the inertia of links j..n turning rigidly about it (straight chain).
    carried = np.cumsum(np.cumsum(inertia[::-1, ::-1], axis=0), axis=1)[::-1, ::-1].diagonal().copy()
    shape = np.maximum((1.0 - float(settings.tip_looseness) * pos) ** 2, LOOSE_SHAPE_FLOOR)
    unit_k = shape * carried
    spring_unit = _joint_matrix(unit_k)
    chol = np.linalg.cholesky(inertia)
    inv_chol = np.linalg.inv(chol)

    def modes(stiff):
        return np.linalg.eigvalsh(inv_chol @ stiff @ inv_chol.T)

    omega_target = 2.0 * math.pi * float(settings.frequency_hz)
    zeta = float(settings.damping_ratio)
    scale = omega_target**2 / max(float(modes(spring_unit)[0]), 1e-300) if omega_target > 0.0 else 0.0
    if n > 1 and omega_target > 0.0 and zeta >= CALIBRATE_ZETA_MIN:
        # The anchor-to-tip direction of a chain is its lowest mode plus a little of the higher
        # ones: calibrate so its step response has the bounce and settling time of the standard
        # second-order system with (frequency, damping ratio) (response.py).
        zeta, time_factor = _calibrate_cached(inertia.tobytes(), spring_unit.tobytes(), load.tobytes(),
                                              lengths.tobytes(), n, zeta)
        scale *= time_factor**2
    joint_k = scale * unit_k
    spring = scale * spring_unit
    gravity_stiffness = load * float(settings.gravity_scale) * g_size_mps2
    hanging = spring + np.diag(gravity_stiffness)
    lam = modes(hanging)
    omega_hanging = math.sqrt(max(float(lam[0]), 0.0))
    if omega_hanging > 0.0 and zeta > 0.0:
        # Rayleigh damping C = alpha M + beta K, split evenly at the lowest mode: that mode gets
        # exactly zeta, mode r gets zeta (w1 / wr + wr / w1) / 2 >= zeta (higher modes calmer).
        damping = zeta * omega_hanging * inertia + (zeta / omega_hanging) * hanging
        damp_max = float(2.0 * zeta * omega_hanging)  # the lowest mode's (see OMEGA_STEP_MAX)
    else:
        damping = np.zeros((n, n))
        damp_max = 0.0
    return {
        "mass": mass, "tip_mass": tip_mass, "inertia": inertia, "load": load, "joint_k": joint_k,
        "spring": spring, "gravity_stiffness": gravity_stiffness, "damping": damping,
        "omega_spring": omega_target, "omega_hanging": omega_hanging,
        "omega_max": omega_hanging, "omega_top": math.sqrt(max(float(lam[-1]), 0.0)),
        "hanging": hanging, "zeta_mode": zeta,
        "damp_max": damp_max + float(settings.air_drag),
    }


def chain_step_response(inertia, spring, load, lengths, zeta, tau, modes=None):
    """Anchor-to-tip direction's response to a step of the anchor's acceleration (gravity off,
    small angles), normalised to 1 at rest: modal superposition with Rayleigh damping split
    evenly at the lowest mode (as in chain_mechanics). ``tau`` in units of 1 / omega_1."""
    lam, vec = _modes_of(inertia, spring) if modes is None else modes
    w = np.sqrt(np.maximum(lam, 1e-300))
    w1 = w[0]
    zetas = 0.5 * zeta * (w1 / w + w / w1)
    tip = lengths / lengths.sum()
    weights = (tip @ vec) * (vec.T @ load) / lam
    weights = weights / weights.sum()
    out = np.zeros_like(tau)
    for r in range(lam.size):
        out += weights[r] * (1.0 - _step_error(tau * (w[r] / w1), float(zetas[r])))
    return out


def _modes_of(inertia, stiff):
    chol = np.linalg.cholesky(inertia)
    inv_chol = np.linalg.inv(chol)
    lam, y = np.linalg.eigh(inv_chol @ stiff @ inv_chol.T)
    return lam, inv_chol.T @ y  # M-orthonormal mode shapes


def _step_error(tau, z):
    from .response import step_error
    return step_error(tau, z)


@functools.lru_cache(maxsize=256)
def _calibrate_cached(inertia, spring_unit, load, lengths, n, zeta_wanted):
    """_calibrate on arrays given as bytes (hashable): a preview re-solve after an edit recomputes
    only the edited chain's calibration."""
    def arr(b, shape):
        return np.frombuffer(b, dtype=np.float64).reshape(shape)
    return _calibrate(arr(inertia, (n, n)), arr(spring_unit, (n, n)), arr(load, (n,)), arr(lengths, (n,)), zeta_wanted)


def _calibrate(inertia, spring_unit, load, lengths, zeta_wanted, iterations: int = 30):
    """(damping ratio of the lowest mode, time factor) giving the chain's anchor-to-tip step
    response the overshoot and 2 % settling time of the standard second-order system."""
    from .response import SETTLE_BAND, bounce_of, settle_tau

    want_bounce = bounce_of(min(zeta_wanted, 1.0)) if zeta_wanted < 1.0 else 0.0
    tau = np.linspace(0.0, (math.log(4.0 / SETTLE_BAND) + 4.0) / min(zeta_wanted, 1.0) * 2.0, 4000)

    modes = _modes_of(inertia, spring_unit)
    # The overshoot is the first peak, near tau = pi / sqrt(1 - zeta^2): a short fine grid.
    tau_peak = np.linspace(0.0, 2.5 * math.pi / math.sqrt(max(1.0 - min(zeta_wanted, 0.99) ** 2, 1e-4)), 600)

    def bounce(z):
        y = chain_step_response(inertia, spring_unit, load, lengths, z, tau_peak, modes)
        return float(y.max()) - 1.0

    z = zeta_wanted
    if want_bounce > 1e-4:
        lo, hi = 0.2 * zeta_wanted, min(1.5 * zeta_wanted + 0.05, 3.0)
        if (bounce(lo) - want_bounce) * (bounce(hi) - want_bounce) < 0.0:
            for _ in range(iterations):
                mid = 0.5 * (lo + hi)
                if bounce(mid) > want_bounce:
                    lo = mid
                else:
                    hi = mid
            z = 0.5 * (lo + hi)
    y = chain_step_response(inertia, spring_unit, load, lengths, z, tau, modes)
    outside = np.flatnonzero(np.abs(y - 1.0) >= SETTLE_BAND)
    got = float(tau[outside[-1] + 1]) if outside.size and outside[-1] + 1 < tau.size else float(tau[-1])
    return z, got / settle_tau(zeta_wanted)


def _joint_matrix(k: np.ndarray) -> np.ndarray:
    """Stiffness of joint springs k_j between link j and its parent (the anchor for j = 0) on the
    deviations ``d - t``: ``V = sum_j k_j / 2 |dev_j - dev_(j-1)|^2``, tridiagonal."""
    n = k.size
    k_next = np.concatenate([k[1:], [0.0]])
    out = np.diag(k + k_next)
    if n > 1:
        out -= np.diag(k[1:], 1) + np.diag(k[1:], -1)
    return out


def prepare(chains, settings, gravity_mps2, dt_s, colliders, initial_states) -> dict:
    """Check the inputs and pack every chain into padded (C, N) arrays plus per-link constants."""
    chains = list(chains)
    settings = list(settings)
    if not chains:
        raise InputError("No chains to simulate")
    if len(settings) != len(chains):
        raise InputError(f"Got {len(chains)} chains but {len(settings)} settings")
    for c in chains:
        if not isinstance(c, ChainInput):
            raise InputError("chains must be ChainInput objects")
    for s in settings:
        if not isinstance(s, ChainSettings):
            raise InputError("settings must be ChainSettings objects")
    if not (isinstance(dt_s, (int, float)) and math.isfinite(dt_s) and dt_s > 0.0):
        raise InputError(f"dt_s must be a positive number of seconds, got {dt_s!r}")
    gravity = np.array(gravity_mps2, dtype=np.float64)
    if gravity.shape != (3,) or not np.all(np.isfinite(gravity)):
        raise InputError("gravity must be a finite 3-vector (check Scene > Gravity)")
    n_frames = chains[0].n_frames
    if any(c.n_frames != n_frames for c in chains):
        raise InputError("All chains must have the same number of frames")
    if colliders is not None:
        colliders.check_frames(n_frames)
        if colliders.n_spheres == 0 and colliders.n_capsules == 0 and colliders.ground_height_m is None:
            colliders = None
    if initial_states is not None and len(initial_states) != len(chains):
        raise InputError("initial_states needs one entry (or None) per chain")

    n_chains = len(chains)
    n_links = max(c.n_links for c in chains)
    mask = np.zeros((n_chains, n_links), dtype=bool)
    lengths = np.ones((n_chains, n_links))
    targets = np.empty((n_frames, n_chains, n_links, 3))
    pivots = np.empty((n_frames, n_chains, 3))
    position = np.zeros((n_chains, n_links))  # 0 at the root link, 1 at the tip link
    for i, c in enumerate(chains):
        m = c.n_links
        mask[i, :m] = True
        lengths[i, :m] = c.lengths_m
        targets[:, i, :m] = c.target_dirs
        targets[:, i, m:] = c.target_dirs[:, -1:]  # padding links copy the last one (harmless)
        pivots[:, i] = c.pivot_pos_m
        if m > 1:
            position[i, :m] = np.arange(m) / (m - 1)
    col = lambda name: np.array([float(getattr(s, name)) for s in settings])[:, None]  # noqa: E731
    g_size = float(np.linalg.norm(gravity))
    inertia = np.tile(np.eye(n_links), (n_chains, 1, 1))  # padding links: decoupled, unit mass
    spring = np.zeros((n_chains, n_links, n_links))
    damping = np.zeros((n_chains, n_links, n_links))
    load = np.zeros((n_chains, n_links))
    mech = []
    omega_max = damp_max = 0.0
    for i, (c, st) in enumerate(zip(chains, settings)):
        m = c.n_links
        mc = chain_mechanics(c.lengths_m, st, g_size)
        mech.append(mc)
        inertia[i, :m, :m] = mc["inertia"]
        spring[i, :m, :m] = mc["spring"]
        damping[i, :m, :m] = mc["damping"] + float(st.air_drag) * mc["inertia"]
        load[i, :m] = mc["load"]
        omega_max = max(omega_max, mc["omega_max"])
        damp_max = max(damp_max, mc["damp_max"])
    drag = col("air_drag")
    wanted = max(
        max(int(s.substeps) for s in settings),
        math.ceil(dt_s * omega_max / OMEGA_STEP_MAX),
        math.ceil(dt_s * damp_max / DAMP_STEP_MAX),
    )
    n_sub = int(min(max(wanted, 1), MAX_SUBSTEPS))

    # Animated rotation of each link between frames: angle, unit tangent toward the next
    # direction, angular velocity (constant over the frame; slerp within it). Computed with
    # components first, (T, 3, M), M = C*N: the layout of the solver's loop.
    n_links_all = n_chains * n_links
    rows = np.ascontiguousarray(np.moveaxis(targets, -1, 1)).reshape(n_frames, 3, n_links_all)
    t0, t1 = rows[:-1], rows[1:]
    cos_a = np.clip((t0 * t1).sum(axis=1), -1.0, 1.0)  # (T-1, M)
    side = t1 - cos_a[:, None] * t0
    sin_a = np.sqrt((side * side).sum(axis=1))
    ang = np.arctan2(sin_a, cos_a)
    turns = (sin_a > _TURN_TINY) & (ang > 1e-15)
    toward = side * (np.where(turns, ang, 0.0) / np.where(turns, sin_a, 1.0))[:, None]  # ang x unit
    spin = _cross_rows(t0, toward) / dt_s
    toward = toward / np.where(turns, ang, 1.0)[:, None]
    # Where a link flips by ~180 degrees in one frame the turning plane is undefined: pick one.
    flips = (cos_a < -0.999999) & ~turns
    if flips.any():
        other = np.moveaxis(any_perpendicular(np.moveaxis(t0, 1, -1)), -1, 1)
        toward = np.where(flips[:, None], other, toward)
        spin = np.where(flips[:, None], _cross_rows(t0, toward) * (ang / dt_s)[:, None], spin)

    anchor_acc, anchor_vel = pivot_derivatives(pivots, dt_s)
    bend = col("bend_limit_rad")
    return {
        "n_frames": n_frames,
        "n_chains": n_chains,
        "n_links": n_links,
        "n_sub": n_sub,
        "dt_s": dt_s,
        "mask": mask,
        "chain_links": [c.n_links for c in chains],
        "lengths_safe": lengths,
        "lengths_active": np.where(mask, lengths, 0.0),
        "targets": targets,
        "target_rows": rows,
        "ang": ang,
        "toward": toward,
        "spin": spin,
        "pivots": pivots,
        "anchor_acc": anchor_acc,
        "anchor_vel": anchor_vel,
        "mechanics": mech,
        "inertia": inertia,
        "spring": spring,
        "damping": damping,
        "load": load,
        "drag": drag[:, :, None],
        "body_response": col("body_response")[:, :, None],
        "felt_const": (col("gravity_scale") * gravity)[:, None, :],
        "bend_limited": bool(np.any(bend < math.pi)),
        "bend": bend,
        "cos_lim": np.cos(bend),
        "sin_lim": np.sin(bend),
        "link_radius": col("collision_radius_m"),
        "colliders": colliders,
        "initial_states": initial_states,
    }


def _cross_rows(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Cross product of arrays laid out (T, 3, M), components on axis 1."""
    a0, a1, a2 = a[:, 0], a[:, 1], a[:, 2]
    b0, b1, b2 = b[:, 0], b[:, 1], b[:, 2]
    return np.stack([a1 * b2 - a2 * b1, a2 * b0 - a0 * b2, a0 * b1 - a1 * b0], axis=1)


def pivot_derivatives(pivots: np.ndarray, dt_s: float) -> tuple[np.ndarray, np.ndarray]:
    """Acceleration and velocity of each pivot per frame by finite differences.

    Central differences inside, second-order one-sided at the ends (both exact for a
    parabola, so a ballistic pivot feels exactly g). Shapes (n_frames, C, 3).
    """
    n = pivots.shape[0]
    acc = np.zeros_like(pivots)
    vel = np.zeros_like(pivots)
    if n >= 3:
        acc[1:-1] = (pivots[2:] - 2.0 * pivots[1:-1] + pivots[:-2]) / dt_s**2
        acc[0] = acc[1]
        acc[-1] = acc[-2]
        vel[1:-1] = (pivots[2:] - pivots[:-2]) / (2.0 * dt_s)
        vel[0] = (-3.0 * pivots[0] + 4.0 * pivots[1] - pivots[2]) / (2.0 * dt_s)
        vel[-1] = (3.0 * pivots[-1] - 4.0 * pivots[-2] + pivots[-3]) / (2.0 * dt_s)
    else:
        vel[:] = (pivots[1] - pivots[0]) / dt_s
    return acc, vel


def initial_state(prep: dict) -> tuple[np.ndarray, np.ndarray]:
    """Settled pre-roll (static equilibrium of frame 0, moving with the animation), or the given states.

    Returns d, u of shape (C, N, 3).
    """
    t0 = prep["targets"][0]
    felt0 = prep["felt_const"][:, 0] - prep["body_response"][:, 0] * prep["anchor_acc"][0]
    felt0 = felt0 - prep["drag"][:, 0] * prep["anchor_vel"][0]  # (C, 3)
    d = settle_directions(t0, felt0, prep["spring"], prep["load"], prep["inertia"], prep["cos_lim"],
                          prep["sin_lim"], prep["bend_limited"])
    n_chains, n_links = prep["n_chains"], prep["n_links"]
    u = np.cross(prep["spin"][0].T.reshape(n_chains, n_links, 3), d)
    states = prep["initial_states"]
    if states is not None:
        for i, st in enumerate(states):
            if st is None:
                continue
            m = prep["chain_links"][i]
            if st.dirs.shape != (m, 3):
                raise InputError(f"initial state of chain {i} has {st.dirs.shape[0]} links, the chain {m}")
            d[i, :m] = st.dirs
            u[i, :m] = st.dir_rates_per_s
    return d, u


def settle_directions(target, felt, spring, load, inertia, cos_lim, sin_lim, limited):
    """Static equilibrium of each chain: joint springs toward ``target`` against the felt load.

    Minimises ``V(d) = 1/2 (d - t)^T K_s (d - t) - sum_j b_j f . d_j`` over unit directions by
    Newton's method on the spheres (the tangent Hessian ``K_s + diag(b_j f . d_j - d_j . grad_j)``,
    clamped to stay positive), starting from the animated pose with turns of at most
    ``SETTLE_STEP_MAX`` per iteration, so the chain settles into the equilibrium it reaches from
    its pose. Bend cones are applied after every iteration.

    Parameters
    ----------
    target : (C, N, 3); felt : (C, 3); spring, inertia : (C, N, N); load : (C, N);
    cos_lim, sin_lim : (C, 1); limited : bool

    Returns
    -------
    ndarray, shape (C, N, 3)
    """
    from .link_constraints import constrained_solve, limit_bend  # the solver's own constrained solve

    size = np.sqrt(dot(felt, felt))
    felt = np.where((size > FELT_NONE_MPS2)[:, None], felt, 0.0)
    pull = load[..., None] * felt[:, None, :]  # b_j f, (C, N, 3)
    d = target.copy()
    scale = np.einsum("cii->c", spring)[:, None] + np.abs(load) * np.sqrt(dot(felt, felt))[:, None] + 1e-300
    reg = (1e-9 * np.max(scale, axis=1)[:, None, None] + 1e-12) * inertia
    for _ in range(SETTLE_ITERATIONS):
        grad = spring @ (d - target) - pull
        curv = np.maximum(-dot(d, grad), 0.0)  # (C, N)
        hess = spring + reg + curv[..., None] * np.eye(d.shape[1])
        a = constrained_solve(np.linalg.inv(hess), -grad, d)
        step = np.sqrt(dot(a, a))
        big = np.max(step, axis=1, keepdims=True)
        a = a * np.minimum(1.0, SETTLE_STEP_MAX / np.maximum(big, 1e-300))[..., None]
        d = d + a
        d = d / np.sqrt(dot(d, d))[..., None]
        if limited:
            d, _ = limit_bend(d, np.zeros_like(d), target, cos_lim, sin_lim)
        if float(np.max(step)) < 1e-14:
            break
    return d


def package(prep: dict, out: np.ndarray, rates: np.ndarray, contacts: np.ndarray) -> ChainMotion:
    """Split the padded (T, C, N, 3) result into per-chain arrays (tips and swings for all at once)."""
    n_frames = prep["n_frames"]
    tips_all = prep["lengths_active"][..., None] * out
    for i in range(1, tips_all.shape[2]):  # running sum down each chain (np.cumsum is slower here)
        np.add(tips_all[:, :, i - 1], tips_all[:, :, i], out=tips_all[:, :, i])
    tips_all += prep["pivots"][:, :, None, :]
    cos_sw = np.clip(dot(out, prep["targets"]), -1.0, 1.0)
    swing_all = np.arccos(np.where(prep["mask"], cos_sw, 1.0)).max(axis=0) if n_frames else None
    dirs, tips, counts, swings, finals = [], [], [], [], []
    for i, m in enumerate(prep["chain_links"]):
        d = out[:, i, :m].copy()
        tips.append(tips_all[:, i, :m].copy())
        swings.append(float(swing_all[i].max()) if n_frames else 0.0)
        dirs.append(d)
        counts.append(contacts[i, :m].copy())
        finals.append(ChainState(d[-1], rates[i, :m]))
    return ChainMotion(tuple(dirs), tuple(tips), tuple(counts), tuple(swings), tuple(finals), prep["n_sub"])
