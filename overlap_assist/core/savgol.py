"""Savitzky–Golay smoothing-differentiation of uniformly sampled signals.

A polynomial of degree ``order`` is fitted by least squares to each window of ``window``
samples and its ``deriv``-th derivative is read at the window's centre sample. Near the ends of
the range, where no centred window fits, the first (last) full window is fitted once and its
polynomial is differentiated at each end sample, so the result is exact for any polynomial of
degree <= ``order`` over the whole range (scipy calls this ``mode='interp'``).

References
----------
Savitzky A. & Golay M.J.E. (1964), "Smoothing and differentiation of data by simplified least
squares procedures", Anal. Chem. 36(8):1627-1639.
"""
from __future__ import annotations

import math

import numpy as np

from .errors import InputError, RangeTooShortError


def savgol_weights(window: int, order: int, deriv: int, at: int, delta: float = 1.0) -> np.ndarray:
    """Weights that turn ``window`` consecutive samples into the ``deriv``-th derivative.

    Parameters
    ----------
    window : int
        Number of samples in the fit (odd or even).
    order : int
        Degree of the fitted polynomial, ``< window``.
    deriv : int
        Derivative to return (0 = smoothed value).
    at : int
        Index inside the window (0 .. window-1) where the derivative is read.
    delta : float
        Sample spacing (seconds for time derivatives).

    Returns
    -------
    ndarray, shape (window,)
        ``weights @ samples[start:start+window]`` is the derivative at sample ``start + at``.
    """
    offsets = np.arange(window, dtype=float) - at
    vander = offsets[:, None] ** np.arange(order + 1)[None, :]
    # Row `deriv` of the pseudo-inverse gives the polynomial coefficient c_deriv as a linear
    # function of the samples; the derivative at offset 0 is deriv! * c_deriv.
    pinv = np.linalg.pinv(vander)
    if deriv > order:
        return np.zeros(window)
    return pinv[deriv] * math.factorial(deriv) / delta**deriv


def savgol_derivative(samples: np.ndarray, window: int, order: int, deriv: int, delta: float) -> np.ndarray:
    """Savitzky–Golay derivative along axis 0, exact for polynomials up to ``order`` everywhere.

    Parameters
    ----------
    samples : ndarray, shape (n, ...)
        Uniformly spaced samples, time on axis 0.
    window, order, deriv, delta
        As in :func:`savgol_weights`; ``window`` must be odd.

    Returns
    -------
    ndarray, same shape as ``samples``
    """
    x = np.asarray(samples, dtype=float)
    n = x.shape[0]
    if window % 2 != 1 or window < 3:
        raise InputError(f"smoothing window must be an odd number of samples >= 3 (got {window})")
    if not 0 <= order < window:
        raise InputError(f"smoothing order must be between 0 and window-1 (got order {order}, window {window})")
    if n < window:
        raise RangeTooShortError(
            f"the range has {n} samples but the smoothing window needs {window}: "
            "use a longer frame range or a smaller smoothing window")
    half = window // 2
    flat = x.reshape(n, -1)
    out = np.empty_like(flat)
    centre = savgol_weights(window, order, deriv, half, delta)
    # Interior: one weighted sum per window position, vectorised over windows and channels.
    windows = np.lib.stride_tricks.sliding_window_view(flat, window, axis=0)  # (n-w+1, ch, w)
    out[half:n - half] = windows @ centre
    # Ends: the first and last full window, differentiated at each end sample.
    for i in range(half):
        out[i] = savgol_weights(window, order, deriv, i, delta) @ flat[:window]
        out[n - 1 - i] = savgol_weights(window, order, deriv, window - 1 - i, delta) @ flat[n - window:]
    return out.reshape(x.shape)
