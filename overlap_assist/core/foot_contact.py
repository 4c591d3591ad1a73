"""Foot contact from the feet's lowest points: when the body is supported and when it is airborne.

A foot is *in contact* while its lowest point rests near a supporting height and is nearly
still; the body is airborne while no foot is in contact. Takeoff and touchdown are where the
lowest point of the last (first) foot leaves (reaches) its support, at sub-frame precision.

What "near" and "still" mean is scaled to the rig, because a child's rig and a giant's move at
different sizes and speeds: lengths scale with the leg length L (hip to ankle) and speeds with
sqrt(g L), the Froude scaling under which geometrically similar bodies move alike in gravity
(Alexander 1989, Physiol. Rev. 69(4):1199, from memory). For a 0.9 m leg:

* near  = 0.04 L (3.6 cm): a planted foot's lowest point wanders by a centimetre or two with toe
  roll, foot pitch and IK stretch in keyed animation (common practice), while a foot that leaves
  the ground in a jump is several centimetres up within one frame (2.5 m/s x 1/24 s = 10 cm).
* still = 0.1 sqrt(g L) (0.30 m/s): a planted, hand-keyed foot slides slower than that; a foot
  that takes off passes 1 m/s within a frame or two.
* event level = 0.005 L (4.5 mm): takeoff and touchdown are placed where the lowest point
  crosses this small height above its support, which biases them by less than 2 ms at the speeds
  of a jump (4.5 mm / 2.5 m/s).

A support (a plant) must hold still for at least ``MIN_PLANT_S`` and must either be there at the
start of the clip or be reached from above: a foot that hangs still at the top of a floaty jump
is reached from below and is not standing on anything. A foot whose lowest point sinks well below
its support while "in contact" is carried by the body (a rig without planted feet), not planted:
such feet give no contact and the analysis falls back to the body's path.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

NEAR_PER_LEG = 0.04
"""Contact height tolerance as a fraction of the leg length (see the module text)."""
STILL_PER_FROUDE = 0.1
"""Contact speed tolerance as a fraction of sqrt(g L) (see the module text)."""
EVENT_PER_LEG = 0.005
"""Height above the support where takeoff and touchdown are placed, fraction of the leg length."""
MIN_PLANT_S = 0.1
"""Shortest still stand that counts as a support (s); ground contacts of hops last 0.15-0.3 s
(from memory), and a foot at the top of a normal jump is still for less than 0.07 s."""
DEFAULT_LEG_M = 0.9
"""Leg length assumed when the rig does not tell (m): an adult's hip-to-ankle length (from memory)."""


@dataclass(frozen=True)
class ContactTolerances:
    near_m: float
    still_mps: float
    event_m: float

    @classmethod
    def for_leg(cls, leg_m: float, g_mps2: float) -> "ContactTolerances":
        leg = float(leg_m) if leg_m and leg_m > 0 else DEFAULT_LEG_M
        return cls(NEAR_PER_LEG * leg, STILL_PER_FROUDE * np.sqrt(g_mps2 * leg), EVENT_PER_LEG * leg)


@dataclass(frozen=True)
class FootContact:
    """Contact of one foot on the sample grid."""
    name: str
    contact: np.ndarray
    """bool (n,): in contact at each sample."""
    level_m: np.ndarray
    """(n,): height of the support of the current or nearest plant (NaN where never planted)."""
    low_z_m: np.ndarray
    """(n,): height of the foot's lowest point."""


@dataclass(frozen=True)
class ContactEvent:
    """An airborne interval found from contact: sample indices of the last contact sample before
    and the first contact sample after, and sub-sample times."""
    i_last_contact: int
    i_next_contact: int
    takeoff_s: float
    touchdown_s: float
    takeoff_foot: str
    touchdown_foot: str


def _runs(mask):
    padded = np.concatenate(([False], np.asarray(mask, bool), [False])).astype(np.int8)
    d = np.diff(padded)
    return list(zip(np.flatnonzero(d == 1), np.flatnonzero(d == -1) - 1))


