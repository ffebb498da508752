"""The Eb/N0 estimators: from the receiver's square-law decision statistics to an estimate.

The receiver hands over, per symbol, ``z0sq = |z0|**2`` and ``z1sq = |z1|**2``
from its two quadrature correlators (any common scale). With unit-amplitude
references, ``|signal|**2 / E|noise|**2`` at one output is Es/N0 = Eb/N0
(REFERENCE.md sec. 4). The model behind every estimator here: orthogonal
tones and correct timing, so per symbol one output is ``|s + n|**2`` (its
amplitude Rician) and the other ``|n'|**2`` (exponential), ``n, n'``
independent complex Gaussian of power ``N``; ``rho = |s|**2 / N`` is the
Eb/N0 sought.

* :func:`estimate_data_aided` (bits known, e.g. frames whose CRC passed):
  unbiased ratio estimator with an exact confidence interval.
* :func:`estimate_blind`: both-branch moment estimator, no decisions, so no
  selection bias; delta-method interval.
* :func:`estimate_decision_directed`: winner/loser estimator, with its
  large-sample bias removed by inverting :func:`decision_directed_limit`.

Each estimator reduces its symbols to a few sums first; :func:`estimate_from_sums`
evaluates any of them on sums, which is how pooled frames are estimated.
:mod:`iqdemod.estimate` offers every name.
"""

from __future__ import annotations

import math

import numpy as np

from iqdemod.errors import EstimateError
from iqdemod.estimate_result import CONFIDENCE, Z90, EbN0Estimate, db_or_minus_inf

__all__ = [
    "estimate_data_aided",
    "estimate_blind",
    "estimate_decision_directed",
    "decision_directed_limit",
    "debias_decision_directed",
    "estimate_from_sums",
    "model_statistics",
]

# Above this many symbols the exact non-central F inversion is replaced by
# its normal limit: the two agree to far better than the interval's own
# sampling noise there, and the special function slows down (and warns) as
# the non-centrality grows with the record length.
_EXACT_MAX_SYMBOLS = 100_000


# --------------------------------------------------------------------------- inputs


def _statistics(z0sq, z1sq) -> tuple[np.ndarray, np.ndarray]:
    z0 = np.asarray(z0sq, dtype=float)
    z1 = np.asarray(z1sq, dtype=float)
    if z0.ndim != 1 or z0.shape != z1.shape:
        raise EstimateError(
            f"z0sq shape {z0.shape}, z1sq shape {z1.shape}: must be 1-D arrays of equal length"
        )
    if z0.size < 1:
        raise EstimateError("0 symbols: need at least 1")
    for name, z in (("z0sq", z0), ("z1sq", z1)):
        if not np.all(np.isfinite(z)) or np.any(z < 0):
            raise EstimateError(f"{name}: square-law statistics must be finite and >= 0")
    return z0, z1


def _sums(a: np.ndarray, b: np.ndarray) -> tuple[float, ...]:
    """(L, sum a, sum b, sum a^2, sum b^2, sum a b): enough for means and covariances."""
    return (
        float(a.size),
        float(a.sum()),
        float(b.sum()),
        float(np.dot(a, a)),
        float(np.dot(b, b)),
        float(np.dot(a, b)),
    )


def _moments(st: tuple[float, ...]):
    """Means and the (unbiased) 2x2 sample covariance from :func:`_sums`."""
    n, sa, sb, saa, sbb, sab = st
    ma, mb = sa / n, sb / n
    cov = np.array(
        [[saa - sa * ma, sab - sa * mb], [sab - sa * mb, sbb - sb * mb]]
    ) / max(n - 1.0, 1.0)  # unused when n = 1
    return n, ma, mb, cov


