"""Link health: Eb/N0 from the decision statistics, predicted against observed error rates.

For a capture this stage answers: how strong is the link (Eb/N0 with a 90 %
interval), what bit and frame error rates detection theory predicts at that
strength for this link's tone spacing and measured residual frequency error,
whether the CRC failures actually seen agree (exact binomial test), how much
margin is left to a target BER, and how far the transmitter's carrier and
symbol clock are off.

Eb/N0 per capture combines the data-aided estimate over frames whose CRC
passed and the blind estimate over bursts without a good frame, weighted by
symbols. Predictions are made at the *decision* SNR (the receiver's noise
bandwidth, :attr:`iqdemod.receiver.ReceiverPlan.noise_bandwidth_ratio`, makes
it slightly higher than Eb/N0), so that they speak of the decisions this
receiver actually made.

A capture may hold bursts of different strength. Each burst's prediction uses
its own Eb/N0 shrunk towards the capture's pooled value by the empirical-Bayes
(James–Stein) rule of Efron & Morris (J. Amer. Statist. Assoc. 68, 1973): when
the bursts are alike the noise of a single burst's estimate does not inflate
the predicted error rate, and when they differ each keeps its own.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterable

import numpy as np

from . import predict as P
from .capture import Capture, DEFAULT_BLOCK_SAMPLES, open_capture
from .errors import IqdemodError
from .channel import FrontEndReport
from .estimate import EbN0Estimate, correct_leakage, pool
from .link import FrameSpec, Link
from .receiver import Burst, Receiver, ReceiverPlan, drive

__all__ = ["HealthReport", "HealthAccumulator", "assess", "HIST_EDGES_DB"]

HIST_EDGES_DB = np.linspace(-20.0, 40.0, 121)
_P_CONSISTENT = 0.01


def _finite(x: float | None) -> float | None:
    return None if x is None or not math.isfinite(x) else float(x)


@dataclass(frozen=True)
class HealthReport:
    """Link-health figures for one capture (see :meth:`as_dict` for the JSON form).

    Rates are probabilities; ``*_db`` are decibels; intervals are (low, high).
    Values that cannot be measured (no frames, no bursts) are None.
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
    per_predicted: float | None
    per_predicted_ci90: tuple[float, float] | None
    per_observed: float | None
    per_observed_ci95: tuple[float, float] | None
    per_p_value: float | None
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
    histogram_edges_db: tuple[float, ...] = field(default=(), repr=False)
    histogram_right: tuple[int, ...] = field(default=(), repr=False)
    histogram_wrong: tuple[int, ...] = field(default=(), repr=False)

    def as_dict(self, *, histogram: bool = False) -> dict:
        """JSON-ready dict; the decision-statistic histogram only when asked."""
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
    prediction of a capture whose bursts differ in strength).
    """

    def __init__(self, plan: ReceiverPlan):
        self.plan = plan
        self.bursts = 0
        self.frames = 0
        self.good = 0
        self._da: list[EbN0Estimate] = []
        self._blind: list[EbN0Estimate] = []
        # per burst with frames: (decision SNR dB, its variance in dB², frames, bad frames, frame bits)
        self._per_burst: list[tuple[float, float, int, int, float]] = []
        self._freq = np.zeros(3)  # weight, Σw·f, Σw·f²
        self._clock = np.zeros(2)
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
        frames = [f for f in burst.frames if not f.truncated] if not self.plan.link.frame.raw else list(burst.frames)
        good = [f for f in frames if f.crc_ok and not f.raw]
        self.frames += len(frames)
        self.good += len(good)
        if not frames:  # no sync word found: most likely the detector triggered on noise
            return
        # transmitter figures from bursts that carried a frame (a noise trigger has no carrier to measure)
        n = burst.n_symbols
        self._freq += (n, n * burst.freq_error_hz, n * burst.freq_error_hz**2)
        self._clock += (n, n * burst.clock_error_ppm)
        self._resid += (n, n * burst.residual_hz**2)
        # Good frames: data-aided on their known bits. The others: blind on their own symbols,
        # so the noise at a burst's edges does not dilute the estimate.
        da = [f.ebn0 for f in good]  # data-aided on the symbols sent (the receiver's own estimate)
        blind = [f.ebn0 for f in frames if f not in good]
        self._da.extend(da)
        self._blind.extend(blind)
        group = da or blind
        est = group[0] if len(group) == 1 else pool(group)  # for the shrinkage: its variance, not an exact interval
        est = correct_leakage(est, _leakage(self.plan))
        lo, hi = est.ci90_db
        var = ((hi - lo) / (2 * 1.645)) ** 2 if math.isfinite(lo) and math.isfinite(hi) else math.inf
        bad = sum(not f.crc_ok for f in frames)
        bits = float(np.mean([_frame_data_bits(f, self.plan.link.frame) for f in frames]))
        self._per_burst.append((est.ebn0_db + _bit_gain_db(self.plan.link.frame), var, len(frames), bad, bits))
        self._bits_sum += bits * len(frames)
        self._bits_n += len(frames)
        self._histogram(burst, est)

    def _histogram(self, burst: Burst, est: EbN0Estimate) -> None:
        # the statistics in dB above the burst's noise, as seen by the decision
        z = np.stack([burst.z0sq, burst.z1sq], axis=1)
        noise = np.median(np.min(z, axis=1)) / math.log(2)  # the loser is ~exponential: median = N·ln 2
        if not noise > 0:
            return
        win = np.max(z, axis=1) / noise
        lose = np.min(z, axis=1) / noise
        with np.errstate(divide="ignore"):
            self.hist_right += np.histogram(10 * np.log10(win), HIST_EDGES_DB)[0]
            self.hist_wrong += np.histogram(10 * np.log10(lose), HIST_EDGES_DB)[0]

    def report(self, *, capture: str, duration_s: float, clipped_fraction: float, target_ber: float = 1e-5,
               warnings: Iterable[str] = (), start_time: str | None = None,
               front_end: FrontEndReport | None = None) -> HealthReport:
        """The health report from everything added so far.

        `front_end` carries the receiver's own measurements of the recording
        (DC level, IQ imbalance; :attr:`iqdemod.receiver.Receiver.front_end`).
        """
        if not 0 < target_ber < 0.5:
            raise IqdemodError(f"target BER {target_ber:g}: must be within (0, 0.5)")
        plan = self.plan
        spec = plan.link.frame
        sig = plan.link.signal
        corr = _correction_db(plan)
        symbol_t = 1.0 / sig.baud
        sps = max(2, int(round(plan.period)))  # the discrete tone correlation takes whole samples
        # -- Eb/N0 (decision SNR, then corrected to Eb/N0)
        leak = _leakage(plan)
        parts = [correct_leakage(pool(g), leak) for g in (self._da, self._blind) if g]
        method = None
        snr_db = snr_ci = None
        if parts:
            method = "+".join(p.method for p in parts)
            w = np.array([p.n_symbols for p in parts], float)
            lin = np.array([p.ebn0 for p in parts])
            snr_db = 10 * math.log10(max(np.dot(w, lin) / w.sum(), 1e-30))
            los = np.array([10 ** (p.ci90_db[0] / 10) if math.isfinite(p.ci90_db[0]) else 0.0 for p in parts])
            his = np.array([10 ** (p.ci90_db[1] / 10) if math.isfinite(p.ci90_db[1]) else np.inf for p in parts])
            lo_lin, hi_lin = np.dot(w, los) / w.sum(), np.dot(w, his) / w.sum()
            snr_ci = (10 * math.log10(lo_lin) if lo_lin > 0 else -math.inf,
                      10 * math.log10(hi_lin) if math.isfinite(hi_lin) else math.inf)
        if snr_db is not None:  # per symbol -> per bit (a Manchester bit is two chips)
            snr_db, snr_ci = _per_bit(snr_db, snr_ci, plan.link.frame)
        ebn0_db = None if snr_db is None else snr_db + corr
        ebn0_ci = None if snr_ci is None else (snr_ci[0] + corr, snr_ci[1] + corr)
        # -- frequency and clock
        fw, f1, f2 = self._freq
        freq = f1 / fw if fw else None
        spread = math.sqrt(max(f2 / fw - freq**2, 0.0)) if fw else None
        clock = self._clock[1] / self._clock[0] if self._clock[0] else None
        resid = math.sqrt(self._resid[1] / self._resid[0]) if self._resid[0] else None
        carrier = None
        centre = plan.centre_hz
        if freq is not None and (centre is not None or sig.frequency_hz is not None):
            f_abs = sig.frequency_hz if sig.frequency_hz is not None else centre + plan.offset_hz
            carrier = freq / f_abs * 1e6 if f_abs else None
        dT = 0.0 if resid is None else resid * symbol_t
        kw = dict(h=sig.h, freq_error_T=dT, samples_per_symbol=sps)
        mismatch = float(P.mismatch_loss_db(dT, samples_per_symbol=sps)) if resid is not None else None
        # -- predictions
        frame_bits = round(self._bits_sum / self._bits_n) if self._bits_n else None
        ber_p = per_p = ber_ci = per_ci = None
        if self._per_burst and snr_db is not None:
            ber_p, per_p, ber_ci, per_ci = self._predict(snr_db, snr_ci, kw)
        # -- observed
        per_obs = per_obs_ci = p_value = None
        framed = not plan.link.frame.raw
        if framed and self.frames:
            bad = self.frames - self.good
            per_obs = bad / self.frames
            per_obs_ci = tuple(float(v) for v in P.clopper_pearson(bad, self.frames))
            if per_p is not None:
                p_value = float(P.binomial_p_value(bad, self.frames, min(max(per_p, 1e-300), 1.0)))
        # -- margin
        needed = coherent = penalty = margin = None
        try:
            needed = _ebn0_db_needed(target_ber, kw, plan) + corr
            coherent = float(P.ebn0_db_for_pb(target_ber, "coherent_orthogonal"))
            penalty = float(P.ebn0_db_for_pb(target_ber, "noncoherent")) - coherent
        except IqdemodError:
            needed = None  # the target lies below this link's error floor
        if needed is not None and ebn0_db is not None:
            margin = ebn0_db - needed
        verdict, causes = self._verdict(per_obs, per_p, p_value, clipped_fraction, spread, resid, framed)
        return HealthReport(
            capture=capture, duration_s=float(duration_s), bursts=self.bursts, frames=self.frames,
            frames_crc_ok=self.good, ebn0_db=_finite(ebn0_db),
            ebn0_db_ci90=None if ebn0_ci is None else tuple(float(v) for v in ebn0_ci), ebn0_method=method,
            ber_predicted=ber_p, ber_predicted_ci90=ber_ci, per_predicted=per_p, per_predicted_ci90=per_ci,
            per_observed=per_obs, per_observed_ci95=per_obs_ci, per_p_value=p_value, verdict=verdict,
            causes=tuple(causes), freq_error_hz=freq, freq_error_ppm=carrier, freq_spread_hz=spread,
            residual_freq_error_hz=resid, clock_error_ppm=clock, margin_db=_finite(margin), target_ber=target_ber,
            ebn0_needed_db=needed, coherent_ebn0_needed_db=coherent, noncoherent_penalty_db=penalty,
            mismatch_loss_db=mismatch, clipped_fraction=float(clipped_fraction), h=sig.h, baud=sig.baud, frame_bits=frame_bits,
            decision_gain_db=-corr, warnings=tuple(warnings), start_time=start_time,
            **_front_end_fields(front_end),
            shift_hz=sig.shift_hz, sync_word=None if spec.sync_word is None else f"{spec.sync_word:#x}",
            sync_bits=None if spec.sync_word is None else spec.sync_bits,
            frame_length=None if spec.raw else spec.length, crc=None if spec.raw else spec.crc,
            pb_model=_pb_model(plan), pulse=sig.pulse, bt=sig.bt if sig.pulse == "gaussian" else None,
            detector="multi-symbol" if plan.sequence is not None else "per-symbol",
            detector_symbols=sig.detector_symbols if plan.sequence is not None else None,
            histogram_edges_db=tuple(float(v) for v in HIST_EDGES_DB),
            histogram_right=tuple(int(v) for v in self.hist_right),
            histogram_wrong=tuple(int(v) for v in self.hist_wrong),
        )

    def _predict(self, snr_db: float, snr_ci, kw) -> tuple:
        """Frame-weighted BER and PER over bursts, each at its shrunk decision SNR."""
        est = np.array([b[0] for b in self._per_burst], float)
        var = np.array([b[1] for b in self._per_burst], float)
        nfr = np.array([b[2] for b in self._per_burst], float)
        bits = np.array([b[4] for b in self._per_burst], float)
        ok = np.isfinite(est) & np.isfinite(var)
        shrunk = np.full(len(est), snr_db)
        if ok.sum() >= 3:
            between = max(0.0, float(np.var(est[ok], ddof=1) - np.mean(var[ok])))
            weight = between / (between + var[ok])  # James–Stein / empirical-Bayes shrinkage factor
            shrunk[ok] = snr_db + weight * (est[ok] - snr_db)
        elif ok.any() and len(est) == ok.sum():
            shrunk = est.copy()

        def rates(offset_db: float) -> tuple[float, float]:
            g = P.from_db(shrunk + offset_db)
            pb = np.asarray(_pb(g, kw, self.plan), float)
            per = np.asarray(P.per_from_ber(pb, np.maximum(bits, 1)), float)
            return float(np.average(pb, weights=nfr * bits)), float(np.average(per, weights=nfr))

        ber, per = rates(0.0)
        ber_ci = per_ci = None
        if snr_ci is not None and all(math.isfinite(v) for v in snr_ci):
            hi_b, hi_p = rates(snr_ci[0] - snr_db)  # lower Eb/N0 -> higher error rates
            lo_b, lo_p = rates(snr_ci[1] - snr_db)
            ber_ci, per_ci = (lo_b, hi_b), (lo_p, hi_p)
        return ber, per, ber_ci, per_ci

    @staticmethod
    def _verdict(per_obs, per_p, p_value, clipped, spread, resid, framed) -> tuple[str, list[str]]:
        if not framed:
            return "no frames to check (raw mode)", []
        if per_obs is None:
            return "no frames found", []
        if per_p is None or p_value is None:
            return "no prediction", []
        if p_value >= _P_CONSISTENT or abs(per_obs - per_p) < 1e-12:
            return "consistent with theory", []
        if per_obs < per_p:
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


# ---- line codings (issue 14): the bit is the unit of Eb, predictions and margin


def _bit_gain_db(spec: FrameSpec) -> float:
    """dB from a symbol's decision SNR to a bit's: a Manchester bit carries two chips' energy."""
    return 10 * math.log10(spec.symbols_per_bit)