def lowest_point(points_m: np.ndarray, up: np.ndarray):
    """Height of the lowest of a foot's points and its speed.

    Parameters
    ----------
    points_m : ndarray (k, n, 3) candidate points (bone heads/tails of one foot) over n samples.
    up : unit vector (3,)

    Returns
    -------
    z_m : (n,) height of the lowest point; which : (n,) index of that point.
    """
    z = points_m @ up
    which = np.argmin(z, axis=0)
    return z[which, np.arange(z.shape[1])], which


def lowest_point_speed(points_m: np.ndarray, which: np.ndarray, dt_s: float) -> np.ndarray:
    """Speed (n,) of the point that is lowest at each sample (central differences of that point's
    own path, so switching from heel to toe is no motion)."""
    vel = np.gradient(points_m, dt_s, axis=1) if points_m.shape[1] > 1 else np.zeros_like(points_m)
    return np.linalg.norm(vel[which, np.arange(points_m.shape[1])], axis=-1)


def foot_contact(name, t_s, points_m, up, tol: ContactTolerances):
    """Contact of one foot, or None if the foot is not planted (it sinks with the body).

    Returns
    -------
    FootContact or None
    """
    n = t_s.size
    dt = float(t_s[1] - t_s[0])
    z, which = lowest_point(points_m, up)
    speed = lowest_point_speed(points_m, which, dt)
    still = speed < tol.still_mps
    need = max(int(np.ceil(MIN_PLANT_S / dt - 1e-9)), 2)
    contact = np.zeros(n, bool)
    level = np.full(n, np.nan)
    planted_any = False
    for a, b in _runs(still):
        if b - a + 1 < need:
            continue
        if contact[a:b + 1].all():
            continue  # already part of an earlier plant (a slide and a stop on the same support)
        lev = float(np.median(z[a:b + 1]))
        if a > 0 and not np.max(z[max(a - need, 0):a]) > lev + tol.near_m:
            continue  # not reached from above: hanging still in the air, not standing on anything
        lo, hi = a, b
        while lo > 0 and z[lo - 1] <= lev + tol.near_m and not contact[lo - 1]:
            lo -= 1
        while hi < n - 1 and z[hi + 1] <= lev + tol.near_m:
            hi += 1
        if np.min(z[lo:hi + 1]) < lev - tol.near_m:
            return None  # sinks below its support while "standing": carried by the body
        contact[lo:hi + 1] = True
        level[lo:hi + 1] = lev
        planted_any = True
    if not planted_any:
        return None
    # Level of the nearest plant everywhere (for event placement on either side of a gap).
    idx = np.flatnonzero(np.isfinite(level))
    near = idx[np.clip(np.searchsorted(idx, np.arange(n)), 0, idx.size - 1)]
    prev = idx[np.clip(np.searchsorted(idx, np.arange(n)) - 1, 0, idx.size - 1)]
    level = np.where(np.isfinite(level), level,
                     np.where(np.abs(prev - np.arange(n)) < np.abs(near - np.arange(n)), level[prev], level[near]))
    return FootContact(name, contact, level, z)


def crossing_time(t_s, z_m, level_m, rising: bool) -> float:
    """Time where ``z`` crosses ``level`` (first upward or last downward crossing), linear
    interpolation between samples; NaN if it does not cross."""
    a = np.asarray(z_m, float) - level_m
    if rising:
        for i in range(a.size - 1):
            if a[i] <= 0 < a[i + 1]:
                return float(t_s[i] + (t_s[i + 1] - t_s[i]) * (-a[i] / (a[i + 1] - a[i])))
    else:
        for i in range(a.size - 1, 0, -1):
            if a[i] <= 0 < a[i - 1]:
                return float(t_s[i - 1] + (t_s[i] - t_s[i - 1]) * (a[i - 1] / (a[i - 1] - a[i])))
    return float("nan")