def _result(method: str, st: tuple[float, ...], rho: float, lo: float, hi: float) -> EbN0Estimate:
    """The estimate of linear values (point, 90 % ends) in dB, keeping the sums (the first is the symbol count)."""
    return EbN0Estimate.with_sums(st, ebn0_db=db_or_minus_inf(rho), ci90_db=(db_or_minus_inf(lo), db_or_minus_inf(hi)),
                                  n_symbols=int(st[0]), method=method)


# --------------------------------------------------------------------------- data-aided


def _ncf_cdf(x: float, dof: float, nc: float) -> float:
    """CDF of the non-central F(dof, dof; nc) at x.

    ``special.ncfdtr`` is the same Boost routine as ``stats.ncf.cdf`` at a
    tenth of the call overhead. Tails are taken as ``1 - cdf``: only the
    5 % points are needed, and ``stats.ncf.sf`` is wrong at ``nc = 0`` in
    scipy 1.17 (it returns ``-cdf``; scipy issue 26188).
    """
    from scipy import special  # late: the decoder's (and its worker's) import need not pay for it

    return float(special.ncfdtr(dof, dof, nc, x))


def _ncf_sf(x: float, dof: float, nc: float) -> float:
    return 1.0 - _ncf_cdf(x, dof, nc)


def _invert_increasing(fun, guess: float) -> float:
    """Root in rho >= 0 of an increasing `fun` with ``fun(0) < 0``.

    `guess` (from the normal limit) only seeds the bracket; the bracket is
    widened geometrically until it holds a sign change.
    """
    guess = max(guess, 1e-3)
    lo, hi = guess / 1.25, guess * 1.25
    while fun(hi) < 0.0:
        lo, hi = hi, 2.0 * hi + 1.0
        if hi > 1e15:
            return math.inf
    while lo > 1e-9 and fun(lo) > 0.0:
        hi, lo = lo, lo / 4.0
    if lo <= 1e-9:
        lo = 0.0
    # rtol 1e-9 is far below the interval's meaning (dB to 3 decimals).
    from scipy import optimize  # late: only the exact interval and the bias map need a root finder

    return optimize.brentq(fun, lo, hi, xtol=1e-12, rtol=1e-9)


def _normal_limit(ratio: float, n: float) -> tuple[float, float, float]:
    """Point value and 90 % ends from the normal limit of log(T/O)."""
    # (for L = 1 only a seed for the exact inversion, so drop the (L-1)/L)
    centre = math.log(ratio) + (math.log1p(-1.0 / n) if n > 1 else 0.0)
    r = max(math.expm1(centre), 0.0)
    se = math.sqrt(((1.0 + 2.0 * r) / (1.0 + r) ** 2 + 1.0) / n)
    return (
        math.expm1(centre),
        math.expm1(centre - Z90 * se),
        math.expm1(centre + Z90 * se),
    )


def _data_aided_from_stats(st: tuple[float, ...], exact: bool = True) -> EbN0Estimate:
    n, t, o = st
    if not o > 0.0:
        raise EstimateError("sum of the other-branch statistics 0: must be > 0 (no noise to measure)")
    ratio = t / o
    rho = (n - 1.0) / n * ratio - 1.0
    alpha = (1.0 - CONFIDENCE) / 2.0
    dof = 2.0 * n
    _, lo_guess, hi_guess = _normal_limit(ratio, n)
    if exact and n <= _EXACT_MAX_SYMBOLS:
        # T/O ~ F'(2L, 2L; 2 L rho): invert each tail in rho (Neyman).
        if _ncf_sf(ratio, dof, 0.0) >= alpha:
            lo = 0.0
        else:
            lo = _invert_increasing(lambda r: _ncf_sf(ratio, dof, dof * r) - alpha, lo_guess)
        if _ncf_cdf(ratio, dof, 0.0) <= alpha:
            hi = 0.0
        else:
            hi = _invert_increasing(lambda r: alpha - _ncf_cdf(ratio, dof, dof * r), hi_guess)
    else:
        # Normal limit of log(T/O): variance ((1 + 2 rho)/(1 + rho)^2 + 1) / L.
        lo, hi = lo_guess, hi_guess
    return _result("data-aided", st, rho, lo, hi)


