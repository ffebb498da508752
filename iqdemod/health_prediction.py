"""What detection theory predicts for a link as this receiver decides it, burst by burst.

The health report compares the frame errors seen with a prediction. This
module holds the link's side of that comparison:

* which Pb model applies (:func:`pb_model`, :func:`link_pb`): the mismatched
  correlator bank for NRZ (tone spacing and the residual carrier error), square-law
  combining of two chips for Manchester (REFERENCE §10), the pruned union bound
  of the multi-symbol detector;
* what a target BER needs (:func:`needed_ebn0`), and how the receiver's own
  estimates relate to Eb/N0 (:func:`estimate_leakage`, :func:`correction_db`,
  :func:`bit_gain_db`);
* the per-burst prediction: each burst's Eb/N0 shrunk towards the capture's
  pooled value by the empirical-Bayes (James–Stein) rule of Efron & Morris
  (J. Amer. Statist. Assoc. 68, 1973), :func:`shrink_snr_db`, and the error
  rates averaged over the bursts, :func:`predicted_rates`.

Predictions are made at the *decision* SNR per bit.
"""

from __future__ import annotations

import math
from typing import Callable, NamedTuple, Sequence

import numpy as np

from .binomial import fer_from_ber
from .errors import IqdemodError
from .link import FrameSpec
from .plan import ReceiverPlan
from .predict_bank import pb_manchester
from .predict_closed_form import from_db, mismatch_loss_db, pb_mismatched
from .predict_inverse import ebn0_db_for_pb

__all__ = ["BurstFigures", "bit_gain_db", "estimate_leakage", "correction_db", "pb_model", "theory_options",
           "link_pb", "needed_ebn0", "shrink_snr_db", "predicted_rates"]


class BurstFigures(NamedTuple):
    """One burst with frames, for the per-burst predictions."""

    snr_db: float  # decision SNR per bit, dB
    var_db2: float  # its variance, dB²
    frames: int
    bad: int
    bits: float  # mean data bits per frame


# ---- the link's own numbers (issue 14: the bit is the unit of Eb, predictions and margin)


def bit_gain_db(spec: FrameSpec) -> float:
    """dB from a symbol's decision SNR to a bit's: a Manchester bit carries two chips' energy.

    Examples
    --------
    >>> from iqdemod.profile import load_link
    >>> round(bit_gain_db(load_link(None, baud=4800, shift=4800, coding="manchester").frame), 2)
    3.01
    """
    return 10 * math.log10(spec.symbols_per_bit)


def estimate_leakage(plan: ReceiverPlan) -> float:
    """The tone leakage the estimates are corrected for (none when fitted against the real pulse).

    Examples
    --------
    Orthogonal tones (h = 1) leak nothing into the other correlator:

    >>> from iqdemod.profile import load_link
    >>> from iqdemod.plan import plan_receiver
    >>> estimate_leakage(plan_receiver(load_link(None, baud=4800, shift=4800), 250_000))
    0.0
    """
    return 0.0 if plan.sequence is not None else plan.tone_leakage


def correction_db(plan: ReceiverPlan) -> float:
    """Decision SNR to Eb/N0 (none for the multi-symbol detector's pulse-aware estimates).

    Examples
    --------
    The channel filter leaves the decisions about 0.25 dB more SNR than Eb/N0
    at this rate (the contributor guide's "Eb/N0 and the decision SNR"):

    >>> from iqdemod.profile import load_link
    >>> from iqdemod.plan import plan_receiver
    >>> round(float(correction_db(plan_receiver(load_link(None, baud=4800, shift=4800), 250_000))), 3)
    -0.248
    """
    return 0.0 if plan.sequence is not None else plan.ebn0_correction_db


def pb_model(plan: ReceiverPlan) -> str:
    """The Pb model of the predictions, as the JSON names it.

    Examples
    --------
    >>> from iqdemod.profile import load_link
    >>> from iqdemod.plan import plan_receiver
    >>> pb_model(plan_receiver(load_link(None, baud=4800, shift=4800), 250_000))
    'noncoherent-fsk'
    """
    if plan.sequence is not None:
        sig = plan.link.signal
        return f"multi-symbol-{sig.detector_symbols}-{sig.pulse}-pruned-union"  # sequence_theory.sequence_ber
    if plan.link.frame.coding == "nrz":
        return "noncoherent-fsk"  # pb_mismatched: tone spacing and residual frequency error
    return "manchester-square-law-combining-L2"  # pb_manchester, REFERENCE §10: orthogonal tones