def _per_bit(snr_db: float, snr_ci, spec: FrameSpec) -> tuple[float, tuple[float, float] | None]:
    gain = _bit_gain_db(spec)
    return snr_db + gain, None if snr_ci is None else (snr_ci[0] + gain, snr_ci[1] + gain)


def _frame_data_bits(frame, spec: FrameSpec) -> float:
    """Data bits of a frame after its sync word (its symbols per bit taken out)."""
    return frame.n_symbols / spec.symbols_per_bit - spec.sync_bits


def _pb_model(plan: ReceiverPlan) -> str:
    """The Pb model of the predictions, as the JSON names it."""
    if plan.sequence is not None:
        sig = plan.link.signal
        return f"multi-symbol-{sig.detector_symbols}-{sig.pulse}-pruned-union"  # sequence_theory.sequence_ber
    if plan.link.frame.coding == "nrz":
        return "noncoherent-fsk"  # P.pb_mismatched: tone spacing and residual frequency error
    return "manchester-square-law-combining-L2"  # P.pb_manchester, REFERENCE §10: orthogonal tones


def _leakage(plan: ReceiverPlan) -> float:
    """The tone leakage the estimates are corrected for (none when fitted against the real pulse)."""
    return 0.0 if plan.sequence is not None else plan.tone_leakage


