"""Inputs, settings and results of the chain solver (frozen dataclasses, checked on creation).

Shapes put time first: ``(n_frames, n_links, 3)``. World space is z-up, metres and seconds.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .errors import InputError, InvalidChainError

MAX_FREQUENCY_HZ = 60.0
"""Upper limit accepted by the core (UI offers 0-10 Hz); keeps automatic sub-stepping bounded."""

MAX_SUBSTEPS = 64
"""Upper limit of sub-steps per frame (requested or automatic); see ``chain_solver``."""

MAX_TAPER = 0.95
"""Largest thickness taper: the tip link keeps 5 % of the root's thickness (0.25 % of its mass per length)."""

MAX_TIP_MASS_RATIO = 20.0
"""Largest tip mass as a multiple of the chain's own mass (a heavy bag on a light strap)."""

UNIT_TOLERANCE = 1e-3
"""Accepted deviation of |target direction| from 1 before it is rejected (rounding of sampled rigs)."""


@dataclass(frozen=True, slots=True)
class ChainSettings:
    """Physical response of one chain. Animator controls map onto these via ``response``."""

    frequency_hz: float = 2.0
    """Lowest mode of the chain's joint springs toward the animated pose, without gravity
    (the whole chain, seen from the anchor to the tip); 0 = no springs."""
    damping_ratio: float = 0.4
    """Damping relative to the animated motion, as a fraction of critical damping of the
    chain's lowest mode (springs together with gravity's pull when hanging straight down)."""
    tip_looseness: float = 0.3
    """0..1: joint stiffness (per unit of what the joint carries) falls along the chain to
    (1 - tip_looseness)^2 x at the tip joint (at least 0.05 x)."""
    gravity_scale: float = 1.0
    """Multiplier of the gravity vector (Gravity x g)."""
    body_response: float = 1.0
    """Multiplier of the felt acceleration of the chain's anchor: 1 physical, > 1 exaggerates
    float, drag and whip, 0 ignores the body's motion."""
    air_drag: float = 0.0
    """Linear drag on the absolute velocity of the links, 1/s."""
    bend_limit_rad: float = math.pi
    """Cone limit per link around its animated direction; pi = no limit."""
    collision_radius_m: float = 0.0
    """Thickness of the links against colliders and the ground."""
    substeps: int = 3
    """Minimum sub-steps per frame (more are used automatically when a stiff setting needs them).
    3 keeps the tip path of a character's chains on a jump within 1 % of the swing of a converged
    run (bench/bench_solver.py: 0.7 %; 2 sub-steps 1.6 %, 4 sub-steps 0.4 %)."""
    thickness_taper: float = 0.0
    """0..0.95: thickness of the tip link as a fraction less than the root link's (linear along
    the chain); mass per unit length goes with thickness squared. 0 = uniform."""
    tip_mass_ratio: float = 0.0
    """Point mass at the chain's end (a bag on a strap) as a multiple of the chain's own mass; 0 = none."""

    def __post_init__(self) -> None:
        _check_range("Frequency (Hz)", self.frequency_hz, 0.0, MAX_FREQUENCY_HZ)
        _check_range("Damping ratio", self.damping_ratio, 0.0, 100.0)
        _check_range("Tip looseness", self.tip_looseness, 0.0, 1.0)
        _check_range("Gravity scale", self.gravity_scale, 0.0, 100.0)
        _check_range("Body response", self.body_response, 0.0, 100.0)
        _check_range("Air drag (1/s)", self.air_drag, 0.0, 1000.0)
        _check_range("Bend limit (rad)", self.bend_limit_rad, 1e-3, math.pi)
        _check_range("Collision radius (m)", self.collision_radius_m, 0.0, 1e3)
        _check_range("Thickness taper", self.thickness_taper, 0.0, MAX_TAPER)
        _check_range("Tip mass (x chain)", self.tip_mass_ratio, 0.0, MAX_TIP_MASS_RATIO)
        if isinstance(self.substeps, bool) or not isinstance(self.substeps, (int, np.integer)):
            raise InputError(f"Sub-steps must be a whole number, got {self.substeps!r}")
        if not 1 <= int(self.substeps) <= MAX_SUBSTEPS:
            raise InputError(f"Sub-steps must be between 1 and {MAX_SUBSTEPS}, got {self.substeps}")