def theory_options(plan: ReceiverPlan, residual_hz: float | None) -> tuple[dict, float | None]:
    """The mismatched-correlator options of this link (h, δf·T, samples per symbol) and the mismatch loss, dB.

    Parameters
    ----------
    plan : ReceiverPlan
    residual_hz : float or None
        The carrier error left after each burst's own correction (rms); None
        when unmeasured.

    Returns
    -------
    options : dict
        Keyword options of :func:`iqdemod.predict.pb_mismatched`.
    mismatch_loss_db : float or None

    Examples
    --------
    A residual of 48 Hz at 4800 Bd is δf·T = 0.01:

    >>> from iqdemod.profile import load_link
    >>> from iqdemod.plan import plan_receiver
    >>> kw, loss = theory_options(plan_receiver(load_link(None, baud=4800, shift=4800), 250_000), 48.0)
    >>> kw, round(loss, 5)
    ({'h': 1.0, 'freq_error_T': 0.01, 'samples_per_symbol': 9}, 0.00141)
    """
    sps = max(2, int(round(plan.period)))  # the discrete tone correlation takes whole samples
    dT = 0.0 if residual_hz is None else residual_hz / plan.link.signal.baud
    kw = dict(h=plan.link.signal.h, freq_error_T=dT, samples_per_symbol=sps)
    mismatch = None if residual_hz is None else float(mismatch_loss_db(dT, samples_per_symbol=sps))
    return kw, mismatch


def link_pb(g, kw: dict, plan: ReceiverPlan):
    """Pb of this link's detector at linear decision SNR per bit `g`.

    Examples
    --------
    An NRZ link with orthogonal tones and no carrier error gives ½·exp(−γ/2)
    (REFERENCE §1: 3.3690e-3 at 10 dB):

    >>> from iqdemod.profile import load_link
    >>> from iqdemod.plan import plan_receiver
    >>> plan = plan_receiver(load_link(None, baud=4800, shift=4800), 250_000)
    >>> round(float(link_pb(10.0, theory_options(plan, 0.0)[0], plan)), 7)
    0.003369
    """
    if plan.sequence is not None:
        from .sequence_theory import sequence_ber

        sig = plan.link.signal
        db = 10 * np.log10(np.maximum(np.asarray(g, float), 1e-30))
        return sequence_ber(db, h=sig.h, pulse=sig.pulse, bt=sig.bt, n_symbols=sig.detector_symbols)
    return pb_mismatched(g, **kw) if plan.link.frame.coding == "nrz" else pb_manchester(g)


def _ebn0_db_needed(target_ber: float, kw: dict, plan: ReceiverPlan) -> float:
    """Decision SNR per bit (dB) at which this link's theory reaches the target BER."""
    if plan.sequence is not None:
        from scipy.optimize import brentq

        def excess(db: float) -> float:
            return math.log(max(float(link_pb(from_db(db), kw, plan)), 1e-300)) - math.log(target_ber)

        lo, hi = -5.0, 40.0
        if excess(hi) > 0:
            raise IqdemodError(f"BER {target_ber:g} is not reached below {hi:g} dB by this link")
        return float(brentq(excess, lo, hi, xtol=1e-4)) if excess(lo) > 0 else lo
    if plan.link.frame.coding == "nrz":
        return float(ebn0_db_for_pb(target_ber, "mismatched", **kw))
    return float(ebn0_db_for_pb(target_ber, "manchester"))


def needed_ebn0(target_ber: float, kw: dict, plan: ReceiverPlan, corr: float) -> dict:
    """What the target BER needs: this link's theory, less the receiver's gain; the coherent reference.

    Parameters
    ----------
    target_ber : float
    kw : dict
        From :func:`theory_options`.
    plan : ReceiverPlan
    corr : float
        :func:`correction_db` of the plan.

    Returns
    -------
    dict
        The report's fields ``theory_ebn0_needed_db``, ``ebn0_needed_db``
        (None where the target lies below the link's error floor),
        ``coherent_ebn0_needed_db`` and ``noncoherent_penalty_db``.

    Examples
    --------
    Orthogonal tones need 13.3525 dB for 1e-5 (REFERENCE §1):

    >>> from iqdemod.profile import load_link
    >>> from iqdemod.plan import plan_receiver
    >>> plan = plan_receiver(load_link(None, baud=4800, shift=4800), 250_000)
    >>> need = needed_ebn0(1e-5, theory_options(plan, 0.0)[0], plan, 0.0)
    >>> round(need["theory_ebn0_needed_db"], 4), round(need["noncoherent_penalty_db"], 2)
    (13.3525, 0.75)
    """
    coherent = float(ebn0_db_for_pb(target_ber, "coherent_orthogonal"))
    out = {
        "theory_ebn0_needed_db": None,
        "ebn0_needed_db": None,
        "coherent_ebn0_needed_db": coherent,
        "noncoherent_penalty_db": float(ebn0_db_for_pb(target_ber, "noncoherent")) - coherent,
    }
    try:
        theory = _ebn0_db_needed(target_ber, kw, plan)
    except IqdemodError:
        return out  # the target lies below this link's error floor
    out["theory_ebn0_needed_db"] = theory
    out["ebn0_needed_db"] = float(theory + corr)
    return out