def estimate_data_aided(z0sq, z1sq, bits, *, exact_interval: bool = True) -> EbN0Estimate:
    """Data-aided Eb/N0 from symbols whose bits are known.

    With ``T = sum |r_true|^2`` (the output of the sent tone's correlator)
    and ``O = sum |r_other|^2`` over ``L`` symbols::

        rho_hat = (L - 1) / L * T / O - 1

    is unbiased (REFERENCE.md sec. 4): ``O / N ~ Gamma(L)`` so
    ``E[1 / O] = 1 / ((L - 1) N)``, independent of ``T`` with
    ``E[T] = L (S + N)``.

    Confidence interval (exact, 90 % two-sided): ``2T/N`` is non-central
    chi-square with ``2L`` degrees of freedom and non-centrality
    ``2 L rho``, ``2O/N`` central chi-square with ``2L``; the unknown ``N``
    cancels in ``T / O``, which is non-central F(2L, 2L; 2 L rho). The
    interval collects every ``rho >= 0`` at which the observed ratio is not
    in either 5 % tail (test inversion, the Neyman construction), solved
    with ``brentq`` on the non-central F distribution function
    (``scipy.special.ncfdtr``). Its coverage is exactly 90 % for any true
    ``rho > 0`` under the model of the module docstring, whatever ``L``. Above 100 000 symbols the
    normal limit of ``log(T/O)`` is used instead.

    Parameters
    ----------
    z0sq, z1sq : array_like of float
        Per-symbol square-law statistics of the tone-0 and tone-1
        correlators (1-D, equal length, >= 1 symbol).
    bits : array_like of {0, 1}
        The bit sent in each symbol (1 means tone 1).
    exact_interval : bool
        False takes the interval from the normal limit of ``log(T/O)``, which
        costs nothing; the receiver does so per frame, and :func:`iqdemod.estimate.pool`
        recomputes the exact interval from the sums.

    Returns
    -------
    EbN0Estimate
        ``method = "data-aided"``, keeping the sums ``(L, T, O)``.

    Examples
    --------
    2000 symbols at 10 dB, tone 0 sent in each:

    >>> z0, z1 = model_statistics(10.0, 2000, seed=1)
    >>> est = estimate_data_aided(z0, z1, np.zeros(2000))
    >>> est.ci90_db[0] < 10.0 < est.ci90_db[1]
    True
    """
    z0, z1 = _statistics(z0sq, z1sq)
    b = np.asarray(bits)
    if b.shape != z0.shape:
        raise EstimateError(f"bits shape {b.shape}: must match the statistics, {z0.shape}")
    if not np.all((b == 0) | (b == 1)):
        raise EstimateError("bits: every value must be 0 or 1")
    one = b.astype(bool)
    true_sum = float(np.where(one, z1, z0).sum())
    other_sum = float(np.where(one, z0, z1).sum())
    return _data_aided_from_stats((float(z0.size), true_sum, other_sum), exact_interval)


# --------------------------------------------------------------------------- blind


