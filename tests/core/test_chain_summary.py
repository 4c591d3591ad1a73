"""Swing angles and settle detection against closed forms."""
import math

import numpy as np

from overlap_assist.core.chain_summary import settle_index, swing_angles


def test_swing_angle_between_unit_vectors():
    a = np.array([[[0.0, 0.0, -1.0]]])
    th = 0.3
    b = np.array([[[math.sin(th), 0.0, -math.cos(th)]]])
    assert abs(swing_angles(a, b)[0, 0] - th) < 1e-12


def test_settle_index_of_a_damped_cosine_matches_its_envelope():
    # x = A e^{-ζωt} cos(ω_d t): within band once A e^{-ζωt} < band (envelope; Ogata §5-3).
    fps, zeta, w = 24.0, 0.2, 2 * math.pi * 1.5
    t = np.arange(0, 8, 1 / fps)
    amp = math.radians(20)
    x = amp * np.exp(-zeta * w * t) * np.cos(w * math.sqrt(1 - zeta**2) * t)
    idx = settle_index(x, 0)
    t_env = math.log(amp / math.radians(1.0)) / (zeta * w)
    assert idx is not None and t[idx] <= t_env + 1 / fps
    assert t[idx] > 0.5 * t_env  # not trivially early


def test_not_settled_by_the_end_returns_none():
    t = np.arange(0, 2, 1 / 24)
    assert settle_index(0.5 * np.sin(2 * np.pi * t), 0) is None
