"""The receiver: capture blocks in, bursts with their symbols and frames out.

Data path (each stage in its own module)::

    capture blocks ─ channel (DC, IQ image, filter, decimate) ─ bursts (energy detector)
      └─ per burst: carrier (coarse) ─ timing ─ correlate ─ carrier (phase step)
         ─ correlate ─ square-law bits ─ framing ─ frames

Streaming happens up to the burst detector, with every state carried
explicitly; a burst, once complete, is a bounded buffer at a few samples per
symbol and is processed as a block. Every burst keeps the two square-law
decision statistics of each symbol for the link-health stage.
"""

from __future__ import annotations

import contextlib
import dataclasses
import datetime
import functools
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterator, NamedTuple

import numpy as np

from . import bursts as _bursts
from .bursts import RawBurst
from .capture import Capture, CaptureInfo, DEFAULT_BLOCK_SAMPLES, open_capture
from .carrier import coarse_offset, residual_offset
from .correlate import correlate, tone_sums
from .sequence import SequencePlan, detect as detect_sequence, phase_trajectory, plan_sequence
from .sequence_estimate import estimate_sequence_data_aided
from .estimate import (EbN0Estimate, correct_leakage, estimate_blind, estimate_data_aided,
                       estimate_decision_directed)
from .framing import bits_to_bytes, find_frames, frame_symbols, sync_symbols
from .link import Link
from .timing import SEGMENT_SYMBOLS, Timing, symbol_starts, symbol_timing
from .channel import ChannelPlan, FrontEndReport, channelize, flush_channel, front_end_report, plan_channel

__all__ = ["ReceiverPlan", "Burst", "Frame", "Receiver", "DecodeSummary", "plan_receiver", "iter_bursts", "drive",
           "decode", "sync_candidates"]

MAX_BURST_SYMBOLS = 1 << 15
SYNC_THRESHOLD = 0.5  # normalised sync-word score a candidate needs (1 = noise-free); a candidate costs only a look
PREAMBLE_SYMBOLS = 24  # symbols before a sync word a transmission's own synchronisation may use


@dataclass(frozen=True, eq=False)
class ReceiverPlan:
    """Fixed settings of the receiver for one link on one capture."""

    link: Link
    sample_rate_hz: float
    offset_hz: float
    centre_hz: float | None
    tuner: ChannelPlan
    detector: _bursts.DetectorPlan

    @property
    def rate_hz(self) -> float:
        """The decimated rate the bursts are processed at."""
        return self.tuner.output_rate_hz

    @property
    def period(self) -> float:
        """Nominal symbol period at the decimated rate, samples."""
        return self.rate_hz / self.link.signal.baud

    @property
    def tones_hz(self) -> tuple[float, float]:
        """(bit-0 tone, bit-1 tone) relative to the signal centre."""
        s = self.link.signal.shift_hz / 2
        return (s, -s) if self.link.signal.invert else (-s, s)

    @functools.cached_property
    def noise_bandwidth_ratio(self) -> float:
        """Noise at a correlator output relative to a full-band integrate-and-dump.

        The theory (½·exp(−Eb/2N0)) assumes the correlator integrates white
        noise over the whole capture band. Here the tuner's low-pass filter runs
        first and removes the far tails of the correlator's sinc response, so a
        correlator sees a little less noise (κ < 1) while the tone keeps its
        energy. For white input noise of variance σ² the output noise is
        σ²/T²·Σ|c_n|², c the combined filter–decimate–correlate weights; the
        ideal is σ²/(T·D). κ is their ratio, averaged over both tones and
        several fractional window starts. Eb/N0 = (decision SNR)·κ.
        """
        h = self.tuner.taps.astype(np.float64)
        d = self.tuner.decimation
        period = self.period
        ratios = []
        for tone in self.tones_hz:
            omega = 2 * np.pi * tone / self.rate_hz
            for a in _WINDOW_STARTS:
                m, w = _window_weights(a, period)
                v = np.zeros(len(m) * d, np.complex128)
                v[::d] = w * np.exp(-1j * omega * m)
                c = np.convolve(v, h[::-1])
                ratios.append(d * np.sum(np.abs(c) ** 2) / period)
        return float(np.mean(ratios))

    @functools.cached_property
    def tone_leakage(self) -> float:
        """|ρ|²: the power a unit tone puts into the other tone's correlator (0 for h = 1, 2, …).

        Computed for this receiver's own correlators (fractional windows at the
        decimated rate), averaged over window starts; about sinc²(h) (REFERENCE §2).
        """
        period = self.period
        f0, f1 = self.tones_hz
        omega = 2 * np.pi * (f0 - f1) / self.rate_hz
        vals = []
        for a in _WINDOW_STARTS:
            m, w = _window_weights(a, period)
            vals.append(abs(np.sum(w * np.exp(1j * omega * m)) / period) ** 2)
        leak = float(np.mean(vals))
        return 0.0 if leak < 1e-4 else leak

    @functools.cached_property
    def sequence(self) -> SequencePlan | None:
        """The multi-symbol detector's plan, when the link's decisions are made by it."""
        sig = self.link.signal
        if not sig.multi_symbol:
            return None
        return plan_sequence(h=sig.h, pulse=sig.pulse, bt=sig.bt, n_symbols=sig.detector_symbols, invert=sig.invert)

    @functools.cached_property
    def sync_score(self) -> float:
        """What a noise-free sync word of this link scores in :func:`sync_candidates`' raw form.

        Measured on the link's own waveform (its pulse, h and tones at this
        rate): 16 preamble symbols, the sync word, 16 more symbols.
        """
        sig = self.link.signal
        sym = np.concatenate([np.arange(16) % 2, sync_symbols(self.link.frame),
                              np.random.default_rng(0).integers(0, 2, 16)]).astype(np.uint8)
        shape = plan_sequence(h=sig.h, pulse=sig.pulse, bt=sig.bt, n_symbols=1, invert=sig.invert)
        t = np.arange(int(len(sym) * self.period)) / self.period
        x = np.exp(1j * phase_trajectory(sym, t + 0.5 / self.period, shape))
        norm = _sync_scores(tone_sums(x, self.rate_hz, self.tones_hz), self)
        start = int(round(16 * self.period))
        near = norm[max(0, start - 2) : start + 3]
        return float(max(near.max(), 0.05)) if near.size else 1.0

    @functools.cached_property
    def filter_noise_share(self) -> float:
        """The share of the decimated band that white input noise fills after the channel filter, D·Σh²."""
        h = np.asarray(self.tuner.taps, np.float64)
        return float(self.tuner.decimation * np.sum(h * h))

    @property
    def ebn0_correction_db(self) -> float:
        """Add to a decision-SNR estimate (dB) to get Eb/N0 (see :attr:`noise_bandwidth_ratio`)."""
        return 10 * np.log10(self.noise_bandwidth_ratio)

    def input_sample(self, burst_start: int, position: float) -> float:
        """Input-sample index of a position in a burst buffer (cumulative-sum convention)."""
        return (burst_start + position - 0.5) * self.tuner.decimation - self.tuner.delay_samples


