"""Per-chain read-outs of a simulation: swing angles, the settle frame after a landing."""
from __future__ import annotations

import math

import numpy as np

SETTLE_BAND_RAD = math.radians(1.0)
"""A chain counts as settled once its tip stays within 1° of where it ends up (common practice:
about the smallest swing an animator notices on a hair strand)."""


def swing_angles(target_dirs: np.ndarray, sim_dirs: np.ndarray) -> np.ndarray:
    """Angle (rad) between simulated and animated direction of each link, shape (n_frames, n_links)."""
    cos = np.einsum("fli,fli->fl", target_dirs, sim_dirs)
    return np.arccos(np.clip(cos, -1.0, 1.0))


def settle_index(angle: np.ndarray, start: int, band_rad: float = SETTLE_BAND_RAD):
    """First index >= ``start`` from which ``angle`` stays within ``band_rad`` of its last value.

    Returns None when the signal has not settled by the end (the range ends too early).
    """
    angle = np.asarray(angle, dtype=float)
    if not 0 <= start < angle.size:
        return None
    outside = np.flatnonzero(np.abs(angle[start:] - angle[-1]) > band_rad)
    if outside.size == 0:
        return start
    last = start + int(outside[-1]) + 1
    # Settling on the very last frames is no evidence of rest.
    return last if last < angle.size - 2 else None