def _correction_db(plan: ReceiverPlan) -> float:
    """Decision SNR to Eb/N0 (none for the multi-symbol detector's pulse-aware estimates)."""
    return 0.0 if plan.sequence is not None else plan.ebn0_correction_db


def _pb(g, kw: dict, plan: ReceiverPlan):
    if plan.sequence is not None:
        from .sequence_theory import sequence_ber

        sig = plan.link.signal
        db = 10 * np.log10(np.maximum(np.asarray(g, float), 1e-30))
        return sequence_ber(db, h=sig.h, pulse=sig.pulse, bt=sig.bt, n_symbols=sig.detector_symbols)
    return P.pb_mismatched(g, **kw) if plan.link.frame.coding == "nrz" else P.pb_manchester(g)


def _ebn0_db_needed(target_ber: float, kw: dict, plan: ReceiverPlan) -> float:
    if plan.sequence is not None:
        from scipy.optimize import brentq

        def excess(db: float) -> float:
            return math.log(max(float(_pb(P.from_db(db), kw, plan)), 1e-300)) - math.log(target_ber)

        lo, hi = -5.0, 40.0
        if excess(hi) > 0:
            raise IqdemodError(f"BER {target_ber:g} is not reached below {hi:g} dB by this link")
        return float(brentq(excess, lo, hi, xtol=1e-4)) if excess(lo) > 0 else lo
    if plan.link.frame.coding == "nrz":
        return float(P.ebn0_db_for_pb(target_ber, "mismatched", **kw))
    return float(P.ebn0_db_for_pb(target_ber, "manchester"))


