"""The health report of a capture, and the accumulator that reduces its bursts to one.

:class:`HealthAccumulator` takes demodulated bursts as they come and keeps
only sums, a fixed histogram and one small record per burst; its
:meth:`~HealthAccumulator.report` is the :class:`HealthReport`: pooled Eb/N0,
predicted against observed frame errors (exact binomial test), margin, the
transmitter's carrier and clock errors, the recording's DC level and IQ
imbalance. The link's theory and the per-burst prediction are in
:mod:`iqdemod.health_prediction`; :mod:`iqdemod.health` assesses a whole
capture and offers every name.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import Iterable

import numpy as np

from .binomial import binomial_p_value, clopper_pearson
from .channel import FrontEndReport
from .errors import IqdemodError
from .estimate import CONFIDENCE, EbN0Estimate, correct_leakage, pool
from .framing import frame_symbols
from .health_prediction import (BurstFigures, bit_gain_db, correction_db, estimate_leakage, link_pb, needed_ebn0,
                                pb_model, predicted_rates, shrink_snr_db, theory_options)
from .link import FrameSpec
from .plan import ReceiverPlan
from .receiver import Burst, Frame

__all__ = ["HealthReport", "HealthAccumulator", "check_target_ber", "HIST_EDGES_DB"]

HIST_EDGES_DB = np.linspace(-20.0, 40.0, 121)
_P_CONSISTENT = 0.01

def _finite(x: float | None) -> float | None:
    return None if x is None or not math.isfinite(x) else float(x)


#: Bursts whose Eb/N0 (10th to 90th percentile) differ by at least this get their spread, the weakest
#: tenth's margin and a note that the predictions are means over the bursts in the reports (the JSON
#: always has the spread and the weakest margin).
BURST_SPREAD_SHOWN_DB = 1.0


@dataclass(frozen=True)
class HealthReport:
    """Link-health figures for one capture (see :meth:`as_dict` for the JSON form).

    Rates are probabilities (the frame error rate ``fer_*`` too: text shows
    it as a percentage); ``*_db`` are decibels; intervals are (low, high).
    Values that cannot be measured (no frames, no bursts) are None.

    The Eb/N0 a target BER needs is given three ways: ``theory_ebn0_needed_db``
    (detection theory for this link, at the decisions), ``decision_gain_db``
    (what this receiver's filter adds to Eb/N0 at its decisions) and
    ``ebn0_needed_db`` (the first less the second: what the margin is
    measured against); ``coherent_ebn0_needed_db`` is the coherent
    orthogonal reference and ``noncoherent_penalty_db`` what non-coherent
    orthogonal detection costs beside it in theory.
    """

    capture: str
    duration_s: float
    bursts: int
    frames: int
    frames_crc_ok: int
    ebn0_db: float | None
    ebn0_db_ci90: tuple[float, float] | None
    ebn0_method: str | None
    ber_predicted: float | None
    ber_predicted_ci90: tuple[float, float] | None
    fer_predicted: float | None
    fer_predicted_ci90: tuple[float, float] | None
    fer_observed: float | None
    fer_observed_ci95: tuple[float, float] | None
    fer_p_value: float | None
    verdict: str
    causes: tuple[str, ...]
    freq_error_hz: float | None
    freq_error_ppm: float | None
    freq_spread_hz: float | None
    residual_freq_error_hz: float | None
    clock_error_ppm: float | None
    margin_db: float | None
    target_ber: float
    ebn0_needed_db: float | None
    coherent_ebn0_needed_db: float | None
    noncoherent_penalty_db: float | None
    mismatch_loss_db: float | None
    clipped_fraction: float
    h: float
    baud: float
    frame_bits: int | None
    decision_gain_db: float
    warnings: tuple[str, ...] = ()
    start_time: str | None = None
    dc_dbfs: float | None = None
    iq_gain_db: float | None = None
    iq_phase_deg: float | None = None
    image_rejection_db: float | None = None
    image_rejection_after_db: float | None = None
    pb_model: str = "noncoherent-fsk"
    shift_hz: float | None = None
    sync_word: str | None = None
    sync_bits: int | None = None
    frame_length: int | str | None = None
    crc: str | None = None
    pulse: str = "rect"
    bt: float | None = None
    detector: str = "per-symbol"
    detector_symbols: int | None = None
    theory_ebn0_needed_db: float | None = None
    clock_error_ppm_ci90: tuple[float, float] | None = None
    ebn0_db_bursts: tuple[float, float] | None = None
    margin_db_weakest: float | None = None
    histogram_edges_db: tuple[float, ...] = field(default=(), repr=False)
    histogram_right: tuple[int, ...] = field(default=(), repr=False)
    histogram_wrong: tuple[int, ...] = field(default=(), repr=False)

    @property
    def bursts_differ(self) -> bool:
        """Whether the bursts' Eb/N0 differ (10th to 90th percentile) by at least ``BURST_SPREAD_SHOWN_DB``:
        then the predictions, each burst's at its own Eb/N0 averaged over the bursts, lie well above the
        curve at the pooled Eb/N0, and the reports say so."""
        spread = self.ebn0_db_bursts
        return spread is not None and spread[1] - spread[0] >= BURST_SPREAD_SHOWN_DB

    def as_dict(self, *, histogram: bool = False) -> dict:
        """JSON-ready dict; the decision-statistic histogram only when asked.

        ``histogram_right`` counts the correlator of the tone sent (known in
        frames with a good CRC; the tone decided elsewhere),
        ``histogram_wrong`` the other correlator.
        """
        out = {}
        for name in self.__dataclass_fields__:
            if name.startswith("histogram") and not histogram:
                continue
            value = getattr(self, name)
            if isinstance(value, tuple):
                value = list(value)
            if isinstance(value, float) and not math.isfinite(value):
                value = None
            out[name] = value
        return out


class HealthAccumulator:
    """Reduces demodulated bursts to the sufficient statistics of a health report.

    Memory stays bounded however many bursts pass: sums, a fixed histogram and
    one small record per burst of the per-burst Eb/N0 (needed for the
    prediction of a capture whose bursts differ in strength). :func:`iqdemod.health.assess`
    is this loop over one capture; use the class to assess bursts as they
    arrive, or bursts from several captures together.

    Examples
    --------
    >>> import tempfile
    >>> from iqdemod.capture import open_capture
    >>> from iqdemod.profile import load_link
    >>> from iqdemod.receiver import Receiver, drive
    >>> from iqdemod.synth import SynthConfig, synthesize
    >>> link = load_link(None, baud=4800, shift=4800, sync="0x9B3C57E1", length="24",
    ...                  crc="CRC-16/IBM-3740", rate=250_000)
    >>> with tempfile.TemporaryDirectory() as d:
    ...     _ = synthesize(f"{d}/buoy", SynthConfig(link=link, ebn0_db=(14.0,), n_frames=5, seed=3))
    ...     with open_capture(f"{d}/buoy.sigmf-meta") as cap:
    ...         rx = Receiver(link, cap.info)
    ...         acc = HealthAccumulator(rx.plan)
    ...         for burst in drive(rx, cap):
    ...             acc.add(burst)
    ...         r = acc.report(capture="buoy", duration_s=cap.info.duration_s, clipped_fraction=0.0)
    >>> r.bursts, r.frames, r.frames_crc_ok, r.fer_observed
    (5, 5, 5, 0.0)
    """

    def __init__(self, plan: ReceiverPlan):
        self.plan = plan
        self.bursts = 0
        self.frames = 0
        self.good = 0
        self._da: list[EbN0Estimate] = []
        self._blind: list[EbN0Estimate] = []
        self._per_burst: list[BurstFigures] = []
        self._freq = np.zeros(3)  # weight, Σw·f, Σw·f²
        self._clock = np.zeros(4)  # weight, Σw·c, Σw·c², Σw² (w: the burst's symbols)
        self._resid = np.zeros(2)  # weight, Σw·r²
        self.hist_right = np.zeros(len(HIST_EDGES_DB) - 1, np.int64)
        self.hist_wrong = np.zeros(len(HIST_EDGES_DB) - 1, np.int64)
        self._bits_sum = 0.0
        self._bits_n = 0

    def add(self, burst: Burst) -> None:
        """Take one burst's figures in."""
        if burst.piece == 0:
            self.bursts += 1
        if burst.n_symbols == 0:
            return
        spec = self.plan.link.frame
        frames = list(burst.frames) if spec.raw else [f for f in burst.frames if not f.truncated]
        good = [f for f in frames if f.crc_ok and not f.raw]
        self.frames += len(frames)
        self.good += len(good)
        if not frames:  # no sync word found: most likely the detector triggered on noise
            return
        # transmitter figures from bursts that carried a frame (a noise trigger has no carrier to measure)
        n = burst.n_symbols
        self._freq += (n, n * burst.freq_error_hz, n * burst.freq_error_hz**2)
        self._clock += (n, n * burst.clock_error_ppm, n * burst.clock_error_ppm**2, n * n)
        self._resid += (n, n * burst.residual_hz**2)
        # Good frames: data-aided on their known bits. The others: blind on their own symbols,
        # so the noise at a burst's edges does not dilute the estimate.
        da = [f.ebn0 for f in good]  # data-aided on the symbols sent (the receiver's own estimate)
        blind = [f.ebn0 for f in frames if f not in good]
        self._da.extend(da)
        self._blind.extend(blind)
        group = da or blind
        est = group[0] if len(group) == 1 else pool(group)  # for the shrinkage: its variance, not an exact interval
        est = correct_leakage(est, estimate_leakage(self.plan))
        sd = est.sd_db
        bits = float(np.mean([_frame_data_bits(f, spec) for f in frames]))
        self._per_burst.append(BurstFigures(est.ebn0_db + bit_gain_db(spec), sd * sd, len(frames),
                                             sum(not f.crc_ok for f in frames), bits))
        self._bits_sum += bits * len(frames)
        self._bits_n += len(frames)
        self._histogram(burst, good, est.ebn0_db)

    def _histogram(self, burst: Burst, good: list[Frame], snr_db: float) -> None:
        """Both decision statistics in dB above the burst's noise: the sent symbol's, and the other's.

        One-symbol correlators: the other tone's |z|² is noise alone, about exponential, so its
        median is the noise times ln 2. Multi-symbol detector: the best hypothesis of the other
        middle bit shares the window's other symbols, so it is no noise reference; the noise of
        a window statistic is the signal's over N·Es/N0 (:class:`~iqdemod.sequence.SequenceDecisions`),
        with Es/N0 the burst's own estimate `snr_db`.
        """
        z = np.stack([burst.z0sq, burst.z1sq], axis=1)
        seq = self.plan.sequence
        if seq is None:
            noise = np.median(np.min(z, axis=1)) / math.log(2)  # the smaller is ~exponential: median = N·ln 2
        else:
            noise = np.median(np.max(z, axis=1)) / (seq.n_symbols * 10 ** (snr_db / 10))
        if not noise > 0:
            return
        sent = _sent_tones(burst, good, self.plan.link.frame)
        rows = np.arange(len(sent))
        with np.errstate(divide="ignore"):
            self.hist_right += np.histogram(10 * np.log10(z[rows, sent] / noise), HIST_EDGES_DB)[0]
            self.hist_wrong += np.histogram(10 * np.log10(z[rows, 1 - sent] / noise), HIST_EDGES_DB)[0]

    def report(self, *, capture: str, duration_s: float, clipped_fraction: float, target_ber: float = 1e-5,
               warnings: Iterable[str] = (), start_time: str | None = None,
               front_end: FrontEndReport | None = None) -> HealthReport:
        """The health report from everything added so far.

        `front_end` carries the receiver's own measurements of the recording
        (DC level, IQ imbalance; :attr:`iqdemod.receiver.Receiver.front_end`).
        """
        check_target_ber(target_ber)
        plan = self.plan
        corr = float(correction_db(plan))
        method, snr_db, snr_ci = self._pooled_snr()
        ebn0_db = None if snr_db is None else snr_db + corr
        ebn0_ci = None if snr_ci is None else (float(snr_ci[0] + corr), float(snr_ci[1] + corr))
        tx = self._transmitter()
        kw, mismatch = theory_options(plan, tx["residual_freq_error_hz"])
        ber_p = fer_p = ber_ci = fer_ci = None
        if self._per_burst and snr_db is not None:
            ber_p, fer_p, ber_ci, fer_ci = predicted_rates(self._per_burst, snr_db, snr_ci,
                                                           lambda g: link_pb(g, kw, plan))
        observed = self._observed(fer_p)
        need = needed_ebn0(target_ber, kw, plan, corr)
        margin = None if need["ebn0_needed_db"] is None or ebn0_db is None else ebn0_db - need["ebn0_needed_db"]
        bursts_db = self._burst_spread(snr_db, corr)
        weakest = None if margin is None or bursts_db is None else bursts_db[0] - need["ebn0_needed_db"]
        verdict, causes = _verdict(observed["fer_observed"], fer_p, observed["fer_p_value"], clipped_fraction,
                                   tx["freq_spread_hz"], tx["residual_freq_error_hz"], not plan.link.frame.raw)
        return HealthReport(
            capture=capture, duration_s=float(duration_s), bursts=self.bursts, frames=self.frames,
            frames_crc_ok=self.good, ebn0_db=_finite(ebn0_db), ebn0_db_ci90=ebn0_ci, ebn0_method=method,
            ber_predicted=ber_p, ber_predicted_ci90=ber_ci, fer_predicted=fer_p, fer_predicted_ci90=fer_ci,
            verdict=verdict, causes=tuple(causes), margin_db=_finite(margin), target_ber=target_ber,
            mismatch_loss_db=mismatch, clipped_fraction=float(clipped_fraction),
            frame_bits=round(self._bits_sum / self._bits_n) if self._bits_n else None,
            decision_gain_db=0.0 - corr, warnings=tuple(warnings), start_time=start_time,
            ebn0_db_bursts=bursts_db, margin_db_weakest=_finite(weakest),
            **tx, **observed, **need, **_front_end_fields(front_end), **_link_fields(plan),
            histogram_edges_db=tuple(float(v) for v in HIST_EDGES_DB),
            histogram_right=tuple(int(v) for v in self.hist_right),
            histogram_wrong=tuple(int(v) for v in self.hist_wrong),
        )

    def _pooled_snr(self) -> tuple[str | None, float | None, tuple[float, float] | None]:
        """(methods, decision SNR per bit in dB, its 90 % interval): the good frames' and the others', symbol-weighted."""
        leak = estimate_leakage(self.plan)
        parts = [correct_leakage(pool(g), leak) for g in (self._da, self._blind) if g]
        if not parts:
            return None, None, None
        method = "+".join(p.method for p in parts)
        w = np.array([p.n_symbols for p in parts], float)
        lin = np.array([p.ebn0 for p in parts])
        snr_db = 10 * math.log10(max(np.dot(w, lin) / w.sum(), 1e-30))
        los = np.array([10 ** (p.ci90_db[0] / 10) if math.isfinite(p.ci90_db[0]) else 0.0 for p in parts])
        his = np.array([10 ** (p.ci90_db[1] / 10) if math.isfinite(p.ci90_db[1]) else np.inf for p in parts])
        lo_lin, hi_lin = np.dot(w, los) / w.sum(), np.dot(w, his) / w.sum()
        snr_ci = (10 * math.log10(lo_lin) if lo_lin > 0 else -math.inf,
                  10 * math.log10(hi_lin) if math.isfinite(hi_lin) else math.inf)
        gain = bit_gain_db(self.plan.link.frame)  # per symbol -> per bit (a Manchester bit is two chips)
        return method, snr_db + gain, (snr_ci[0] + gain, snr_ci[1] + gain)

    def _burst_spread(self, snr_db: float | None, corr: float) -> tuple[float, float] | None:
        """10th and 90th percentile of the frames' Eb/N0, each burst's estimate shrunk by its own noise
        (:func:`shrink_snr_db`, the values the predictions use); None with fewer than three bursts."""
        if snr_db is None or len(self._per_burst) < 3:
            return None
        shrunk = shrink_snr_db([b.snr_db for b in self._per_burst], [b.var_db2 for b in self._per_burst], snr_db)
        per_frame = np.repeat(shrunk, [b.frames for b in self._per_burst]) + corr  # per bit, as ebn0_db
        if not np.all(np.isfinite(per_frame)):
            return None
        lo, hi = np.percentile(per_frame, [10.0, 90.0])
        return float(lo), float(hi)

    def _transmitter(self) -> dict:
        """Carrier error (Hz, ppm of the signal's frequency), its spread, the residual, the clock error."""
        fw, f1, f2 = self._freq
        freq = f1 / fw if fw else None
        ppm = None
        sig = self.plan.link.signal
        if freq is not None and (self.plan.centre_hz is not None or sig.frequency_hz is not None):
            f_abs = sig.frequency_hz if sig.frequency_hz is not None else self.plan.centre_hz + self.plan.offset_hz
            ppm = freq / f_abs * 1e6 if f_abs else None
        return {
            "freq_error_hz": freq,
            "freq_error_ppm": ppm,
            "freq_spread_hz": math.sqrt(max(f2 / fw - freq**2, 0.0)) if fw else None,
            "residual_freq_error_hz": math.sqrt(self._resid[1] / self._resid[0]) if self._resid[0] else None,
            "clock_error_ppm": self._clock[1] / self._clock[0] if self._clock[0] else None,
            "clock_error_ppm_ci90": _weighted_mean_ci90(*self._clock),
        }

    def _observed(self, fer_predicted: float | None) -> dict:
        """The frame error rate seen, its 95 % interval, and the exact binomial test against the prediction."""
        out = {"fer_observed": None, "fer_observed_ci95": None, "fer_p_value": None}
        if self.plan.link.frame.raw or not self.frames:
            return out
        bad = self.frames - self.good
        out["fer_observed"] = bad / self.frames
        out["fer_observed_ci95"] = tuple(float(v) for v in clopper_pearson(bad, self.frames))
        if fer_predicted is not None:
            out["fer_p_value"] = float(binomial_p_value(bad, self.frames, min(max(fer_predicted, 1e-300), 1.0)))
        return out


def check_target_ber(target_ber: float) -> None:
    """Refuse a target BER outside (0, 0.5), naming it.

    Examples
    --------
    >>> check_target_ber(1e-5)
    >>> check_target_ber(0.5)
    Traceback (most recent call last):
    ...
    iqdemod.errors.IqdemodError: target BER 0.5: must be within (0, 0.5)
    """
    if not 0 < target_ber < 0.5:
        raise IqdemodError(f"target BER {target_ber:g}: must be within (0, 0.5)")


def _weighted_mean_ci90(w: float, wx: float, wxx: float, ww: float) -> tuple[float, float] | None:
    """90 % interval of a weighted mean from its sums (Σw, Σw·x, Σw·x², Σw²); None from one value.

    Each burst's clock is measured with its own noise, which the spread between bursts shows; with
    the variance s² = Σw(x − m)²/(Σw − Σw²/Σw) (unbiased for weights that are not frequencies) the
    mean's standard error is s·√(Σw²)/Σw. The variance is itself estimated from a few bursts, so
    the interval takes Student's t quantile with n − 1 degrees of freedom, n = (Σw)²/Σw² the
    bursts' effective number (Kish 1965); with equal weights this is the textbook t interval of a
    mean. On captures of 12 GFSK bursts (BT 0.5, h 0.5, 14 dB, true clock 0 ppm) it covered the truth
    84 times in 100, the normal quantile 81: the bursts' estimates spread a little more than their
    own noise says, which is not followed further here.

    Examples
    --------
    Three bursts of 100 symbols at −10, 0 and +10 ppm: the mean 0, s = 10, SE 10/√3, and t at
    2 degrees of freedom 2.920 (the t table's 95th percentile):

    >>> lo, hi = _weighted_mean_ci90(300.0, 0.0, 20000.0, 30000.0)
    >>> round(lo, 2), round(hi, 2)
    (-16.86, 16.86)
    """
    from scipy.special import stdtrit  # Student's t quantile (scipy.special: health imports it anyway)

    if w <= 0:
        return None
    dof = w - ww / w
    if dof <= 1e-9 * w:
        return None
    m = wx / w
    s2 = max(wxx - w * m * m, 0.0) / dof
    n_eff = w * w / ww
    half = float(stdtrit(max(n_eff - 1.0, 1e-9), 0.5 + CONFIDENCE / 2.0)) * math.sqrt(s2 * ww) / w
    return (float(m - half), float(m + half))


def _verdict(fer_obs, fer_p, p_value, clipped, spread, resid, framed) -> tuple[str, list[str]]:
    """The verdict of the binomial test in words, with the likely causes when the link does worse."""
    if not framed:
        return "no frames to check (raw mode)", []
    if fer_obs is None:
        return "no frames found", []
    if fer_p is None or p_value is None:
        return "no prediction", []
    if p_value >= _P_CONSISTENT or abs(fer_obs - fer_p) < 1e-12:
        return "consistent with theory", []
    if fer_obs < fer_p:
        return "better than theory predicts", [
            "the Eb/N0 estimate may be low: leakage between the tones (pulse shaping, timing error) "
            "raises the noise the estimator sees",
        ]
    causes = []
    if clipped > 1e-4:
        causes.append(f"clipping: {clipped:.3%} of samples at full scale distort the tones")
    if spread is not None and resid is not None:
        causes.append(f"a drifting transmitter: the carrier error varies by {spread:.0f} Hz rms between bursts")
    causes += [
        "interference on or near the channel",
        "fading or bursts of errors, which the white-noise theory does not cover",
        "a symbol clock drifting faster than the per-burst timing fit follows",
    ]
    return "worse than theory predicts", causes


def _link_fields(plan: ReceiverPlan) -> dict:
    """The link's own parameters, for the report's head (and the JSON)."""
    sig, spec = plan.link.signal, plan.link.frame
    framed = not spec.raw
    return {
        "h": sig.h, "baud": sig.baud, "shift_hz": sig.shift_hz,
        "sync_word": None if spec.sync_word is None else f"0x{spec.sync_word:0{(spec.sync_bits + 3) // 4}X}",
        "sync_bits": None if spec.sync_word is None else spec.sync_bits,
        "frame_length": spec.length if framed else None, "crc": spec.crc if framed else None,
        "pb_model": pb_model(plan), "pulse": sig.pulse, "bt": sig.bt if sig.pulse == "gaussian" else None,
        "detector": "multi-symbol" if plan.sequence is not None else "per-symbol",
        "detector_symbols": sig.detector_symbols if plan.sequence is not None else None,
    }


def _frame_data_bits(frame, spec: FrameSpec) -> float:
    """Data bits of a frame after its sync word (its symbols per bit taken out)."""
    return frame.n_symbols / spec.symbols_per_bit - spec.sync_bits


def _sent_tones(burst: Burst, good: list[Frame], spec: FrameSpec) -> np.ndarray:
    """Per symbol, the tone sent where a good CRC makes it known, else the tone decided.

    In a frame with a good CRC every NRZ decision is the bit sent; with a line
    coding a hard chip decision may have been overruled by the soft pair
    decision, so the chips are rebuilt from the payload (as the receiver's
    own data-aided estimate does).
    """
    sent = np.asarray(burst.bits, np.intp).copy()
    if spec.coding != "nrz":
        for f in good:
            known = np.asarray(frame_symbols(f.payload, spec), np.intp)[: f.n_symbols]
            sent[f.first_symbol : f.first_symbol + len(known)] = known
    return sent


def _front_end_fields(fe: FrontEndReport | None) -> dict:
    if fe is None:
        return {}
    return {k: _finite(v) if v is not None else None for k, v in dataclasses.asdict(fe).items()}


