"""What is done with estimates once made: pooling frames, and undoing tone leakage.

:func:`pool` adds the sums the estimates keep and evaluates the estimator once
on the total, so frames combine exactly. :func:`correct_leakage` undoes the
signal that leaks into the other correlator when the tones are not orthogonal
(pool first, then correct). :mod:`iqdemod.estimate` offers every name.
"""

from __future__ import annotations

import math
from typing import Sequence

import numpy as np

from iqdemod.errors import EstimateError
from iqdemod.estimate_methods import estimate_from_sums
from iqdemod.estimate_result import EbN0Estimate, db_or_minus_inf

__all__ = ["pool", "correct_leakage"]


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

    >>> from iqdemod.estimate_methods import estimate_data_aided, model_statistics
    >>> z0, z1 = model_statistics(10.0, 1000, seed=1)
    >>> bits = np.zeros(1000)
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
    if all(e.sums for e in ests):
        total = tuple(float(v) for v in np.sum([e.sums for e in ests], axis=0))
        return estimate_from_sums(method, total)

    weights = np.array([e.n_symbols for e in ests], dtype=float)
    weights /= weights.sum()
    lin = lambda x: 0.0 if x == -math.inf else 10.0 ** (x / 10.0)
    rho = float(np.dot(weights, [e.ebn0 for e in ests]))
    halves = np.array([(lin(e.ci90_db[1]) - lin(e.ci90_db[0])) / 2.0 for e in ests])
    half = float(np.sqrt(np.sum((weights * halves) ** 2)))
    return EbN0Estimate(
        ebn0_db=db_or_minus_inf(rho),
        ci90_db=(db_or_minus_inf(rho - half), db_or_minus_inf(rho + half) if math.isfinite(half) else math.inf),
        n_symbols=int(sum(e.n_symbols for e in ests)),
        method=method,
    )


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
        return db_or_minus_inf(g / denom) if denom > 0 else math.inf

    value = min(fix(estimate.ebn0_db), 60.0)
    lo, hi = (fix(v) for v in estimate.ci90_db)
    return EbN0Estimate.with_sums(estimate.sums, ebn0_db=value, ci90_db=(min(lo, value), max(hi, value)),
                                  n_symbols=estimate.n_symbols, method=estimate.method)