@dataclass(frozen=True, slots=True)
class ChainInput:
    """Animated motion of one chain, sampled once per frame.

    Attributes
    ----------
    pivot_pos_m : ndarray, shape (n_frames, 3)
        World position of the first link's pivot (head of the first bone).
    target_dirs : ndarray, shape (n_frames, n_links, 3)
        Animated world direction (head -> tail) of each link; unit vectors.
    lengths_m : ndarray, shape (n_links,)
        Link lengths, > 0.
    """

    pivot_pos_m: np.ndarray
    target_dirs: np.ndarray
    lengths_m: np.ndarray

    def __post_init__(self) -> None:
        pivot = _as_float_array("pivot_pos_m", self.pivot_pos_m)
        dirs = _as_float_array("target_dirs", self.target_dirs)
        lengths = _as_float_array("lengths_m", self.lengths_m)
        if pivot.ndim != 2 or pivot.shape[1] != 3 or pivot.shape[0] < 2:
            raise InputError(f"{_label('pivot_pos_m')} need at least 2 frames of 3 coordinates, got {pivot.shape}")
        if lengths.ndim != 1 or lengths.size == 0:
            raise InvalidChainError(f"A chain needs at least one link, got lengths of shape {lengths.shape}")
        if np.any(lengths <= 0.0):
            raise InvalidChainError("Every link of a chain needs a positive length (zero-length bone?)")
        if dirs.shape != (pivot.shape[0], lengths.size, 3):
            raise InputError(
                f"{_label('target_dirs')} must cover {pivot.shape[0]} frames x {lengths.size} bones, "
                f"got {dirs.shape}"
            )
        norms = np.sqrt(np.einsum("fli,fli->fl", dirs, dirs))
        if np.any(np.abs(norms - 1.0) > UNIT_TOLERANCE):
            raise InputError(f"{_label('target_dirs')} are not unit length (a bone with zero length or a broken sample?)")
        object.__setattr__(self, "pivot_pos_m", pivot)
        object.__setattr__(self, "target_dirs", dirs / norms[..., None])
        object.__setattr__(self, "lengths_m", lengths)

    @property
    def n_frames(self) -> int:
        return int(self.pivot_pos_m.shape[0])

    @property
    def n_links(self) -> int:
        return int(self.lengths_m.size)


@dataclass(frozen=True, slots=True)
class Colliders:
    """Body colliders (moving, sampled per frame) and an optional ground plane (z up).

    Attributes
    ----------
    sphere_centres_m : ndarray, shape (n_frames, n_spheres, 3)
    sphere_radii_m : ndarray, shape (n_spheres,)
    capsule_a_m, capsule_b_m : ndarray, shape (n_frames, n_capsules, 3)
        End points of each capsule's axis.
    capsule_radii_m : ndarray, shape (n_capsules,)
    ground_height_m : float or None
        Height of a horizontal ground plane, None for no ground.
    """

    sphere_centres_m: np.ndarray = field(default_factory=lambda: np.zeros((0, 0, 3)))
    sphere_radii_m: np.ndarray = field(default_factory=lambda: np.zeros(0))
    capsule_a_m: np.ndarray = field(default_factory=lambda: np.zeros((0, 0, 3)))
    capsule_b_m: np.ndarray = field(default_factory=lambda: np.zeros((0, 0, 3)))
    capsule_radii_m: np.ndarray = field(default_factory=lambda: np.zeros(0))
    ground_height_m: float | None = None

    def __post_init__(self) -> None:
        for name in ("sphere_centres_m", "capsule_a_m", "capsule_b_m"):
            arr = _as_float_array(name, getattr(self, name))
            if arr.ndim != 3 or arr.shape[2] != 3:
                raise InputError(f"{_label(name)} must be 3 coordinates per frame and collider, got {arr.shape}")
            object.__setattr__(self, name, arr)
        for name in ("sphere_radii_m", "capsule_radii_m"):
            arr = _as_float_array(name, getattr(self, name))
            if arr.ndim != 1 or np.any(arr <= 0.0):
                raise InputError(f"{_label(name)} must be positive")
            object.__setattr__(self, name, arr)
        if self.sphere_centres_m.shape[1] != self.sphere_radii_m.size:
            raise InputError("the sphere colliders' positions and radii disagree on the number of spheres")
        if self.capsule_a_m.shape != self.capsule_b_m.shape or self.capsule_a_m.shape[1] != self.capsule_radii_m.size:
            raise InputError("the capsule colliders' ends and radii disagree on the number of capsules")
        if self.ground_height_m is not None:
            g = float(self.ground_height_m)
            if not math.isfinite(g):
                raise InputError(f"Ground height must be finite, got {self.ground_height_m}")
            object.__setattr__(self, "ground_height_m", g)

    @property
    def n_spheres(self) -> int:
        return int(self.sphere_radii_m.size)

    @property
    def n_capsules(self) -> int:
        return int(self.capsule_radii_m.size)

    def check_frames(self, n_frames: int) -> None:
        """Raise InputError unless every moving collider has ``n_frames`` samples."""
        if self.n_spheres and self.sphere_centres_m.shape[0] != n_frames:
            raise InputError(f"Sphere colliders have {self.sphere_centres_m.shape[0]} frames, the chains {n_frames}")
        if self.n_capsules and self.capsule_a_m.shape[0] != n_frames:
            raise InputError(f"Capsule colliders have {self.capsule_a_m.shape[0]} frames, the chains {n_frames}")


