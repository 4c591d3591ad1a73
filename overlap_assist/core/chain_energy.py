"""Energy bookkeeping of the coupled chain: what a step, a bend stop or a contact may not add.

The chain's energy in the anchor's frame (relative units of ``chain_setup.chain_mechanics``) is

    E = 1/2 u^T M u + 1/2 (d - t)^T K_s (d - t) - sum_j b_j f . d_j,

kinetic energy of the motion relative to the anchor, the joint springs toward the animated
directions ``t`` and the load of the felt acceleration ``f``. From the equations of motion
(``chain_solver``'s docstring) its rate is

    dE/dt = P_ext - u^T C_rel u - drag u^T M u,
    P_ext = -(d - t)^T K_s t' - (sum_j b_j d_j) . f' + u^T C_rel d'_anim,

the work the animation does on the chain (its targets turning, the felt acceleration changing,
the damper dragging the chain along with the animated motion) minus what the damper and the air
take out. A frame of the numerical solution may therefore not end with more energy than it started
with plus the animation's work (trapezoid rule over the frame: exact for a body that holds still,
where ``P_ext = 0``).

``EnergyBound`` enforces that: it is the energy-safe projection of the rates after each frame.
The step (linearly implicit, the centripetal coupling between links explicit), a bend stop that
moves links back onto their cones and a link sliding along a cone can all add a little energy in
violent motion (measured before this bound: +78 % over 2 s at 48 fps for 3 links with a tip mass
after a violent start, +8 % at 12 fps with one sub-step, +4.2 % undamped, +3.8 % for a link
sliding along its cone). Where a frame ends above the allowance, the excess is taken out of the
kinetic energy (the rates are scaled, never re-aimed). The allowance is measured from the lowest
energy the chain has had (plus the work since), with a band of ``ENERGY_BAND`` of the allowed
energy above the load's floor, so the bounded oscillation of the step's energy around the exact value
(undamped double pendulum: 4e-4; a tumbling chain in free fall: a few 1e-3) is left alone and only a systematic gain is cut. Frames in which
a collider touched the chain are not bounded (a moving collider does work the bookkeeping does
not know; contact impulses themselves never add kinetic energy).
"""

from __future__ import annotations

import numpy as np

ENERGY_BAND = 5e-3
"""Slack of the energy bound, as a fraction of the allowed energy above the load's floor (the
lowest energy the load allows, ``-sum_j b_j |f|``): a chain's energy may rise this far above its
lowest value plus the animation's work before the rates are scaled. Measured: a bent, tapered
chain with a tip mass tumbling in free fall (3 s, 120 fps) keeps its kinetic energy within 0.12 %
unbounded, 0.20 % with this band, 0.88 % with 2e-3 (the step's energy oscillates, and a tight
band turns each upswing into a loss)."""


def chain_energy(mech: dict, pivot_vel, felt, d, u, target):
    """Energy of one chain (relative units of its mechanics): kinetic + load + joint springs.

    For a still anchor (``pivot_vel = 0``) and a steady felt acceleration ``felt`` this is the
    conserved energy of the undamped model. Arrays: d, u, target (n, 3); felt, pivot_vel (3,).
    """
    m, b = mech["inertia"], mech["load"]
    vel = u
    kinetic = 0.5 * float(np.sum(m * (vel @ vel.T)))
    kinetic += float(np.asarray(pivot_vel) @ (b @ u)) + 0.5 * (1.0 + mech["tip_mass"]) * float(
        np.asarray(pivot_vel) @ np.asarray(pivot_vel))
    dev = d - target
    springs = 0.5 * float(np.sum(mech["spring"] * (dev @ dev.T)))
    return kinetic - float(b @ (d @ np.asarray(felt))) + springs


def potential(spring, target, load_f, d):
    """Joint springs' and load's energy per chain: 1/2 (d - t)^T K_s (d - t) - sum_j b_j f . d_j."""
    dev = d - target
    return 0.5 * np.einsum("cni,cni->c", dev, spring @ dev) - np.einsum("cni,cni->c", load_f, d)


def take_energy(inertia, u, gain):
    """Rates scaled down per chain so their kinetic energy drops by ``gain`` (where positive)."""
    kinetic = 0.5 * np.einsum("cni,cnm,cmi->c", u, inertia, u)
    over = (gain > 0.0) & (kinetic > 0.0)
    if not over.any():
        return u
    scale = np.sqrt(np.where(over, np.maximum(kinetic - gain, 0.0) / np.where(over, kinetic, 1.0), 1.0))
    return u * scale[:, None, None]


def no_energy_gain(inertia, before, after):
    """Rates after contacts and bend stops, scaled down per chain where they would carry more
    kinetic energy (``1/2 u^T M u``) than before: moving a link onto a surface or a cone re-aims
    its rate along its new direction, and through the coupling that must not speed the chain up."""
    e0 = np.einsum("cni,cnm,cmi->c", before, inertia, before)
    e1 = np.einsum("cni,cnm,cmi->c", after, inertia, after)
    over = e1 > e0
    if not over.any():
        return after
    scale = np.sqrt(np.where(over, e0 / np.where(over, e1, 1.0), 1.0))
    return after * scale[:, None, None]


