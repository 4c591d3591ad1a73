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
take out. With the body holding still (``P_ext = 0`` exactly) the energy can only fall; while
the animation works, a frame's energy can rise by the animation's work (trapezoid rule over the
frame). A frame of the numerical solution may not end with more energy than its **budget** allows:
the budget plus that work. The budget is the energy the frame started with where the animation
works (the trapezoid's estimate is not exact, and its error must not accumulate); while the body
holds still it is carried on and falls with the energy, never staying more than ``ENERGY_SLACK``
above it, so the chain cannot creep back up to an energy it has lost, while the bounded
oscillation of the step's energy around the exact value is left alone (undamped double pendulum:
4e-4; a violently tumbling chain at 60 fps: about 1e-2).

``EnergyBound`` enforces that: it is the energy-safe projection of the rates after each frame.
The step (linearly implicit, the centripetal coupling between links explicit), a bend stop that
moves links back onto their cones and a link sliding along a cone can all add a little energy in
violent motion (measured before this bound, on one trajectory continued from a violent start
with the body then still: +5 % for a chain with a negligible damping ratio, +34 % for a chain
creeping up along its bend cone at 12 fps). Where a frame ends above its budget by more than a
band of ``ENERGY_BAND`` (of the budget above the load's floor), the excess is taken out of the
kinetic energy (the rates are scaled, never re-aimed); the bounded oscillation of the step's
energy around the exact value (undamped double pendulum: 4e-4) is left alone. Where the excess
is more than the kinetic energy, a chain of a still body keeps its last directions at rest; what
cannot be taken out is accepted and becomes the new budget, and so is the energy after a frame in
which a collider touched the chain (a moving collider does work the bookkeeping does not know;
contact impulses themselves never add kinetic energy). A frame in which the animation works and
the solver took only plain steps (no split step, no bend stop, no contact) is not bounded: the
step is accurate there, and that keeps the bound's cost off ordinary animated shots.
"""

from __future__ import annotations

import numpy as np

ENERGY_BAND = 3e-3
"""Slack of the energy bound, as a fraction of the budget above the load's floor (the lowest
energy the load allows, ``-sum_j b_j |f|``): a frame may end this far above its budget before the
rates are scaled."""

ENERGY_SLACK = 5e-3
"""How far above a still body's chain's energy its budget may stay (fraction of the budget above
the floor). With ENERGY_BAND, a chain on a still body never ends more than 0.8 % of its energy
above any energy it had. Measured: a bent, tapered chain with a tip mass tumbling in free fall
for 3 s (tests/core/test_chain_dynamics.py) keeps its energy within 0.12 % and its angular
momentum within 0.26 % at 120 fps and 0.8 % / 1.5 % at 60 fps, as without the bound."""


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
    """Per frame: the chain's energy may not exceed its budget (the energy balance above).

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
        # Frames in which the animation may work on some chain (targets turn or the load changes).
        self.animated = (np.any(spin != 0.0, axis=(1, 2, 3)) | np.any(self.felt_rate != 0.0, axis=(1, 2))).tolist()
        self.budget = self.power = None

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
        self._begin(d, u, 0)

    def _begin(self, d, u, k):
        self.budget, _, terms = self._terms(d, u, k)
        self.power = self._power(terms, k, self.target_rate_start[k]) if k < self.spin.shape[0] else None

    def end_frame(self, d, u, k, touched, d_start, u_start, smooth):
        """After frame k -> k + 1; returns the directions and rates. ``touched`` (C,) bool or None:
        a collider touched the chain in the frame. ``d_start``, ``u_start``: the state at frame k.
        ``smooth``: the frame took only plain steps (no split step, no bend stop, no contact).

        A smooth frame in which the animation works is not bounded (the step is accurate there,
        and the next budget would start from the frame's end anyway): that keeps the bound's cost
        off ordinary animated shots. The excess is taken out of the kinetic energy. Where it is
        more than that (a bend stop lifted a slowly sliding chain against its load), the chain
        keeps its directions of frame k, at rest, if they are inside the bend cones of frame
        k + 1 and within the allowance there (a body that holds still); what cannot be taken out
        is accepted."""
        if smooth and self.animated[k]:
            self.budget = None
            return d, u
        if self.budget is None:
            self._begin(d_start, u_start, k)
        energy, kinetic, terms = self._terms(d, u, k + 1)
        power_end = self._power(terms, k, self.target_rate_end[k])
        allowed = self.budget + self.half_dt * (self.power + power_end)
        # Where the animation did work in the frame, its trapezoid estimate carries an error that
        # must not be carried on: the next budget starts from the frame's final energy.
        worked = (self.power != 0.0) | (power_end != 0.0)
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
        # What could not be taken out, and what a collider did, is accepted (the bound must never
        # lock a chain).
        still = np.minimum(allowed, energy + ENERGY_SLACK * np.maximum(allowed - self.floor[k + 1], 0.0))
        self.budget = np.where((energy > allowed + band) | worked, energy, still)
        if touched is not None:
            self.budget = np.where(touched, energy, self.budget)
        if k + 1 < self.spin.shape[0]:
            self.power = self._power(terms, k + 1, self.target_rate_start[k + 1])
        return d, u


def _cross(a, b):
    """Cross product on the last axis (np.cross is slow for small arrays)."""
    a0, a1, a2 = a[..., 0], a[..., 1], a[..., 2]
    b0, b1, b2 = b[..., 0], b[..., 1], b[..., 2]
    return np.stack([a1 * b2 - a2 * b1, a2 * b0 - a0 * b2, a0 * b1 - a1 * b0], axis=-1)
