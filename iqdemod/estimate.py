"""Eb/N0 from the receiver's square-law decision statistics.

The receiver hands over, per symbol, ``z0sq = |z0|**2`` and ``z1sq = |z1|**2``
from its two quadrature correlators (any common scale). With unit-amplitude
references, ``|signal|**2 / E|noise|**2`` at one output is Es/N0 = Eb/N0
(REFERENCE.md sec. 4). The model behind every estimator here: orthogonal
tones and correct timing, so per symbol one output is ``|s + n|**2`` (its
amplitude Rician) and the other ``|n'|**2`` (exponential), ``n, n'``
independent complex Gaussian of power ``N``; ``rho = |s|**2 / N`` is the
Eb/N0 sought.

Estimators
----------
* :func:`estimate_data_aided` (bits known, e.g. frames whose CRC passed):
  unbiased ratio estimator with an exact confidence interval.
* :func:`estimate_blind`: both-branch moment estimator, no decisions, so no
  selection bias; delta-method interval.
* :func:`estimate_decision_directed`: winner/loser estimator, with its
  large-sample bias removed by inverting :func:`decision_directed_limit`.

An estimate keeps the sums it was computed from, so :func:`pool` combines
frames exactly, as if all their symbols had been one record.

Reporting convention: a linear estimate ``<= 0`` (no signal detectable) is
reported as ``ebn0_db = -inf``, never nan; interval ends follow the same
rule, so an interval ``(-inf, x)`` means "consistent with no signal".
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np
from scipy import integrate, optimize, special, stats

from iqdemod.errors import EstimateError

__all__ = [
    "CONFIDENCE",
    "Z90",
    "EbN0Estimate",
    "estimate_data_aided",
    "estimate_blind",
    "estimate_decision_directed",
    "decision_directed_limit",
    "debias_decision_directed",
    "pool",
    "correct_leakage",
    "crb_normalised_variance_noncoherent_da",
    "crb_normalised_variance_coherent_da",
]

#: Two-sided confidence level of every interval reported here.
CONFIDENCE = 0.90
#: The standard normal quantile of that level: an interval's half-width in standard errors (1.6449).
Z90 = float(stats.norm.isf((1.0 - CONFIDENCE) / 2.0))

# Above this many symbols the exact non-central F inversion is replaced by
# its normal limit: the two agree to far better than the interval's own
# sampling noise there, and the special function slows down (and warns) as
# the non-centrality grows with the record length.
_EXACT_MAX_SYMBOLS = 100_000

_METHODS = ("data-aided", "blind", "decision-directed", "decision-directed-raw")
# Length of the private sufficient-statistics tuple per method.
_N_STATS = {"data-aided": 3, "blind": 6, "decision-directed": 6, "decision-directed-raw": 6}


def _to_db(x: float) -> float:
    """Linear to dB with the module's convention: <= 0 gives -inf."""
    if not x > 0.0:  # also catches nan, which should not occur
        return -math.inf
    return 10.0 * math.log10(x)


