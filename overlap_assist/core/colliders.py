"""Keeping link ends out of spheres, capsules and the ground (position projection).

A link end that ends inside a collider is moved to the nearest point of the collider's
surface that the link can reach without changing its length: the circle where the sphere of
radius ``L`` around the link's head meets the (inflated) collider surface. Its velocity into
the surface is removed. Correcting a link moves every link after it, so the projection is
repeated (each pass vectorised over all chains and links) until no end is inside or a pass
limit is reached; pass ``i`` settles link ``i`` for good when the chain's pivot is outside.
"""
from __future__ import annotations

import numpy as np

_TINY = 1e-12
"""Below this a length counts as zero (metres, or unit vectors): direction undefined."""

SURFACE_SLACK_M = 1e-9
"""Depth below which a link end counts as on the surface, not inside (absorbs rounding)."""


def dot(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Row-wise dot product over the last axis (size 3)."""
    return np.einsum("...i,...i->...", a, b)


def unit_or(v: np.ndarray, fallback: np.ndarray) -> np.ndarray:
    """``v / |v|`` over the last axis; ``fallback`` (broadcast) where ``|v|`` is ~0."""
    n = np.sqrt(dot(v, v))
    ok = n > _TINY
    return np.where(ok[..., None], v / np.where(ok, n, 1.0)[..., None], fallback)


def any_perpendicular(v: np.ndarray) -> np.ndarray:
    """A deterministic unit vector perpendicular to each unit vector ``v`` (..., 3)."""
    helper = np.where((np.abs(v[..., 0]) < 0.9)[..., None], np.array([1.0, 0.0, 0.0]), np.array([0.0, 1.0, 0.0]))
    p = helper - dot(helper, v)[..., None] * v
    return p / np.sqrt(dot(p, p))[..., None]


def heads_and_tips(pivot_m: np.ndarray, dirs: np.ndarray, lengths_m: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Head and tail of every link.

    Parameters
    ----------
    pivot_m : ndarray, shape (..., 3)
    dirs : ndarray, shape (..., n_links, 3)
    lengths_m : ndarray, shape (..., n_links)   (0 for padding links)

    Returns
    -------
    heads, tips : ndarray, shape (..., n_links, 3)
    """
    tips = pivot_m[..., None, :] + np.cumsum(lengths_m[..., None] * dirs, axis=-2)
    heads = np.concatenate([pivot_m[..., None, :], tips[..., :-1, :]], axis=-2)
    return heads, tips


def _reach_sphere(heads, tips, lengths, centres, radii):
    """New link ends on a sphere surface reachable at distance ``lengths`` from ``heads``."""
    to_head = heads - centres
    dist = np.sqrt(dot(to_head, to_head))
    axis = unit_or(to_head, np.array([0.0, 0.0, 1.0]))
    safe = np.maximum(dist, _TINY)
    along = (safe**2 + radii**2 - lengths**2) / (2.0 * safe)
    ring2 = radii**2 - along**2
    rel = tips - centres
    side = rel - dot(rel, axis)[..., None] * axis
    side = unit_or(side, any_perpendicular(axis))
    ring = np.sqrt(np.maximum(ring2, 0.0))
    on_ring = centres + along[..., None] * axis + ring[..., None] * side
    # No ring: the head is so deep that the link cannot reach out; point straight away instead.
    away = heads + lengths[..., None] * axis
    return np.where((ring2 >= 0.0)[..., None], on_ring, away)


def _closest_on_segments(points, a, b):
    """Closest point on segment a-b to each point; a, b broadcast against points."""
    ab = b - a
    denom = np.maximum(dot(ab, ab), _TINY)
    s = np.clip(dot(points - a, ab) / denom, 0.0, 1.0)
    return a + s[..., None] * ab


def project_out(
    pivot_m: np.ndarray,
    dirs: np.ndarray,
    rates: np.ndarray,
    lengths_m: np.ndarray,
    link_radius_m: np.ndarray,
    sphere_centres_m: np.ndarray,
    sphere_radii_m: np.ndarray,
    capsule_a_m: np.ndarray,
    capsule_b_m: np.ndarray,
    capsule_radii_m: np.ndarray,
    ground_height_m: float | None,
    max_passes: int,
    with_normals: bool = False,
):
    """Move link ends out of colliders; remove their velocity into the surface.

    Parameters
    ----------
    pivot_m : ndarray, shape (n_chains, 3)
    dirs, rates : ndarray, shape (n_chains, n_links, 3)
        Link directions (unit) and their time derivatives (1/s).
    lengths_m : ndarray, shape (n_chains, n_links)
        Link lengths; 0 for padding links (they never collide).
    link_radius_m : ndarray, shape (n_chains, 1)
        Thickness added to every collider for this chain.
    sphere_centres_m : (n_spheres, 3); sphere_radii_m : (n_spheres,)
    capsule_a_m, capsule_b_m : (n_capsules, 3); capsule_radii_m : (n_capsules,)
    ground_height_m : float or None
    max_passes : int

    Returns
    -------
    dirs, rates : ndarray, shape (n_chains, n_links, 3)
        New arrays (inputs are not modified).
    touched : ndarray of bool, shape (n_chains, n_links)
        Links whose end was pushed out.
    normals : ndarray, shape (n_chains, n_links, 3)
        Only with ``with_normals``: the outward surface normal at each touched link's end (the
        last contact), zero elsewhere.
    """
    active = lengths_m > 0.0
    touched = np.zeros(lengths_m.shape, dtype=bool)
    safe_len = np.where(active, lengths_m, 1.0)
    normals = np.zeros(dirs.shape)
    for _ in range(max_passes):
        heads, tips = heads_and_tips(pivot_m, dirs, lengths_m)
        depth = np.full(lengths_m.shape, SURFACE_SLACK_M)
        centre = np.zeros(tips.shape)
        radius = np.ones(lengths_m.shape)
        if sphere_radii_m.size:
            r = sphere_radii_m + link_radius_m[..., None]  # (C, 1, S)
            rel = tips[..., None, :] - sphere_centres_m  # (C, N, S, 3)
            d_s = r - np.sqrt(dot(rel, rel))
            best = np.argmax(d_s, axis=-1)
            d_best = np.take_along_axis(d_s, best[..., None], axis=-1)[..., 0]
            better = d_best > depth
            depth = np.where(better, d_best, depth)
            centre = np.where(better[..., None], sphere_centres_m[best], centre)
            radius = np.where(better, np.take_along_axis(np.broadcast_to(r, d_s.shape), best[..., None], -1)[..., 0], radius)
        if capsule_radii_m.size:
            r = capsule_radii_m + link_radius_m[..., None]
            near = _closest_on_segments(tips[..., None, :], capsule_a_m, capsule_b_m)  # (C, N, K, 3)
            rel = tips[..., None, :] - near
            d_c = r - np.sqrt(dot(rel, rel))
            best = np.argmax(d_c, axis=-1)
            d_best = np.take_along_axis(d_c, best[..., None], axis=-1)[..., 0]
            better = d_best > depth
            depth = np.where(better, d_best, depth)
            centre = np.where(better[..., None], np.take_along_axis(near, best[..., None, None], axis=-2)[..., 0, :], centre)
            radius = np.where(better, np.take_along_axis(np.broadcast_to(r, d_c.shape), best[..., None], -1)[..., 0], radius)
        hit = (depth > SURFACE_SLACK_M) & active
        ground_hit = np.zeros_like(hit)
        if ground_height_m is not None:
            plane = ground_height_m + link_radius_m  # (C, 1)
            ground_depth = plane - tips[..., 2]
            ground_hit = (ground_depth > SURFACE_SLACK_M) & (ground_depth > depth) & active
            hit = hit & ~ground_hit
        if not (hit.any() or ground_hit.any()):
            break
        # A link below one that is moved in this pass waits for the next pass: its head moves
        # with its parent's end (treated now with its old head it could flip upright).
        above = np.cumsum(hit | ground_hit, axis=-1) - (hit | ground_hit) > 0
        hit, ground_hit = hit & ~above, ground_hit & ~above
        new_tips = tips
        normal = np.zeros(tips.shape)
        if hit.any():
            on_surface = _reach_sphere(heads, tips, safe_len, centre, radius)
            new_tips = np.where(hit[..., None], on_surface, new_tips)
            normal = np.where(hit[..., None], unit_or(on_surface - centre, dirs), normal)
        if ground_hit.any():
            up = np.array([0.0, 0.0, 1.0])
            drop = plane - heads[..., 2]  # <= 0 when the head is above the plane
            reach = np.sqrt(np.maximum(safe_len**2 - drop**2, 0.0))
            flat = (tips - heads) * np.array([1.0, 1.0, 0.0])
            flat = unit_or(flat, np.array([1.0, 0.0, 0.0]))
            on_ground = heads + reach[..., None] * flat + drop[..., None] * up
            # A head below the plane cannot bring its end up to it: point straight up instead (a head
            # on the plane, within the slack, lies flat: rounding must not flip it upright).
            on_ground = np.where((drop > SURFACE_SLACK_M)[..., None], heads + safe_len[..., None] * up, on_ground)
            new_tips = np.where(ground_hit[..., None], on_ground, new_tips)
            normal = np.where(ground_hit[..., None], up, normal)
        moved = hit | ground_hit
        new_dirs = unit_or(new_tips - heads, dirs)
        dirs = np.where(moved[..., None], new_dirs, dirs)
        rates = rates - dot(rates, dirs)[..., None] * dirs
        n_t = normal - dot(normal, dirs)[..., None] * dirs
        n_t = unit_or(n_t, np.zeros(3))
        into = np.minimum(dot(rates, n_t), 0.0) * moved
        rates = rates - into[..., None] * n_t
        touched |= moved
        normals = np.where(moved[..., None], normal, normals)
    if with_normals:
        return dirs, rates, touched, normals
    return dirs, rates, touched
