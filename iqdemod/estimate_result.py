"""An Eb/N0 estimate with its 90 % interval: the one result every estimator returns.

Reporting convention: a linear estimate ``<= 0`` (no signal detectable) is
reported as ``ebn0_db = -inf``, never nan; interval ends follow the same
rule, so an interval ``(-inf, x)`` means "consistent with no signal".

An estimate keeps the sums it was computed from (:attr:`EbN0Estimate.sums`),
so :func:`iqdemod.estimate_pooling.pool` combines frames exactly, as if all
their symbols had been one record. :mod:`iqdemod.estimate` offers every name.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from statistics import NormalDist

from iqdemod.errors import EstimateError

__all__ = ["CONFIDENCE", "Z90", "EbN0Estimate", "db_or_minus_inf"]

#: Two-sided confidence level of every interval reported here.
CONFIDENCE = 0.90
#: The standard normal quantile of that level: an interval's half-width in standard errors (1.6449).
Z90 = NormalDist().inv_cdf(0.5 + CONFIDENCE / 2.0)  # the normal quantile, 1.6449 (the standard library's: no scipy import)

_METHODS = ("data-aided", "blind", "decision-directed", "decision-directed-raw")
# Length of the private sufficient-statistics tuple per method.
_N_STATS = {"data-aided": 3, "blind": 6, "decision-directed": 6, "decision-directed-raw": 6}


def db_or_minus_inf(x: float) -> float:
    """Linear to dB with the reporting convention: <= 0 gives -inf.

    Parameters
    ----------
    x : float
        A linear ratio (an estimate can come out negative).

    Returns
    -------
    float
        ``10·log10(x)``, or ``-inf`` for ``x <= 0``.

    Examples
    --------
    >>> db_or_minus_inf(100.0), db_or_minus_inf(-0.2)
    (20.0, -inf)
    """
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
    (empty for an estimate built by hand), read as :attr:`sums`; the
    estimators build their results with :meth:`with_sums`, and
    :func:`iqdemod.estimate_pooling.pool` adds them up. It is left out of
    :meth:`as_dict`, repr and equality.

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

    @classmethod
    def with_sums(cls, sums, *, ebn0_db: float, ci90_db: tuple[float, float], n_symbols: int,
                  method: str) -> EbN0Estimate:
        """An estimate that keeps the sums it was computed from: how the estimators build theirs.

        Examples
        --------
        >>> est = EbN0Estimate.with_sums((400.0, 4400.0, 400.0), ebn0_db=10.0, ci90_db=(9.5, 10.5),
        ...                              n_symbols=400, method="data-aided")
        >>> est.sums, est == EbN0Estimate(10.0, (9.5, 10.5), 400, "data-aided")
        ((400.0, 4400.0, 400.0), True)
        """
        return cls(ebn0_db=ebn0_db, ci90_db=ci90_db, n_symbols=n_symbols, method=method, _stats=sums)

    @property
    def sums(self) -> tuple[float, ...]:
        """The sums the estimate came from (empty for one built by hand): what pooling adds up."""
        return self._stats

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
