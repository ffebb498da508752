"""Detection theory for binary FSK: what bit error rate a link should show.

Every function offered here is a closed-form (or one-dimensional root-finding)
result from the literature, vectorised over the Eb/N0 argument. Eb/N0
arguments are *linear* ratios unless the name ends in ``_db``; :func:`db` and
:func:`from_db` convert. For binary signalling Es = Eb, so the same numbers
are Es/N0. This module is the front door; the work is done in

* :mod:`iqdemod.predict_closed_form`: orthogonal, correlated and mismatched
  square-law receivers, the general square-law comparison, the coherent
  references, dB;
* :mod:`iqdemod.predict_bank`: the one-symbol bank on a continuous-phase
  pulse, and Manchester chips combined by the square law;
* :mod:`iqdemod.predict_inverse`: the Eb/N0 a scheme needs for a target Pb;
* :mod:`iqdemod.predict_curves`: the planning table;
* :mod:`iqdemod.predict_args`: the argument checks they share.

Sources
-------
* Proakis, *Digital Communications* (5th ed. ch. 4; 4th ed. sec. 5.4) and
  Sklar, *Digital Communications* (2nd ed. ch. 4): error rates of orthogonal
  and antipodal signalling.
* Proakis, *Digital Communications*, Appendix B, and Stein, "Unified analysis
  of certain coherent and noncoherent binary communications systems", IEEE
  Trans. Inf. Theory IT-10, 1964: the probability that one Hermitian quadratic
  form of two correlated complex Gaussian variables is negative, used for every
  square-law comparison here.
* The frame error rate and the binomial statistics of CRC failures
  (Clopper & Pearson, Biometrika 26, 1934) live in :mod:`iqdemod.binomial`;
  ``fer_from_ber``, ``clopper_pearson`` and ``binomial_p_value`` are offered
  here too.
* The one-symbol correlator bank receiving a continuous-phase pulse (Gaussian
  or rectangular, :func:`pb_per_symbol_pulse`) is the mismatched-correlator
  result of REFERENCE.md sec. 3 (the signal term of a correlator ``w`` on a
  received waveform ``m`` is ``<w, m>``), averaged over the bit patterns the
  pulse spans; the continuous-phase model is Proakis, *Digital
  Communications*, the CPM section, and the Gaussian pulse Murota & Hirade,
  IEEE Trans. Commun. 29(7), 1981 (from memory), as in :mod:`iqdemod.sequence`.

The correlator convention shared with :mod:`iqdemod.estimate`: references have
unit amplitude, ``<a, b> = sum(conj(a) * b)``, and a received tone at
frequency offset ``x / T`` from a reference keeps the complex fraction
``tone_correlation(x)`` of its amplitude at that correlator's output.

Examples
--------
>>> from iqdemod import predict
>>> round(predict.ebn0_db_for_pb(1e-5), 4)  # REFERENCE §1: 13.3525 dB for ½·exp(−Eb/2N0)
13.3525
"""

from __future__ import annotations

from iqdemod.binomial import binomial_p_value, clopper_pearson, fer_from_ber
from iqdemod.predict_bank import pb_manchester, pb_per_symbol_pulse, pb_square_law_combining
from iqdemod.predict_closed_form import (db, from_db, mismatch_loss_db, pb_antipodal, pb_coherent_orthogonal,
                                         pb_mismatched, pb_noncoherent, pb_noncoherent_correlated, pb_square_law,
                                         tone_correlation)
from iqdemod.predict_curves import curves_extended, curves_table
from iqdemod.predict_inverse import ebn0_db_for_pb, ebn0_for_pb

__all__ = [
    "db",
    "from_db",
    "pb_noncoherent",
    "pb_coherent_orthogonal",
    "pb_antipodal",
    "pb_square_law_combining",
    "pb_manchester",
    "tone_correlation",
    "pb_noncoherent_correlated",
    "pb_square_law",
    "pb_mismatched",
    "pb_per_symbol_pulse",
    "mismatch_loss_db",
    "ebn0_for_pb",
    "ebn0_db_for_pb",
    "fer_from_ber",
    "curves_extended",
    "curves_table",
    "clopper_pearson",
    "binomial_p_value",
]