@dataclass(frozen=True)
class EbN0Estimate:
    """An Eb/N0 estimate with a 90 % confidence interval.

    Parameters
    ----------
    ebn0_db : float
        Point estimate in dB; ``-inf`` when the linear estimate is <= 0.
    ci90_db : tuple of float
        ``(lower, upper)`` two-sided 90 % confidence interval in dB; an end
        at or below linear zero is ``-inf``.
    n_symbols : int
        Symbols used (>= 1).
    method : str
        ``"data-aided"``, ``"blind"``, ``"decision-directed"`` (bias
        removed) or ``"decision-directed-raw"``.

    Notes
    -----
    The private field ``_stats`` holds the sums the estimate came from
    (empty for an estimate built by hand); :func:`pool` uses it. It is left
    out of :meth:`as_dict`, repr and equality.

    Examples
    --------
    >>> est = EbN0Estimate(10.0, (9.5, 10.5), 400, "data-aided")
    >>> est.ebn0, est.as_dict()["ci90_db"]
    (10.0, [9.5, 10.5])
    """

    ebn0_db: float
    ci90_db: tuple[float, float]
    n_symbols: int
    method: str
    _stats: tuple[float, ...] = field(default=(), repr=False, compare=False)

    def __post_init__(self):
        if self.method not in _METHODS:
            raise EstimateError(f"method {self.method!r}: must be one of {', '.join(_METHODS)}")
        if isinstance(self.n_symbols, bool) or int(self.n_symbols) != self.n_symbols or self.n_symbols < 1:
            raise EstimateError(f"n_symbols {self.n_symbols!r}: must be an integer >= 1")
        object.__setattr__(self, "n_symbols", int(self.n_symbols))
        value = float(self.ebn0_db)
        if math.isnan(value) or value == math.inf:
            raise EstimateError(f"ebn0_db {self.ebn0_db!r}: must be a number or -inf")
        object.__setattr__(self, "ebn0_db", value)
        try:
            lo, hi = (float(v) for v in self.ci90_db)
        except (TypeError, ValueError):
            raise EstimateError(f"ci90_db {self.ci90_db!r}: must be a pair (lower, upper) in dB") from None
        if math.isnan(lo) or math.isnan(hi) or lo > hi:
            raise EstimateError(f"ci90_db {self.ci90_db!r}: must be (lower, upper) with lower <= upper")
        object.__setattr__(self, "ci90_db", (lo, hi))
        st = tuple(float(v) for v in self._stats)
        if st and len(st) != _N_STATS[self.method]:
            raise EstimateError(
                f"_stats of length {len(st)}: expected {_N_STATS[self.method]} for {self.method!r}"
            )
        object.__setattr__(self, "_stats", st)

    @property
    def sd_db(self) -> float:
        """Standard error of the estimate in dB, from the interval's width (inf when an end is infinite).

        The interval read as ``±Z90`` standard errors of a normal variable in
        dB; exact only in the normal limit, and meant for weighting (e.g.
        shrinking per-burst estimates), not as an interval of its own.

        Examples
        --------
        >>> EbN0Estimate(10.0, (9.0, 11.0), 500, "blind").sd_db == 1.0 / Z90
        True
        """
        lo, hi = self.ci90_db
        if not (math.isfinite(lo) and math.isfinite(hi)):
            return math.inf
        return (hi - lo) / (2.0 * Z90)

    @property
    def ebn0(self) -> float:
        """Point estimate as a linear ratio (0 for ``-inf`` dB)."""
        return 0.0 if self.ebn0_db == -math.inf else 10.0 ** (self.ebn0_db / 10.0)

    def as_dict(self) -> dict:
        """The public fields as a JSON-ready dict (``ci90_db`` as a list).

        ``-inf`` stays a float; ``json.dumps`` writes it as ``-Infinity``.
        """
        return {
            "ebn0_db": self.ebn0_db,
            "ci90_db": list(self.ci90_db),
            "n_symbols": self.n_symbols,
            "method": self.method,
        }


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


# --------------------------------------------------------------------------- data-aided