# ---- bursts of different strength


def shrink_snr_db(estimates_db, variances_db2, pooled_db: float) -> np.ndarray:
    """Each burst's decision SNR shrunk towards the capture's pooled value (Efron & Morris 1973).

    With three or more bursts the spread between them beyond their own
    estimation noise, ``between = max(0, var(est) − mean(var))``, sets the
    weight ``between / (between + var)`` each keeps of its own departure from
    the pooled value: alike bursts all get the pooled value, bursts that
    differ keep their own. With fewer, each keeps its own estimate when every
    one is finite, else all get the pooled value.

    Parameters
    ----------
    estimates_db, variances_db2 : array_like
        Per burst, the decision SNR (dB) and its variance (dB²).
    pooled_db : float
        The capture's pooled decision SNR, dB.

    Returns
    -------
    ndarray
        The SNR each burst is predicted at, dB.

    Examples
    --------
    Bursts whose spread is no more than their own noise all take the pooled value:

    >>> shrink_snr_db([10.2, 9.8, 10.1, 9.9], [0.25] * 4, 10.0).tolist()
    [10.0, 10.0, 10.0, 10.0]
    >>> shrink_snr_db([6.0, 14.0, 10.0], [0.01] * 3, 10.0).round(2).tolist()
    [6.0, 14.0, 10.0]
    """
    est = np.array(estimates_db, float)
    var = np.array(variances_db2, float)
    ok = np.isfinite(est) & np.isfinite(var)
    shrunk = np.full(len(est), pooled_db)
    if ok.sum() >= 3:
        between = max(0.0, float(np.var(est[ok], ddof=1) - np.mean(var[ok])))
        weight = between / (between + var[ok])  # James–Stein / empirical-Bayes shrinkage factor
        shrunk[ok] = pooled_db + weight * (est[ok] - pooled_db)
    elif ok.any() and len(est) == ok.sum():
        shrunk = est.copy()
    return shrunk


def predicted_rates(bursts: Sequence[BurstFigures], snr_db: float, snr_ci: tuple[float, float] | None,
                    pb: Callable) -> tuple:
    """Frame-weighted BER and frame error rate over bursts, each at its shrunk decision SNR.

    Parameters
    ----------
    bursts : sequence of BurstFigures
        At least one.
    snr_db : float
        The capture's pooled decision SNR per bit, dB.
    snr_ci : (float, float) or None
        Its 90 % interval; the rates' intervals follow it where both ends are finite.
    pb : callable
        Pb at a linear decision SNR per bit (vectorised), e.g. :func:`link_pb` with its options.

    Returns
    -------
    ber, fer : float
    ber_ci, fer_ci : (float, float) or None

    Examples
    --------
    One burst of two 200-bit frames at 10 dB, ½·exp(−γ/2) (REFERENCE §1):

    >>> ber, fer, _, _ = predicted_rates([BurstFigures(10.0, 0.01, 2, 0, 200.0)], 10.0, None,
    ...                                  lambda g: 0.5 * np.exp(-0.5 * g))
    >>> round(ber, 7), round(fer, 4)
    (0.003369, 0.4908)
    """
    shrunk = shrink_snr_db([b.snr_db for b in bursts], [b.var_db2 for b in bursts], snr_db)
    nfr = np.array([b.frames for b in bursts], float)
    bits = np.array([b.bits for b in bursts], float)

    def rates(offset_db: float) -> tuple[float, float]:
        g = from_db(shrunk + offset_db)
        p = np.asarray(pb(g), float)
        fer = np.asarray(fer_from_ber(p, np.maximum(bits, 1)), float)
        return float(np.average(p, weights=nfr * bits)), float(np.average(fer, weights=nfr))

    ber, fer = rates(0.0)
    ber_ci = fer_ci = None
    if snr_ci is not None and all(math.isfinite(v) for v in snr_ci):
        hi_b, hi_f = rates(snr_ci[0] - snr_db)  # lower Eb/N0 -> higher error rates
        lo_b, lo_f = rates(snr_ci[1] - snr_db)
        ber_ci, fer_ci = (lo_b, hi_b), (lo_f, hi_f)
    return ber, fer, ber_ci, fer_ci