def assess(
    capture: str | Path | Capture,
    link: Link,
    *,
    target_ber: float = 1e-5,
    block_samples: int = DEFAULT_BLOCK_SAMPLES,
    progress: bool = False,
    frames_out: list | None = None,
) -> HealthReport:
    """Decode a capture and assess its link health.

    Parameters
    ----------
    capture : str, Path or Capture
    link : Link
    target_ber : float
        The BER the margin is measured against.
    frames_out : list, optional
        When given, every decoded frame is appended to it.

    Returns
    -------
    HealthReport
    """
    import contextlib

    if not 0 < target_ber < 0.5:
        raise IqdemodError(f"target BER {target_ber:g}: must be within (0, 0.5)")
    with contextlib.ExitStack() as stack:
        cap = capture if isinstance(capture, Capture) else stack.enter_context(
            open_capture(capture, datatype=link.capture.datatype, sample_rate=link.capture.sample_rate)
        )
        rx = Receiver(link, cap.info)
        acc = HealthAccumulator(rx.plan)
        for burst in drive(rx, cap, block_samples=block_samples, progress=progress):
            acc.add(burst)
            if frames_out is not None:
                frames_out.extend(burst.frames)
        return acc.report(
            capture=Path(cap.info.path).name,
            duration_s=cap.info.duration_s,
            clipped_fraction=cap.stats.clipped_fraction,
            target_ber=target_ber,
            warnings=cap.stats.warnings(),
            start_time=cap.info.start_time,
            front_end=rx.front_end,
        )


def _front_end_fields(fe: FrontEndReport | None) -> dict:
    if fe is None:
        return {}
    return {k: _finite(v) if v is not None else None for k, v in dataclasses.asdict(fe).items()}
