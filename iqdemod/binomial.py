"""Counting frame errors: the frame error rate of independent bit errors, and binomial statistics.

What a capture's CRC failures say beside a prediction: the frame error rate
that a bit error rate implies, an exact confidence interval for the rate
observed (Clopper & Pearson, Biometrika 26, 1934; REFERENCE.md §7) and the
exact two-sided binomial test of the count against the predicted rate
(``scipy.stats.binomtest``). Split from :mod:`iqdemod.predict` (issue 11),
which still offers these names.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from iqdemod.errors import EstimateError

__all__ = ["fer_from_ber", "clopper_pearson", "binomial_p_value"]


def _out(value, scalar: bool):
    """Return a Python float for scalar input, otherwise the array itself."""
    return float(value) if scalar else value


def fer_from_ber(ber, n_bits):
    """Frame error rate of `n_bits` independent bits, ``1 - (1 - ber)^n_bits``.

    Computed as ``-expm1(n_bits * log1p(-ber))`` so that tiny `ber` keeps its
    digits (``per ~ n_bits * ber``).

    Parameters
    ----------
    ber : float or array_like
        Bit error probability in [0, 1].
    n_bits : int or array_like
        Bits per frame that a CRC checks (>= 0).

    Returns
    -------
    float or ndarray
        Frame error probability, broadcast over the arguments.

    Examples
    --------
    >>> fer_from_ber(1e-12, 1000)  # doctest: +ELLIPSIS
    9.99999999...e-10

    A 208-bit frame (24 payload bytes and a 16-bit CRC) of non-coherent
    orthogonal FSK at 10 dB, where ½·exp(−Eb/2N0) = 3.369e-3 (REFERENCE §1):

    >>> round(fer_from_ber(0.5 * np.exp(-10.0 / 2), 208), 4)
    0.5044
    """
    p = np.asarray(ber, dtype=float)
    n = np.asarray(n_bits, dtype=float)
    if np.any(~(p >= 0)) or np.any(p > 1):
        raise EstimateError(f"ber {ber!r}: must be in [0, 1]")
    if np.any(~(n >= 0)) or np.any(n != np.floor(n)) or np.any(~np.isfinite(n)):
        raise EstimateError(f"n_bits {n_bits!r}: must be a whole number >= 0")
    with np.errstate(divide="ignore", invalid="ignore"):
        fer = -np.expm1(n * np.log1p(-p))
    fer = np.where(n == 0, 0.0, np.where(p == 1.0, 1.0, fer))
    return _out(fer, p.ndim == 0 and n.ndim == 0)



def _counts(k, n):
    karr = np.asarray(k)
    narr = np.asarray(n)
    for name, v in (("k", karr), ("n", narr)):
        if not np.issubdtype(v.dtype, np.integer) and not (
            np.issubdtype(v.dtype, np.floating) and np.all(v == np.floor(v))
        ):
            raise EstimateError(f"{name} {v!r}: must be a whole number")
    karr = karr.astype(np.int64)
    narr = narr.astype(np.int64)
    if np.any(narr < 1):
        raise EstimateError(f"n {n!r}: must be >= 1")
    if np.any(karr < 0) or np.any(karr > narr):
        raise EstimateError(f"k {k!r}: must be in [0, n] (n = {n!r})")
    return karr, narr


def clopper_pearson(k, n, *, confidence=0.95, alternative="two-sided"):
    """Exact (Clopper–Pearson) confidence interval for a binomial proportion.

    ``lower = beta.ppf(alpha/2, k, n - k + 1)`` and
    ``upper = beta.ppf(1 - alpha/2, k + 1, n - k)``, with ``lower = 0`` at
    ``k = 0`` and ``upper = 1`` at ``k = n`` (Clopper & Pearson, Biometrika
    26, 1934); the same as ``scipy.stats.binomtest(k, n).proportion_ci("exact")``.

    Parameters
    ----------
    k : int or array_like
        Observed errors.
    n : int or array_like
        Trials (>= 1).
    confidence : float, optional
        Confidence level in (0, 1); default 0.95.
    alternative : {"two-sided", "less", "greater"}, optional
        ``"less"`` gives the one-sided upper bound ``(0, upper)`` (all of
        ``1 - confidence`` in the upper tail), ``"greater"`` the one-sided
        lower bound ``(lower, 1)``; names as in ``scipy.stats.binomtest``.

    Returns
    -------
    (float, float) or (ndarray, ndarray)
        ``(lower, upper)``.

    Examples
    --------
    >>> lo, hi = clopper_pearson(0, 1000)
    >>> lo, round(hi, 8)
    (0.0, 0.00368208)
    """
    karr, narr = _counts(k, n)
    if not (0.0 < float(confidence) < 1.0):
        raise EstimateError(f"confidence {confidence!r}: must be in (0, 1)")
    if alternative not in ("two-sided", "less", "greater"):
        raise EstimateError(f"alternative {alternative!r}: must be 'two-sided', 'less' or 'greater'")
    alpha = 1.0 - float(confidence)
    tail = alpha / 2.0 if alternative == "two-sided" else alpha
    with np.errstate(invalid="ignore"):
        lo = stats.beta.ppf(tail, karr, narr - karr + 1)
        hi = stats.beta.ppf(1.0 - tail, karr + 1, narr - karr)
    lo = np.where(karr == 0, 0.0, lo)
    hi = np.where(karr == narr, 1.0, hi)
    if alternative == "less":
        lo = np.zeros_like(lo)
    elif alternative == "greater":
        hi = np.ones_like(hi)
    scalar = karr.ndim == 0 and narr.ndim == 0
    return _out(lo, scalar), _out(hi, scalar)


def binomial_p_value(k, n, p):
    """Two-sided exact binomial test of `k` errors in `n` trials against rate `p`.

    ``scipy.stats.binomtest(k, n, p).pvalue`` (the two-sided p-value sums the
    probabilities of all outcomes no more likely than `k`).

    Parameters
    ----------
    k : int
        Observed errors.
    n : int
        Trials (>= 1).
    p : float
        Hypothesised error probability in [0, 1].

    Returns
    -------
    float
        p-value in [0, 1].

    Examples
    --------
    >>> binomial_p_value(5, 10, 0.5)
    1.0
    """
    karr, narr = _counts(k, n)
    if karr.ndim or narr.ndim:
        raise EstimateError(f"k {k!r}, n {n!r}: must be single numbers")
    if not (0.0 <= float(p) <= 1.0):
        raise EstimateError(f"p {p!r}: must be in [0, 1]")
    return float(stats.binomtest(int(karr), int(narr), float(p)).pvalue)
