"""Inputs and results of the body-motion analysis (frozen dataclasses, arrays in SI units)."""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Optional

import numpy as np

from . import constants as C
from .errors import InputError


@dataclass(frozen=True)
class MotionSamples:
    """Body motion sampled from the rig on a uniform (sub-)frame grid.

    Attributes
    ----------
    frames : ndarray, shape (n,)
        Frame number of each sample (uniform spacing, may be fractional).
    fps : float
        Frames per second of the scene (``fps / fps_base``).
    body_pos_m : ndarray, shape (n, 3)
        World position of the body source (root bone or whole-body CoM), metres, z up.
    gravity_mps2 : ndarray, shape (3,)
        Gravity vector in m/s^2 (the scene's, or standard gravity).
    body_source : str
        'root' or 'com' (what ``body_pos_m`` is).
    unit_scale : float
        Metres per Blender unit the samples were converted with (reported back).
    arm_com_m, rest_com_m : ndarray, shape (n, 3), optional
        CoM of both arms and of the body they swing against (trunk and head; for the arm-swing
        timing), metres.
    arm_mass_fraction : float
        Share of body mass in the arms (from the segment table).
    foot_points_m : ndarray, shape (n_feet, k, n, 3), optional
        Points of each foot (heads and tails of its contact bones), metres; the lowest of them
        tells contact (``foot_contact``). None: airborne phases come from the body's path.
    foot_names : tuple of str
        A name per foot (for messages), e.g. the foot bone's name.
    leg_length_m : float
        Hip-to-ankle length that scales the contact tolerances (0: a default adult leg).
    """
    frames: np.ndarray
    fps: float
    body_pos_m: np.ndarray
    gravity_mps2: np.ndarray
    body_source: str = "root"
    unit_scale: float = 1.0
    arm_com_m: Optional[np.ndarray] = None
    rest_com_m: Optional[np.ndarray] = None
    arm_mass_fraction: float = 0.0
    foot_points_m: Optional[np.ndarray] = None
    foot_names: tuple = ()
    leg_length_m: float = 0.0

    def __post_init__(self):
        frames = np.asarray(self.frames, dtype=float)
        pos = np.asarray(self.body_pos_m, dtype=float)
        if frames.ndim != 1 or pos.shape != (frames.size, 3):
            raise InputError(f"body positions must have shape (n, 3) matching {frames.size} frames, got {pos.shape}")
        if not np.all(np.isfinite(pos)):
            raise InputError("body positions contain NaN or infinite values: check the rig's constraints and keys")
        if frames.size >= 2 and not np.allclose(np.diff(frames), frames[1] - frames[0], rtol=1e-6, atol=1e-9):
            raise InputError("samples must be uniformly spaced in frames")
        if self.fps <= 0:
            raise InputError(f"frame rate must be positive (got {self.fps})")
        if self.foot_points_m is not None:
            fp = np.asarray(self.foot_points_m, dtype=float)
            if fp.ndim != 4 or fp.shape[2] != frames.size or fp.shape[3] != 3:
                raise InputError(f"foot points must have shape (feet, points, {frames.size}, 3), got {fp.shape}")
            if not np.all(np.isfinite(fp)):
                raise InputError("foot positions contain NaN or infinite values: check the rig's constraints")
        g = np.asarray(self.gravity_mps2, dtype=float)
        if g.shape != (3,) or not np.linalg.norm(g) > 0:
            raise InputError("gravity must be a non-zero 3-vector: set the scene gravity or choose standard gravity")

    @property
    def dt_s(self) -> float:
        """Time between samples in seconds."""
        return float(self.frames[1] - self.frames[0]) / self.fps if self.frames.size > 1 else 1.0 / self.fps

    @property
    def times_s(self) -> np.ndarray:
        return (np.asarray(self.frames, dtype=float) - self.frames[0]) / self.fps


@dataclass(frozen=True)
class AnalysisSettings:
    """How to analyse the body motion (defaults from :mod:`constants`)."""
    smoothing_window_frames: float = C.SMOOTHING_WINDOW_FRAMES
    """Savitzky–Golay window span in frames (rounded to an odd number of samples >= 3)."""
    smoothing_order: int = C.SMOOTHING_ORDER
    flight_load_max: float = C.FLIGHT_LOAD_MAX
    min_flight_s: float = C.MIN_FLIGHT_S
    onset_load_drop: float = C.ONSET_LOAD_DROP

    def __post_init__(self):
        if not self.smoothing_window_frames > 0:
            raise InputError("smoothing window must be positive (frames)")
        if not 1 <= self.smoothing_order <= 6:
            raise InputError("smoothing order must be between 1 and 6 (2 suits keyed jumps)")
        if not 0 < self.flight_load_max < 1:
            raise InputError("flight threshold must lie between 0 and 1 g")


@dataclass(frozen=True)
class Phase:
    name: str
    start_frame: float
    end_frame: float


@dataclass(frozen=True)
class Flight:
    """One airborne interval and how it compares with ballistics (frames are sub-frame floats)."""
    takeoff_frame: float
    apex_frame: float
    touchdown_frame: float
    hang_time_s: float
    apex_height_m: float
    takeoff_speed_mps: float
    horizontal_speed_mps: float
    horizontal_accel_mps2: float
    implied_gravity_mps2: float
    gravity_ratio: float
    verdict: str
    hang_time_needed_s: float
    """Hang time this apex needs at scene gravity."""
    retime_frames: float
    """Frames to add (+) or remove (−) from the flight for this apex to be ballistic."""
    apex_for_hang_time_m: float
    """Apex height (above takeoff) that this hang time implies at scene gravity."""
    fit_rms_m: float
    late_arm_swing: bool = False
    arm_swing_peak_frame: Optional[float] = None
    arm_swing_offset_frames: Optional[float] = None
    """Peak upward arm swing minus takeoff, in frames (> 0: after takeoff)."""
    arm_swing_body_drop_m: float = 0.0
    """How far the rest of the body drops relative to the CoM because the arms rise in flight."""
    kind: str = "jump"
    """'jump' (leaves the ground rising) or 'drop' (airborne without upward takeoff speed: apex,
    retiming and arm-swing checks do not apply)."""


@dataclass(frozen=True)
class Landing:
    frame: float
    peak_load_g: float
    peak_frame: float
    decel_frames: float
    """Frames from touchdown until the body stops descending."""


@dataclass(frozen=True)
class BodyAnalysis:
    """Everything the analysis found; arrays are per sample."""
    frames: np.ndarray
    fps: float
    unit_scale: float
    gravity_mps2: np.ndarray
    body_source: str
    body_pos_m: np.ndarray
    velocity_mps: np.ndarray
    accel_mps2: np.ndarray
    effective_g_mps2: np.ndarray
    load_factor: np.ndarray
    phases: tuple = ()
    flights: tuple = ()
    landings: tuple = ()
    warnings: tuple = field(default=())
    airborne_from: str = "body path"
    """'feet' (contact of the feet) or 'body path' (one parabola per airborne phase)."""
    contact_feet: tuple = ()
    """Names of the feet whose contact was used."""