@dataclass(frozen=True, slots=True)
class ChainState:
    """State of one chain at one instant (used to start a simulation instead of the pre-roll).

    Attributes
    ----------
    dirs : ndarray, shape (n_links, 3)
        World direction of each link (unit).
    dir_rates_per_s : ndarray, shape (n_links, 3)
        Time derivative of each direction (perpendicular to it), 1/s. A link turning with
        angular velocity w has ``dir_rate = w x dir``.
    """

    dirs: np.ndarray
    dir_rates_per_s: np.ndarray

    def __post_init__(self) -> None:
        dirs = _as_float_array("dirs", self.dirs)
        rates = _as_float_array("dir_rates_per_s", self.dir_rates_per_s)
        if dirs.ndim != 2 or dirs.shape[1] != 3 or rates.shape != dirs.shape:
            raise InputError(f"a chain's start state needs 3 coordinates per bone, got {dirs.shape}, {rates.shape}")
        norms = np.linalg.norm(dirs, axis=1)
        if np.any(np.abs(norms - 1.0) > UNIT_TOLERANCE):
            raise InputError("a chain's start directions must be unit length")
        dirs = dirs / norms[:, None]
        rates = rates - np.einsum("li,li->l", rates, dirs)[:, None] * dirs
        object.__setattr__(self, "dirs", dirs)
        object.__setattr__(self, "dir_rates_per_s", rates)


@dataclass(frozen=True, slots=True)
class ChainMotion:
    """Simulated motion of every chain, one entry per input chain, in input order.

    Attributes
    ----------
    dirs : tuple of ndarray, each shape (n_frames, n_links, 3)
        Simulated world direction of each link.
    tip_positions_m : tuple of ndarray, each shape (n_frames, n_links, 3)
        World position of each link's end (tail).
    contact_counts : tuple of ndarray, each shape (n_links,), int
        Number of sub-steps in which a collider or the ground pushed the link's end out.
    max_swing_rad : tuple of float
        Largest angle between a simulated and an animated link direction, over all frames.
    final_states : tuple of ChainState
        State after the last frame (to continue a simulation, or to inspect the motion).
    substeps : int
        Sub-steps per frame actually used (the largest requested, raised for stiff settings).
    """

    dirs: tuple
    tip_positions_m: tuple
    contact_counts: tuple
    max_swing_rad: tuple
    final_states: tuple
    substeps: int


def _check_range(label: str, value: float, lo: float, hi: float) -> None:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{label} must be a number, got {value!r}") from None
    if not (math.isfinite(v) and lo <= v <= hi):
        raise InputError(f"{label} must be between {lo:g} and {hi:g}, got {value!r}")


_LABELS = {
    # Field -> the words users see in an error (never the internal field name).
    "pivot_pos_m": "the chain roots' animated positions",
    "target_dirs": "the chain bones' animated directions",
    "lengths_m": "the chain bones' lengths",
    "dirs": "the simulated chain directions",
    "dir_rates_per_s": "the simulated chain's turning rates",
    "sphere_centres_m": "the sphere colliders' positions",
    "capsule_a_m": "the capsule colliders' positions",
    "capsule_b_m": "the capsule colliders' positions",
    "sphere_radii_m": "the sphere colliders' radii",
    "capsule_radii_m": "the capsule colliders' radii",
}
_NAN_HINT = {
    "dirs": ": the simulation became unstable; lower Body response or Frequency, and please report it",
    "dir_rates_per_s": ": the simulation became unstable; lower Body response or Frequency, and please report it",
}


def _label(name: str) -> str:
    return _LABELS.get(name, name.replace("_", " "))


def _as_float_array(name: str, value) -> np.ndarray:
    try:
        arr = np.array(value, dtype=np.float64)  # a copy: inputs are never modified or aliased
    except (TypeError, ValueError):
        raise InputError(f"{_label(name)} must be numbers") from None
    if not np.all(np.isfinite(arr)):
        raise InputError(f"{_label(name)} contain NaN or infinite values"
                         + _NAN_HINT.get(name, ": check the rig's constraints and keys"))
    return arr