def _ncf_cdf(x: float, dof: float, nc: float) -> float:
    """CDF of the non-central F(dof, dof; nc) at x.

    ``special.ncfdtr`` is the same Boost routine as ``stats.ncf.cdf`` at a
    tenth of the call overhead. Tails are taken as ``1 - cdf``: only the
    5 % points are needed, and ``stats.ncf.sf`` is wrong at ``nc = 0`` in
    scipy 1.17 (it returns ``-cdf``; scipy issue 26188).
    """
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
    return EbN0Estimate(
        ebn0_db=_to_db(rho),
        ci90_db=(_to_db(lo), _to_db(hi)),
        n_symbols=int(n),
        method="data-aided",
        _stats=st,
    )


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
        costs nothing; the receiver does so per frame, and :func:`pool`
        recomputes the exact interval from the sums.

    Returns
    -------
    EbN0Estimate
        ``method = "data-aided"``.

    Examples
    --------
    >>> rng = np.random.default_rng(1)
    >>> L, rho = 2000, 10.0
    >>> n = (rng.standard_normal((2, L)) + 1j * rng.standard_normal((2, L))) / np.sqrt(2)
    >>> est = estimate_data_aided(np.abs(n[0] + np.sqrt(rho)) ** 2, np.abs(n[1]) ** 2, np.zeros(L))
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
    return EbN0Estimate(
        ebn0_db=_to_db(rho),
        ci90_db=(_to_db(lo), _to_db(hi)),
        n_symbols=int(n),
        method="blind",
        _stats=st,
    )


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
        ``method = "blind"``.

    Examples
    --------
    2000 symbols at 10 dB, which tone was sent never used:

    >>> rng = np.random.default_rng(1)
    >>> L, rho = 2000, 10.0
    >>> n = (rng.standard_normal((2, L)) + 1j * rng.standard_normal((2, L))) / np.sqrt(2)
    >>> est = estimate_blind(np.abs(n[0] + np.sqrt(rho)) ** 2, np.abs(n[1]) ** 2)
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
    return EbN0Estimate(
        ebn0_db=_to_db(rho),
        ci90_db=(_to_db(lo), _to_db(hi)),
        n_symbols=int(n),
        method="decision-directed" if debias else "decision-directed-raw",
        _stats=st,
    )


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

    >>> rng = np.random.default_rng(1)
    >>> L, rho = 2000, 10.0
    >>> n = (rng.standard_normal((2, L)) + 1j * rng.standard_normal((2, L))) / np.sqrt(2)
    >>> z0, z1 = np.abs(n[0] + np.sqrt(rho)) ** 2, np.abs(n[1]) ** 2
    >>> round(estimate_decision_directed(z0, z1).ebn0_db, 3)
    10.034
    >>> round(estimate_decision_directed(z0, z1, debias=False).ebn0_db, 3)
    10.051
    """
    z0, z1 = _statistics(z0sq, z1sq)
    return _dd_from_stats(_sums(np.maximum(z0, z1), np.minimum(z0, z1)), bool(debias))


# --------------------------------------------------------------------------- pooling


def _from_stats(method: str, st: tuple[float, ...]) -> EbN0Estimate:
    if method == "data-aided":
        return _data_aided_from_stats(st)
    if method == "blind":
        return _blind_from_stats(st)
    return _dd_from_stats(st, method == "decision-directed")


def pool(estimates: Sequence[EbN0Estimate]) -> EbN0Estimate:
    """Capture-level Eb/N0 from per-frame estimates of one method.

    When every estimate carries its sums (all those made by this module
    do), the sums are added and the estimator and its interval are
    evaluated once on the total: the result equals one call on all the
    symbols together, so frames are weighted by their symbol counts and
    the interval is the proper one for the pooled record. This assumes the
    same Eb/N0 in every frame; a drifting link gives a symbol-weighted
    average.

    Estimates built by hand (no sums) fall back to a symbol-weighted mean
    in linear units, with the interval from each estimate's half-width
    taken as :data:`Z90` standard errors and combined as independent; an
    infinite end makes that end infinite.

    Parameters
    ----------
    estimates : sequence of EbN0Estimate
        At least one, all with the same `method`.

    Returns
    -------
    EbN0Estimate

    Examples
    --------
    Two frames pooled give what one call on all their symbols gives:

    >>> rng = np.random.default_rng(1)
    >>> n = (rng.standard_normal((2, 1000)) + 1j * rng.standard_normal((2, 1000))) / np.sqrt(2)
    >>> z0, z1, bits = np.abs(n[0] + np.sqrt(10.0)) ** 2, np.abs(n[1]) ** 2, np.zeros(1000)
    >>> halves = [estimate_data_aided(z0[:400], z1[:400], bits[:400]),
    ...           estimate_data_aided(z0[400:], z1[400:], bits[400:])]
    >>> pool(halves) == estimate_data_aided(z0, z1, bits)
    True
    """
    ests = list(estimates)
    if not ests:
        raise EstimateError("estimates: need at least one to pool")
    if not all(isinstance(e, EbN0Estimate) for e in ests):
        raise EstimateError("estimates: every item must be an EbN0Estimate")
    methods = {e.method for e in ests}
    if len(methods) != 1:
        raise EstimateError(f"estimates of methods {sorted(methods)}: can only pool one method")
    method = ests[0].method
    if all(e._stats for e in ests):
        total = tuple(float(v) for v in np.sum([e._stats for e in ests], axis=0))
        return _from_stats(method, total)

    weights = np.array([e.n_symbols for e in ests], dtype=float)
    weights /= weights.sum()
    lin = lambda x: 0.0 if x == -math.inf else 10.0 ** (x / 10.0)
    rho = float(np.dot(weights, [e.ebn0 for e in ests]))
    halves = np.array([(lin(e.ci90_db[1]) - lin(e.ci90_db[0])) / 2.0 for e in ests])
    half = float(np.sqrt(np.sum((weights * halves) ** 2)))
    return EbN0Estimate(
        ebn0_db=_to_db(rho),
        ci90_db=(_to_db(rho - half), _to_db(rho + half) if math.isfinite(half) else math.inf),
        n_symbols=int(sum(e.n_symbols for e in ests)),
        method=method,
    )


# --------------------------------------------------------------------------- bounds


def _rician_fisher(snr: float) -> np.ndarray:
    """Fisher information about (S, N) at N = 1 from one ``|s + n|^2``.

    Density of the amplitude r (Rice): ``2 r exp(-(r^2 + S)) I0(2 r sqrt(S))``
    (Proakis, *Digital Communications*, ch. 2). Scores, with
    ``u = 2 r sqrt(S)`` and ``A = I1(u) / I0(u)``::

        d/dS ln f = -1 + A r / sqrt(S)
        d/dN ln f = -1 + r^2 + S - A u
    """
    root = math.sqrt(snr)

    def parts(r):
        u = 2.0 * r * root
        a = special.i1e(u) / special.i0e(u)
        dens = 2.0 * r * math.exp(-((r - root) ** 2)) * special.i0e(u)
        s_s = -1.0 + a * r / root
        s_n = -1.0 + r * r + snr - a * u
        return dens, s_s, s_n

    def entry(i, j):
        def f(r):
            dens, s_s, s_n = parts(r)
            sc = (s_s, s_n)
            return dens * sc[i] * sc[j]

        lo, hi = max(0.0, root - 12.0), root + 12.0
        pts = [root] if lo < root < hi else None
        return integrate.quad(f, lo, hi, points=pts, epsabs=1e-13, epsrel=1e-10, limit=200)[0]

    j_ss, j_sn, j_nn = entry(0, 0), entry(0, 1), entry(1, 1)
    return np.array([[j_ss, j_sn], [j_sn, j_nn]])


def _crb_arguments(ebn0, n_symbols) -> np.ndarray:
    """The bounds' shared argument checks; returns Eb/N0 as a float array."""
    g = np.asarray(ebn0, dtype=float)
    if np.any(~(g > 0)) or np.any(~np.isfinite(g)):
        raise EstimateError(f"ebn0 {ebn0!r}: must be a finite linear Eb/N0 > 0")
    if isinstance(n_symbols, bool) or int(n_symbols) != n_symbols or n_symbols < 1:
        raise EstimateError(f"n_symbols {n_symbols!r}: must be an integer >= 1")
    return g