_WINDOW_STARTS = np.arange(8) / 8  # fractional window starts the plan's figures are averaged over


def _window_weights(start: float, length: float) -> tuple[np.ndarray, np.ndarray]:
    """Samples m a correlator window [start, start + length) touches, and the share of each in it.

    The same weights :func:`iqdemod.correlate.window_sums` applies through its running sums.
    """
    m = np.arange(int(np.floor(start)), int(np.ceil(start + length)) + 1)
    return m, np.clip(np.minimum(m + 1, start + length) - np.maximum(m, start), 0, None)


def plan_receiver(link: Link, sample_rate_hz: float, centre_hz: float | None = None) -> ReceiverPlan:
    """Check `link` against the capture's rate and plan tuner and detector.

    Raises
    ------
    LinkError
        When the signal does not fit the capture (see :meth:`Link.check_rate`).
    """
    offset = link.check_rate(sample_rate_hz, centre_hz)
    sig = link.signal
    tuner = plan_channel(sample_rate_hz, sig, offset)
    overlap = link.frame.max_bits + 64 if not link.frame.raw else 64
    detector = _bursts.plan_detector(
        tuner.output_rate_hz,
        baud=sig.baud,
        band_hz=sig.shift_hz / 2 + sig.pull_in_hz + sig.baud / 2,
        max_symbols=max(MAX_BURST_SYMBOLS, 4 * overlap),
        overlap_symbols=overlap,
        settle_samples=-(-len(tuner.taps) // tuner.decimation),
    )
    return ReceiverPlan(link, float(sample_rate_hz), offset, centre_hz, tuner, detector)


@dataclass(frozen=True, eq=False)
class Frame:
    """One frame (or, in raw mode, one burst's bits).

    Attributes
    ----------
    capture : str
    t_s : float
        Time of the sync word's first bit (raw mode: of the burst's first bit),
        seconds from the capture start.
    sample : int
        The same instant as an input-sample index.
    burst : int
    length : int
        Payload bytes (raw mode: 0).
    payload : bytes
    crc_ok : bool
    sync_errors : int
    freq_error_hz : float
        Measured carrier error of the burst.
    ebn0_db : float or None
        This frame's Eb/N0 estimate, dB (the decision SNR of `ebn0` corrected
        by the receiver's noise bandwidth, :attr:`ReceiverPlan.ebn0_correction_db`).
    truncated : bool
        The burst ended before the frame did.
    bits : numpy.ndarray or None
        Raw mode only: the hard bits.
    first_symbol, n_symbols : int
        Where the frame's symbols lie in its burst's arrays.
    ebn0 : EbN0Estimate or None
        The estimator's own output, before the corrections for tone leakage
        (non-orthogonal tones) and noise bandwidth that give `ebn0_db`
        (per symbol on the air: with Manchester, per chip).
    coding_errors : int or None
        Manchester chip pairs that were not a valid symbol (None for NRZ).
    crc_received, crc_computed : int or None
        The CRC as sent and as computed over the received bytes (None without a CRC).
    level_dbfs : float or None
        The frame's signal power, dB re full scale (1.0 for float captures).
    noise_dbfs : float or None
        The noise around it: its power over the whole capture band, dB re full
        scale (from the signal level and the frame's Eb/N0, REFERENCE §8).
    frequency_hz : float or None
        The carrier as received: capture centre + signal offset + measured
        carrier error (None when the capture's centre is not known).
    clock_ppm : float or None
        The transmitter's symbol-clock error measured on this transmission.
    time_utc : str or None
        ISO 8601 UTC time of `t_s` (the capture's start time + t_s), when known.
    crc_bits : int
        Width of the link's CRC (for the hex fields).
    """

    capture: str
    t_s: float
    sample: int
    burst: int
    length: int
    payload: bytes
    crc_ok: bool
    sync_errors: int
    freq_error_hz: float
    ebn0_db: float | None
    truncated: bool = False
    bits: np.ndarray | None = field(default=None, repr=False)
    first_symbol: int = 0
    n_symbols: int = 0
    ebn0: EbN0Estimate | None = field(default=None, repr=False)
    coding_errors: int | None = None
    crc_received: int | None = None
    crc_computed: int | None = None
    level_dbfs: float | None = None
    noise_dbfs: float | None = None
    frequency_hz: float | None = None
    clock_ppm: float | None = None
    time_utc: str | None = None
    crc_bits: int = 0

    @property
    def raw(self) -> bool:
        return self.bits is not None

    def as_record(self) -> dict:
        """The JSON Lines record of this frame (the decode output contract)."""
        ebn0 = None if self.ebn0_db is None or not np.isfinite(self.ebn0_db) else round(float(self.ebn0_db), 2)
        rec = {"capture": self.capture, "t_s": round(self.t_s, 7), "sample": self.sample, "burst": self.burst}
        if self.raw:
            rec.update(n_bits=int(len(self.bits)), bits_hex=bits_to_bytes(self.bits).hex())
        else:
            rec.update(
                length=self.length,
                payload_hex=self.payload.hex(),
                crc_ok=self.crc_ok,
                sync_errors=self.sync_errors,
            )
            if self.truncated:
                rec["truncated"] = True
            if self.coding_errors is not None:
                rec["coding_errors"] = int(self.coding_errors)
            if not self.crc_ok and self.crc_received is not None:
                digits = (self.crc_bits + 3) // 4
                rec.update(crc_received_hex=f"{self.crc_received:0{digits}x}",
                           crc_computed_hex=f"{self.crc_computed:0{digits}x}")
        rec.update(freq_error_hz=round(self.freq_error_hz, 1), ebn0_db=ebn0)
        for key in ("level_dbfs", "noise_dbfs"):
            value = getattr(self, key)
            if value is not None and np.isfinite(value):
                rec[key] = round(float(value), 2)
        if self.frequency_hz is not None:
            rec["frequency_hz"] = round(float(self.frequency_hz), 1)
        if self.clock_ppm is not None and np.isfinite(self.clock_ppm):
            rec["clock_ppm"] = round(float(self.clock_ppm), 1)
        if self.time_utc is not None:
            rec["time_utc"] = self.time_utc
        return rec


@dataclass(frozen=True, eq=False)
class Burst:
    """A demodulated burst: its symbol grid, decision statistics, bits and frames.

    Attributes
    ----------
    index : int
    sample : int
        Input-sample index of the first symbol kept.
    n_symbols : int
        Symbols where the detector saw the signal (the arrays below).
    freq_error_hz : float
        Carrier error found and removed, Hz.
    residual_hz : float
        What the residual estimator still measures after the correction, Hz.
    clock_error_ppm : float
    z0sq, z1sq : numpy.ndarray
        float64 square-law statistics of the bit-0 and bit-1 tones, per symbol.
        Scale: |z|² of a unit tone is 1.
    bits : numpy.ndarray
        uint8 decisions.
    frames : tuple of Frame
    timing_strength : float
    piece : int
        0 unless this is a later piece of a burst cut for length.
    """

    index: int
    sample: int
    n_symbols: int
    freq_error_hz: float
    residual_hz: float
    clock_error_ppm: float
    z0sq: np.ndarray = field(repr=False)
    z1sq: np.ndarray = field(repr=False)
    bits: np.ndarray = field(repr=False)
    frames: tuple[Frame, ...] = ()
    timing_strength: float = 0.0
    piece: int = 0
    symbol_s: float = 0.0


def _residual(z: np.ndarray, decided: np.ndarray, period: float, rate: float) -> float:
    """Residual carrier error from the phase step between consecutive symbols of the same tone, Hz.

    See :func:`iqdemod.carrier.residual_offset`; `z` are the correlator
    outputs and `decided` the tone chosen for each symbol.
    """
    if len(z) < 2:
        return 0.0
    zw = z[np.arange(len(z)), decided]
    return residual_offset(zw, decided, period, rate)


def demodulate_burst(raw: RawBurst, plan: ReceiverPlan, *, capture: str = "") -> list[Burst]:
    """Carrier, timing, correlation, decisions and framing for one detector buffer.

    A transmission is the unit, not the buffer. With a sync word, every place
    where it starts is found first without any symbol clock (see
    :func:`sync_candidates`), and each transmission is then synchronised on its
    own symbols only: its carrier error, its symbol timing and clock, its
    decisions and its Eb/N0. Frames back to back, or repeated with no gap at
    all, therefore never share a carrier, a timing or an SNR. Without a sync
    word (raw mode), or where none is found, the buffer is demodulated as one
    transmission; a lasting jump of the symbol phase (see
    :class:`iqdemod.timing.Timing`) still parts two transmissions there.

    Parameters
    ----------
    raw : RawBurst
        From the burst detector.
    plan : ReceiverPlan
    capture : str
        Name recorded in each frame.

    Returns
    -------
    list of Burst
        One per transmission, in time order (the same index, pieces numbered on).
    """
    sig = plan.link.signal
    rate = plan.rate_hz
    # Keep the detector's core with a detector frame of margin each side: the first frame
    # above the threshold may start up to a frame late, and the last one holding signal may
    # already count as quiet; beyond that is only noise.
    margin = int(plan.detector.frame_len)
    lo = max(0, raw.core[0] - margin)
    hi = min(len(raw.samples), raw.core[1] + margin)
    x = raw.samples[lo:hi].astype(np.complex128)
    raw_start = raw.start + lo
    core0, core1 = raw.core[0] - lo, raw.core[1] - lo
    core = x[core0:core1] if core1 - core0 > 4 * plan.period else x
    delta = coarse_offset(core, rate, baud=sig.baud, shift_hz=sig.shift_hz, pull_in_hz=sig.pull_in_hz)
    sums = tone_sums(x, rate, plan.tones_hz, offset_hz=delta)
    if not plan.link.frame.raw:
        found = sync_candidates(sums, plan)
        if len(x) > 1.5 * plan.link.frame.max_bits * plan.period:
            # Several transmissions may share the buffer, each with its own carrier error, and
            # the buffer's estimate is their blend: look again with the carrier a fifth of the
            # baud either side (a transmission far from the blend keeps its sync score there).
            step = sig.baud / 5
            for shift in (-step, step):
                if abs(delta + shift) <= sig.pull_in_hz + step / 2:
                    more = tone_sums(x, rate, plan.tones_hz, offset_hz=delta + shift)
                    found = _merge_candidates(found, sync_candidates(more, plan), plan)
        if found:
            bursts = _transmissions(raw, x, raw_start, found, plan, capture, delta, sums)
            if bursts:
                return bursts
    return _whole(raw, x, raw_start, (core0, core1), plan, capture, delta, sums, 0)


def sync_candidates(sums: np.ndarray, plan: ReceiverPlan, *, threshold: float = SYNC_THRESHOLD) -> list[tuple[float, float]]:
    """Where the sync word starts in a buffer, found without a symbol clock.

    The soft decision d(t) = |z1(t)|² − |z0(t)|² of a one-symbol correlator
    window starting at every sample t is correlated with the sync word's
    pattern (its symbols on the air) at the symbol spacing: score(t) =
    Σ_i s_i·d(t + i·T), s_i = ±1, normalised by Σ_i (|z0|² + |z1|²). This is a
    matched filter for the sync word on the square-law statistics (the
    frame-synchronisation correlator of Massey, "Optimum frame
    synchronization", IEEE Trans. Commun. 20(2), 1972, cited from memory, in
    its large-SNR form). A noise-free sync word of orthogonal rectangular
    tones scores 1; tones that leak into each other (h not whole) or a
    Gaussian pulse score less, so `threshold` is taken relative to what a
    noise-free sync word of this link scores (:attr:`ReceiverPlan.sync_score`).
    Local maxima above it, at least half a sync word apart, are the
    candidates.

    Returns
    -------
    list of (position, score)
        Sample positions (cumulative-sum convention) of the sync word's first
        symbol, strongest first; the score relative to the noise-free one.
    """
    norm = _sync_scores(sums, plan) / plan.sync_score
    above = np.flatnonzero(norm >= threshold)
    if above.size == 0:
        return []
    radius = max(1, int(len(sync_symbols(plan.link.frame)) * plan.period / 2))
    out: list[tuple[float, float]] = []
    order = above[np.argsort(-norm[above], kind="stable")]
    taken = np.zeros(len(norm), bool)
    for t in order:
        if taken[t]:
            continue
        taken[max(0, t - radius) : t + radius + 1] = True
        out.append((float(t), float(norm[t])))
    return out


def _merge_candidates(a: list[tuple[float, float]], b: list[tuple[float, float]], plan: ReceiverPlan
                      ) -> list[tuple[float, float]]:
    """Two candidate lists as one, strongest first, keeping the best of those within half a sync word."""
    radius = len(sync_symbols(plan.link.frame)) * plan.period / 2
    out: list[tuple[float, float]] = []
    for pos, score in sorted(a + b, key=lambda c: -c[1]):
        if all(abs(pos - p) > radius for p, _ in out):
            out.append((pos, score))
    return out


def _sync_scores(sums: np.ndarray, plan: ReceiverPlan) -> np.ndarray:
    """The normalised sync-word score at every start sample (see :func:`sync_candidates`)."""
    T = plan.period
    pattern = sync_symbols(plan.link.frame).astype(np.float64) * 2 - 1
    n_sync = len(pattern)
    n = sums.shape[1] - 1
    whole = int(np.floor(T))
    m = n - whole - 1
    span = int(round((n_sync - 1) * T))
    if m - span < 1:
        return np.zeros(0)
    frac = T - whole
    z = (1.0 - frac) * sums[:, whole : whole + m] + frac * sums[:, whole + 1 : whole + 1 + m] - sums[:, :m]
    p = z.real**2 + z.imag**2
    d = p[1] - p[0]
    e = p[1] + p[0]
    offsets = np.round(np.arange(n_sync) * T).astype(np.intp)
    width = m - span
    score = np.zeros(width)
    energy = np.zeros(width)
    for s_i, o in zip(pattern, offsets):
        score += s_i * d[o : o + width]
        energy += e[o : o + width]
    return score / np.maximum(energy, 1e-300)


def _transmissions(raw: RawBurst, x: np.ndarray, raw_start: int, found: list[tuple[float, float]],
                   plan: ReceiverPlan, capture: str, delta0: float, sums0: np.ndarray) -> list[Burst]:
    """Demodulate each sync candidate's transmission on its own; best candidates first, no frame twice."""
    T = plan.period
    spec = plan.link.frame
    taken: list[tuple[float, float]] = []  # spans of good frames already handed out
    out: list[Burst] = []
    for pos, _score in found:
        if any(a - T <= pos < b - T for a, b in taken):
            continue  # a sync-like pattern inside a frame already decoded
        a = max(0, int(np.floor(pos - PREAMBLE_SYMBOLS * T)))
        b = min(len(x), int(np.ceil(pos + (spec.max_bits + 2) * T)))
        burst = _one_transmission(raw, x, raw_start, a, b, pos, plan, capture, delta0, sums0)
        if burst is None:
            continue
        if spec.length == "prefix8" and burst.frames and burst.frames[0].crc_ok:
            # the frame is shorter than the longest one: synchronise again on its own span
            f = burst.frames[0]
            b2 = min(len(x), int(np.ceil(pos + (f.n_symbols + 2) * T)))
            if b2 < b - 8 * T:
                burst = _one_transmission(raw, x, raw_start, a, b2, pos, plan, capture, delta0, sums0) or burst
        good = [f for f in burst.frames if f.crc_ok]
        if good:
            f = good[0]
            taken.append((pos, pos + f.n_symbols * T))
        out.append(burst)
    # keep each frame once: two candidates may land on one sync word (different spans)
    out.sort(key=lambda bu: bu.sample)
    kept: list[Burst] = []
    seen: list[int] = []
    half = 0.5 * plan.sample_rate_hz / plan.link.signal.baud
    for burst in out:
        frames = tuple(f for f in burst.frames if all(abs(f.sample - s) > half for s in seen))
        if not frames:
            continue
        seen.extend(f.sample for f in frames)
        kept.append(dataclasses.replace(burst, frames=frames))
    return [dataclasses.replace(bu, piece=raw.piece + i) for i, bu in enumerate(kept)]


def _one_transmission(raw: RawBurst, x: np.ndarray, raw_start: int, a: int, b: int, sync_pos: float,
                      plan: ReceiverPlan, capture: str, delta0: float, sums0: np.ndarray) -> Burst | None:
    """Carrier, timing and frame of the transmission whose sync word starts at `sync_pos` in x[a:b]."""
    sig = plan.link.signal
    rate = plan.rate_hz
    seg = x[a:b]
    if len(seg) < 4 * plan.period:
        return None
    delta = coarse_offset(seg, rate, baud=sig.baud, shift_hz=sig.shift_hz, pull_in_hz=sig.pull_in_hz)
    if abs(delta - delta0) < sig.baud / 1024:  # the buffer's own estimate: reuse its running sums
        sums = sums0[:, a : b + 1] - sums0[:, a : a + 1]
    else:
        sums = tone_sums(seg, rate, plan.tones_hz, offset_hz=delta)
    sub = RawBurst(raw.index, raw.start, seg, (0, len(seg)), raw.piece)
    end = sync_pos - a + plan.link.frame.max_bits * plan.period if plan.link.frame.length != "prefix8" else None
    sync = _synchronise(sub, seg, raw_start + a, (0, len(seg)), plan, delta, sums, end=end)
    burst, starts = sync.burst, sync.starts
    # the frame whose sync word starts where the candidate said (within two symbols)
    want = sync_pos - a
    frames = []
    for f in _frames_of(sync, plan, raw_start + a, capture):
        if abs(starts[f.first_symbol] - want) <= 2 * plan.period:
            frames.append(f)
            break
    return dataclasses.replace(burst, frames=tuple(frames))


class _Sync(NamedTuple):
    """One synchronised transmission: its burst (no frames yet) and what the frame estimates need."""

    burst: Burst
    starts: np.ndarray  # symbol starts of the burst's arrays, samples of x
    timing: Timing
    x: np.ndarray
    delta_hz: float  # the carrier error still in x


def _synchronise(raw: RawBurst, x: np.ndarray, x_start: int, core: tuple[int, int], plan: ReceiverPlan,
                 delta: float, sums: np.ndarray, *, end: float | None = None) -> _Sync:
    """Timing, decisions and the refined carrier of one transmission in `x` (coarse carrier `delta`).

    The decisions are the one-symbol correlator bank's, or, when the link asks
    for it, the multi-symbol detector's (:mod:`iqdemod.sequence`), which then
    also gives the decision statistics kept in the burst. `end`, where the
    transmission is known to end (samples of x), keeps the symbols after it
    out of the multi-symbol detector's windows: its hypotheses would take the
    silence there for signal.
    """
    rate = plan.rate_hz
    core0, core1 = core
    timing = symbol_timing(sums, plan.period)
    starts = symbol_starts(timing, len(x))
    z = correlate(sums, starts, timing.period_samples)
    # Decision-directed refinement of the carrier on the symbols the detector saw; the coarse
    # estimate is within a few hundredths of the baud, well inside this estimator's ±baud/2.
    # The timing found with the coarse carrier is kept: estimating it again after this step
    # changed no bit decision in the Monte Carlo BER runs (408 against 409 errors at 9 dB).
    inside = (starts >= core0 - plan.period) & (starts + timing.period_samples <= core1 + plan.period)
    decided = np.argmax(np.abs(z[inside]), axis=1)
    delta += _residual(z[inside], decided, timing.period_samples, rate)
    sums = tone_sums(x, rate, plan.tones_hz, offset_hz=delta)
    z = correlate(sums, starts, timing.period_samples)
    zsq = z.real**2 + z.imag**2
    decided = (zsq[:, 1] > zsq[:, 0]).astype(np.uint8)  # tone 1 is bit 1 (tones_hz honours `invert`)
    if plan.sequence is not None and len(starts):
        n_in = len(starts) if end is None else max(1, int(np.searchsorted(starts, end - 0.5 * timing.period_samples)))
        decided = decided.copy()
        for _ in range(2):
            dec = detect_sequence(x, starts[:n_in], timing.period_samples, plan.sequence, offset_hz=delta, rate_hz=rate)
            decided[:n_in] = dec.bits
            # the one-symbol decisions the carrier step above used are poor for a Gaussian pulse at
            # h = ½ (several per cent wrong): measured again on this detector's decisions
            step = _residual(z[inside], decided[inside], timing.period_samples, rate)
            if abs(step) < plan.link.signal.baud * 2e-3:
                break
            delta += step
            z = correlate(tone_sums(x, rate, plan.tones_hz, offset_hz=delta), starts, timing.period_samples)
        zsq = z.real**2 + z.imag**2
        zsq[:n_in] = np.stack([dec.m0, dec.m1], axis=1)
    residual = _residual(z[inside], decided[inside], timing.period_samples, rate)
    keep = np.flatnonzero(inside)
    if keep.size == 0:
        keep = np.arange(len(starts))
    k0, k1 = (int(keep[0]), int(keep[-1]) + 1) if keep.size else (0, 0)
    period = timing.period_samples
    burst = Burst(
        index=raw.index,
        sample=int(round(plan.input_sample(x_start, starts[k0]))) if len(starts) else int(plan.input_sample(x_start, 0)),
        n_symbols=k1 - k0,
        freq_error_hz=float(delta),
        residual_hz=float(residual),
        clock_error_ppm=timing.clock_error_ppm(plan.period),
        z0sq=zsq[k0:k1, 0].copy(),
        z1sq=zsq[k0:k1, 1].copy(),
        bits=decided[k0:k1].copy(),
        timing_strength=timing.strength,
        piece=raw.piece,
        symbol_s=period * plan.tuner.decimation / plan.sample_rate_hz,
    )
    return _Sync(burst, starts[k0:k1], timing, x, float(delta))


def _whole(raw: RawBurst, x: np.ndarray, raw_start: int, core: tuple[int, int], plan: ReceiverPlan,
           capture: str, delta: float, sums: np.ndarray, depth: int) -> list[Burst]:
    """The buffer as one transmission, or parted where its symbol phase jumps."""
    timing = symbol_timing(sums, plan.period)
    if timing.breaks and depth < 3:
        return _split(raw, raw_start - raw.start, x, timing.breaks, plan, capture, depth)
    sync = _synchronise(raw, x, raw_start, core, plan, delta, sums)
    return [dataclasses.replace(sync.burst, frames=tuple(_frames_of(sync, plan, raw_start, capture)))]


def _drop_repeats(burst: Burst, last_sample: float, half_symbol: float) -> tuple[Burst, float]:
    """`burst` without the frames that overlapping buffers already handed out (same sync position).

    Returns the burst and the latest frame sample seen so far.
    """
    kept = tuple(f for f in burst.frames if f.sample > last_sample + half_symbol)
    if len(kept) != len(burst.frames):
        burst = dataclasses.replace(burst, frames=kept)
    if kept:
        last_sample = max(last_sample, max(f.sample for f in kept))
    return burst, last_sample


def _split(raw: RawBurst, lo: int, x: np.ndarray, breaks: tuple[int, ...], plan: ReceiverPlan, capture: str,
           depth: int) -> list[Burst]:
    """Demodulate the parts of a buffer that holds several transmissions; drop frames seen twice."""
    sig = plan.link.signal
    seg = int(SEGMENT_SYMBOLS * plan.period)
    cuts = [0, *breaks, len(x)]
    out: list[Burst] = []
    last_sample = -np.inf
    half = 0.5 * plan.sample_rate_hz / sig.baud
    for i, (a, b) in enumerate(zip(cuts[:-1], cuts[1:])):
        # overlap the neighbours by a segment: the phase jump is only known to a segment
        a0, b0 = max(0, a - seg), min(len(x), b + seg)
        part = RawBurst(raw.index, raw.start + lo + a0, raw.samples[lo + a0 : lo + b0], (0, b0 - a0),
                        raw.piece + i)
        px = x[a0:b0]
        delta = coarse_offset(px, plan.rate_hz, baud=sig.baud, shift_hz=sig.shift_hz, pull_in_hz=sig.pull_in_hz)
        sums = tone_sums(px, plan.rate_hz, plan.tones_hz, offset_hz=delta)
        for burst in _whole(part, px, part.start, (0, b0 - a0), plan, capture, delta, sums, depth + 1):
            burst, last_sample = _drop_repeats(burst, last_sample, half)
            out.append(dataclasses.replace(burst, piece=len(out) + raw.piece))
    return out


def _estimate(z0: np.ndarray, z1: np.ndarray, bits: np.ndarray | None, leakage: float) -> EbN0Estimate:
    """The decision SNR of a run of symbols, before any leakage correction.

    Known bits (a good CRC): data-aided. Otherwise, with orthogonal tones, the
    blind moment estimator; with non-orthogonal tones, whose model that
    estimator does not cover, the raw decision-directed ratio, to be corrected
    by :func:`iqdemod.estimate.correct_leakage` (biased upward at low SNR).
    """
    if bits is not None:
        return estimate_data_aided(z0, z1, bits, exact_interval=False)
    if leakage:
        return estimate_decision_directed(z0, z1, debias=False)
    return estimate_blind(z0, z1)


def _estimate_sequence(sync: _Sync, plan: ReceiverPlan, a: int, b: int, known: np.ndarray | None) -> EbN0Estimate:
    """Eb/N0 of symbols a … b − 1 against the expected outputs of the link's real pulse.

    Known bits (a good CRC): data-aided. Otherwise the detector's own
    decisions stand in for them (decision-directed, reading a little low
    where decisions are wrong).
    """
    bits = sync.burst.bits[a:b] if known is None else known
    est = estimate_sequence_data_aided(sync.x, sync.starts[a:b], sync.timing.period_samples, bits, plan.sequence,
                                       offset_hz=sync.delta_hz, rate_hz=plan.rate_hz,
                                       noise_bandwidth=plan.filter_noise_share)
    return est if known is not None else dataclasses.replace(est, method="decision-directed-raw")


def _levels(sync: _Sync, plan: ReceiverPlan, a: int, b: int, es_n0_db: float) -> dict:
    """Signal and noise level, absolute frequency and clock of symbols a … b − 1 (Frame fields).

    The front end hands the signal on at unit gain, so the mean power P of
    the frame's samples is A² + σ²·Σh², with σ² the noise over the whole
    capture band and h the channel filter's taps. With Es/N0 = A²·(fs/baud)/σ²
    (REFERENCE §8, per symbol on the air) that gives A² and σ².
    """
    burst, starts = sync.burst, sync.starts
    out: dict = {"clock_ppm": burst.clock_error_ppm}
    if plan.centre_hz is not None:
        out["frequency_hz"] = plan.centre_hz + plan.offset_hz + burst.freq_error_hz
    if b <= a or not np.isfinite(es_n0_db):
        return out
    lo = max(0, int(np.floor(starts[a])))
    hi = min(len(sync.x), int(np.ceil(starts[b - 1] + sync.timing.period_samples)))
    seg = sync.x[lo:hi]
    if not len(seg):
        return out
    power = float(np.vdot(seg, seg).real) / len(seg)
    noise_per_signal = (plan.sample_rate_hz / plan.link.signal.baud) / 10 ** (es_n0_db / 10)  # σ²/A²
    passed = plan.filter_noise_share / plan.tuner.decimation  # Σh²: the share of σ² a sample of x holds
    signal = power / (1.0 + passed * noise_per_signal)
    if signal > 0:
        out["level_dbfs"] = 10 * np.log10(signal)
        out["noise_dbfs"] = 10 * np.log10(signal * noise_per_signal)
    return out


def _frames_of(sync: _Sync, plan: ReceiverPlan, raw_start: int, capture: str) -> list[Frame]:
    """The frames (or, in raw mode, the one record of bits) of a synchronised burst."""
    burst, starts = sync.burst, sync.starts
    fs = plan.sample_rate_hz
    spec = plan.link.frame
    corr = plan.ebn0_correction_db

    def estimate(a: int, b: int, known: np.ndarray | None) -> tuple[EbN0Estimate, float]:
        """A run of symbols' estimate and the Eb/N0 it gives, dB (per symbol on the air)."""
        if plan.sequence is None:
            est = _estimate(burst.z0sq[a:b], burst.z1sq[a:b], known, plan.tone_leakage)
            return est, correct_leakage(est, plan.tone_leakage).ebn0_db + corr
        est = _estimate_sequence(sync, plan, a, b, known)
        return est, est.ebn0_db  # fitted against the real pulse: Eb/N0 as it is, no corrections

    frames = []
    if spec.raw:
        if burst.n_symbols:
            est, db = estimate(0, burst.n_symbols, None)
            sample = burst.sample
            frames.append(
                Frame(capture, sample / fs, sample, burst.index, 0, b"", False, 0, burst.freq_error_hz,
                      db, bits=burst.bits, first_symbol=0, n_symbols=burst.n_symbols, ebn0=est,
                      **_levels(sync, plan, 0, burst.n_symbols, db))
            )
    else:
        per_bit_db = 10 * np.log10(spec.symbols_per_bit)  # Eb of a Manchester bit is two chips' energy
        for hit in find_frames(burst.bits, spec, stats=(burst.z0sq, burst.z1sq)):
            a, b = hit.bit_index, min(hit.bit_index + hit.n_bits, burst.n_symbols)
            known = None
            if hit.crc_ok:
                # a good CRC makes the symbols sent known exactly; with a line coding the hard chip
                # decisions are not (the soft pair decision may have overruled a wrong chip)
                known = burst.bits[a:b] if spec.coding == "nrz" else frame_symbols(hit.payload, spec)[: b - a]
            est, db = estimate(a, b, known)
            db += per_bit_db
            sample = int(round(plan.input_sample(raw_start, starts[a])))
            frames.append(
                Frame(capture, sample / fs, sample, burst.index, hit.length, hit.payload, hit.crc_ok,
                      hit.sync_errors, burst.freq_error_hz, db, hit.truncated,
                      first_symbol=a, n_symbols=b - a, ebn0=est,
                      coding_errors=hit.coding_errors if spec.coding != "nrz" else None,
                      crc_received=hit.crc_received, crc_computed=hit.crc_computed, crc_bits=spec.crc_bits,
                      **_levels(sync, plan, a, b, db - per_bit_db))
            )
    return frames


def _parse_utc(text: str | None) -> datetime.datetime | None:
    """A capture's start time (RFC 3339, as SigMF's core:datetime) as an aware UTC datetime; None if absent or unreadable."""
    if not text:
        return None
    try:
        when = datetime.datetime.fromisoformat(text.strip().replace("z", "Z"))
    except ValueError:
        return None
    if when.tzinfo is None:
        when = when.replace(tzinfo=datetime.timezone.utc)
    return when.astimezone(datetime.timezone.utc)


def _utc(start: datetime.datetime, t_s: float) -> str:
    """ISO 8601 UTC with microseconds of `t_s` seconds after `start`."""
    when = start + datetime.timedelta(microseconds=round(t_s * 1e6))
    return when.strftime("%Y-%m-%dT%H:%M:%S.%fZ")


class Receiver:
    """Streaming receiver for one capture: feed blocks, collect bursts.

    The explicit states of the tuner and the burst detector live here between
    calls; every stage underneath is a pure function of (input, state).

    Parameters
    ----------
    link : Link
    info : CaptureInfo
        Sample rate, centre frequency and name of the capture.
    """

    def __init__(self, link: Link, info: CaptureInfo):
        self.plan = plan_receiver(link, info.sample_rate_hz, info.centre_hz)
        self.info = info
        self._tuner = self.plan.tuner.initial_state()
        self._detector = self.plan.detector.initial_state()
        self._last_frame_sample = -np.inf
        self._name = Path(info.path).name
        self._start = _parse_utc(info.start_time)

    def feed(self, block: np.ndarray) -> list[Burst]:
        """Process one block of input samples; return the bursts it completed."""
        y, self._tuner = channelize(block, self.plan.tuner, self._tuner)
        found, self._detector = _bursts.detect(y, self.plan.detector, self._detector)
        return [burst for raw in found for burst in self._finish(raw)]

    def flush(self) -> list[Burst]:
        """End of input: hand out the bursts still open."""
        y, self._tuner = flush_channel(self.plan.tuner, self._tuner)
        found, self._detector = _bursts.detect(y, self.plan.detector, self._detector)
        bursts = [burst for raw in found for burst in self._finish(raw)]
        found, self._detector = _bursts.flush(self.plan.detector, self._detector)
        return bursts + [burst for raw in found for burst in self._finish(raw)]

    @property
    def front_end(self) -> FrontEndReport:
        """DC level and IQ imbalance measured on the samples fed so far."""
        return front_end_report(self._tuner.moments)

    def _finish(self, raw: RawBurst) -> list[Burst]:
        out = []
        half = 0.5 * self.plan.sample_rate_hz / self.plan.link.signal.baud
        for burst in demodulate_burst(raw, self.plan, capture=self._name):
            if self._start is not None and burst.frames:
                burst = dataclasses.replace(burst, frames=tuple(
                    dataclasses.replace(f, time_utc=_utc(self._start, f.t_s)) for f in burst.frames))
            if burst.piece:  # pieces of a long burst overlap: drop frames already handed out
                burst, self._last_frame_sample = _drop_repeats(burst, self._last_frame_sample, half)
            elif burst.frames:
                self._last_frame_sample = max(self._last_frame_sample, max(f.sample for f in burst.frames))
            out.append(burst)
        return out


class DecodeSummary:
    """Counts kept while decoding: bursts, frames, good frames, and the capture's defects."""

    def __init__(self) -> None:
        self.bursts = 0
        self.frames = 0
        self.good = 0
        self.stats = None

    def add(self, burst: Burst) -> None:
        if burst.piece == 0:
            self.bursts += 1
        self.frames += len(burst.frames)
        self.good += sum(f.crc_ok for f in burst.frames)

    def line(self, name: str) -> str:
        """The one-line summary for people."""
        text = f"{name}: {self.bursts} burst(s), {self.frames} frame(s), {self.good} good"
        if self.stats is not None and self.stats.clipped:
            text += f", {self.stats.clipped_fraction:.3%} clipped"
        return text


def iter_bursts(
    capture: Capture,
    link: Link,
    *,
    block_samples: int = DEFAULT_BLOCK_SAMPLES,
    progress: bool = False,
) -> Iterator[Burst]:
    """Demodulate every burst of an open capture, in time order.

    Parameters
    ----------
    capture : Capture
        From :func:`iqdemod.open_capture`.
    link : Link
    block_samples : int
        Samples read per block; the results do not depend on it.
    progress : bool
        Show a tqdm bar (stderr) over the capture's samples.

    Yields
    ------
    Burst
    """
    yield from drive(Receiver(link, capture.info), capture, block_samples=block_samples, progress=progress)


def drive(rx: "Receiver", capture: Capture, *, block_samples: int = DEFAULT_BLOCK_SAMPLES,
          progress: bool = False) -> Iterator[Burst]:
    """Feed a whole capture through `rx` and yield its bursts; `rx` keeps its measurements.

    For a caller that needs the receiver's own figures afterwards (such as
    :attr:`Receiver.front_end`); :func:`iter_bursts` is the usual way in.
    """
    bar = None
    if progress:
        from tqdm import tqdm

        bar = tqdm(total=capture.info.n_samples, unit="S", unit_scale=True, desc=Path(capture.info.path).name,
                   leave=False, delay=1.0)
    try:
        for block in capture.blocks(block_samples):
            yield from rx.feed(block)
            if bar is not None:
                bar.update(len(block))
        yield from rx.flush()
    finally:
        if bar is not None:
            bar.close()


def decode(
    path: str | Path | Capture,
    link: Link,
    *,
    block_samples: int = DEFAULT_BLOCK_SAMPLES,
    progress: bool = False,
    summary: DecodeSummary | None = None,
) -> Iterator[Frame]:
    """Decode the frames of a capture, in time order.

    Parameters
    ----------
    path : str, Path or Capture
        A capture file (see :func:`iqdemod.open_capture`) or an open capture.
    link : Link
        From :func:`iqdemod.load_link`. Its ``capture`` table supplies datatype
        and rate for raw files.

    Yields
    ------
    Frame
        Every frame whose sync word was found, good CRC or bad (raw mode: one
        record per burst).
    summary : DecodeSummary, optional
        Filled in as the capture is read.
    """
    with contextlib.ExitStack() as stack:
        cap = path if isinstance(path, Capture) else stack.enter_context(
            open_capture(path, datatype=link.capture.datatype, sample_rate=link.capture.sample_rate)
        )
        for burst in iter_bursts(cap, link, block_samples=block_samples, progress=progress):
            if summary is not None:
                summary.add(burst)
            yield from burst.frames
        if summary is not None:
            summary.stats = cap.stats
