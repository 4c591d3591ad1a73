"""Chain solver set-up: padding chains into shared arrays, per-link constants, pre-roll, output.

Everything here runs once per simulation (vectorised over frames); the time loop and the step
kernel are in ``chain_solver``.
"""
from __future__ import annotations

import math

import numpy as np

from .chain_types import MAX_SUBSTEPS, ChainInput, ChainMotion, ChainSettings, ChainState
from .colliders import any_perpendicular, dot, unit_or
from .errors import InputError

ROD_LEVER = 1.5
"""Angular acceleration per (felt acceleration / length) of a uniform rod about its end: 3/2."""
OMEGA_STEP_MAX = 0.7
"""Automatic sub-stepping keeps h x (link frequency incl. gravity) below this, for accuracy:
the trapezoid's frequency error is (h w)^2 / 12 < 4 %."""

DAMP_STEP_MAX = 4.0
"""Automatic sub-stepping keeps h x damping coefficient below this: the trapezoidal rule
turns a very stiff damper into a sign-alternating decay (factor -(hc-2)/(hc+2)); 4 -> -1/3."""
SPRING_FLOOR = 0.5
"""Floor of 1 + cos(angle to target) in the spring: the moment k 2 tan(angle/2) (= k angle
within 3 % up to 35 degrees) stops growing past 120 degrees and falls to 0 at 180, so the
spring's stiffness never exceeds 4 k (covered by automatic sub-stepping)."""


_TURN_TINY = 1e-12
"""Below this sine a frame's turn of a link counts as none (or, near 180 degrees, as a flip)."""

FELT_NONE_MPS2 = 1e-6
"""Felt accelerations below this count as none in the pre-roll: finite differences of a ballistic
path leave ~1e-10 m/s^2 of rounding, which must not pick a hanging direction for a free link."""


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
    omega = 2.0 * math.pi * col("frequency_hz") * (1.0 - col("tip_looseness") * position)
    stiffness = omega * omega
    g_size = float(np.linalg.norm(gravity))
    gravity_stiffness = ROD_LEVER / lengths * col("gravity_scale") * g_size
    damp_rel = 2.0 * col("damping_ratio") * np.sqrt(stiffness + gravity_stiffness)
    drag = col("air_drag")
    damping = damp_rel + drag
    relative_share = np.where(damping > 0.0, damp_rel / np.where(damping > 0.0, damping, 1.0), 0.0)

    omega_max = float(np.sqrt(np.max((stiffness + gravity_stiffness)[mask])))
    damp_max = float(np.max(damping[mask]))
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
        "stiffness": stiffness,
        "damping": damping,
        "relative_share": relative_share,
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
    """Settled pre-roll (static equilibrium of frame 0), or the given initial states."""
    t0 = prep["targets"][0]
    felt0 = prep["felt_const"] - prep["body_response"] * prep["anchor_acc"][0][:, None, :]
    felt0 = felt0 - prep["drag"] * prep["anchor_vel"][0][:, None, :]  # (C, 1, 3)
    d = settle_directions(t0, felt0, prep["stiffness"], ROD_LEVER / prep["lengths_safe"], prep["bend"])
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


def settle_directions(target, felt, stiffness, lever, bend_rad, n_grid: int = 64):
    """Static equilibrium of each link: spring toward ``target`` against the felt acceleration.

    In the plane of the target and the felt direction, the deflection ``theta`` from the
    target solves ``spring_moment(k, theta) = lever |f| sin(phi - theta)`` (``phi``: angle from target to the
    felt direction). The first root reached from the target (``theta`` growing from 0) is the
    one the link settles into when it starts from its pose.

    Parameters
    ----------
    target : (C, N, 3); felt : (C, 1, 3); stiffness, lever : (C, N); bend_rad : (C, 1)

    Returns
    -------
    ndarray, shape (C, N, 3)
    """
    size = np.sqrt(dot(felt, felt))  # (C, 1)
    size = np.where(size > FELT_NONE_MPS2, size, 0.0)
    down = unit_or(felt, np.zeros(3))
    cos_phi = np.clip(dot(target, down), -1.0, 1.0)
    phi = np.arccos(cos_phi)
    pull = lever * size
    plane = unit_or(down - cos_phi[..., None] * target, any_perpendicular(target))
    frac = np.linspace(0.0, 1.0, n_grid + 1)
    grid = phi[..., None] * frac  # (C, N, G)
    resid = spring_moment(stiffness[..., None], grid) - pull[..., None] * np.sin(phi[..., None] - grid)
    first = np.argmax(resid >= 0.0, axis=-1)  # the last grid point always qualifies (k phi >= 0)
    hi = np.take_along_axis(grid, first[..., None], -1)[..., 0]
    lo = np.take_along_axis(grid, np.maximum(first - 1, 0)[..., None], -1)[..., 0]
    for _ in range(50):
        mid = 0.5 * (lo + hi)
        neg = spring_moment(stiffness, mid) - pull * np.sin(phi - mid) < 0.0
        lo = np.where(neg, mid, lo)
        hi = np.where(neg, hi, mid)
    theta = np.minimum(np.where(first == 0, 0.0, hi), bend_rad)
    return target * np.cos(theta)[..., None] + plane * np.sin(theta)[..., None]


def spring_moment(stiffness, angle_rad):
    """Spring's angular acceleration at ``angle_rad`` from the pose: ``k 2 tan(angle / 2)``
    (``k angle`` to within 3 % up to 35 degrees), levelling off past 120 degrees
    (``SPRING_FLOOR``) and falling to 0 at 180 degrees."""
    return stiffness * 2.0 * np.sin(angle_rad) / np.maximum(1.0 + np.cos(angle_rad), SPRING_FLOOR)


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