def _blind_from_stats(st: tuple[float, ...]) -> EbN0Estimate:
    n, m2, p, cov = _moments(st)
    if not p > 0.0:
        raise EstimateError("mean of z0sq * z1sq 0: must be > 0 (no noise to measure)")
    disc = m2 * m2 - 4.0 * p  # < m2**2 since p > 0, so m2 - sqrt(disc) > 0
    if n < 2:
        # one symbol: a point value, but no spread to build an interval from
        s = math.sqrt(max(disc, 0.0))
        rho = 2.0 * s / (m2 - s)
        lo, hi = 0.0, math.inf
    elif disc > 0.0:
        s = math.sqrt(disc)
        rho = 2.0 * s / (m2 - s)
        # Delta method on log(rho) as a function of (M2, P).
        grad = np.array([(m2 + s) / (s * s), -2.0 * m2 / (s * s * (m2 - s))])
        se = math.sqrt(max(float(grad @ cov @ grad) / n, 0.0))
        lo = rho * math.exp(-Z90 * se)
        hi = rho * math.exp(Z90 * se)
    else:
        # No signal resolved: point estimate 0, upper limit from the
        # discriminant's own delta-method interval.
        rho = lo = 0.0
        grad = np.array([2.0 * m2, -4.0])
        d_hi = disc + Z90 * math.sqrt(max(float(grad @ cov @ grad) / n, 0.0))
        if d_hi > 0.0:
            s_hi = math.sqrt(d_hi)
            hi = 2.0 * s_hi / (m2 - s_hi) if m2 > s_hi else math.inf
        else:
            hi = 0.0
    return _result("blind", st, rho, lo, hi)


def estimate_blind(z0sq, z1sq) -> EbN0Estimate:
    """Non-data-aided Eb/N0 from the moments of both branches.

    Per symbol one output holds signal and noise, the other noise only, but
    which is which is never decided, so there is no selection bias. With
    ``M2 = E(|r0|^2 + |r1|^2) = S + 2N`` and ``P = E(|r0|^2 |r1|^2) =
    (S + N) N`` (REFERENCE.md sec. 4 [derived])::

        N_hat = (M2 - sqrt(M2^2 - 4P)) / 2,   S_hat = M2 - 2 N_hat,
        rho_hat = S_hat / N_hat

    from the sample means. A discriminant ``M2^2 - 4P <= 0`` (signal below
    what the record resolves) gives ``S_hat = 0``, i.e. ``-inf`` dB.

    Confidence interval (90 %): delta method on ``log rho_hat`` with the
    sample covariance of the per-symbol pair ``(|r0|^2 + |r1|^2,
    |r0|^2 |r1|^2)`` (Casella & Berger, *Statistical Inference*, sec. 5.5),
    symmetric in log so that it stays positive; when the discriminant is
    not positive the upper end comes from the delta-method interval of
    the discriminant itself. The interval is asymptotic; its coverage was
    measured in the tests.

    Parameters
    ----------
    z0sq, z1sq : array_like of float
        Per-symbol square-law statistics (1-D, equal length, >= 1 symbol;
        one symbol gives a point value with the interval ``(-inf, inf)``).

    Returns
    -------
    EbN0Estimate
        ``method = "blind"``, keeping the sums of the pair ``(|r0|^2 + |r1|^2, |r0|^2 |r1|^2)``
        (count, both sums, both sums of squares, the sum of products).

    Examples
    --------
    2000 symbols at 10 dB, which tone was sent never used:

    >>> est = estimate_blind(*model_statistics(10.0, 2000, seed=1))
    >>> est.ci90_db[0] < 10.0 < est.ci90_db[1], round(est.ebn0_db, 2)
    (True, 9.95)
    """
    z0, z1 = _statistics(z0sq, z1sq)
    return _blind_from_stats(_sums(z0 + z1, z0 * z1))


# --------------------------------------------------------------------------- decision-directed


def decision_directed_limit(ebn0):
    """Large-sample limit of the decision-directed Eb/N0 estimate.

    The estimator ``(mean|r_w|^2 - mean|r_l|^2) / mean|r_l|^2`` (winner
    and loser of each symbol) converges to::

        (rho + 2 Pb) / (1 - Pb),   Pb = exp(-rho / 2) / 2

    (REFERENCE.md sec. 4 [derived]): ``E[min] = N (1 - Pb)`` because
    ``E min(X, Y) = integral P(X > t) P(Y > t) dt`` with ``Y`` exponential,
    which integrates by parts to ``N (1 - E exp(-X/N)) = N (1 - Pb)``, and
    ``E max + E min = S + 2N``. It is 2 (3.01 dB) at ``rho = 0`` and
    increasing.

    Parameters
    ----------
    ebn0 : float or array_like
        True linear Eb/N0 (>= 0).

    Returns
    -------
    float or ndarray
        The linear value the raw estimator tends to.

    Examples
    --------
    >>> round(10 * math.log10(decision_directed_limit(1.0)), 3)
    3.628
    """
    g = np.asarray(ebn0, dtype=float)
    if np.any(~(g >= 0)):
        raise EstimateError(f"ebn0 {ebn0!r}: must be a linear Eb/N0 >= 0")
    pb = 0.5 * np.exp(-0.5 * g)
    out = (g + 2.0 * pb) / (1.0 - pb)
    return float(out) if g.ndim == 0 else out