def crb_normalised_variance_noncoherent_da(ebn0, n_symbols):
    """Cramér–Rao bound on ``var(rho_hat) / rho^2``, non-coherent BFSK, data-aided.

    Each of ``L`` symbols contributes the sent tone's output (Rician
    amplitude, parameters ``S = |s|^2`` and ``N``, phase unknown) and the
    other tone's output (exponential with mean ``N``), both used. The
    Fisher information per symbol about ``theta = (S, N)`` is that of the
    Rician density (found by quadrature, see ``_rician_fisher``) plus
    ``diag(0, 1 / N^2)`` from the exponential; for ``rho = S / N``::

        CRB(rho) = g^T J^-1 g / L,   g = (1/N, -S/N^2)

    normalised by ``rho^2`` (scale-free, so ``N = 1``). REFERENCE.md sec. 4
    [derived]: 5.64e-3 at 0 dB and 9.58e-4 at 10 dB for L = 1000. At high
    Eb/N0 it tends to ``(2/rho + 2/3) / L``: the Rician becomes Gaussian in
    amplitude and gives half the noise information of a complex sample.

    Parameters
    ----------
    ebn0 : float or array_like
        True linear Eb/N0 (> 0).
    n_symbols : int
        ``L`` (>= 1).

    Returns
    -------
    float or ndarray
        Normalised variance bound.

    Examples
    --------
    REFERENCE §4: 9.58e-4 at 10 dB for L = 1000.

    >>> f"{crb_normalised_variance_noncoherent_da(10.0, 1000):.3g}"
    '0.000958'
    """
    g = _crb_arguments(ebn0, n_symbols)

    def one(s: float) -> float:
        j = _rician_fisher(s)
        j[1, 1] += 1.0
        grad = np.array([1.0, -s])
        return float(grad @ np.linalg.solve(j, grad)) / (s * s)

    out = np.array([one(float(v)) for v in g.ravel()]).reshape(g.shape) / int(n_symbols)
    return float(out) if g.ndim == 0 else out


