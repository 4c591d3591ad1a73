"""Whole-body angular momentum about the center of mass, and the spin check per flight.

While airborne only gravity acts, and gravity exerts no torque about the center of mass, so the
whole body's angular momentum about it is constant (Euler's laws of motion; e.g. Goldstein,
Poole & Safko, *Classical Mechanics*, 3rd ed., sec. 1.2). Limbs can trade angular momentum with
the trunk (arms windmilling, tucking) but the total cannot start, stop or reverse. From the
segments' masses, centers of mass, principal radii of gyration and sampled orientations::

    H = sum_i m_i (r_i - r_cm) x (v_i - v_cm) + R_i I_i R_i^T w_i

A change of H is reported as the whole-body angular velocity it corresponds to,
``|dH| / (n^T I_cm n)`` with ``n`` the direction of ``dH`` and ``I_cm`` the whole body's inertia
tensor about its CoM at that sample.

Differentiation: one operator for everything, central differences over +-1 sample of the
segment CoMs and of the segment frames (angular velocity = vee of the skew part of
``(R_{j+1} - R_{j-1}) / 2h  R_j^T``). With the same operator a rigid rotation's orbital and
own-spin parts are scaled alike (both by sin(wh)/(wh)), so the H of a rigid body turning at a
constant rate stays constant to rounding. The same over +-2 samples gives Richardson's estimate
of the differentiation error, ``(H_2h - H_h) / 3`` (second-order differences; Press et al.,
*Numerical Recipes*, 3rd ed., sec. 5.7).

A change is a finding only when it exceeds (per sample, in H units)

    TABLE_PRECISION x sum_i |h_i - h_i(takeoff)|  +  SAMPLING_SAFETY x (differentiation error)
    + (whole-body inertia) x MIN_SPIN_CHANGE_DEG_S

The first term bounds what the segment table's precision can explain: for motion that truly
conserves H the segments' changes cancel, ``sum_i dh_i = 0``; a table whose mass and radius of
segment i are off by a relative ``e_i`` weights each change by ``(1 + e_i)``, leaving at most
``max|e_i| sum_i |dh_i|``. The second covers sampling; the third is a floor below which a spin
change does not read on screen.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Optional, Sequence

import numpy as np

from .errors import InputError
from .flight_windows import FlightWindow
from .segment_inertia import inertia_tensors, whole_body_inertia

TABLE_PRECISION = 0.15
"""Relative error of a segment's mass x radius^2 the table may have for a given character:
individual subjects differ from de Leva's (1996) adjusted means by roughly 10-20 % in segment
mass and radius of gyration (from memory: Zatsiorsky's sample SDs), and a rig's landmarks only
approximate the table's endpoints."""

SAMPLING_SAFETY = 3.0
"""Multiplier on Richardson's estimate of the differentiation error (the estimate itself is
only the leading term)."""

CONTACT_MARGIN_FRAMES = 2.0
"""Frames left out after takeoff and before touchdown. Keys interpolated as Bezier curves carry
a contact's push or impact into the flight: an automatic handle's slope at a key is set by the
keys either side (Blender's auto and auto-clamped handles), so with a key on every frame the
curve between two airborne keys still bends with the ground phase until the second key after
the contact, up to two frames from it. A contact found from sampled feet is itself placed to
within a fraction of a frame. Over those frames H changes through forces the flight check
cannot see, so they are no evidence of a spin from nothing."""

MIN_SPIN_CHANGE_DEG_S = 20.0
"""Smallest whole-body spin change reported (deg/s): over a half-second flight that is 10
degrees of unexplained rotation (common practice: about what passes unnoticed on screen)."""

BODY_AXES = ("left", "forward", "up")
_WORDS = {  # (positive, negative) spin about each body axis
    "left": ("turning forward", "turning backward"),
    "forward": ("tipping to its right", "tipping to its left"),
    "up": ("twisting to its left", "twisting to its right"),
}


@dataclass(frozen=True)
class SegmentMotion:
    """Body segments sampled on a uniform grid (arrays in SI units).

    Attributes
    ----------
    frames : ndarray (n,), frame number of each sample
    fps : float
    mass_kg : ndarray (k,), segment masses (mass fractions give H per kg of body mass)
    com_m : ndarray (n, k, 3), segment centers of mass, world
    rotations : ndarray (n, k, 3, 3), segment frames (columns x ML, y long, z AP, in world)
    radii_m : ndarray (n, k, 3), radii of gyration about the frame's x, y, z
    body_axes : ndarray (n, 3, 3), columns = the body's left, forward and up directions in world
    names : tuple of str, segment names
    """
    frames: np.ndarray
    fps: float
    mass_kg: np.ndarray
    com_m: np.ndarray
    rotations: np.ndarray
    radii_m: np.ndarray
    body_axes: np.ndarray
    names: tuple = ()

    def __post_init__(self):
        n, k = np.shape(self.com_m)[:2]
        if np.shape(self.frames) != (n,) or np.shape(self.mass_kg) != (k,):
            raise InputError("segment samples: frames (n,), masses (k,) and CoMs (n, k, 3) must agree")
        if np.shape(self.rotations) != (n, k, 3, 3) or np.shape(self.radii_m) != (n, k, 3):
            raise InputError("segment samples: rotations must be (n, k, 3, 3) and radii (n, k, 3)")
        if np.shape(self.body_axes) != (n, 3, 3):
            raise InputError("segment samples: body axes must be (n, 3, 3)")
        if n < 5:
            raise InputError("the spin check needs at least 5 samples: sample more sub-frames")
        for name in ("com_m", "rotations", "radii_m", "body_axes"):
            if not np.all(np.isfinite(getattr(self, name))):
                raise InputError(f"segment samples contain NaN or infinite values ({name}): check the rig")

    @property
    def dt_s(self) -> float:
        return float(self.frames[1] - self.frames[0]) / self.fps

    @property
    def times_s(self) -> np.ndarray:
        return (np.asarray(self.frames, dtype=float) - self.frames[0]) / self.fps


@dataclass(frozen=True)
class SpinCheck:
    """The angular-momentum check of one flight."""
    takeoff_frame: float
    touchdown_frame: float
    kind: str
    frames: np.ndarray
    """Samples checked (the differences' stencils lie inside the flight less ``CONTACT_MARGIN_FRAMES``
    at each end), shape (m,)."""
    h_body: np.ndarray
    """H per kg of body mass in the body's own axes (left, forward, up), m^2/s, shape (m, 3)."""
    change_deg_s: float
    """Largest change of H since takeoff as whole-body angular velocity, signed along its main body axis."""
    change_h: float
    """The same change as |dH| (per kg of body mass), m^2/s."""
    change_frame: float
    """Where the change is largest."""
    steepest_frame: float
    """Where H changes fastest (the largest |dH/dt|)."""
    onset_frame: Optional[float]
    """First sample where the change is beyond the threshold (None: no finding)."""
    threshold_deg_s: float
    """The threshold at ``change_frame``, as whole-body angular velocity."""
    axis: str
    """Body axis the change is mostly about: 'left', 'forward' or 'up'."""
    finding: Optional[str]
    """Plain words, or None when the change is within what sampling and the table explain."""


def _angular_velocity(r_prev: np.ndarray, r_mid: np.ndarray, r_next: np.ndarray, h2_s: float) -> np.ndarray:
    """World angular velocities (..., 3) from frames either side: vee(skew((R+ - R-)/2h R^T))."""
    w = np.einsum("...ij,...kj->...ik", (r_next - r_prev) / h2_s, r_mid)
    return 0.5 * np.stack([w[..., 2, 1] - w[..., 1, 2], w[..., 0, 2] - w[..., 2, 0], w[..., 1, 0] - w[..., 0, 1]], -1)


def _momentum(motion: SegmentMotion, step: int):
    """H (n, 3) and per-segment contributions (n, k, 3); NaN where the stencil leaves the clip."""
    m = np.asarray(motion.mass_kg, dtype=float)
    com = np.asarray(motion.com_m, dtype=float)
    rot = np.asarray(motion.rotations, dtype=float)
    n = com.shape[0]
    h2 = 2.0 * step * motion.dt_s
    out = np.full(com.shape, np.nan)
    mid = slice(step, n - step)
    vel = (com[2 * step:] - com[:n - 2 * step]) / h2
    omega = _angular_velocity(rot[:n - 2 * step], rot[mid], rot[2 * step:], h2)
    r = com[mid]
    r_cm = np.einsum("k,nkj->nj", m, r) / m.sum()
    v_cm = np.einsum("k,nkj->nj", m, vel) / m.sum()
    orbital = m[None, :, None] * np.cross(r - r_cm[:, None], vel - v_cm[:, None])
    spin = np.einsum("nkij,nkj->nki", inertia_tensors(m, motion.radii_m[mid], rot[mid]), omega)
    out[mid] = orbital + spin
    return np.sum(out, axis=1), out


def angular_momentum(motion: SegmentMotion):
    """Whole-body angular momentum about the CoM at every sample.

    Returns
    -------
    h : ndarray (n, 3)
        kg m^2/s in world axes (per kg of body mass when the masses are fractions); NaN at the
        first and last sample.
    error : ndarray (n, 3)
        Richardson's estimate of the differentiation error of ``h``; NaN at the two first and last.
    parts : ndarray (n, k, 3)
        Each segment's contribution (orbital + own spin).
    """
    h1, parts = _momentum(motion, 1)
    h2, _ = _momentum(motion, 2)
    return h1, (h2 - h1) / 3.0, parts


def _direction(axis, value):
    return _WORDS[axis][0 if value >= 0 else 1]


def check_spin(motion: SegmentMotion, windows: Sequence[FlightWindow]) -> tuple:
    """Check every flight for angular momentum that appears or vanishes.

    Parameters
    ----------
    motion : SegmentMotion
    windows : FlightWindow per flight (times on ``motion``'s clock)

    Returns
    -------
    tuple of SpinCheck (flights too short to check are left out)
    """
    h, err, parts = angular_momentum(motion)
    t = motion.times_s
    dt = motion.dt_s
    frames = np.asarray(motion.frames, dtype=float)
    m = np.asarray(motion.mass_kg, dtype=float)
    _com, inertia = whole_body_inertia(m, motion.com_m, motion.radii_m, motion.rotations)
    floor = np.deg2rad(MIN_SPIN_CHANGE_DEG_S)
    margin_s = CONTACT_MARGIN_FRAMES / motion.fps
    out = []
    for w in windows:
        first, last = w.takeoff_s + margin_s, w.touchdown_s - margin_s
        sel = np.flatnonzero((t - 2 * dt >= first - 1e-9) & (t + 2 * dt <= last + 1e-9) & np.isfinite(err[:, 0]))
        if sel.size < 3:
            continue
        j0 = sel[0]
        dh = h[sel] - h[j0]
        size = np.linalg.norm(dh, axis=1)
        unit = np.where(size[:, None] > 0, dh / np.where(size > 0, size, 1.0)[:, None], 0.0)
        i_axis = np.einsum("mi,mij,mj->m", unit, inertia[sel], unit)
        i_axis = np.where(size > 0, i_axis, np.trace(inertia[sel], axis1=1, axis2=2) / 3.0)
        table = TABLE_PRECISION * np.sum(np.linalg.norm(parts[sel] - parts[j0], axis=2), axis=1)
        sampling = SAMPLING_SAFETY * (np.linalg.norm(err[sel], axis=1) + np.linalg.norm(err[j0]))
        threshold = table + sampling + i_axis * floor
        spin = size / i_axis
        at = int(np.argmax(spin))
        axes = np.asarray(motion.body_axes, dtype=float)[sel]
        h_body = np.einsum("mji,mj->mi", axes, h[sel])
        dh_body = h_body - h_body[0]
        main = int(np.argmax(np.abs(dh_body[at])))
        axis = BODY_AXES[main]
        signed = float(np.sign(dh_body[at, main]) * spin[at]) if size[at] > 0 else 0.0
        rate = np.linalg.norm(np.gradient(h[sel], dt, axis=0), axis=1)
        beyond = np.flatnonzero(size > threshold)
        onset = float(frames[sel[beyond[0]]]) if beyond.size else None
        finding = None
        if onset is not None:
            finding = (f"the body starts {_direction(axis, signed)} at frame {onset:.0f} with nothing to push "
                       f"against: {np.rad2deg(signed):+.0f}°/s by frame {frames[sel[at]]:.0f}")
        out.append(SpinCheck(
            takeoff_frame=float(frames[0] + w.takeoff_s * motion.fps),
            touchdown_frame=float(frames[0] + w.touchdown_s * motion.fps), kind=w.kind,
            frames=frames[sel], h_body=h_body, change_deg_s=float(np.rad2deg(signed)), change_h=float(size[at]),
            change_frame=float(frames[sel[at]]), steepest_frame=float(frames[sel[int(np.argmax(rate))]]),
            onset_frame=onset, threshold_deg_s=float(np.rad2deg(threshold[at] / i_axis[at])), axis=axis,
            finding=finding))
    return tuple(out)


def spin_to_dict(checks: Sequence[SpinCheck], per_frame_only: bool = True) -> list:
    """JSON-ready list, one dict per flight (H series reduced to whole frames when asked)."""
    out = []
    for c in checks:
        keep = np.isclose(c.frames, np.round(c.frames)) if per_frame_only else np.ones(c.frames.size, bool)
        out.append({
            "takeoff_frame": c.takeoff_frame, "touchdown_frame": c.touchdown_frame, "kind": c.kind,
            "change_deg_per_s": round(c.change_deg_s, 2), "change_h_m2ps_per_kg": round(c.change_h, 6),
            "change_frame": c.change_frame, "steepest_frame": c.steepest_frame, "onset_frame": c.onset_frame,
            "threshold_deg_per_s": round(c.threshold_deg_s, 2), "axis": c.axis, "finding": c.finding,
            "frames": [float(f) for f in c.frames[keep]],
            "h_body_m2ps_per_kg": {a: [round(float(v), 6) for v in c.h_body[keep, i]]
                                   for i, a in enumerate(BODY_AXES)},
        })
    return out


def body_axes_from_landmarks(mid_hips, mid_shoulders, left_hip, right_hip) -> np.ndarray:
    """The body's own axes (columns left, forward, up) from trunk landmarks, shape (n, 3, 3).

    Up runs from the mid hips to the mid shoulders; left from the right to the left hip made
    orthogonal to up; forward = left x up (a character facing -y has left +x and up +z). The
    three are orthonormal but left-handed (left, forward, up): components are plain projections.
    """
    up = np.asarray(mid_shoulders, float) - np.asarray(mid_hips, float)
    up /= np.linalg.norm(up, axis=-1, keepdims=True)
    left = np.asarray(left_hip, float) - np.asarray(right_hip, float)
    left = left - np.sum(left * up, axis=-1, keepdims=True) * up
    left /= np.linalg.norm(left, axis=-1, keepdims=True)
    forward = np.cross(left, up)
    return np.stack([left, forward, up], axis=-1)