def debias_decision_directed(ebn0_dd):
    """Invert :func:`decision_directed_limit`: the true Eb/N0 behind a raw estimate.

    Solved with ``brentq`` on ``[0, ebn0_dd]`` (the limit exceeds the truth
    by ``Pb (2 + rho) / (1 - Pb) > 0``). Raw values at or below 2, the
    limit at zero signal, map to 0.

    Parameters
    ----------
    ebn0_dd : float or array_like
        Raw decision-directed estimate, linear.

    Returns
    -------
    float or ndarray
        Linear Eb/N0 (>= 0).

    Examples
    --------
    >>> round(10 * math.log10(debias_decision_directed(10 ** 0.4622)), 2)
    3.0
    """
    arr = np.asarray(ebn0_dd, dtype=float)
    if np.any(np.isnan(arr)):
        raise EstimateError(f"ebn0_dd {ebn0_dd!r}: must not be nan")

    from scipy import optimize  # late: the decoder's import need not pay for it

    def one(v: float) -> float:
        if not v > 2.0:
            return 0.0
        if v == math.inf:
            return math.inf
        return optimize.brentq(
            lambda g: decision_directed_limit(g) - v, 0.0, v, xtol=1e-14, rtol=1e-12
        )

    out = np.array([one(float(v)) for v in arr.ravel()]).reshape(arr.shape)
    return float(out) if arr.ndim == 0 else out


def _dd_from_stats(st: tuple[float, ...], debias: bool) -> EbN0Estimate:
    n, mw, ml, cov = _moments(st)
    if not ml > 0.0:
        raise EstimateError("mean of the losing statistics 0: must be > 0 (no noise to measure)")
    ratio = mw / ml
    # Delta method on log(mean_w / mean_l); no interval from one symbol.
    grad = np.array([1.0 / mw, -1.0 / ml])
    se = math.sqrt(max(float(grad @ cov @ grad) / n, 0.0)) if n >= 2 else math.inf
    raw = np.array([ratio * math.exp(-Z90 * se), ratio, ratio * math.exp(Z90 * se)]) - 1.0
    vals = debias_decision_directed(raw) if debias else raw
    lo, rho, hi = (float(v) for v in vals)
    return _result("decision-directed" if debias else "decision-directed-raw", st, rho, lo, hi)


