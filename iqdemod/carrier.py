"""Carrier error: how far the burst's tones sit from where the link says.

Two estimators, used in turn on each burst:

- :func:`coarse_offset`, data-free. It maximises the energy a pair of
  tone correlators would collect, averaged over all timing phases. That average
  is the burst's periodogram smoothed by the correlator's own response
  sinc²(f·T), so the search is a smoothed periodogram read at the two tones
  (the periodogram maximum-likelihood frequency estimator of Rife & Boorstyn,
  IEEE Trans. IT-20, 1974, extended to a pair of tones), computed as a
  Blackman–Tukey estimate from the short-lag autocorrelation. Its pull-in is
  the search range, ±(pull-in) around the nominal centre.
- :func:`residual_offset`, decision-directed. While one tone is sent, its
  correlator output turns by 2π·δf·T from symbol to symbol; the averaged
  phase step of consecutive same-tone symbols measures δf (a delay-and-
  multiply phase-difference estimator, in the manner of Kay, IEEE Trans.
  ASSP-37, 1989). Unambiguous for |δf| < baud/2; the coarse estimate leaves
  a few hundredths of the baud.
"""

from __future__ import annotations

import functools

import numpy as np

from .numeric import parabolic_offset

__all__ = ["coarse_offset", "residual_offset"]


def coarse_offset(x: np.ndarray, rate_hz: float, *, baud: float, shift_hz: float, pull_in_hz: float) -> float:
    """Data-free carrier error of a burst, Hz.

    The periodogram smoothed by sinc²(f·T) is, by the Wiener–Khinchin
    theorem, the Fourier transform of the burst's autocorrelation times a
    triangular (Bartlett) lag window of half-width T: a Blackman–Tukey
    spectral estimate. Only lags shorter than one symbol are needed, so it is
    evaluated directly at the candidate frequencies.

    Parameters
    ----------
    x : numpy.ndarray
        Complex burst at `rate_hz`, nominally centred on 0 Hz.
    baud, shift_hz : float
        Symbol rate and tone shift.
    pull_in_hz : float
        The search range, ± Hz.

    Returns
    -------
    float
        The carrier error, Hz (+ = the tones are higher than nominal).

    Examples
    --------
    A burst of 100 random symbols (1 kbaud at 16 kHz, tones ±500 Hz) whose
    tones sit 120 Hz high; the search covers ±400 Hz:

    >>> import numpy as np
    >>> bits = np.random.default_rng(2).integers(0, 2, 100)
    >>> freq_hz = np.repeat(np.where(bits == 1, 500.0, -500.0), 16) + 120.0
    >>> x = np.exp(2j * np.pi * np.cumsum(freq_hz) / 16000)
    >>> round(coarse_offset(x, 16000, baud=1000, shift_hz=1000, pull_in_hz=400.0))
    120
    """
    x = np.asarray(x, dtype=np.complex128)
    period = rate_hz / baud
    n_lags = min(int(np.ceil(period)), len(x) - 1)
    if n_lags < 1:
        return 0.0
    r0 = float(np.vdot(x, x).real)
    r = np.array([np.vdot(x[:-k], x[k:]) for k in range(1, n_lags + 1)])  # Σ x[n+k]·conj(x[n])
    grid, kernel = _search_kernel(float(rate_hz), float(baud), float(shift_hz), float(pull_in_hz), n_lags)
    # kernel rows: both tones' weighted phase ramps, so score = Σ over tones of the smoothed spectrum
    score = 2.0 * r0 + 2.0 * (kernel @ r).real
    i = int(np.argmax(score))
    delta = float(grid[i])
    step = grid[1] - grid[0] if len(grid) > 1 else 0.0
    if 0 < i < len(score) - 1:  # parabolic refinement between grid points
        delta += parabolic_offset(score[i - 1], score[i], score[i + 1]) * step
    return float(np.clip(delta, -pull_in_hz, pull_in_hz))


@functools.lru_cache(maxsize=32)
def _search_kernel(rate_hz: float, baud: float, shift_hz: float, pull_in_hz: float, n_lags: int):
    """The candidate offsets and, per candidate, Σ over both tones of w_k·exp(−j2π f k / rate).

    It depends only on the link and the rate, so every burst of a capture shares it.
    """
    period = rate_hz / baud
    lags = np.arange(1, n_lags + 1)
    w = np.clip(1.0 - lags / period, 0.0, None)
    step = baud / 64
    grid = np.arange(-pull_in_hz, pull_in_hz + step / 2, step) if pull_in_hz > 0 else np.zeros(1)
    kernel = np.zeros((len(grid), n_lags), np.complex128)
    for tone in (-shift_hz / 2, shift_hz / 2):
        kernel += w * np.exp(-2j * np.pi * np.outer(grid + tone, lags) / rate_hz)
    kernel.setflags(write=False)
    return grid, kernel


def residual_offset(z: np.ndarray, decided: np.ndarray, period_samples: float, rate_hz: float) -> float:
    """Decision-directed carrier error from the winning correlator outputs, Hz.

    The correlator references run on a common time axis, so while the same
    tone is sent the winning output turns by 2π·δf·T from one symbol to the
    next. The angle of Σ z[k+1]·conj(z[k]) over pairs of the same tone
    estimates δf; pairs across a change of tone are left out, so a Gaussian
    pulse does not pull the estimate with the data pattern.

    Parameters
    ----------
    z : numpy.ndarray
        Complex output of the winning correlator, per symbol.
    decided : numpy.ndarray
        The tone decided for each symbol.
    period_samples : float
        Symbol period in samples at `rate_hz`.

    Returns
    -------
    float
        δf, Hz, unambiguous for |δf| < baud/2; 0.0 with fewer than 8 pairs.

    Examples
    --------
    A tone 30 Hz off turns the winning correlator output by 2π·30·T per
    symbol (T = 1 ms, 16 samples at 16 kHz); the phase step gives the 30 Hz back:

    >>> import numpy as np
    >>> k = np.arange(40)
    >>> z = np.exp(2j * np.pi * 30.0 * 0.001 * k + 0.3j)
    >>> round(residual_offset(z, np.ones(40, dtype=int), 16.0, 16000), 6)
    30.0
    """
    same = np.flatnonzero(decided[1:] == decided[:-1])
    if len(same) < 8:
        return 0.0
    acc = np.sum(z[same + 1] * np.conj(z[same]))
    if acc == 0:
        return 0.0
    return float(np.angle(acc) / (2 * np.pi * period_samples / rate_hz))
