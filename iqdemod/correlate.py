"""The correlator bank: quadrature (I/Q) correlators, one pair per tone, with square-law decisions.

For tone i the complex correlator output over symbol k is

    z_i[k] = (1/T) ∫_{t_k}^{t_k+T} r(t)·exp(−j2π f_i t) dt,

its real and imaginary parts being the in-phase and quadrature correlators.
The square-law statistic |z_i[k]|² does not depend on the carrier phase, and
the decision picks the larger one: the optimum non-coherent receiver for
equal-energy binary signals in white Gaussian noise (Proakis, *Digital
Communications*, ch. 4 (5th ed.); Sklar, *Digital Communications*, ch. 4).

The integral is evaluated at any fractional start and length from the running
sum of r·exp(−j2π f_i t), linearly interpolated: a sample counts in full when
its interval [n, n+1) lies inside the window and in proportion otherwise. One
cumulative sum per tone serves every symbol, so there is no loop per symbol.
"""

from __future__ import annotations

import numpy as np

__all__ = ["tone_sums", "window_sums", "correlate"]


def tone_sums(x: np.ndarray, rate_hz: float, tones_hz) -> np.ndarray:
    """Running sums of `x` mixed down by each tone.

    Returns
    -------
    numpy.ndarray
        complex128, shape (n_tones, len(x) + 1); row i at position t is the sum
        of x[n]·exp(−j2π f_i n / rate) over n < t.
    """
    x = np.asarray(x, dtype=np.complex128)
    n = np.arange(len(x))
    out = np.zeros((len(tones_hz), len(x) + 1), dtype=np.complex128)
    for i, f in enumerate(tones_hz):
        np.cumsum(x * np.exp(-2j * np.pi * (f / rate_hz) * n), out=out[i, 1:])
    return out


def window_sums(sums: np.ndarray, starts: np.ndarray, length: float) -> np.ndarray:
    """Sums over the windows [start, start + length), fractional edges included.

    Parameters
    ----------
    sums : numpy.ndarray
        From :func:`tone_sums`, shape (n_tones, n + 1).
    starts : numpy.ndarray
        Window starts in samples (floats), each with start >= 0 and
        start + length <= n.
    length : float
        Window length in samples.

    Returns
    -------
    numpy.ndarray
        complex128, shape (len(starts), n_tones).
    """
    grid = np.arange(sums.shape[1], dtype=np.float64)
    starts = np.asarray(starts, dtype=np.float64)
    out = np.empty((len(starts), sums.shape[0]), dtype=np.complex128)
    for i in range(sums.shape[0]):
        out[:, i] = np.interp(starts + length, grid, sums[i]) - np.interp(starts, grid, sums[i])
    return out


def correlate(sums: np.ndarray, starts: np.ndarray, length: float) -> np.ndarray:
    """Correlator outputs z (window mean, so a unit tone gives |z| = 1), shape (n_symbols, n_tones)."""
    return window_sums(sums, starts, length) / length
