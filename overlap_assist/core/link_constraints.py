"""Link constraints shared by the chain's time step and its settling: unit link directions.

Every link direction ``d_j`` stays a unit vector, so its rate is tangential (``d_j . a_j = 0``).
Two places need that: the solver's step (``core.chain_solver``) and the static equilibrium found
before the first frame (``core.chain_setup.settle``). Both solve their linear systems under the
constraint here, and both keep links inside their bend cones with ``limit_bend``.
"""

from __future__ import annotations

import numpy as np

from .colliders import any_perpendicular, dot

_TINY = 1e-12


def constrained_solve(s_inv: np.ndarray, rhs: np.ndarray, d: np.ndarray) -> np.ndarray:
    """Solve ``S a = rhs + lambda d`` with ``d_j . a_j = 0`` for every link, all chains at once.

    ``S`` acts on the link index (the same on x, y, z); ``S^-1`` (C, N, N) is given. Schur
    complement: ``a = S^-1 rhs + S^-1 (lambda d)`` with ``G lambda = -(d . S^-1 rhs)``,
    ``G_jk = (S^-1)_jk d_j . d_k`` (symmetric positive definite).

    Parameters
    ----------
    s_inv : (C, N, N); rhs, d : (C, N, 3)

    Returns
    -------
    ndarray (C, N, 3): tangential accelerations.
    """
    r = s_inv @ rhs
    gram = s_inv * (d @ np.swapaxes(d, -1, -2))
    lam = np.linalg.solve(gram, -dot(d, r)[..., None])  # (C, N, 1)
    return r + s_inv @ (lam * d)


def _impulse(inv_inertia, d, rows, speed):
    """Rates changed by the impulses that stop the motion ``speed`` (C, P) < 0 along the
    constraint rows ``rows`` (C, P, N, 3) (``speed_p = sum_k rows_pk . u_k``), distributed
    through the chain's mass matrix (the least kinetic energy change that stops them; it never
    adds kinetic energy). Inactive rows (speed >= 0) have no impulse."""
    active = speed < 0.0
    # Constrained response of the rates to each row's unit impulse, (C, P, N, 3).
    resp = constrained_solve(inv_inertia[:, None], rows, np.broadcast_to(d[:, None], rows.shape))
    w = np.einsum("cpni,cqni->cpq", rows, resp)
    eye = np.eye(w.shape[-1])
    act2 = active[:, :, None] & active[:, None, :]
    w = np.where(act2, w, 0.0) + np.where(active[:, :, None], 0.0, eye)
    # Rows of a chain may be dependent (two contacts on parallel links): a tiny ridge keeps W regular.
    w = w + 1e-12 * np.einsum("cpp->c", np.abs(w))[:, None, None] * eye
    mu = np.linalg.solve(w, np.where(active, -speed, 0.0)[..., None])[..., 0]  # (C, P)
    return np.einsum("cp,cpni->cni", mu, resp)


def limit_bend(d, u, target, cos_lim, sin_lim, inv_inertia=None):
    """Keep each direction within its cone around the animated direction; stop outward motion.

    Arrays ``(C, N, 3)``; ``cos_lim``, ``sin_lim`` (C, 1): cosine and sine of each chain's cone
    half-angle. With ``inv_inertia`` (C, N, N) the outward motion is stopped by impulses through
    the mass matrix (the chain shares the stop and gains no kinetic energy); without it, each
    link's outward rate is removed.
    """
    c = dot(target, d)
    over = c < cos_lim
    if not over.any():
        return d, u
    side = d - c[..., None] * target
    size = np.sqrt(dot(side, side))
    fallback = any_perpendicular(target)
    side = np.where((size > _TINY)[..., None], side / np.maximum(size, _TINY)[..., None], fallback)
    d = np.where(over[..., None], target * cos_lim[..., None] + side * sin_lim[..., None], d)
    u = u - dot(u, d)[..., None] * d
    away = dot(target, d)[..., None] * d - target
    away = away / np.maximum(np.sqrt(dot(away, away)), _TINY)[..., None]
    if inv_inertia is None:
        outward = np.maximum(dot(u, away), 0.0) * over
        return d, u - outward[..., None] * away
    n = d.shape[1]
    rows = -np.eye(n)[None, :, :, None] * (away * over[..., None])[:, None, :, :]  # row j: -away_j on link j
    speed = np.einsum("cpni,cni->cp", rows, u)
    if not (speed < 0.0).any():
        return d, u
    return d, u + _impulse(inv_inertia, d, rows, speed)
