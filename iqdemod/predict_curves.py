"""Planning curves: BER and frame error rate against Eb/N0 for a link, beside the textbook references.

The table behind ``iqdemod curves`` and the planning plot: this link's tones
(:func:`iqdemod.predict_closed_form.pb_mismatched`), the three textbook
curves, the frame error rate of a frame's CRC-covered bits
(:func:`iqdemod.binomial.fer_from_ber`), the Eb/N0 each needs for a target
BER, and for a Gaussian pulse or a fractional h the one-symbol bank on the
pulse and the multi-symbol detector. :mod:`iqdemod.predict` offers every name.
"""

from __future__ import annotations

import numpy as np

from iqdemod.binomial import fer_from_ber
from iqdemod.errors import EstimateError
from iqdemod.predict_bank import pb_per_symbol_pulse
from iqdemod.predict_closed_form import (db, from_db, pb_antipodal, pb_coherent_orthogonal, pb_mismatched,
                                         pb_noncoherent)
from iqdemod.predict_inverse import ebn0_db_for_pb, solve_ebn0

__all__ = ["curves_extended", "curves_table"]


def curves_extended(h: float, pulse: str = "rect") -> bool:
    """Whether the curves for this link add the pulse-aware detectors: a Gaussian pulse or a fractional h.

    Examples
    --------
    >>> curves_extended(1.0), curves_extended(0.5), curves_extended(1.0, "gaussian")
    (False, True, True)
    """
    return pulse == "gaussian" or abs(float(h) - round(float(h))) > 1e-9 or round(float(h)) == 0


def curves_table(ebn0_db, *, h: float = 1.0, freq_error_per_baud: float = 0.0, frame_bits: int = 208,
                 target_ber: float = 1e-5, samples_per_symbol=None, pulse: str = "rect", bt: float = 0.5,
                 detector_symbols: int = 5) -> dict:
    """BER and frame error rate against Eb/N0 for a link and the textbook references, for planning.

    For a link with a Gaussian pulse or a modulation index that is not whole
    (:func:`curves_extended`) two more detectors are tabulated beside the
    textbook ones: the one-symbol correlator bank receiving this pulse
    (:func:`pb_per_symbol_pulse`, with the link's carrier error) and the
    multi-symbol detector of `detector_symbols` symbols
    (:func:`iqdemod.sequence_theory.sequence_ber`, its default "pruned"
    approximation, no carrier error).

    Parameters
    ----------
    ebn0_db : array_like
        Eb/N0 values, dB.
    h : float
        Modulation index of the link, shift / baud.
    freq_error_per_baud : float
        Residual carrier error as a fraction of the symbol rate (δf·T, the
        ``freq_error_T`` of the Pb functions).
    frame_bits : int
        Bits a frame's CRC covers, for the frame error rate.
    target_ber : float
        The Eb/N0 each scheme needs for this BER is reported too.
    samples_per_symbol : int, optional
        Sampled correlators instead of continuous time.
    pulse : {"rect", "gaussian"}
        The link's frequency pulse.
    bt : float
        Its BT (Gaussian only).
    detector_symbols : int
        Window of the multi-symbol detector (odd).

    Returns
    -------
    dict
        Lists keyed ``ebn0_db``, ``ber_link`` (tones of this h with a
        rectangular pulse and the carrier error), ``ber_noncoherent``,
        ``ber_coherent_orthogonal``, ``ber_antipodal``, ``fer_link`` (frame
        error rate, a fraction), and ``needed_db`` (a dict per scheme; None
        where the target is below the error floor). Extended links add
        ``ber_one_symbol_pulse``, ``ber_multi_symbol``,
        ``fer_one_symbol_pulse``, ``fer_multi_symbol`` and ``needed_db``
        entries ``one_symbol_pulse`` and ``multi_symbol``.

    Examples
    --------
    The textbook columns at 10 dB (REFERENCE §1: 3.3690e-3, 7.827e-4,
    3.872e-6; 13.3525 dB needed for 1e-5 without coherence):

    >>> t = curves_table([10.0])
    >>> [f"{t[k][0]:.4g}" for k in ("ber_noncoherent", "ber_coherent_orthogonal", "ber_antipodal")]
    ['0.003369', '0.0007827', '3.872e-06']
    >>> round(t["needed_db"]["noncoherent"], 4)
    13.3525

    A Gaussian pulse at h = 0.5: the one-symbol bank loses to the pulse's
    intersymbol interference, the multi-symbol detector wins it back:

    >>> t = curves_table([10.0], h=0.5, pulse="gaussian", bt=0.5, detector_symbols=3)
    >>> t["ber_one_symbol_pulse"][0] > t["ber_link"][0] > t["ber_multi_symbol"][0]
    True
    """
    x = np.asarray(ebn0_db, dtype=float)
    g = from_db(x)
    eps = freq_error_per_baud
    link = np.asarray(pb_mismatched(g, h=h, freq_error_T=eps, samples_per_symbol=samples_per_symbol), float)
    out = {
        "h": float(h),
        "freq_error_per_baud": float(eps),
        "frame_bits": int(frame_bits),
        "target_ber": float(target_ber),
        "pulse": str(pulse),
        "bt": float(bt),
        "ebn0_db": x.tolist(),
        "ber_link": link.tolist(),
        "ber_noncoherent": np.asarray(pb_noncoherent(g), float).tolist(),
        "ber_coherent_orthogonal": np.asarray(pb_coherent_orthogonal(g), float).tolist(),
        "ber_antipodal": np.asarray(pb_antipodal(g), float).tolist(),
        "fer_link": np.asarray(fer_from_ber(link, frame_bits), float).tolist(),
        "needed_db": {
            "link": _needed_or_none(target_ber, "mismatched", h=h, freq_error_T=eps,
                                    samples_per_symbol=samples_per_symbol),
            "noncoherent": float(ebn0_db_for_pb(target_ber, "noncoherent")),
            "coherent_orthogonal": float(ebn0_db_for_pb(target_ber, "coherent_orthogonal")),
            "antipodal": float(ebn0_db_for_pb(target_ber, "antipodal")),
        },
    }
    if curves_extended(h, pulse):
        _add_pulse_detectors(out, x, frame_bits=frame_bits, target_ber=target_ber, samples_per_symbol=samples_per_symbol,
                             detector_symbols=detector_symbols)
    return out


