"""Acceleration of the body and the gravity it feels.

The effective gravity is what a force plate under the feet would read, per unit mass and
turned into an acceleration: g_eff = g − a. Its vertical part as a multiple of |g| is the load
factor n = 1 + a_up/|g| (Newton's second law; Linthorne 2001, Am. J. Phys. 69(11):1198): 1 when
standing still, below 1 while dropping into the crouch, above 1 while braking and pushing off,
0 in flight, a spike on landing.
"""
from __future__ import annotations

import numpy as np

from .savgol import savgol_derivative


def window_samples(window_frames: float, samples_per_frame: float, order: int) -> int:
    """Odd number of samples spanning about ``window_frames`` frames, and enough for ``order``."""
    w = int(round(window_frames * samples_per_frame))
    w = max(w, order + 1, 3)
    return w + 1 if w % 2 == 0 else w


def body_kinematics(pos_m: np.ndarray, dt_s: float, window: int, order: int):
    """Velocity and acceleration by Savitzky–Golay differentiation.

    Parameters
    ----------
    pos_m : ndarray, shape (n, 3)
    dt_s : float
        Time between samples.

    Returns
    -------
    velocity_mps, accel_mps2 : ndarray, shape (n, 3)
    """
    vel = savgol_derivative(pos_m, window, order, 1, dt_s)
    acc = savgol_derivative(pos_m, window, order, 2, dt_s)
    return vel, acc


def up_axis(gravity_mps2: np.ndarray) -> np.ndarray:
    """Unit vector opposite to gravity."""
    g = np.asarray(gravity_mps2, dtype=float)
    return -g / np.linalg.norm(g)


def effective_gravity(accel_mps2: np.ndarray, gravity_mps2: np.ndarray) -> np.ndarray:
    """g_eff = g − a, shape (n, 3), m/s^2."""
    return np.asarray(gravity_mps2, dtype=float)[None, :] - accel_mps2


def load_factor(accel_mps2: np.ndarray, gravity_mps2: np.ndarray) -> np.ndarray:
    """n = 1 + a_up/|g| (in g units), shape (n,)."""
    g = np.asarray(gravity_mps2, dtype=float)
    return 1.0 + accel_mps2 @ up_axis(g) / np.linalg.norm(g)