class EnergyBound:
    """Per frame: the chain's energy may not exceed its lowest value plus the animation's work.

    Built once per simulation from the padded (C, N) arrays of ``chain_setup.prepare``; call
    ``start`` with the state at frame 0 and ``end_frame`` after every frame (it returns the rates,
    scaled where the frame gained energy it was not given).
    """

    def __init__(self, inertia, spring, relative, load, felt, spin, targets, dt_s, cos_lim):
        self.cos_lim = cos_lim  # (C, 1): bend cones
        self.inertia, self.spring, self.relative = inertia, spring, relative
        self.load3 = load[..., None]  # (C, N, 1)
        self.felt = felt  # (T, C, 3)
        self.felt_rate = np.diff(felt, axis=0) / dt_s  # (T-1, C, 3): f is linear within a frame
        self.floor = -np.abs(load).sum(axis=1)[None] * np.sqrt((felt * felt).sum(axis=-1))  # (T, C)
        self.spin, self.targets, self.half_dt = spin, targets, 0.5 * dt_s
        # t' at a frame's start and end: the targets turn at the frame's constant spin.
        self.target_rate_start = _cross(spin, targets[:-1])  # (T-1, C, N, 3)
        self.target_rate_end = _cross(spin, targets[1:])
        self.low = self.power = None

    def _terms(self, d, u, k):
        """Energy at frame ``k``'s targets and felt load, and what the power needs of it."""
        t = self.targets[k]
        mu = self.inertia @ u
        dev = d - t
        kd = self.spring @ dev
        bd = (self.load3 * d).sum(axis=1)  # (C, 3)
        kinetic = 0.5 * (u * mu).sum(axis=(1, 2))
        energy = kinetic + 0.5 * (dev * kd).sum(axis=(1, 2)) - (self.felt[k] * bd).sum(axis=-1)
        return energy, kinetic, (kd, bd, _cross(d, self.relative @ u))

    def _power(self, terms, frame, target_rate):
        """The animation's power with frame ``frame``'s (constant) target spin and load rate;
        ``target_rate`` t' at the state's frame. (u^T C (w x d) = sum_j w_j . (d_j x (C u)_j).)"""
        kd, bd, d_cu = terms
        return ((self.spin[frame] * d_cu - kd * target_rate).sum(axis=(1, 2))
                - (self.felt_rate[frame] * bd).sum(axis=-1))

    def start(self, d, u):
        self.low, _, terms = self._terms(d, u, 0)
        self.power = self._power(terms, 0, self.target_rate_start[0]) if self.spin.shape[0] else None

    def end_frame(self, d, u, k, touched, d_start):
        """After frame k -> k + 1; returns the directions and rates. ``touched`` (C,) bool or None:
        a collider touched the chain in the frame. ``d_start``: the directions at frame k.

        The excess is taken out of the kinetic energy. Where it is more than that (a bend stop
        lifted a slowly sliding chain against its load), the chain keeps its directions of frame
        k, at rest, if they are inside the bend cones of frame k + 1 and within the allowance
        there (a body that holds still); what cannot be taken out is accepted."""
        energy, kinetic, terms = self._terms(d, u, k + 1)
        allowed = self.low + self.half_dt * (self.power + self._power(terms, k, self.target_rate_end[k]))
        band = ENERGY_BAND * np.maximum(allowed - self.floor[k + 1], 0.0)
        excess = energy - allowed - band
        if touched is not None:
            excess = np.where(touched, 0.0, excess)
        if bool(np.any(excess > 0.0)):
            cut = np.minimum(np.maximum(excess, 0.0), kinetic)
            u = take_energy(self.inertia, u, cut)
            energy = energy - cut
            if bool(np.any(excess > kinetic)):
                # Kept at frame k's directions, at rest, where that is within the allowance.
                fits = np.all((d_start * self.targets[k + 1]).sum(axis=-1) >= self.cos_lim - 1e-9, axis=1)
                rest = np.zeros_like(u)
                energy_rest, _, _ = self._terms(d_start, rest, k + 1)
                keep = (excess > kinetic) & fits & (energy_rest < energy) & (energy_rest <= allowed + band)
                if keep.any():
                    d = np.where(keep[:, None, None], d_start, d)
                    u = np.where(keep[:, None, None], rest, u)
                    energy = np.where(keep, energy_rest, energy)
            _, _, terms = self._terms(d, u, k + 1)
        # What could not be taken out is accepted (the bound must never lock a chain).
        self.low = np.where(energy > allowed + band, energy, np.minimum(allowed, energy))
        if k + 1 < self.spin.shape[0]:
            self.power = self._power(terms, k + 1, self.target_rate_start[k + 1])
        return d, u


def _cross(a, b):
    """Cross product on the last axis (np.cross is slow for small arrays)."""
    a0, a1, a2 = a[..., 0], a[..., 1], a[..., 2]
    b0, b1, b2 = b[..., 0], b[..., 1], b[..., 2]
    return np.stack([a1 * b2 - a2 * b1, a2 * b0 - a0 * b2, a0 * b1 - a1 * b0], axis=-1)
