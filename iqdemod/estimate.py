"""Eb/N0 from the receiver's square-law decision statistics: the estimators' front door.

Per frame the receiver hands its two correlators' square-law statistics to
an estimator (data-aided where the bits are known, blind, or
decision-directed; their model is stated in :mod:`iqdemod.estimate_methods`)
and gets an :class:`EbN0Estimate` with a 90 % interval back. An estimate
keeps the sums it was computed from, so :func:`pool` combines frames
exactly, as if all their symbols had been one record.

This module is the front door; the work is done in

* :mod:`iqdemod.estimate_result`: :class:`EbN0Estimate`, the 90 % level;
* :mod:`iqdemod.estimate_methods`: the three estimators and the
  decision-directed bias map;
* :mod:`iqdemod.estimate_pooling`: pooling frames, and the correction for
  tones that are not orthogonal (:func:`correct_leakage`);
* :mod:`iqdemod.estimate_bounds`: Cramér–Rao bounds.

A linear estimate ``<= 0`` (no signal detectable) is reported as ``-inf``
dB, never nan (:mod:`iqdemod.estimate_result` states the convention).

Examples
--------
>>> from iqdemod import estimate
>>> est = estimate.estimate_data_aided([11.0, 0.5, 12.0], [1.5, 9.0, 0.5], [0, 1, 0])
>>> est.method, est.n_symbols, estimate.pool([est]) == est
('data-aided', 3, True)
"""

from __future__ import annotations

from iqdemod.estimate_bounds import crb_normalised_variance_coherent_da, crb_normalised_variance_noncoherent_da
from iqdemod.estimate_methods import (debias_decision_directed, decision_directed_limit, estimate_blind,
                                      estimate_data_aided, estimate_decision_directed)
from iqdemod.estimate_pooling import correct_leakage, pool
from iqdemod.estimate_result import CONFIDENCE, Z90, EbN0Estimate

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
