"""The receiver's plan: everything fixed about receiving one link on one capture.

The front end (:mod:`iqdemod.channel`), the burst detector (:mod:`iqdemod.bursts`) and, where the
link asks for it, the multi-symbol detector (:mod:`iqdemod.sequence`), with the figures the
estimators need: the correlators' noise bandwidth against the textbook integrate-and-dump, the tone
leakage of non-orthogonal tones, the channel filter's noise share, and what a noise-free sync word
of this link scores in the sync search.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

from . import bursts as _bursts
from .channel import ChannelPlan, plan_channels
from .correlate import tone_sums, window_weights
from .framing import sync_symbols
from .link import Link
from .sequence import SequencePlan, phase_trajectory, plan_sequence
from .sync import sync_scores

__all__ = ["ReceiverPlan", "plan_receiver", "MAX_BURST_SYMBOLS"]

MAX_BURST_SYMBOLS = 1 << 15

_WINDOW_STARTS = np.arange(8) / 8  # fractional window starts the plan's figures are averaged over


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
                m, w = window_weights(a, period)
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
            m, w = window_weights(a, period)
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
        norm = sync_scores(tone_sums(x, self.rate_hz, self.tones_hz), self)
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


def plan_receiver(link: Link, sample_rate_hz: float, centre_hz: float | None = None) -> ReceiverPlan:
    """Check `link` against the capture's rate and plan tuner and detector.

    Raises
    ------
    LinkError
        When the signal does not fit the capture (see :meth:`Link.check_rate`).

    Examples
    --------
    A 1200-baud buoy link in a 48 kHz capture: the tuner decimates by 5 to
    9.6 kHz (8 samples per symbol), and the tones sit at ±600 Hz:

    >>> from iqdemod.profile import load_link
    >>> link = load_link(None, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> plan = plan_receiver(link, 48000)
    >>> plan.offset_hz, plan.tuner.decimation, plan.rate_hz, plan.period, plan.tones_hz
    (6000.0, 5, 9600.0, 8.0, (-600.0, 600.0))

    A signal that does not fit the capture is refused, naming the values:

    >>> plan_receiver(link, 4800)
    Traceback (most recent call last):
    ...
    iqdemod.errors.LinkError: baud 1200 at sample rate 4800 Hz: 4 samples per symbol, the receiver needs at least 8 (a capture at 9600 Hz or more)
    """
    return plan_receivers((link,), sample_rate_hz, centre_hz)[0]


def plan_receivers(links: "tuple[Link, ...]", sample_rate_hz: float, centre_hz: float | None = None
                   ) -> tuple[ReceiverPlan, ...]:
    """:func:`plan_receiver` for several links of one capture, their front ends sharing one FFT pass
    (:func:`iqdemod.channel.plan_channels`); one link gets exactly :func:`plan_receiver`'s plan."""
    offsets = [link.check_rate(sample_rate_hz, centre_hz) for link in links]
    tuners = plan_channels(sample_rate_hz, [(link.signal, off) for link, off in zip(links, offsets)])
    return tuple(ReceiverPlan(link, float(sample_rate_hz), off, centre_hz, tuner, _detector_for(link, tuner))
                 for link, off, tuner in zip(links, offsets, tuners))


def _detector_for(link: Link, tuner: ChannelPlan) -> _bursts.DetectorPlan:
    sig = link.signal
    overlap = link.frame.max_bits + 64 if not link.frame.raw else 64
    return _bursts.plan_detector(
        tuner.output_rate_hz,
        baud=sig.baud,
        band_hz=sig.shift_hz / 2 + sig.pull_in_hz + sig.baud / 2,
        max_symbols=max(MAX_BURST_SYMBOLS, 4 * overlap),
        overlap_symbols=overlap,
        settle_samples=-(-len(tuner.taps) // tuner.decimation),
    )
