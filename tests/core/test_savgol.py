"""Savitzky–Golay smoothing-differentiation against published coefficients and scipy."""
import numpy as np
import pytest
from scipy.signal import savgol_coeffs, savgol_filter

from overlap_assist.core.errors import InputError, RangeTooShortError
from overlap_assist.core.savgol import savgol_derivative, savgol_weights

G0 = 9.80665  # standard gravity, 3rd CGPM 1901


@pytest.mark.parametrize("window,order,deriv,expected", [
    # Savitzky & Golay 1964, Anal. Chem. 36(8), Tables I-III (quadratic/cubic smoothing and
    # quadratic derivatives), as regenerated in REFERENCES.md §7.
    (5, 2, 0, np.array([-3, 12, 17, 12, -3]) / 35),
    (7, 2, 0, np.array([-2, 3, 6, 7, 6, 3, -2]) / 21),
    (5, 2, 1, np.array([-2, -1, 0, 1, 2]) / 10),
    (7, 2, 1, np.array([-3, -2, -1, 0, 1, 2, 3]) / 28),
    (5, 2, 2, np.array([2, -1, -2, -1, 2]) / 7),
    (5, 3, 2, np.array([2, -1, -2, -1, 2]) / 7),
    (7, 2, 2, np.array([5, 0, -3, -4, -3, 0, 5]) / 42),
])
def test_centre_weights_match_savitzky_golay_1964(window, order, deriv, expected):
    np.testing.assert_allclose(savgol_weights(window, order, deriv, window // 2), expected, atol=1e-12)


@pytest.mark.parametrize("window,order,deriv", [(5, 2, 1), (9, 3, 2), (11, 4, 0), (7, 2, 2)])
@pytest.mark.parametrize("at", [0, 1, 3])
def test_weights_match_scipy_savgol_coeffs(window, order, deriv, at):
    # Reference library: scipy.signal.savgol_coeffs(pos=at, use='dot') (oldest -> newest).
    ref = savgol_coeffs(window, order, deriv=deriv, delta=0.5, pos=at, use="dot")
    np.testing.assert_allclose(savgol_weights(window, order, deriv, at, 0.5), ref, atol=1e-9)


@pytest.mark.parametrize("window,order,deriv", [(5, 2, 2), (9, 2, 1), (13, 3, 2), (7, 3, 0)])
def test_whole_signal_matches_scipy_interp_mode(window, order, deriv):
    rng = np.random.default_rng(0)
    x = np.cumsum(rng.normal(size=(60, 3)), axis=0)
    ours = savgol_derivative(x, window, order, deriv, 1 / 96)
    ref = savgol_filter(x, window, order, deriv=deriv, delta=1 / 96, axis=0, mode="interp")
    np.testing.assert_allclose(ours, ref, rtol=1e-9, atol=1e-6)


def test_exact_parabola_gives_gravity_at_every_sample_including_the_ends():
    # REFERENCES.md §7 edge test: z = 3t - g0 t^2/2 at 24 fps, SG(5,2), second derivative.
    t = np.arange(30) / 24
    z = 3 * t - 0.5 * G0 * t**2
    acc = savgol_derivative(z, 5, 2, 2, 1 / 24)
    np.testing.assert_allclose(acc, -G0, atol=1e-9)


def test_bad_settings_say_what_to_do():
    with pytest.raises(RangeTooShortError, match="longer frame range"):
        savgol_derivative(np.zeros(4), 5, 2, 2, 1.0)
    with pytest.raises(InputError, match="odd"):
        savgol_derivative(np.zeros(40), 6, 2, 2, 1.0)