def _leave_time(t_s, z, i_contact, level, tol, rising):
    """Sub-sample time the lowest point passes ``level + event`` next to contact sample ``i_contact``
    (rising: leaving after it; else arriving before it).

    The crossing lies in the step from the contact sample to the first airborne one; the path of
    the airborne foot is extrapolated back into that step with the parabola through the first
    three airborne samples (a foot carried through the air by a ballistic body follows one), or
    the line through two when fewer are airborne."""
    n = t_s.size
    step = 1 if rising else -1
    j = [i_contact + k * step for k in (1, 2, 3)]
    if not (0 <= j[0] < n):
        return float(t_s[i_contact])
    target = level + tol.event_m
    z0, z1 = z[i_contact], z[j[0]]
    if z0 >= target:
        return float(t_s[i_contact])
    # Samples above the event level are airborne; their path is followed back to the support
    # itself (not to the event level, which would place the event late by event / speed).
    target = max(level, z0)
    lo, hi = sorted((float(t_s[i_contact]), float(t_s[j[0]])))
    est = float(t_s[i_contact] + (t_s[j[0]] - t_s[i_contact]) * (target - z0) / (z1 - z0)) if z1 > z0 \
        else float(t_s[j[0]])
    ok = [k for k in j if 0 <= k < n]
    if len(ok) >= 2 and z[ok[1]] > z1 > level + tol.event_m:
        slope = (z[ok[1]] - z1) / (t_s[ok[1]] - t_s[j[0]])
        est = float(t_s[j[0]] - (z1 - target) / slope)
        if len(ok) == 3 and z[ok[2]] > z[ok[1]]:
            tt = np.array([t_s[k] for k in ok]) - t_s[j[0]]
            c = np.polyfit(tt, np.array([z[k] for k in ok]) - target, 2)
            roots = np.roots(c) if abs(c[0]) > 1e-12 else np.roots(c[1:])
            roots = roots[np.isreal(roots)].real + t_s[j[0]]
            inside = [r for r in roots if lo - 1e-9 <= r <= hi + 1e-9]
            if inside:
                est = float(min(inside, key=lambda r: abs(r - t_s[j[0]])))
    return float(np.clip(est, lo, hi))


def airborne_from_contact(t_s, feet, tol: ContactTolerances, min_flight_s: float, refine=None):
    """Airborne intervals (no foot in contact) with sub-sample takeoff and touchdown.

    Parameters
    ----------
    feet : list of FootContact
    refine : callable(t_from_s, t_to_s) -> (t_fine (m,), z_fine (n_feet, m)), optional
        Lowest-point heights of the same feet sampled densely between two sample times; used to
        place events between samples. Without it the sample grid is interpolated.

    Returns
    -------
    events : list of ContactEvent
    warnings : list of str
    """
    n = t_s.size
    any_contact = np.zeros(n, bool)
    for f in feet:
        any_contact |= f.contact
    events, warnings = [], []
    if refine is not None:
        cache, plain = {}, refine

        def refine(t_a, t_b):  # one dense sampling per pair of frames, shared by all feet
            if (t_a, t_b) not in cache:
                cache[(t_a, t_b)] = plain(t_a, t_b)
            return cache[(t_a, t_b)]
    for a, b in _runs(~any_contact):
        if a == 0 or b == n - 1:
            warnings.append("the clip starts or ends in the air: that airborne phase is not checked "
                            "(extend the frame range to include takeoff and touchdown)")
            continue
        i0, i1 = a - 1, b + 1
        takeoff, who_to = -np.inf, ""
        touchdown, who_td = np.inf, ""
        for k, f in enumerate(feet):
            for rising, i_edge in ((True, i0), (False, i1)):
                if not f.contact[i_edge]:
                    continue
                target = f.level_m[i_edge] + tol.event_m
                # The contact sample next to the gap may already be above the event level
                # (within "near"): step into the contact to the sample below it.
                j, step = i_edge, (-1 if rising else 1)
                while 0 < j < n - 1 and f.contact[j + step] and f.low_z_m[j] > target:
                    j += step
                t_ev = _leave_time(t_s, f.low_z_m, j, f.level_m[i_edge], tol, rising)
                if refine is not None:
                    pair = (j, j + 1) if rising else (j - 1, j)
                    if 0 <= pair[0] and pair[1] < n:
                        tf, zf = refine(float(t_s[pair[0]]), float(t_s[pair[1]]))
                        t_fine = crossing_time(tf, zf[k], target, rising=rising)
                        if np.isfinite(t_fine):
                            t_ev = t_fine
                if rising and t_ev > takeoff:
                    takeoff, who_to = t_ev, f.name
                elif not rising and t_ev < touchdown:
                    touchdown, who_td = t_ev, f.name
        if touchdown - takeoff < min_flight_s:
            continue
        events.append(ContactEvent(i0, i1, float(takeoff), float(touchdown), who_to, who_td))
    return events, warnings