def crb_normalised_variance_coherent_da(ebn0, n_symbols):
    """Cramér–Rao bound on ``var(rho_hat) / rho^2`` for coherent data-aided samples.

    ``L`` complex samples of a known unit-modulus sequence with unknown
    real amplitude ``A`` and noise power ``N``: Fisher information
    ``2L/N`` for ``A`` and ``L/N^2`` for ``N``, so
    ``var(rho_hat) >= (2 rho + rho^2) / L`` (derived here from those two
    informations; REFERENCE.md sec. 4 [derived]), i.e. a normalised
    bound ``(2/rho + 1) / L``: 3.00e-3 at 0 dB, 1.20e-3 at 10 dB for
    L = 1000.

    Parameters
    ----------
    ebn0 : float or array_like
        True linear Eb/N0 (> 0).
    n_symbols : int
        ``L`` (>= 1).

    Returns
    -------
    float or ndarray
        Normalised variance bound.

    Examples
    --------
    >>> round(crb_normalised_variance_coherent_da(1.0, 1000), 6)
    0.003
    """
    g = _crb_arguments(ebn0, n_symbols)
    out = (2.0 * g + g * g) / (int(n_symbols) * g * g)
    return float(out) if g.ndim == 0 else out


# --------------------------------------------------------------------------- non-orthogonal tones


def correct_leakage(estimate: EbN0Estimate, leakage: float) -> EbN0Estimate:
    """Undo the signal that leaks into the other correlator when the tones are not orthogonal.

    With tone correlation ρ the other branch holds |ρ|²·S + N instead of N
    (REFERENCE §2–3: the signal term of a correlator is ⟨w, m⟩). An estimator
    built for orthogonal tones then measures R − 1 with R = (S + N)/(|ρ|²S + N);
    solving for S/N gives γ = (R − 1)/(1 − |ρ|²·R), applied here to the point
    value and to both ends of the interval (the map is increasing). Pool first,
    then correct: the sums kept inside an estimate stay those of the raw
    statistics.

    Parameters
    ----------
    estimate : EbN0Estimate
        From an estimator that assumes orthogonal tones (data-aided or
        decision-directed-raw; the blind moment estimator's model differs).
    leakage : float
        |ρ|², 0 <= leakage < 1.

    Returns
    -------
    EbN0Estimate
        The same method and sums; values that the model cannot explain (the
        other branch stronger than leakage allows) become +inf dB ends and a
        point value capped at 60 dB.

    Examples
    --------
    Tones at h = 0.5 leak |ρ|² = sinc²(0.5) = 0.405 of the signal into the
    other correlator. At a true 10 dB an orthogonal-tone estimator measures
    R − 1 with R = 11/(0.405·10 + 1); the correction gives the 10 dB back:

    >>> R = 11 / (0.405 * 10 + 1)
    >>> raw = EbN0Estimate(10 * math.log10(R - 1), (0.0, 1.5), 1000, "data-aided")
    >>> round(raw.ebn0_db, 3), round(correct_leakage(raw, 0.405).ebn0_db, 6)
    (0.712, 10.0)
    """
    if not 0.0 <= leakage < 1.0:
        raise EstimateError(f"leakage {leakage!r}: must be within [0, 1)")
    if leakage == 0.0:
        return estimate

    def fix(db: float) -> float:
        if db == -math.inf:
            return db
        if db == math.inf:
            return math.inf
        g = 10.0 ** (db / 10.0)
        denom = 1.0 - leakage * (1.0 + g)
        return _to_db(g / denom) if denom > 0 else math.inf

    value = min(fix(estimate.ebn0_db), 60.0)
    lo, hi = (fix(v) for v in estimate.ci90_db)
    return EbN0Estimate(
        ebn0_db=value,
        ci90_db=(min(lo, value), max(hi, value)),
        n_symbols=estimate.n_symbols,
        method=estimate.method,
        _stats=estimate._stats,
    )