def estimate_decision_directed(z0sq, z1sq, *, debias=True) -> EbN0Estimate:
    """Decision-directed Eb/N0: the larger output taken as signal plus noise.

    ``S_hat = mean|r_w|^2 - mean|r_l|^2``, ``N_hat = mean|r_l|^2``
    (REFERENCE.md sec. 4). The raw ratio is biased upward at low Eb/N0
    because the loser is sometimes the signal; with `debias` the
    large-sample bias is removed through :func:`debias_decision_directed`.

    Confidence interval (90 %): delta method on ``log(mean|r_w|^2 /
    mean|r_l|^2)`` with the sample covariance of winner and loser, mapped
    through the (monotone) bias correction.

    Parameters
    ----------
    z0sq, z1sq : array_like of float
        Per-symbol square-law statistics (1-D, equal length, >= 1 symbol;
        one symbol gives a point value with the interval ``(-inf, inf)``).
    debias : bool, optional
        Remove the selection bias (default True; method
        ``"decision-directed"``), or report the raw ratio (method
        ``"decision-directed-raw"``).

    Returns
    -------
    EbN0Estimate

    Examples
    --------
    The same 2000 symbols at 10 dB as :func:`estimate_blind`'s example; at
    this strength the selection bias is small (REFERENCE §4: the raw limit is
    10.018 dB for a truth of 10 dB):

    >>> z0, z1 = model_statistics(10.0, 2000, seed=1)
    >>> round(estimate_decision_directed(z0, z1).ebn0_db, 3)
    10.034
    >>> round(estimate_decision_directed(z0, z1, debias=False).ebn0_db, 3)
    10.051
    """
    z0, z1 = _statistics(z0sq, z1sq)
    return _dd_from_stats(_sums(np.maximum(z0, z1), np.minimum(z0, z1)), bool(debias))

# --------------------------------------------------------------------------- from sums


def estimate_from_sums(method: str, sums: tuple[float, ...]) -> EbN0Estimate:
    """An estimator of `method` evaluated on the sums an estimate keeps (:attr:`EbN0Estimate.sums`).

    Sums add across records, so evaluating the estimator on the sums of
    several frames gives what one call on all their symbols gives; the
    data-aided interval is the exact one.

    Parameters
    ----------
    method : str
        ``"data-aided"``, ``"blind"``, ``"decision-directed"`` or
        ``"decision-directed-raw"``.
    sums : tuple of float
        The sums of that method, as an estimate of it keeps them.

    Returns
    -------
    EbN0Estimate

    Examples
    --------
    >>> est = estimate_data_aided([11.0, 0.5, 12.0], [1.5, 9.0, 0.5], [0, 1, 0])
    >>> estimate_from_sums("data-aided", est.sums) == est
    True
    """
    if method == "data-aided":
        return _data_aided_from_stats(sums)
    if method == "blind":
        return _blind_from_stats(sums)
    return _dd_from_stats(sums, method == "decision-directed")


# --------------------------------------------------------------------------- the model, drawn


def model_statistics(ebn0: float, n_symbols: int, *, seed=None) -> tuple[np.ndarray, np.ndarray]:
    """Square-law statistics drawn from the estimators' model, tone 0 sent in every symbol.

    Per symbol ``z0sq = |sqrt(ebn0) + n|**2`` and ``z1sq = |n'|**2``, with
    ``n, n'`` independent complex Gaussian noise of unit power: the model of
    the module docstring, for examples and trials of the estimators.

    Parameters
    ----------
    ebn0 : float
        True linear Eb/N0 (>= 0).
    n_symbols : int
        Symbols to draw (>= 1).
    seed : int or numpy.random.Generator, optional
        Seed of ``numpy.random.default_rng``.

    Returns
    -------
    z0sq, z1sq : ndarray
        The sent tone's and the other tone's statistics.

    Examples
    --------
    >>> z0, z1 = model_statistics(100.0, 1000, seed=2)
    >>> bool(np.all(z0 > z1)), round(float(np.mean(z1)), 1)  # at 20 dB the sent tone always wins
    (True, 1.0)
    """
    if not (math.isfinite(float(ebn0)) and ebn0 >= 0):
        raise EstimateError(f"ebn0 {ebn0!r}: must be a finite linear Eb/N0 >= 0")
    if isinstance(n_symbols, bool) or int(n_symbols) != n_symbols or n_symbols < 1:
        raise EstimateError(f"n_symbols {n_symbols!r}: must be an integer >= 1")
    rng = np.random.default_rng(seed)
    n = int(n_symbols)
    noise = (rng.standard_normal((2, n)) + 1j * rng.standard_normal((2, n))) / np.sqrt(2)
    return np.abs(noise[0] + np.sqrt(ebn0)) ** 2, np.abs(noise[1]) ** 2