def _needed_or_none(target_ber: float, scheme: str, **kw) -> float | None:
    """Eb/N0 (dB) a scheme needs for the target; None below its error floor."""
    try:
        return float(ebn0_db_for_pb(target_ber, scheme, **kw))
    except EstimateError:  # below the error floor
        return None


def _add_pulse_detectors(out: dict, x: np.ndarray, *, frame_bits: int, target_ber: float, samples_per_symbol,
                         detector_symbols: int) -> None:
    """Into a new curves table: the one-symbol bank on this pulse and the multi-symbol detector."""
    from .sequence_theory import sequence_ber  # it imports iqdemod.predict, which imports this module

    h, pulse, bt, eps = out["h"], out["pulse"], out["bt"], out["freq_error_per_baud"]
    pulse_kw = dict(h=h, pulse=pulse, bt=bt, freq_error_T=eps, samples_per_symbol=samples_per_symbol)
    one = np.asarray(pb_per_symbol_pulse(from_db(x), **pulse_kw), float)
    seq_kw = dict(h=h, pulse=pulse, bt=bt, n_symbols=detector_symbols, samples_per_symbol=samples_per_symbol)
    multi = np.asarray(sequence_ber(x, **seq_kw), float).reshape(x.shape)
    need_multi: float | None
    try:
        need_multi = float(db(solve_ebn0(lambda v: float(sequence_ber(db(v), **seq_kw)), float(target_ber),
                                         f"multi-symbol {detector_symbols}")))
    except EstimateError:  # below the error floor
        need_multi = None
    out.update({
        "detector_symbols": int(detector_symbols),
        "ber_one_symbol_pulse": one.tolist(),
        "ber_multi_symbol": multi.tolist(),
        "fer_one_symbol_pulse": np.asarray(fer_from_ber(one, frame_bits), float).tolist(),
        "fer_multi_symbol": np.asarray(fer_from_ber(multi, frame_bits), float).tolist(),
    })
    out["needed_db"]["one_symbol_pulse"] = _needed_or_none(target_ber, "per_symbol_pulse", **pulse_kw)
    out["needed_db"]["multi_symbol"] = need_multi
