"""Surveying a capture: find the bursty FSK signals in it and say what they are.

Nothing about the signals needs to be known. The capture is read a few times,
always in blocks, and only short excerpts of a few bursts are ever kept:

1. **Spectrum** (one pass). An averaged periodogram over the whole capture
   with a fixed FFT size (Welch, "The use of fast Fourier transform for the
   estimation of power spectra", IEEE Trans. Audio Electroacoust. AU-15,
   1967), plus *peak-hold* spectra of short averages at a few time–frequency
   resolutions, so that a bursty signal stands out by its level while it is on
   rather than by its long-term mean. Bins well above a noise baseline (low
   percentiles, robust to signals filling much of the band) form candidate
   bands.
2. **Activity** (one pass). Each candidate band is tuned to 0 Hz, decimated and
   watched by an energy detector with hysteresis (a squelch on the band's
   power, its noise floor seeded from the averaged spectrum); the bursts'
   times are kept, and the first few bursts as short excerpts. Bands that are
   on at the same times (pieces of one spectrum, or the two tone lobes of a
   wide-shift signal, which start together on the alternating preamble) are
   one signal; such a signal is tuned again as a whole (one more pass, only
   when it happens).
3. **Modulation**, from the excerpts, band-limited. The instantaneous
   frequency (the phase-difference discriminator, cf. Kay, "A fast and
   accurate single frequency estimator", IEEE Trans. ASSP-37, 1989), cleaned
   of clicks by a 3-point running median (Tukey, *Exploratory Data Analysis*,
   1977), has two levels split by Otsu's threshold (Otsu, "A threshold
   selection method from gray-level histograms", IEEE Trans. SMC-9, 1979).
   Its crossings between the levels (with hysteresis) form a point process
   whose spectrum has a line at the symbol rate — the cyclostationarity of a
   keyed signal (Gardner, "Exploitation of spectral redundancy in
   cyclostationary signals", IEEE Signal Processing Mag. 8(2), 1991); the
   line gives the rate, and the periodogram of the crossing instants
   (Bartlett, "The spectral analysis of point processes", J. R. Stat. Soc. B
   25, 1963) refines it. The tones are then the median frequencies of steady
   symbols (both neighbours equal), which reach the full deviation even with
   a Gaussian pulse; the eye opening of the symbols rejects what is not a
   keyed signal. The **pulse** comes from the bursts' own averaged spectrum
   (Welch): how fast it falls beyond Carson's bandwidth, compared with the
   spectra of CPFSK with a rectangular pulse and with Gaussian pulses of BT
   0.3–1 at the measured h and baud, computed from random-bit waveforms of
   the receiver's own phase model (:func:`_pulse_shape`).
4. **Framing** (part of one more pass). The project's receiver demodulates a
   few bursts in raw mode with the parameters found. The alternating
   preamble is located, and every catalogue CRC is tried over every payload
   start and length after it (the parametrised model of Williams, "A painless
   guide to CRC error detection algorithms", 1993, which the catalogue
   uses); a layout that checks on enough bursts fixes the payload start, the
   length and the CRC, and the sync word is read off just before the payload
   (32 bits, taking in alternating bits when the word is shorter). Without a
   CRC match, the sync word guess is the longest pattern (32, 24 or 16 bits)
   common to nearly every burst after the preamble, the length what the
   shortest burst holds after it, and the CRC "none".

   The codings of :mod:`iqdemod.coding` are tried the same way. When the
   symbols after the preamble pair into valid Manchester symbols (few chip
   pairs 0,0 or 1,1, in the better of the two pairings), the bursts are also
   read as Manchester in both conventions, whose bits are complements, so
   only the CRC tells them apart; each reading is searched plain and
   de-whitened with PN9 from each candidate payload start, with bytes MSB
   and LSB first; the CRC may be sent big- or little-endian, and a length
   byte may count the payload, the payload and the CRC, or the whole frame.
   The layout whose frames check on most bursts wins (the plainer one on a
   tie), and the receiver's own :func:`~iqdemod.framing.find_frames`
   confirms it on the symbols as demodulated. Manchester chips put the
   strongest line of the transition train at the bit rate (a change in the
   middle of every bit), so a line whose changes fall on two phases half a
   period apart is taken for half the symbol period.

The result, :class:`SurveyResult`, lists the signals strongest first; each
:class:`SignalFound` turns into a :class:`~iqdemod.link.Link` that
:func:`iqdemod.decode` accepts.

Limits: a signal must be on in bursts (a carrier that never stops is taken for
the noise floor) and leave at least a quarter of the band to noise; bursts
must be a few dozen symbols long; two transmitters keyed in step in bands far
apart are taken for one. The sync word guess can miss the word's first bits
when they continue the alternation, and then take in as many leading bits of
the frame if those are the same in every burst (a fixed header): only a CRC
match places the payload exactly.
"""

from __future__ import annotations

import dataclasses
import itertools
import math
import os
from dataclasses import dataclass, field
from functools import cached_property, lru_cache
from pathlib import Path
from typing import Any, Sequence

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view
from scipy import fft as _fft
from scipy import signal as _sig
from scipy.ndimage import binary_closing, median_filter, uniform_filter1d

from .capture import Capture, DEFAULT_BLOCK_SAMPLES
from .coding import bytes_to_bits, manchester_decode, whiten
from .crc import CRC_CATALOGUE, CrcSpec, crc_final, crc_init, crc_table, crc_update
from .errors import CaptureError, IqdemodError
from .framing import find_frames
from .link import MAX_BT, MIN_BT, PULSES, CaptureFormat, FrameSpec, Link, SignalSpec
from .receiver import iter_bursts
from .sequence import phase_trajectory, plan_sequence
from .tune import STOPBAND_DB, TunerPlan, tune

__all__ = [
    "BurstLengths",
    "Excerpt",
    "SignalFound",
    "SurveyResult",
    "SpectrumPlan",
    "SpectrumState",
    "plan_spectrum",
    "spectrum_update",
    "ActivityPlan",
    "ActivityState",
    "ActivityBurst",
    "plan_activity",
    "activity_update",
    "survey",
    "plot_survey",
    "require_plotting",
]

SPECTRUM_BIN_HZ = 150.0  # the FFT size is the power of two nearest to fs / this
MIN_FFT, MAX_FFT = 256, 1 << 16
# Peak-hold resolutions: (periodograms averaged, FFT bins smoothed): 16 degrees of averaging, and 64 for
# wide weak signals.
PEAK_RESOLUTIONS = ((16, 1), (4, 4), (1, 16), (1, 64))
FINE_RESOLUTIONS = 3  # the first ones; the last, coarse one only adds bands none of these sees
BASELINE_CHUNKS = 64
DETECT_DB = 3.0  # a bin is active this far above the baseline ...
DETECT_SPREAD = 8.0  # ... and this many robust standard deviations
MAX_EXCERPTS = 12  # bursts kept per signal
MAX_EXCERPT_SAMPLES = 1 << 15  # decimated samples kept per burst
MAX_TRANSITIONS = 2048  # tone transitions per burst used to refine the rate
MAX_SEARCH_BYTES = 256  # longest payload the CRC search tries
DETECTOR_BINS = 24  # FFT bins in the band per detector frame (sets the frame length) ...
MIN_DETECTOR_BINS = 8  # ... or down to this many for a strong signal
MIN_BURST_FRAMES = 3
MAX_SYNC_BITS = 32
MIN_SYNC_BITS = 8
MIN_PREAMBLE_BITS = 8
MIN_H, MAX_H = 0.3, 12.0
MIN_EYE = 0.6  # eye opening of a real signal: above 0.75 down to Eb/N0 10 dB; noise gives about 0.4
_TWO_PI = 2.0 * np.pi


# --------------------------------------------------------------------------- results


@dataclass(frozen=True)
class BurstLengths:
    """Summary of the burst durations of one signal.

    Attributes
    ----------
    n : int
        Bursts measured.
    min, median, max : float
        Durations in seconds (the field holding this summary says so:
        ``burst_lengths_s``), to the burst detector's resolution of a few symbols.
    """

    n: int
    min: float
    median: float
    max: float

    def __post_init__(self) -> None:
        if self.n < 0:
            raise IqdemodError(f"burst count {self.n}: must be >= 0")
        if self.n and not 0 <= self.min <= self.median <= self.max:
            raise IqdemodError(
                f"burst lengths {self.min:g}/{self.median:g}/{self.max:g} s: need 0 <= min <= median <= max"
            )

    @classmethod
    def of(cls, durations_s: Sequence[float]) -> "BurstLengths":
        d = np.asarray(durations_s, dtype=float)
        if d.size == 0:
            return cls(0, 0.0, 0.0, 0.0)
        return cls(int(d.size), float(d.min()), float(np.median(d)), float(d.max()))


@dataclass(frozen=True, eq=False)
class Excerpt:
    """A few milliseconds of one burst, tuned and decimated (for plots).

    Attributes
    ----------
    samples : numpy.ndarray
        complex64 samples at `rate_hz`, centred on `centre_hz`.
    rate_hz : float
    centre_hz : float
        Frequency mixed to 0 Hz, relative to the capture centre.
    t_s : float
        Time of ``samples[0]``, seconds from the capture start.
    """

    samples: np.ndarray = field(repr=False)
    rate_hz: float
    centre_hz: float
    t_s: float


@dataclass(frozen=True, eq=False)
class SignalFound:
    """One FSK signal found by :func:`survey`.

    Attributes
    ----------
    offset_hz : float
        Signal centre (midway between the tones) relative to the capture centre.
    tone_low_hz, tone_high_hz : float
        The two tones, relative to the capture centre.
    baud : float
        Symbol rate, symbols/s.
    bursts : int
        Bursts of this signal in the whole capture.
    burst_lengths_s : BurstLengths
        Their durations, seconds.
    ebn0_db : float
        Rough Eb/N0 of the bursts (in-band SNR × band / baud), dB.
    power_db : float
        Power while on, dB full scale.
    band_low_hz, band_high_hz : float
        Where the signal was seen in the spectrum, relative to the capture centre.
    sync_guess : str or None
        The sync word as hex (bit 1 = upper tone, MSB first), or None.
    sync_bits : int or None
    preamble_bits : int or None
        Alternating bits seen before the sync word (median over bursts).
    length : int, "prefix8" or None
        Payload bytes (from the CRC search, or a guess from the burst lengths).
    crc : str or None
        The catalogue CRC that checks on the bursts, or None.
    coding, whitening, length_counts, bit_order, crc_order : str
        The line coding ("nrz", "manchester", "manchester-inverted"), the
        whitening ("none", "pn9"), what a "prefix8" length byte counts, the
        bit order of the bytes and the CRC's byte order, as the framing
        search found them (see :class:`~iqdemod.link.FrameSpec`).
        With Manchester, `baud` is the chip rate and `sync_guess` is in bits.
    bursts_checked, frames_crc_ok : int
        Bursts demodulated for the framing search, and how many of them carry a
        frame with a good CRC under the layout found.
    pulse : {"rect", "gaussian"} or None
        The frequency pulse the bursts' spectrum fits best (see
        :func:`_pulse_shape`); None when the bursts were too short or too few
        to measure a spectrum.
    bt : float or None
        With a Gaussian pulse, the nearest of ``PULSE_BTS``.
    beyond_carson_db : float or None
        The share of the signal's power beyond Carson's bandwidth (shift +
        2·baud) within the band the survey kept, noise removed, dB; None when
        that band ends inside Carson's bandwidth or nothing stood above the
        noise there.
    """

    offset_hz: float
    tone_low_hz: float
    tone_high_hz: float
    baud: float
    bursts: int
    burst_lengths_s: BurstLengths
    ebn0_db: float
    power_db: float
    band_low_hz: float
    band_high_hz: float
    sync_guess: str | None = None
    sync_bits: int | None = None
    preamble_bits: int | None = None
    length: int | str | None = None
    crc: str | None = None
    bursts_checked: int = 0
    frames_crc_ok: int = 0
    example: Excerpt | None = field(default=None, repr=False)
    coding: str = "nrz"
    whitening: str = "none"
    length_counts: str = "payload"
    bit_order: str = "msb"
    crc_order: str = "big"
    pulse: str | None = None
    bt: float | None = None
    beyond_carson_db: float | None = None

    def __post_init__(self) -> None:
        if self.pulse is not None and self.pulse not in PULSES:
            raise IqdemodError(f"pulse {self.pulse!r}: must be 'rect', 'gaussian' or None")
        if (self.pulse == "gaussian") != (self.bt is not None):
            raise IqdemodError(f"bt {self.bt!r} with pulse {self.pulse!r}: a Gaussian pulse needs a BT, others none")
        if self.bt is not None and not MIN_BT <= self.bt <= MAX_BT:
            raise IqdemodError(f"bt {self.bt!r}: must be within {MIN_BT:g}–{MAX_BT:g}")
        if not self.baud > 0:
            raise IqdemodError(f"baud {self.baud!r}: must be > 0")
        if not self.tone_high_hz > self.tone_low_hz:
            raise IqdemodError(
                f"tones {self.tone_low_hz:g}/{self.tone_high_hz:g} Hz: the high tone must be above the low one"
            )
        if self.bursts < 0:
            raise IqdemodError(f"burst count {self.bursts}: must be >= 0")
        if (self.sync_guess is None) != (self.sync_bits is None):
            raise IqdemodError(
                f"sync guess {self.sync_guess!r} with sync_bits {self.sync_bits!r}: give both or neither"
            )
        if self.sync_bits is not None and not 1 <= self.sync_bits <= 64:
            raise IqdemodError(f"sync_bits {self.sync_bits}: must be within 1–64")
        if self.crc is not None and self.crc not in CRC_CATALOGUE:
            raise IqdemodError(f"crc {self.crc!r}: not a catalogue name")
        try:
            FrameSpec(sync_word=None, length="prefix8", coding=self.coding, whitening=self.whitening,
                      length_counts=self.length_counts, bit_order=self.bit_order, crc_order=self.crc_order)
        except IqdemodError as exc:
            raise IqdemodError(f"signal found: {exc}") from None

    @property
    def shift_hz(self) -> float:
        """Upper tone minus lower tone, Hz."""
        return self.tone_high_hz - self.tone_low_hz

    @property
    def h(self) -> float:
        """Modulation index, shift / baud."""
        return self.shift_hz / self.baud

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready form (the excerpt left out)."""
        out = {f.name: getattr(self, f.name) for f in dataclasses.fields(self) if f.name != "example"}
        out["burst_lengths_s"] = dataclasses.asdict(self.burst_lengths_s)
        out["shift_hz"] = self.shift_hz
        out["h"] = self.h
        return out

    def to_link(self, *, sync_tolerance: int | None = None, capture: CaptureFormat | None = None) -> Link:
        """The link description of this signal, for :func:`iqdemod.decode`.

        Parameters
        ----------
        sync_tolerance : int, optional
            Bit errors accepted in the sync word; default an eighth of its bits
            (at most 3).
        capture : CaptureFormat, optional
            Datatype and rate, for a raw capture without metadata.

        Returns
        -------
        Link
            Raw mode (no sync word, one record of bits per burst) when no
            sync word or no length was found; ``crc = "none"`` unless a
            catalogue CRC checked. A Gaussian pulse found is written with its
            BT (the receiver then decides with the multi-symbol detector by
            default); a pulse not measured is taken for rectangular.
        """
        sig = SignalSpec(baud=float(self.baud), shift_hz=float(self.shift_hz), offset_hz=float(self.offset_hz),
                         **_pulse_options(self.pulse, self.bt))
        if self.sync_guess is None or self.length is None:
            frame = FrameSpec(sync_word=None, crc="none")
        else:
            bits = int(self.sync_bits)
            tol = min(3, bits // 8) if sync_tolerance is None else int(sync_tolerance)
            frame = FrameSpec(sync_word=int(self.sync_guess, 16), sync_bits=bits, sync_tolerance=tol,
                              length=self.length, crc=self.crc or "none", coding=self.coding,
                              whitening=self.whitening, bit_order=self.bit_order, crc_order=self.crc_order,
                              length_counts=self.length_counts if self.length == "prefix8" else "payload")
        return Link(signal=sig, frame=frame, capture=capture or CaptureFormat())


def _pulse_options(pulse: str | None, bt: float | None) -> dict:
    """SignalSpec keywords for a pulse found (none for rect or unknown: the link's default)."""
    return {"pulse": "gaussian", "bt": float(bt)} if pulse == "gaussian" else {}


@dataclass(frozen=True, eq=False)
class SurveyResult:
    """What :func:`survey` found in a capture.

    Attributes
    ----------
    capture : str
        The capture's name.
    sample_rate_hz : float
    duration_s : float
    centre_hz : float or None
        The capture's centre frequency, when its metadata gives one.
    signals : tuple of SignalFound
        Strongest (highest power while on) first.
    fft_size : int
        FFT size of the averaged spectrum.
    spectrum_hz : numpy.ndarray
        Frequencies of the spectrum bins relative to the capture centre, ascending.
    spectrum_db : numpy.ndarray
        Averaged power spectral density, dB full scale per Hz.
    peak_db : numpy.ndarray
        Peak-hold of short averages (finest time resolution), same units.
    """

    capture: str
    sample_rate_hz: float
    duration_s: float
    centre_hz: float | None
    signals: tuple[SignalFound, ...]
    fft_size: int = 0
    spectrum_hz: np.ndarray = field(default_factory=lambda: np.zeros(0), repr=False)
    spectrum_db: np.ndarray = field(default_factory=lambda: np.zeros(0), repr=False)
    peak_db: np.ndarray = field(default_factory=lambda: np.zeros(0), repr=False)

    def __post_init__(self) -> None:
        if not self.sample_rate_hz > 0:
            raise IqdemodError(f"sample rate {self.sample_rate_hz!r} Hz: must be > 0")
        if self.duration_s < 0:
            raise IqdemodError(f"duration {self.duration_s!r} s: must be >= 0")
        object.__setattr__(self, "signals", tuple(self.signals))

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready form (the spectra left out)."""
        return {
            "capture": self.capture,
            "sample_rate_hz": self.sample_rate_hz,
            "duration_s": self.duration_s,
            "centre_hz": self.centre_hz,
            "fft_size": self.fft_size,
            "signals": [s.as_dict() for s in self.signals],
        }


# --------------------------------------------------------------------------- pass 1: the spectrum


@dataclass(frozen=True, eq=False)
class SpectrumPlan:
    """Fixed settings of the spectrum pass.

    Attributes
    ----------
    sample_rate_hz : float
    nfft : int
        FFT size; segments overlap by half (Welch 1967) with a periodic Hann window.
    window : numpy.ndarray
    """

    sample_rate_hz: float
    nfft: int
    window: np.ndarray = field(repr=False)

    @property
    def hop(self) -> int:
        return self.nfft // 2

    @property
    def scale(self) -> float:
        """Periodogram to power density (full scale² per Hz)."""
        return 1.0 / (self.sample_rate_hz * float(np.sum(self.window**2)))

    def initial_state(self) -> "SpectrumState":
        n = self.nfft
        return SpectrumState(
            tail=np.zeros(0, np.complex64),
            n_segments=0,
            total=np.zeros(n),
            group_sum=tuple(np.zeros(n) for _ in PEAK_RESOLUTIONS),
            group_count=tuple(0 for _ in PEAK_RESOLUTIONS),
            peak=tuple(np.zeros(n) for _ in PEAK_RESOLUTIONS),
            groups=tuple(0 for _ in PEAK_RESOLUTIONS),
        )


@dataclass(frozen=True, eq=False)
class SpectrumState:
    """What the spectrum pass carries between blocks (FFT order, not shifted).

    Attributes
    ----------
    tail : numpy.ndarray
        Input samples from the start of the next segment on.
    n_segments : int
        Periodograms taken so far.
    total : numpy.ndarray
        Their sum (density units).
    group_sum, group_count : tuple
        Per peak-hold resolution: the open group's sum and count.
    peak : tuple of numpy.ndarray
        Per resolution: the running maximum of the smoothed group means.
    groups : tuple of int
        Per resolution: complete groups seen.
    """

    tail: np.ndarray
    n_segments: int
    total: np.ndarray
    group_sum: tuple[np.ndarray, ...]
    group_count: tuple[int, ...]
    peak: tuple[np.ndarray, ...]
    groups: tuple[int, ...]


def plan_spectrum(sample_rate_hz: float, *, nfft: int | None = None) -> SpectrumPlan:
    """Spectrum settings for a capture: an FFT of about 150 Hz bins, 256–65536 points."""
    fs = float(sample_rate_hz)
    if not fs > 0:
        raise CaptureError(f"sample rate {sample_rate_hz!r} Hz: must be > 0")
    if nfft is None:
        nfft = int(2 ** round(math.log2(max(1.0, fs / SPECTRUM_BIN_HZ))))
        nfft = min(MAX_FFT, max(MIN_FFT, nfft))
    if nfft < 16 or nfft & (nfft - 1):
        raise IqdemodError(f"FFT size {nfft}: must be a power of two >= 16")
    return SpectrumPlan(fs, int(nfft), _sig.get_window("hann", int(nfft), fftbins=True))


def _smooth(p: np.ndarray, bins: int) -> np.ndarray:
    """Moving average over `bins` FFT bins (the last axis, circular)."""
    return p if bins <= 1 else uniform_filter1d(p, bins, axis=-1, mode="wrap")


def spectrum_update(x: np.ndarray, plan: SpectrumPlan, state: SpectrumState) -> SpectrumState:
    """Add a block of samples to the spectrum pass.

    Segments sit on a fixed grid of the global sample index (every ``nfft/2``
    samples), so the result does not depend on how the input is cut.

    Parameters
    ----------
    x : numpy.ndarray
        complex64 samples following those already fed.
    plan : SpectrumPlan
    state : SpectrumState
        From :meth:`SpectrumPlan.initial_state` or the previous call; not changed.

    Returns
    -------
    SpectrumState
    """
    buf = np.concatenate([state.tail, np.asarray(x, np.complex64)]) if state.tail.size else np.asarray(x, np.complex64)
    n, hop = plan.nfft, plan.hop
    count = 0 if len(buf) < n else (len(buf) - n) // hop + 1
    if count == 0:
        return dataclasses.replace(state, tail=buf.copy())
    segs = sliding_window_view(buf, n)[::hop][:count]
    spec = _fft.fft(segs * plan.window.astype(np.float32), axis=1)  # complex64 in, complex64 out
    p = (spec.real**2 + spec.imag**2) * np.float32(plan.scale)
    group_sum, group_count, peak, groups = [], [], [], []
    for j, (g, bins) in enumerate(PEAK_RESOLUTIONS):
        acc, cnt, top, done = state.group_sum[j].copy(), state.group_count[j], state.peak[j], state.groups[j]
        i = min(g - cnt, count)
        acc += p[:i].sum(axis=0, dtype=np.float64)
        cnt += i
        if cnt == g:
            m = (count - i) // g
            full = p[i : i + m * g].reshape(m, g, n).mean(axis=1, dtype=np.float64)
            means = np.concatenate([(acc / g)[None, :], full])
            rest = p[i + m * g :]
            acc, cnt = rest.sum(axis=0, dtype=np.float64), len(rest)
            top = np.maximum(top, _smooth(means, bins).max(axis=0))
            done += len(means)
        group_sum.append(acc)
        group_count.append(cnt)
        peak.append(top)
        groups.append(done)
    return SpectrumState(
        tail=buf[count * hop :].copy(),
        n_segments=state.n_segments + count,
        total=state.total + p.sum(axis=0, dtype=np.float64),
        group_sum=tuple(group_sum),
        group_count=tuple(group_count),
        peak=tuple(peak),
        groups=tuple(groups),
    )


@dataclass(frozen=True, eq=False)
class _Spectrum:
    """The finished spectrum pass, bins in ascending frequency."""

    freqs_hz: np.ndarray
    mean: np.ndarray
    peaks: tuple[np.ndarray, ...]
    n_segments: int
    baseline_db: np.ndarray  # noise baseline under `mean`

    @property
    def bin_hz(self) -> float:
        return float(self.freqs_hz[1] - self.freqs_hz[0])

    def floor_density(self, f_hz: float) -> float:
        """The noise power density at `f_hz` (relative to the capture centre), full scale² per Hz."""
        return float(10 ** (np.interp(f_hz, self.freqs_hz, self.baseline_db) / 10))


def _finish_spectrum(plan: SpectrumPlan, state: SpectrumState) -> _Spectrum:
    if state.n_segments == 0:
        raise CaptureError(f"capture of {len(state.tail)} samples: too short to survey (need at least {plan.nfft})")
    peaks = []
    for j, (_, bins) in enumerate(PEAK_RESOLUTIONS):
        top = state.peak[j]
        if state.groups[j] == 0:  # a capture shorter than one group: its open group is all there is
            top = _smooth(state.group_sum[j] / max(1, state.group_count[j]), bins)
        peaks.append(np.fft.fftshift(top))
    freqs = np.fft.fftshift(np.fft.fftfreq(plan.nfft, 1.0 / plan.sample_rate_hz))
    mean = np.fft.fftshift(state.total / state.n_segments)
    return _Spectrum(freqs, mean, tuple(peaks), state.n_segments, _baseline_db(_db(mean), percentile=50))


def _db(x: np.ndarray) -> np.ndarray:
    return 10.0 * np.log10(np.maximum(x, 1e-300))


def _baseline_db(level_db: np.ndarray, *, percentile: float = 30) -> np.ndarray:
    """A noise baseline under a spectrum (dB): low percentiles of chunks, median-filtered, interpolated.

    The median filter spans a third of the band, so a signal narrower than
    half that does not lift the baseline under it; a wider one is capped by
    the low quartile of the whole band (a flat noise floor).
    """
    n = len(level_db)
    chunks = np.array_split(level_db, BASELINE_CHUNKS)
    values = np.array([np.percentile(c, percentile) for c in chunks])
    centres = np.array([np.mean(idx) for idx in np.array_split(np.arange(n), BASELINE_CHUNKS)])
    local = median_filter(values, size=BASELINE_CHUNKS // 3 | 1, mode="wrap")
    # A signal wider than half the filter lifts the local baseline; the band's low quartile (+1 dB) caps it.
    local = np.minimum(local, np.percentile(values, 25) + 1.0)
    return np.interp(np.arange(n), centres, local)


@dataclass(frozen=True)
class _Band:
    """A candidate band from the spectrum: frequencies relative to the capture centre."""

    low_hz: float
    high_hz: float
    excess_db: float


def _active(peak: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(active mask, excess dB) of one peak-hold spectrum over its baseline."""
    level = _db(peak)
    excess = level - _baseline_db(level)
    # The noise's centre and spread from the low tail (10th and 25th percentiles, as for a normal
    # distribution), which stays noise even when signals fill most of the band.
    p10, p25 = np.percentile(excess, [10, 25])
    spread = max((p25 - p10) / 0.6068, 1e-3)
    excess -= p25 + 0.6745 * spread
    return excess > max(DETECT_DB, DETECT_SPREAD * spread), excess


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """(start, end) of the runs of True in `mask`, gaps of a bin or two closed."""
    closed = binary_closing(mask, structure=np.ones(3, dtype=bool)) | mask
    edges = np.flatnonzero(np.diff(np.concatenate([[0], closed.astype(np.int8), [0]])))
    return [(int(a), int(b)) for a, b in zip(edges[::2], edges[1::2])]


def _find_bands(spec: _Spectrum) -> list[_Band]:
    """Runs of bins that stand out from the baseline in a peak-hold spectrum, strongest first.

    The fine resolutions give the bands; the coarse one adds only bands that
    none of the fine ones sees (a wide, weak signal).
    """
    n = len(spec.freqs_hz)
    fine = np.zeros(n, dtype=bool)
    excess = np.full(n, -np.inf)
    for peak in spec.peaks[:FINE_RESOLUTIONS]:
        act, exc = _active(peak)
        fine |= act
        excess = np.maximum(excess, exc)
    runs = _runs(fine)
    for peak in spec.peaks[FINE_RESOLUTIONS:]:
        act, exc = _active(peak)
        for a, b in _runs(act):
            if not fine[a:b].any():
                runs.append((a, b))
                excess[a:b] = np.maximum(excess[a:b], exc[a:b])
    half_bin = spec.bin_hz / 2
    bands = [
        _Band(float(spec.freqs_hz[a] - half_bin), float(spec.freqs_hz[b - 1] + half_bin), float(excess[a:b].max()))
        for a, b in runs
        if b - a >= 3
    ]
    return sorted(bands, key=lambda band: -band.excess_db)


# --------------------------------------------------------------------------- pass 2: activity per band


def _band_tuner(sample_rate_hz: float, centre_hz: float, half_width_hz: float) -> TunerPlan:
    """A tuner plan that keeps ±`half_width_hz` around `centre_hz` and decimates to about 5× that.

    The FIR is the tuner's own Kaiser-window design (Kaiser 1974).
    """
    fs = sample_rate_hz
    passband = min(half_width_hz, 0.45 * fs)
    decimation = max(1, int(fs // (5.0 * passband)))
    out_rate = fs / decimation
    if decimation == 1:
        taps = np.ones(1, np.float32)
    else:
        stop = out_rate - passband
        n_taps, beta = _sig.kaiserord(STOPBAND_DB, (stop - passband) / (fs / 2))
        n_taps |= 1
        taps = _sig.firwin(n_taps, (passband + stop) / 2, window=("kaiser", beta), fs=fs)
        taps = (taps / taps.sum()).astype(np.float32)
    return TunerPlan(fs, float(centre_hz), decimation, taps, passband)


@dataclass(frozen=True, eq=False)
class ActivityPlan:
    """Fixed settings of the burst detector of one band (decimated samples).

    The statistic of a *frame* of ``frame_len`` samples is its power in the
    band's FFT bins, per sample; frames start every ``hop`` samples (a quarter
    frame), so bursts are timed to a quarter frame while the statistic keeps a
    whole frame's averaging. A burst starts above ``on_ratio`` × the noise
    floor and ends after ``HANG`` frames in a row (a frame's length) below ``off_ratio`` × the
    floor (a squelch's hysteresis); bursts shorter than ``MIN_BURST_FRAMES``
    frames are dropped as noise. The thresholds sit 6 and 3 standard
    deviations of the noise statistic above the floor. The floor starts at the
    level the averaged spectrum gives and follows the quiet frames, updated on
    a fixed grid of ``FLOOR_FRAMES`` frames.

    Attributes
    ----------
    rate_hz : float
    frame_len, hop : int
    band_bins : numpy.ndarray
        Boolean mask of the FFT bins (FFT order) inside the band.
    floor0 : float
        Initial noise floor, band power per sample.
    max_excerpts : int
        Bursts whose samples are handed out (the first ones); later bursts are only timed.
    max_excerpt_samples : int
        Longest excerpt, samples.
    """

    rate_hz: float
    frame_len: int
    hop: int
    band_bins: np.ndarray = field(repr=False)
    floor0: float
    max_excerpts: int = MAX_EXCERPTS
    max_excerpt_samples: int = MAX_EXCERPT_SAMPLES

    HANG = 4  # hops: a burst ends after a frame's length of quiet frames
    FLOOR_FRAMES = 64

    def __post_init__(self) -> None:
        if self.frame_len < 8 or not 1 <= self.hop <= self.frame_len:
            raise IqdemodError(f"frame {self.frame_len}, hop {self.hop}: need frame >= 8 and 1 <= hop <= frame")
        if not self.floor0 > 0:
            raise IqdemodError(f"initial noise floor {self.floor0!r}: must be > 0")

    @cached_property
    def n_bins(self) -> int:
        return int(self.band_bins.sum())

    @cached_property
    def on_ratio(self) -> float:
        return 1.0 + 6.0 / math.sqrt(self.n_bins)

    @cached_property
    def off_ratio(self) -> float:
        return 1.0 + 3.0 / math.sqrt(self.n_bins)

    @property
    def margin(self) -> int:
        """Samples kept on each side of a burst's core in its excerpt."""
        return self.frame_len

    @property
    def band_hz(self) -> float:
        """Width of the band the statistic covers, Hz."""
        return self.n_bins * self.rate_hz / self.frame_len

    def initial_state(self) -> "ActivityState":
        return ActivityState(pending=np.zeros(0, np.complex64), pending_start=0, next_frame=0, floor=self.floor0)


@dataclass(frozen=True, eq=False)
class ActivityState:
    """What a band's burst detector carries between blocks (see :func:`activity_update`)."""

    pending: np.ndarray
    pending_start: int  # decimated index of pending[0]
    next_frame: int
    floor: float
    quiet_sum: float = 0.0
    quiet_n: int = 0
    in_burst: bool = False
    first: int = 0  # first frame above the on-threshold
    last: int = 0  # last frame above the off-threshold
    quiet: int = 0
    n_bursts: int = 0
    held: np.ndarray | None = None  # the excerpt of a burst that outgrew max_excerpt_samples
    held_start: int = 0


@dataclass(frozen=True, eq=False)
class ActivityBurst:
    """A burst seen by a band's detector.

    Attributes
    ----------
    index : int
    core : tuple of int
        (start, end) decimated sample indices where the detector saw the signal.
    start : int
        Decimated index of ``samples[0]``.
    samples : numpy.ndarray or None
        The burst with a frame of margin on each side (cut at the excerpt
        limit); None after the first ``max_excerpts`` bursts.
    """

    index: int
    core: tuple[int, int]
    start: int = 0
    samples: np.ndarray | None = field(default=None, repr=False)

    @property
    def local_core(self) -> tuple[int, int]:
        """The core as positions in `samples`."""
        n = 0 if self.samples is None else len(self.samples)
        return (max(0, self.core[0] - self.start), min(n, self.core[1] - self.start))


def plan_activity(rate_hz: float, half_band_hz: float, floor_density: float, *, snr: float = 0.0,
                  frame_len: int | None = None) -> ActivityPlan:
    """Detector settings for a band of ±`half_band_hz` at `rate_hz`.

    Parameters
    ----------
    floor_density : float
        Noise power density, full scale² per Hz (from the averaged spectrum).
    snr : float
        The band's signal-to-noise ratio while on, if known (linear). A strong
        signal needs fewer FFT bins per frame, hence shorter frames: the
        frame is as short as keeps the on-threshold (6 standard deviations of
        the noise statistic) below half the signal's level, with
        ``MIN_DETECTOR_BINS`` to ``DETECTOR_BINS`` bins in the band, so that short gaps between bursts
        are seen even in a narrow band.
    frame_len : int, optional
        Overrides that choice.
    """
    if frame_len is None:
        bins = DETECTOR_BINS if snr <= 0 else min(DETECTOR_BINS, max(MIN_DETECTOR_BINS, (12.0 / snr) ** 2))
        wanted = bins * rate_hz / (2 * half_band_hz)
        frame_len = int(2 ** max(4, round(math.log2(max(1.0, wanted)))))
    freqs = np.fft.fftfreq(frame_len, 1.0 / rate_hz)
    band = np.abs(freqs) <= half_band_hz
    if band.sum() < 4:
        band = np.abs(freqs) <= 2 * rate_hz / frame_len
    return ActivityPlan(float(rate_hz), int(frame_len), max(1, frame_len // 4), band,
                        float(max(floor_density * rate_hz, 1e-30)))


def activity_update(y: np.ndarray, plan: ActivityPlan, state: ActivityState, *,
                    final: bool = False) -> tuple[list[ActivityBurst], ActivityState]:
    """Feed decimated samples to a band's burst detector.

    Frames sit on a fixed grid of the global sample index and the floor is
    updated on a fixed grid of frames, so the bursts found do not depend on
    how the input was cut.

    Parameters
    ----------
    y : numpy.ndarray
        complex64 samples following those already fed.
    plan : ActivityPlan
    state : ActivityState
        From :meth:`ActivityPlan.initial_state` or the previous call; not changed.
    final : bool
        The end of the stream: a burst still open is handed out.

    Returns
    -------
    bursts : list of ActivityBurst
        Bursts completed by this call.
    state : ActivityState
    """
    y = np.asarray(y, np.complex64)
    pending = np.concatenate([state.pending, y]) if state.pending.size else y
    p0 = state.pending_start
    F, H = plan.frame_len, plan.hop
    k0 = state.next_frame
    n_frames = max(0, (p0 + len(pending) - F) // H - k0 + 1) if p0 + len(pending) >= F else 0
    st = {f.name: getattr(state, f.name) for f in dataclasses.fields(state)}  # arrays are replaced, never changed
    st["pending"] = pending
    out: list[ActivityBurst] = []
    if n_frames:
        a = k0 * H - p0
        frames = sliding_window_view(pending[a : a + (n_frames - 1) * H + F], F)[::H][:n_frames]
        spec = np.fft.fft(frames, axis=1)
        power = (spec.real**2 + spec.imag**2)[:, plan.band_bins].mean(axis=1) / F
        for i, pw in enumerate(power):
            _step(k0 + i, float(pw), plan, st, out)
    st["next_frame"] = k0 + n_frames
    if final and st["in_burst"]:
        _end_burst(plan, st, out)
    # keep what an excerpt may still need
    keep = st["next_frame"] * H - plan.margin
    if st["in_burst"] and st["held"] is None and st["n_bursts"] < plan.max_excerpts:
        keep = min(keep, st["first"] * H - plan.margin)
    keep = max(keep, p0)
    st["pending"] = pending[keep - p0 :].copy()
    st["pending_start"] = keep
    return out, ActivityState(**st)


def _step(k: int, power: float, plan: ActivityPlan, st: dict, out: list) -> None:
    """One frame of the hysteresis."""
    floor = st["floor"]
    H = plan.hop
    if not st["in_burst"]:
        if power > plan.on_ratio * floor:
            st.update(in_burst=True, first=k, last=k, quiet=0, held=None)
        elif power < plan.off_ratio * floor:
            st["quiet_sum"] += power
            st["quiet_n"] += 1
    else:
        if power < plan.off_ratio * floor:
            st["quiet"] += 1
            if st["quiet"] >= plan.HANG:
                _end_burst(plan, st, out)
        else:
            st["quiet"] = 0
            st["last"] = k
            if (st["held"] is None and st["n_bursts"] < plan.max_excerpts
                    and (k - st["first"]) * H + plan.frame_len + 2 * plan.margin >= plan.max_excerpt_samples):
                start = st["first"] * H - plan.margin
                a = max(0, start - st["pending_start"])
                st["held"] = st["pending"][a : a + plan.max_excerpt_samples].copy()
                st["held_start"] = max(start, st["pending_start"])
    if (k + 1) % plan.FLOOR_FRAMES == 0:
        if st["quiet_n"] >= plan.FLOOR_FRAMES // 8:
            st["floor"] = 0.7 * floor + 0.3 * st["quiet_sum"] / st["quiet_n"]
        st["quiet_sum"], st["quiet_n"] = 0.0, 0


def _end_burst(plan: ActivityPlan, st: dict, out: list) -> None:
    """Hand out the open burst, unless it is too short to be one (a noise blip)."""
    H, F = plan.hop, plan.frame_len
    core = (st["first"] * H, st["last"] * H + F)
    if core[1] - core[0] < MIN_BURST_FRAMES * F:
        st.update(in_burst=False, quiet=0, held=None)
        return
    index = st["n_bursts"]
    if st["held"] is not None:
        burst = ActivityBurst(index, core, st["held_start"], st["held"])
    elif index < plan.max_excerpts:
        start = max(core[0] - plan.margin, st["pending_start"])
        a, b = start - st["pending_start"], core[1] + plan.margin - st["pending_start"]
        burst = ActivityBurst(index, core, start, st["pending"][a:b].copy())
    else:
        burst = ActivityBurst(index, core)
    out.append(burst)
    st.update(in_burst=False, quiet=0, n_bursts=index + 1, held=None)


@dataclass(frozen=True, eq=False)
class _Watch:
    """Tuner and detector for one band."""

    low_hz: float
    high_hz: float
    tuner: TunerPlan
    detector: ActivityPlan

    @property
    def rate_hz(self) -> float:
        return self.tuner.output_rate_hz

    def input_sample(self, decimated: float) -> float:
        return decimated * self.tuner.decimation - self.tuner.delay_samples


def _watch(sample_rate_hz: float, low_hz: float, high_hz: float, spec: "_Spectrum", excess_db: float = 0.0) -> _Watch:
    width = high_hz - low_hz
    margin = max(width / 4, 2 * spec.bin_hz)
    tuner = _band_tuner(sample_rate_hz, (low_hz + high_hz) / 2, width / 2 + margin)
    detector = plan_activity(tuner.output_rate_hz, width / 2 + margin / 2, spec.floor_density((low_hz + high_hz) / 2),
                             snr=10 ** (excess_db / 10))
    return _Watch(low_hz, high_hz, tuner, detector)


@dataclass
class _Activity:
    """What one band's watch saw: burst intervals (input samples), excerpts, noise floor."""

    watch: _Watch
    intervals: list[tuple[float, float]] = field(default_factory=list)
    excerpts: list[ActivityBurst] = field(default_factory=list)
    floor: float | None = None


def _progress(capture: Capture, enabled: bool, desc: str):
    if not enabled:
        return None
    from tqdm import tqdm

    return tqdm(total=capture.info.n_samples, unit="S", unit_scale=True, desc=desc, leave=False, delay=1.0)


def _watch_bands(capture: Capture, watches: Sequence[_Watch], *, block_samples: int, progress: bool,
                 desc: str) -> list[_Activity]:
    """One pass: tune every band, detect its bursts, keep the first few as excerpts."""
    acts = [_Activity(w) for w in watches]
    tables = [w.tuner.table() for w in watches]
    tstates = [w.tuner.initial_state() for w in watches]
    dstates = [w.detector.initial_state() for w in watches]
    bar = _progress(capture, progress, desc)

    def take(act: _Activity, found: list[ActivityBurst]) -> None:
        w = act.watch
        for burst in found:
            c0, c1 = burst.core
            act.intervals.append((w.input_sample(c0), w.input_sample(c1)))
            if burst.samples is not None and len(act.excerpts) < MAX_EXCERPTS:
                act.excerpts.append(burst)

    try:
        for block in capture.blocks(block_samples):
            for i, w in enumerate(watches):
                y, tstates[i] = tune(block, w.tuner, tstates[i], table=tables[i])
                found, dstates[i] = activity_update(y, w.detector, dstates[i])
                take(acts[i], found)
            if bar is not None:
                bar.update(len(block))
        for i, w in enumerate(watches):
            found, dstates[i] = activity_update(np.zeros(0, np.complex64), w.detector, dstates[i], final=True)
            take(acts[i], found)
            acts[i].floor = dstates[i].floor
    finally:
        if bar is not None:
            bar.close()
    return acts


GROUPING_BURSTS = 256  # bursts compared when deciding whether two bands are one signal


def _compared(a: list[tuple[float, float]], b: list[tuple[float, float]]) -> tuple[np.ndarray, np.ndarray]:
    """The first GROUPING_BURSTS bursts of `a`, and the bursts of `b` during them, as (n, 2) arrays."""
    x = np.asarray(a[:GROUPING_BURSTS], dtype=float).reshape(-1, 2)
    y = np.asarray(b, dtype=float).reshape(-1, 2)
    if len(x) and len(y):
        y = y[(y[:, 1] > x[0, 0]) & (y[:, 0] < x[-1, 1])][: 4 * GROUPING_BURSTS]
    return x, y


def _starts_match(a: list[tuple[float, float]], b: list[tuple[float, float]], tolerance: float) -> float:
    """Fraction of the bursts of `a` for which a burst of `b` starts within `tolerance` samples."""
    x, y = _compared(a, b)
    if not len(x) or not len(y):
        return 0.0
    return float((np.abs(x[:, :1] - y[None, :, 0]) <= tolerance).any(axis=1).mean())


def _covered(a: list[tuple[float, float]], b: list[tuple[float, float]]) -> float:
    """Fraction of the burst time of `a` during which `b` is also on."""
    x, y = _compared(a, b)
    total = float(np.sum(x[:, 1] - x[:, 0])) if len(x) else 0.0
    if total <= 0 or not len(y):
        return 0.0
    both = np.clip(np.minimum(x[:, 1:], y[None, :, 1]) - np.maximum(x[:, :1], y[None, :, 0]), 0.0, None)
    return float(both.sum() / total)


def _group_bands(acts: list[_Activity]) -> list[list[int]]:
    """Bands that are one signal: each group is one transmitter.

    Two bands join when they touch or nearly (a gap no wider than the wider
    band) and are on at the same times (each covers 70 % of the other's burst
    time); or, further apart, when their bursts start together and overlap
    (the two tone lobes of a wide-shift signal: both are on during the
    alternating preamble, though a band holding one tone may go quiet inside
    a burst during a long run of the other). Two transmitters keyed by one
    clock in bands far apart would be taken for one signal.
    """
    n = len(acts)
    tols = [2 * a.watch.detector.frame_len * a.watch.tuner.decimation for a in acts]
    parent = list(range(n))

    def root(i: int) -> int:
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    for i in range(n):
        for j in range(i + 1, n):
            wi, wj = acts[i].watch, acts[j].watch
            a, b = acts[i].intervals, acts[j].intervals
            if not a or not b:
                continue
            gap = max(wi.low_hz, wj.low_hz) - min(wi.high_hz, wj.high_hz)
            wider = max(wi.high_hz - wi.low_hz, wj.high_hz - wj.low_hz)
            ca, cb = _covered(a, b), _covered(b, a)
            if gap <= wider and ca >= 0.7 and cb >= 0.7:
                parent[root(i)] = root(j)
                continue
            fewer, more = (a, b) if len(a) <= len(b) else (b, a)
            if len(fewer) < 2 or len(more) > 3 * len(fewer):
                continue
            if _starts_match(fewer, more, max(tols[i], tols[j])) >= 0.8 and min(ca, cb) >= 0.5:
                parent[root(i)] = root(j)
    groups: dict[int, list[int]] = {}
    for i in range(n):
        if acts[i].intervals:
            groups.setdefault(root(i), []).append(i)
    return list(groups.values())


# --------------------------------------------------------------------------- modulation from the excerpts


def _lag_products(x: np.ndarray) -> np.ndarray:
    """x[n+1]·conj(x[n]): its angle is the phase step between samples."""
    return x[1:] * np.conj(x[:-1])


def _inst_freq(lag: np.ndarray, rate_hz: float) -> np.ndarray:
    """Phase-difference discriminator: frequency between consecutive samples, Hz (Kay 1989)."""
    return np.angle(lag) * (rate_hz / _TWO_PI)


def _band_limit(x: np.ndarray, rate_hz: float, half_band_hz: float) -> np.ndarray:
    """Zero-phase low-pass to ±`half_band_hz`: noise outside the signal's band would swamp the discriminator."""
    cutoff = min(half_band_hz, 0.45 * rate_hz)
    if cutoff >= 0.45 * rate_hz:
        return x
    n_taps = int(min(len(x) // 2, 8 * rate_hz / cutoff)) | 1
    if n_taps < 5:
        return x
    taps = _sig.firwin(n_taps, cutoff, fs=rate_hz, window="hamming")
    return _sig.fftconvolve(x, taps, mode="same")


def _otsu(values: np.ndarray, lo: float, hi: float, bins: int = 256) -> tuple[float, float]:
    """Otsu's threshold (Otsu 1979) of `values` within [lo, hi]; returns (threshold, separability η)."""
    hist, edges = np.histogram(values, bins=bins, range=(lo, hi))
    p = hist.astype(float)
    if p.sum() == 0:
        return (lo + hi) / 2, 0.0
    p /= p.sum()
    mid = (edges[:-1] + edges[1:]) / 2
    w0 = np.cumsum(p)
    m = np.cumsum(p * mid)
    mt = m[-1]
    w1 = 1.0 - w0
    with np.errstate(divide="ignore", invalid="ignore"):
        between = (mt * w0 - m) ** 2 / (w0 * w1)
    between[~np.isfinite(between)] = 0.0
    k = int(np.argmax(between))
    total = float(np.sum(p * (mid - mt) ** 2))
    return float(edges[k + 1]), float(between[k] / total) if total > 0 else 0.0


def _signal_span(x: np.ndarray, core: tuple[int, int], smooth: int) -> tuple[int, int]:
    """The samples of an excerpt that carry the burst: its core, trimmed to where the envelope is up."""
    c0, c1 = core
    if c1 - c0 < 4:
        return c0, c1
    env = uniform_filter1d(np.abs(x.astype(np.complex128)) ** 2, max(1, smooth))
    level = np.median(env[c0:c1])
    up = np.flatnonzero(env[c0:c1] > 0.5 * level)
    if up.size < 4:
        return c0, c1
    return c0 + int(up[0]), c0 + int(up[-1]) + 1


def _transition_times(f: np.ndarray, centre: float, hysteresis: float) -> np.ndarray:
    """Instants where `f` crosses `centre`, counting only swings beyond ±hysteresis.

    The hysteresis is a Schmitt trigger's (Schmitt, "A thermionic trigger",
    J. Sci. Instrum. 15, 1938): noise about the centre does not make extra
    transitions. Each swing counts once, at its first crossing of `centre`, interpolated
    between samples.
    """
    state = np.zeros(len(f), dtype=np.int8)
    state[f > centre + hysteresis] = 1
    state[f < centre - hysteresis] = -1
    idx = np.flatnonzero(state)
    if idx.size < 2:
        return np.zeros(0)
    flips = np.flatnonzero(state[idx[1:]] != state[idx[:-1]])
    if flips.size == 0:
        return np.zeros(0)
    d = f - centre
    crossings = np.flatnonzero(np.signbit(d[1:]) != np.signbit(d[:-1]))
    # the first crossing after the last sample on the old side (there is one before the new side)
    c = crossings[np.minimum(np.searchsorted(crossings, idx[flips]), len(crossings) - 1)]
    y0, y1 = d[c], d[c + 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.where(y0 != y1, y0 / (y0 - y1), 0.5)
    return c + np.clip(frac, 0.0, 1.0)


def _impulses(times: np.ndarray, n: int) -> np.ndarray:
    """An impulse train with a unit impulse at each (fractional) time, shared between its two samples."""
    s = np.zeros(n + 2)
    i = np.floor(times).astype(int)
    frac = times - i
    np.add.at(s, i, 1.0 - frac)
    np.add.at(s, i + 1, frac)
    return s


def _line_rate(trains: list[np.ndarray], rate_hz: float, lo_hz: float, hi_hz: float) -> float | None:
    """The symbol rate: the strongest spectral line of the transition trains (summed over bursts) in [lo, hi] Hz.

    Tone changes can only happen on the symbol grid, so the train of change
    instants is cyclostationary with the symbol period and its spectrum has a
    line at the rate (Gardner 1991).
    A line at a sub-multiple (1/2, 1/3) that is also well above the continuum
    wins: the fundamental, not a harmonic. None when no line stands 4× above
    the continuum.
    """
    n_max = max(len(e) for e in trains)
    nfft = int(2 ** math.ceil(math.log2(max(64, 4 * n_max))))
    total = np.zeros(nfft // 2 + 1)
    for e in trains:
        total += np.abs(np.fft.rfft(e - e.mean(), nfft)) ** 2
    freqs = np.fft.rfftfreq(nfft, 1.0 / rate_hz)
    ok = (freqs >= lo_hz) & (freqs <= hi_hz)
    if ok.sum() < 3:
        return None
    continuum = median_filter(total, size=max(9, (nfft // max(1, n_max)) * 16 + 1), mode="nearest")
    ratio = total / np.maximum(continuum, 1e-300)
    score = np.where(ok, ratio, 0.0)
    k = int(np.argmax(score))
    if score[k] < 4.0:
        return None
    best = k
    for div in (2, 3):
        f = freqs[k] / div
        if f < lo_hz:
            break
        near = np.flatnonzero(np.abs(freqs - f) <= max(2 * (freqs[1] - freqs[0]), 0.01 * f))
        if near.size:
            j = int(near[np.argmax(ratio[near])])
            if ratio[j] >= max(4.0, 0.25 * ratio[k]):
                best = j
    # parabolic refinement on the log spectrum
    if 0 < best < len(total) - 1:
        a, b, c = np.log(total[best - 1 : best + 2] + 1e-300)
        denom = a - 2 * b + c
        delta = 0.5 * (a - c) / denom if denom < 0 else 0.0
        return float((best + np.clip(delta, -0.5, 0.5)) * (freqs[1] - freqs[0]))
    return float(freqs[best])


def _two_phases(times: list[np.ndarray], period: float) -> bool:
    """True when the tone changes fall on two phases half a `period` apart, not one.

    The transition line of Manchester chips is strongest at half the chip
    rate (a change in the middle of every bit, at bit boundaries only
    between equal bits), so :func:`_line_rate` takes the bit rate for the
    fundamental. Folded on the bit period, the changes then sit at two
    phases, a third of them opposite the rest: the first circular moment
    |E exp(j2πt/T)| is about ⅓ while the second, |E exp(j4πt/T)|, stays near
    1. On a true symbol grid both moments are alike.
    """
    t = np.concatenate([np.asarray(x, float) for x in times]) if times else np.zeros(0)
    if t.size < 16:
        return False
    first = abs(np.mean(np.exp(1j * _TWO_PI * t / period)))
    second = abs(np.mean(np.exp(2j * _TWO_PI * t / period)))
    return bool(first < 0.6 * second)


def _refine_period(times: list[np.ndarray], period: float, *, points: int = 121) -> float:
    """Symbol period maximising the summed point-process periodogram Σ_b |Σ_k exp(j2π t_k / T)|² (Bartlett 1963).

    The search spans ±3 main-lobe widths of the longest burst's periodogram
    around `period` (a lobe is 1/N of the period wide for N symbols), which
    the spectral line's estimate is well within; at most MAX_TRANSITIONS
    instants per burst are used.
    """
    times = [t[:MAX_TRANSITIONS] - t[0] for t in times if len(t) >= 4]
    if not times:
        return period
    n_symbols = max(float(t[-1]) / period for t in times)
    span = float(np.clip(3.0 / max(n_symbols, 1.0), 1e-4, 0.03))
    grid = period * (1.0 + np.linspace(-span, span, points))
    score = np.zeros(points)
    for t in times:
        ph = np.exp(1j * _TWO_PI * np.outer(1.0 / grid, t))
        score += np.abs(ph.sum(axis=1)) ** 2
    k = int(np.argmax(score))
    if 0 < k < points - 1:
        a, b, c = score[k - 1 : k + 2]
        denom = a - 2 * b + c
        delta = 0.5 * (a - c) / denom if denom < 0 else 0.0
        return float(grid[k] + np.clip(delta, -0.5, 0.5) * (grid[1] - grid[0]))
    return float(grid[k])


@dataclass(frozen=True)
class _Modulation:
    """Tones relative to the excerpts' centre, and the symbol rate."""

    tone_low_hz: float
    tone_high_hz: float
    baud: float
    eye: float = 1.0  # see _eye


def _eye(values: np.ndarray, lo: float, hi: float) -> float:
    """Eye opening of the per-symbol frequencies: 1 when every symbol sits on a tone, about 0.5 for noise.

    1 − median distance of a symbol's frequency from the nearer tone, in units
    of half the shift.
    """
    if values.size == 0 or not hi > lo:
        return 0.0
    half = (hi - lo) / 2
    return float(1.0 - np.median(np.abs(np.abs(values - (lo + hi) / 2) - half)) / half)


def _symbol_values(f: np.ndarray, times: np.ndarray, period: float) -> np.ndarray:
    """Mean discriminator output over the middle half of each symbol, on the grid the transitions give, Hz.

    (The angle of the summed lag products would be less troubled by noise
    clicks, but band-limited noise is correlated from one sample to the next
    and pulls that angle towards the band centre.)
    """
    if len(times) == 0:
        return np.zeros(0)
    phase = np.angle(np.sum(np.exp(1j * _TWO_PI * times / period)))
    first = (phase / _TWO_PI * period) % period
    starts = first + period * np.arange(int((len(f) - first) // period))
    csum = np.concatenate([[0.0], np.cumsum(f)])
    grid = np.arange(len(csum), dtype=float)
    a, b = starts + period / 4, starts + 3 * period / 4
    ok = b <= len(f)
    a, b = a[ok], b[ok]
    return (np.interp(b, grid, csum) - np.interp(a, grid, csum)) / (b - a)


def _modulation(excerpts: list[ActivityBurst], rate_hz: float, half_band_hz: float,
                detector_frame: int) -> _Modulation | None:
    """Tones and symbol rate of one signal from its burst excerpts (see the module notes).

    `half_band_hz` is the half-width of the band the signal was seen in. A
    first estimate filters the bursts to that band, which may cut the signal's
    spectrum short (only its strongest part stood out) or let in extra noise.
    The estimate is then made again through a filter centred on the signal,
    shift + 1.5·baud wide: between Carson's rule for rectangular keying (shift
    + 2·baud; Carson, "Notes on the theory of modulation", Proc. IRE 10, 1922)
    and the narrower spectrum of a Gaussian pulse. Measured on generated
    bursts (h 0.7–2.8, rectangular and BT 0.5, Eb/N0 16 dB) that width left
    the smallest bias in the shift.
    """
    first = _modulation_once(excerpts, rate_hz, 0.0, half_band_hz, detector_frame)
    if first is None:
        return None
    centre = (first.tone_low_hz + first.tone_high_hz) / 2
    half = (first.tone_high_hz - first.tone_low_hz) / 2 + 0.75 * first.baud
    second = _modulation_once(excerpts, rate_hz, centre, min(half, 0.45 * rate_hz - abs(centre)), detector_frame)
    return second if second is not None else first


def _modulation_once(excerpts: list[ActivityBurst], rate_hz: float, centre_hz: float, half_band_hz: float,
                     detector_frame: int) -> _Modulation | None:
    """One estimate of tones and rate, the bursts filtered to ±`half_band_hz` around `centre_hz`."""
    lags = []
    for raw in excerpts:
        x = raw.samples.astype(np.complex128)
        if centre_hz:
            x = x * np.exp(-2j * np.pi * (centre_hz / rate_hz) * np.arange(len(x)))
        x = _band_limit(x, rate_hz, 1.1 * half_band_hz)
        a, b = _signal_span(x, raw.local_core, detector_frame // 8)
        if b - a > 16:
            lags.append(_lag_products(x[a:b]))
    if not lags:
        return None
    # a 3-sample median removes the discriminator's clicks and keeps the keying's edges (Tukey's running median)
    raw_if = [_inst_freq(lag, rate_hz) for lag in lags]
    spans = [median_filter(f, size=3, mode="nearest") for f in raw_if]
    inside = np.concatenate(spans)
    lim = min(rate_hz / 2, 1.25 * half_band_hz)
    thr, eta = _otsu(inside, -lim, lim)
    if eta < 0.5:  # not two levels
        return None
    low = inside[(inside < thr) & (inside > -lim)]
    high = inside[(inside >= thr) & (inside < lim)]
    if low.size < 16 or high.size < 16:
        return None
    lo, hi = float(np.median(low)), float(np.median(high))
    shift = hi - lo
    if not shift > 0:
        return None
    centre = (lo + hi) / 2
    # the symbol rate: the spectral line of the tone-transition impulse train
    times = [_transition_times(f, centre, shift / 4) for f in spans]
    n_longest = max(len(f) for f in spans)
    lo_rate = max(shift / MAX_H, 16 * rate_hz / n_longest, 1.0)
    hi_rate = min(rate_hz / 3, shift / MIN_H, 2 * half_band_hz)
    line = _line_rate([_impulses(t, len(f)) for t, f in zip(times, spans)], rate_hz, lo_rate, hi_rate)
    if line is None:
        return None
    period = rate_hz / line
    if rate_hz / (period / 2) <= hi_rate and _two_phases(times, period):
        period /= 2  # Manchester chips: the line at the bit rate is not the symbol rate
    # refine the rate on the transition instants, then the tones on steady symbols
    for _ in range(2):
        smooth = max(1, int(round(period / 4)))
        times = [_transition_times(uniform_filter1d(f, smooth) if smooth > 1 else f, centre, shift / 4)
                 for f in spans]
        period = _refine_period(times, period)
        lows, highs, every, pairs = [], [], [], []
        for f, t in zip(raw_if, times):
            v = _symbol_values(f, t, period)
            every.append(v)
            if len(v) < 3:
                continue
            d = v > centre
            steady = np.zeros(len(v), dtype=bool)
            steady[1:-1] = (d[1:-1] == d[:-2]) & (d[1:-1] == d[2:])
            lows.append(v[steady & ~d])
            highs.append(v[steady & d])
            # Manchester chips never run to three: fall back on symbols with one equal neighbour
            half = np.zeros(len(v), dtype=bool)
            half[1:-1] = (d[1:-1] == d[:-2]) | (d[1:-1] == d[2:])
            pairs.append((v[half & ~d], v[half & d]))
        lows_a = np.concatenate(lows) if lows else np.zeros(0)
        highs_a = np.concatenate(highs) if highs else np.zeros(0)
        if (lows_a.size < 8 or highs_a.size < 8) and pairs:
            lows_a = np.concatenate([a for a, _ in pairs])
            highs_a = np.concatenate([b for _, b in pairs])
        if lows_a.size >= 8 and highs_a.size >= 8:
            lo, hi = float(np.median(lows_a)), float(np.median(highs_a))
            shift, centre = hi - lo, (lo + hi) / 2
    if not shift > 0:
        return None
    eye = _eye(np.concatenate(every) if every else np.zeros(0), lo, hi)
    return _Modulation(centre_hz + lo, centre_hz + hi, rate_hz / period, eye)


def _ebn0_and_power(excerpts: list[ActivityBurst], watch: _Watch, floor: float | None,
                    baud: float) -> tuple[float, float]:
    """Rough Eb/N0 (dB) and on-power (dBFS) from the band power of the bursts over the detector's noise floor.

    With S/N the in-band power ratio over the detector's band B (its FFT bins),
    Eb/N0 = (S/N)·B / baud; the signal power is (S/N)·floor·N/n_bins per sample.
    """
    det = watch.detector
    fl = det.frame_len
    if not floor or floor <= 0:
        return math.nan, math.nan
    ratios = []
    for raw in excerpts:
        c0, c1 = raw.local_core
        x = raw.samples[c0 + fl : c1 - fl]  # the core's first and last frames may be partly empty
        n = len(x) // fl
        if n < 1:
            continue
        spec = np.fft.fft(x[: n * fl].reshape(n, fl), axis=1)
        power = (spec.real**2 + spec.imag**2)[:, det.band_bins].mean(axis=1) / fl
        ratios.append(np.median(power) / floor)
    if not ratios:
        return math.nan, math.nan
    snr = max(float(np.median(ratios)) - 1.0, 1e-6)
    n_bins = int(det.band_bins.sum())
    band_hz = n_bins * watch.rate_hz / fl
    ebn0 = 10 * math.log10(snr * band_hz / baud)
    power = 10 * math.log10(snr * floor * fl / n_bins)
    return ebn0, power


# --------------------------------------------------------------------------- the pulse, from the spectrum

PULSE_BTS = (0.3, 0.35, 0.5, 0.7, 1.0)  # Gaussian BT values the survey tells apart
_SPECTRUM_SEGMENT_SYMBOLS = 8  # Welch segment of the burst spectrum and of the theoretical one, symbols
# The simulated waveforms: samples per symbol and random bits (511 half-overlapping segments: about ±4 % a
# bin). Sampling in step with the symbols adds the cyclic spectra of the aliases to the tails (the
# signal is cyclostationary): at 16 samples per symbol that is +1 dB three baud out, at 32 under 1 dB to 4 baud
# (against the closed-form MSK spectrum; tests/test_survey_pulse.py).
_THEORY_SPS = 32
_THEORY_SYMBOLS = 2048
_MIN_SEGMENTS = 24  # burst segments needed for a spectrum worth fitting
# A Gaussian pulse is called only when it fits clearly better than the rectangle: its log residual at most
# this share of the rectangle's. Where the fall beyond Carson's bandwidth is under the noise every candidate
# fits alike (residuals within a few per cent: 1 200 Bd at h 0.7, 16 dB), and the plainer pulse is kept;
# a Gaussian pulse that shows fits 4–50 times better (BT 0.3–1, h 0.5–3, 16 dB).
_GAUSSIAN_MARGIN = 0.8


@dataclass(frozen=True)
class _PulseShape:
    """What the burst spectrum says about the frequency pulse (see :func:`_pulse_shape`)."""

    pulse: str
    bt: float | None
    beyond_carson_db: float | None


def _welch(x: np.ndarray, nper: int) -> tuple[np.ndarray, int]:
    """Sum of the Hann-windowed periodograms of half-overlapping segments (Welch 1967), FFT order, and their count.

    Scaled as a density per unit of the sample rate: divide by the count and the rate.
    """
    hop = nper - nper // 2
    n_seg = 1 + (len(x) - nper) // hop
    if n_seg < 1:
        return np.zeros(nper), 0
    win = _sig.get_window("hann", nper)
    seg = sliding_window_view(x, nper)[::hop][:n_seg] * win
    spec = _fft.fft(seg, axis=1)
    return np.sum(spec.real**2 + spec.imag**2, axis=0) / np.sum(win**2), n_seg


@lru_cache(maxsize=64)
def _cpfsk_spectrum(h: float, pulse: str, bt: float) -> tuple[np.ndarray, np.ndarray]:
    """Power spectrum of binary CPFSK with random bits: (frequency in baud, PSD per baud), unit power.

    Averaged periodograms (Welch 1967) of a simulated waveform made with the
    receiver's own phase model (:func:`iqdemod.sequence.phase_trajectory`),
    with the same Hann segments, in symbols, as the burst spectrum it is
    compared with, so that both are smoothed alike (the spectral lines of
    whole h included). The bits come from a fixed seed: the result is a
    function of (h, pulse, bt) only, and cached.
    """
    plan = plan_sequence(h=h, pulse=pulse, bt=bt, n_symbols=1)
    bits = np.random.default_rng(0x5EED).integers(0, 2, _THEORY_SYMBOLS)
    t = np.arange(_THEORY_SYMBOLS * _THEORY_SPS) / _THEORY_SPS
    x = np.exp(1j * phase_trajectory(bits, t, plan))
    nper = _SPECTRUM_SEGMENT_SYMBOLS * _THEORY_SPS
    total, _ = _welch(x, nper)
    f = np.fft.fftshift(np.fft.fftfreq(nper, 1.0 / _THEORY_SPS))
    p = np.fft.fftshift(total)
    p = p / (np.sum(p) * (f[1] - f[0]))
    f.setflags(write=False)
    p.setflags(write=False)
    return f, p


def _burst_spectrum(excerpts: list[ActivityBurst], rate_hz: float, baud: float,
                    detector_frame: int) -> tuple[np.ndarray, np.ndarray] | None:
    """Averaged periodogram of the bursts' own samples (frequency relative to the tuner centre, PSD), or None."""
    nper = int(round(_SPECTRUM_SEGMENT_SYMBOLS * rate_hz / baud))
    if nper < 16:
        return None
    total, count = np.zeros(nper), 0
    for raw in excerpts:
        x = raw.samples.astype(np.complex128)
        a, b = _signal_span(x, raw.local_core, detector_frame // 8)
        if b - a >= 2 * nper:
            p, n_seg = _welch(x[a:b], nper)
            total += p
            count += n_seg
    if count < _MIN_SEGMENTS:
        return None
    freqs = np.fft.fftshift(np.fft.fftfreq(nper, 1.0 / rate_hz))
    return freqs, np.fft.fftshift(total / (count * rate_hz))


def _tuner_gain(tuner: TunerPlan, freqs_hz: np.ndarray) -> np.ndarray:
    """|H(f)|² of the tuner's decimating filter at each output frequency and its aliases: (aliases, bins).

    Row k is the response at f + (k − K)·rate, the input frequency that lands on f after decimation.
    """
    if tuner.decimation == 1:
        return np.ones((1, len(freqs_hz)))
    rate = tuner.output_rate_hz
    shifts = np.arange(-2, 3)[:, None] * rate
    _, resp = _sig.freqz(tuner.taps.astype(np.float64), worN=(freqs_hz[None, :] + shifts).ravel(),
                         fs=tuner.sample_rate_hz)
    return (np.abs(resp) ** 2).reshape(len(shifts), -1)


def _fit_shape(p_meas: np.ndarray, shape: np.ndarray, noise: np.ndarray) -> tuple[float, float, float]:
    """Fit p ≈ a·shape + n·noise (a, n >= 0) with relative errors; return (a, n, mean squared log residual)."""
    w = 1.0 / p_meas
    cols = np.stack([shape * w, noise * w], axis=1)
    coef, *_ = np.linalg.lstsq(cols, np.ones_like(p_meas), rcond=None)
    if coef[0] <= 0 or coef[1] <= 0:  # one term alone
        only = [float(np.sum(c) / np.sum(c * c)) for c in (cols[:, 0], cols[:, 1])]
        err = [np.sum((1 - o * c) ** 2) for o, c in zip(only, (cols[:, 0], cols[:, 1]))]
        coef = np.array([only[0], 0.0]) if err[0] <= err[1] else np.array([0.0, only[1]])
    model = np.maximum(coef[0] * shape + coef[1] * noise, 1e-300)
    return float(coef[0]), float(coef[1]), float(np.mean(np.log(p_meas / model) ** 2))


def _pulse_shape(excerpts: list[ActivityBurst], watch: _Watch, mod: _Modulation) -> _PulseShape | None:
    """Rectangular or Gaussian pulse (and its BT), from how fast the bursts' spectrum falls.

    Beyond Carson's bandwidth (shift + 2·baud; Carson, Proc. IRE 10, 1922)
    the spectrum of CPFSK with a rectangular pulse falls slowly (as f⁻⁴, the
    phase has corners), a Gaussian pulse's far faster and the sooner the
    smaller its BT. The averaged periodogram of the burst excerpts is fitted,
    bin by bin with relative errors, by ``a·S(f) + n·N(f)`` for each
    candidate spectrum S (:func:`_cpfsk_spectrum` at the measured h and baud:
    rect, and Gaussian with each of ``PULSE_BTS``), N the white noise floor;
    both pass through the tuner's filter and its aliases, so the whole
    decimated band counts, not only the filter's flat part. The Gaussian
    candidate with the smallest mean squared log residual is called when that
    residual is below ``_GAUSSIAN_MARGIN`` times the rectangle's, otherwise
    the rectangle (the plainer pulse, on a near tie). Also measured: the share of the
    signal's power beyond Carson's bandwidth within that band, noise removed,
    dB. None when the bursts are too short or too few for a spectrum.
    """
    rate, baud = watch.rate_hz, mod.baud
    h = (mod.tone_high_hz - mod.tone_low_hz) / baud
    if not (0.1 < h < 20 and rate > 3 * baud):
        return None
    got = _burst_spectrum(excerpts, rate, baud, watch.detector.frame_len)
    if got is None:
        return None
    freqs, p_meas = got
    centre = (mod.tone_low_hz + mod.tone_high_hz) / 2
    use = (np.abs(freqs) <= 0.48 * rate) & (p_meas > 0)
    freqs, p_meas = freqs[use], p_meas[use]
    gain = _tuner_gain(watch.tuner, freqs)
    k0 = gain.shape[0] // 2
    aliases = (np.arange(gain.shape[0]) - k0)[:, None] * rate
    noise = gain.sum(axis=0)
    h_key = round(h, 3)
    candidates = [("rect", None)] + [("gaussian", bt) for bt in PULSE_BTS]
    fits = []
    for pulse, bt in candidates:
        f_theory, s_theory = _cpfsk_spectrum(h_key, pulse, 0.5 if bt is None else bt)
        at = (freqs[None, :] + aliases - centre) / baud
        shape = np.sum(gain * np.interp(at, f_theory, s_theory, left=0.0, right=0.0), axis=0)
        fits.append(_fit_shape(p_meas, shape, noise))
    best = 1 + int(np.argmin([f[2] for f in fits[1:]]))
    if not fits[best][2] <= _GAUSSIAN_MARGIN * fits[0][2]:
        best = 0
    pulse, bt = candidates[best]
    # the share beyond Carson's bandwidth, where the filter keeps at least half the power
    flat = gain[k0] >= 0.5
    sig = (p_meas - fits[best][1] * noise)[flat] / gain[k0][flat]
    off = np.abs(freqs[flat] - centre)
    total, beyond = float(np.sum(sig)), float(np.sum(sig[off > (h / 2 + 1) * baud]))
    share = 10 * math.log10(beyond / total) if total > 0 and beyond > 0 else None
    return _PulseShape(pulse, bt, share)


# --------------------------------------------------------------------------- framing from demodulated bursts


@lru_cache(maxsize=None)
def _table_array(spec: CrcSpec) -> np.ndarray:
    return np.array(crc_table(spec), dtype=np.int64)


def _crc_hits(bits: np.ndarray, starts: np.ndarray, max_bytes: int, *, whitening: str = "none",
              bit_order: str = "msb") -> list[tuple[int, int, str, int, str]]:
    """Every (start, n_bytes, CRC name, first byte, CRC byte order) where the CRC of the bytes from `start`
    equals the bytes that follow, read big- or little-endian.

    The bytes from each start are read in `bit_order` and, with ``whitening =
    "pn9"``, de-whitened from that start on (whitening begins right after
    the sync word, which is where the CRC's coverage begins). All starts are
    computed together, one byte step at a time, with the CRC register of
    :mod:`iqdemod.crc`.
    """
    bits = np.asarray(bits, dtype=np.uint8)
    starts = starts[starts + 8 + 8 <= len(bits)]
    if starts.size == 0:
        return []
    n_bytes = min(max_bytes, (len(bits) - int(starts.min())) // 8)
    widest = max(spec.width for spec in CRC_CATALOGUE.values()) // 8
    total = n_bytes + widest
    padded = np.concatenate([bits, np.zeros(8 * total + 64, np.uint8)])
    rows = padded[starts[:, None] + np.arange(8 * total)[None, :]]
    if whitening != "none":
        rows = rows ^ bytes_to_bits(whiten(bytes(total), whitening), bit_order)[None, :]
    order = "big" if bit_order == "msb" else "little"
    data = np.packbits(rows.reshape(len(starts), total, 8), axis=2, bitorder=order)[:, :, 0].astype(np.int64)
    hits = []
    for spec in CRC_CATALOGUE.values():
        w = spec.width
        if w < 8:
            continue
        table = _table_array(spec)
        wb = w // 8
        sent = np.zeros((len(starts), total - wb + 1), dtype=np.int64)  # big-endian value from each byte on
        sent_le = np.zeros_like(sent)  # and little-endian
        for j in range(wb):
            sent = (sent << 8) | data[:, j : j + total - wb + 1]
            sent_le |= data[:, j : j + total - wb + 1] << (8 * j)
        reg = np.full(len(starts), crc_init(spec), dtype=np.int64)
        for k in range(n_bytes):
            reg = crc_update(spec, reg, data[:, k], table)
            pos = starts + 8 * (k + 1)
            ok = pos + w <= len(bits)
            if not ok.any():
                break
            value = crc_final(spec, reg)
            for crc_order, table_sent in (("big", sent), ("little", sent_le)):
                match = ok & (table_sent[:, k + 1] == value)
                for i in np.flatnonzero(match):
                    hits.append((int(starts[i]), k + 1, spec.name, int(data[i, 0]), crc_order))
    return hits


def _preamble(bits: np.ndarray) -> tuple[int, int] | None:
    """(first bit, first bit after) of the longest alternating run that starts in the first half of a burst."""
    if len(bits) < MIN_PREAMBLE_BITS + 8:
        return None
    alt = np.concatenate([[0], (bits[1:] != bits[:-1]).astype(np.int8), [0]])
    edges = np.flatnonzero(np.diff(alt))
    best = None
    for a, b in zip(edges[::2], edges[1::2]):
        start, end = a, b + 1  # bits a..b alternate
        if start > len(bits) // 2:
            break
        if end - start >= MIN_PREAMBLE_BITS and (best is None or end - start > best[1] - best[0]):
            best = (int(start), int(end))
    return best


@dataclass(frozen=True)
class _Layout:
    sync_word: int | None = None
    sync_bits: int | None = None
    preamble_bits: int | None = None
    length: int | str | None = None
    crc: str | None = None
    frames_crc_ok: int = 0
    coding: str = "nrz"
    whitening: str = "none"
    length_counts: str = "payload"
    bit_order: str = "msb"
    crc_order: str = "big"


def _majority(rows: list[np.ndarray]) -> np.ndarray:
    return (np.mean(np.vstack(rows), axis=0) >= 0.5).astype(np.uint8)


def _sync_from(burst_bits: list[np.ndarray], pre: list[tuple[int, int]], ends: list[int]) -> tuple[int, int, int]:
    """(sync word, its bits, preamble bits) for sync words ending at `ends`.

    32 bits, or as many as the preamble seen in most bursts leaves room for;
    each bit is the majority over the bursts that have room for it.
    """
    rooms = np.array([e - p[0] for e, p in zip(ends, pre)])
    n = int(max(1, min(MAX_SYNC_BITS, np.median(rooms))))
    rows = [b[e - n : e] for b, e, r in zip(burst_bits, ends, rooms) if r >= n]
    word = _bits_value(_majority(rows))
    preamble = int(np.median([e - n - p[0] for e, p, r in zip(ends, pre, rooms) if r >= n]))
    return word, n, preamble


def _bits_value(bits: np.ndarray) -> int:
    return int("".join("1" if b else "0" for b in bits), 2) if len(bits) else 0


def _common_bits(aligned: list[np.ndarray], *, agree: float = 0.9) -> int:
    """How many leading bits (nearly) every row shares: at least `agree` of them equal the majority."""
    limit = min(len(a) for a in aligned)
    rows = np.vstack([a[:limit] for a in aligned]).astype(float)
    ones = rows.mean(axis=0)
    bad = np.flatnonzero(np.maximum(ones, 1 - ones) < agree)
    return int(bad[0]) if bad.size else limit


def _crc_layout(usable: list[tuple[np.ndarray, tuple[int, int]]], common: int, *, raw: list[np.ndarray] | None = None,
                coding: str = "nrz", whitening: str = "none", bit_order: str = "msb") -> _Layout | None:
    """The CRC search (see the module notes); None when no layout checks on enough bursts.

    A layout must check on at least 30 % of the bursts, and on at least 2 (a
    CRC of 16 bits or more) or 3 (an 8-bit CRC, which a random start and
    length pass once in 256). A match must reach past the bits every burst
    shares, and the bursts it checks on must not all carry the same bits: a
    CRC that checks inside the sync word checks on every burst. (So frames
    that never change cannot be told apart from their sync word; the shared
    word then stands in.)

    `usable` holds the decoded bits (Manchester chips already paired) and
    `raw` the symbols as demodulated, on which the layout found is checked
    by the receiver's own :func:`~iqdemod.framing.find_frames`.
    """
    widths = {name: spec.width for name, spec in CRC_CATALOGUE.items()}
    votes: dict[tuple, dict[int, int]] = {}
    votes_len: dict[tuple, dict[int, int]] = {}  # bytes the CRC covers, per burst
    for i, (b, (p0, p1)) in enumerate(usable):
        # payload starts from 48 bits after the alternation back to where the sync word would have only
        # MIN_SYNC_BITS bits of its own (its first bit may continue the alternation: p1 - 1)
        starts = np.arange(max(p0 + MIN_SYNC_BITS, p1 - 1 + MIN_SYNC_BITS - 2), min(len(b), p1 + 48))
        for start, n_bytes, crc, first, crc_order in _crc_hits(
                b, starts, max_bytes=min(MAX_SEARCH_BYTES, (len(b) - p1) // 8), whitening=whitening,
                bit_order=bit_order):
            if start + 8 * n_bytes + widths[crc] <= p1 + common:
                continue
            rel = start - p1
            keys = [(rel, "fixed", n_bytes, crc, crc_order)]
            # a length byte counting the payload, the payload and the CRC, or the whole frame
            for counts, extra in (("payload", 0), ("payload+crc", widths[crc] // 8), ("frame", 1 + widths[crc] // 8)):
                if n_bytes >= 2 and first == n_bytes - 1 + extra:
                    keys.append((rel, "prefix8", counts, crc, crc_order))
            for key in keys:
                votes.setdefault(key, {})[i] = start
                votes_len.setdefault(key, {})[i] = n_bytes

    def enough(key: tuple) -> bool:
        floor = 2 if widths[key[3]] >= 16 else 3
        if len(votes[key]) < max(floor, math.ceil(0.3 * len(usable))):
            return False
        # bits that are the same in every burst (preamble, sync word) pass any CRC found in them every time
        crc = key[3]
        seen = set()
        for i, start in votes[key].items():
            b = usable[i][0]
            seen.add(b[start : start + 8 * votes_len[key][i] + widths[crc]].tobytes())
        return len(seen) >= 2

    ranked = [k for k in votes if enough(k)]
    if not ranked:
        return None
    # Ties: a CRC is linear, so a window ending where the frame ends but starting in the constant bits
    # before it (one byte longer per byte earlier) checks on every burst once in 2^width; and with a
    # zero initial register, a window one bit earlier passes when the sync word ends in a 0. The
    # shortest frame, then the latest start, is the frame.
    counts_rank = {"payload": 0, "payload+crc": 1, "frame": 2}
    key = max(ranked, key=lambda k: (len(votes[k]), widths[k[3]], -(k[2] if k[1] == "fixed" else 0), k[0],
                                     -counts_rank.get(k[2], 0), k[4] == "big"))
    _, kind, n_bytes, crc, crc_order = key
    members = sorted(votes[key])
    word, n, preamble = _sync_from([usable[i][0] for i in members], [usable[i][1] for i in members],
                                   [votes[key][i] for i in members])
    length = "prefix8" if kind == "prefix8" else n_bytes
    counts = n_bytes if kind == "prefix8" else "payload"
    spec = FrameSpec(sync_word=word, sync_bits=n, sync_tolerance=min(3, n // 8), length=length, crc=crc,
                     coding=coding, whitening=whitening, length_counts=counts, bit_order=bit_order,
                     crc_order=crc_order)
    streams = raw if raw is not None else [b for b, _ in usable]
    good = sum(any(h.crc_ok for h in find_frames(b, spec)) for b in streams)
    return _Layout(word, n, preamble, length, crc, good, coding, whitening, counts, bit_order, crc_order)


def _alternations(bits: np.ndarray) -> int:
    return int(np.count_nonzero(bits[1:] != bits[:-1]))


def _shared_word(usable: list[tuple[np.ndarray, tuple[int, int]]]) -> tuple[int, int, list[int]] | None:
    """A word that (nearly) every burst carries just after its alternating preamble, without a CRC to go by.

    Each burst offers the 32 (then 24, then 16) bits after its alternation as
    a candidate; a candidate counts the bursts that carry it, within 3 bit
    errors, near the end of their own alternation (±8 bits, so a bit error
    in a preamble does not throw the alignment). The best candidate carried
    by 60 % of the bursts wins; a candidate that is itself mostly alternating
    (more preamble than word) is never taken. The first bits of a sync word
    may continue the alternation; the window is then slid back over them while
    that makes the match better (payload bits, which differ between bursts,
    leave its end), so that it ends where the shared bits end.

    Returns
    -------
    (length, word, end of the word in each burst carrying it, -1 elsewhere), or None.
    """
    need = max(2, math.ceil(0.6 * len(usable)))
    for n in (MAX_SYNC_BITS, 24, 16):
        windows = []
        for b, (_, p1) in usable:
            lo, hi = max(0, p1 - 16), min(len(b) - n, p1 + 8)
            windows.append((lo, sliding_window_view(b[: hi + n], n)[lo : hi + 1] if hi >= lo else None))

        def score(cand: np.ndarray) -> tuple[int, int, list[int]]:
            ends, total = [], 0
            for lo, win in windows:
                if win is None:
                    ends.append(-1)
                    continue
                dist = np.count_nonzero(win != cand, axis=1)
                k = int(np.argmin(dist))
                ends.append(lo + k + n if dist[k] <= 3 else -1)
                total += int(dist[k]) if dist[k] <= 3 else 0
            return sum(e >= 0 for e in ends), total, ends

        best = None
        for b, (p0, p1) in usable:
            if p1 + n > len(b) or _alternations(b[p1 : p1 + n]) > 0.75 * (n - 1):
                continue
            count, total, ends = score(b[p1 : p1 + n])
            if count < need:
                continue
            for back in range(1, 9):  # slide back over sync bits that continue the alternation
                if p1 - back < p0:
                    break
                c2, t2, e2 = score(b[p1 - back : p1 - back + n])
                if c2 < count or c2 == count and t2 >= total:
                    break
                count, total, ends = c2, t2, e2
            if best is None or (count, -total) > (best[0], -best[1]):
                best = (count, total, ends)
        if best is not None:
            ends = best[2]
            rows = [usable[i][0][e - n : e] for i, e in enumerate(ends) if e >= 0]
            return n, _bits_value(_majority(rows)), ends
    return None


MAX_INVALID_PAIRS = 0.2  # Manchester chip pairs that are no symbol, most in a burst of Manchester chips
WHITENINGS_TRIED = ("none", "pn9")
BIT_ORDERS_TRIED = ("msb", "lsb")


def _manchester_pairs(chips: np.ndarray, pre: tuple[int, int], coding: str
                      ) -> tuple[np.ndarray, tuple[int, int], float]:
    """A burst's chips paired into bits, from the pairing that leaves fewest invalid pairs after the preamble.

    Returns the bits, the preamble in bits, and the share of invalid pairs
    after the preamble (near 0 for Manchester chips, about ½ for NRZ bits).
    """
    best = None
    for phase in (0, 1):
        bits, invalid = manchester_decode(chips[phase:], coding)
        after = invalid[max(0, (pre[1] - phase) // 2) :]
        share = float(np.mean(after)) if after.size else 1.0
        if best is None or share < best[2]:
            best = (bits, ((pre[0] - phase + 1) // 2, (pre[1] - phase) // 2), share)
    return best


_Streams = list[tuple[np.ndarray, tuple[int, int]]]  # decoded bits of each burst, with its preamble (first, after)


def _candidate_streams(burst_bits: list[np.ndarray]) -> list[tuple[str, list[np.ndarray], _Streams]]:
    """(coding, the bursts' symbols, the decoded bits with their preambles) for each coding worth trying."""
    raw = [(b, _preamble(b)) for b in burst_bits]
    raw = [(b, p) for b, p in raw if p is not None]
    out = [("nrz", [b for b, _ in raw], raw)]
    if not raw:
        return out
    # Manchester chips pair into valid symbols after the preamble, NRZ bits into about half invalid ones;
    # both conventions read the same pairs (as complementary bits), so the CRC decides between them.
    ieee = [_manchester_pairs(b, p, "manchester") for b, p in raw]
    if np.median([share for _, _, share in ieee]) <= MAX_INVALID_PAIRS:
        for coding in ("manchester", "manchester-inverted"):
            decoded = [((bits if coding == "manchester" else 1 - bits).astype(np.uint8), pre)
                       for bits, pre, _ in ieee]
            out.append((coding, [b for b, _ in raw], decoded))
    return out


def _frame_layout(burst_bits: list[np.ndarray]) -> _Layout:
    """Sync word, length, CRC, coding and whitening from a few demodulated bursts (see the module notes).

    Every coding the bursts could carry (NRZ; Manchester in both conventions
    when the chips pair into valid symbols) and every whitening is tried; the
    layout whose frames check on most bursts wins, the plainer one on a tie.
    """
    best: _Layout | None = None
    fallback: tuple[str, list[np.ndarray], list] | None = None
    for coding, raw, usable in _candidate_streams(burst_bits):
        if len(usable) < 2:
            continue
        if fallback is None or coding == "manchester":
            fallback = (coding, raw, usable)
        # The bits after the alternation that every burst shares: sync word (and any fixed header).
        common = _common_bits([b[p1:] for b, (_, p1) in usable])
        for whitening, bit_order in itertools.product(WHITENINGS_TRIED, BIT_ORDERS_TRIED):
            if best is not None and best.frames_crc_ok == len(usable):
                break  # every burst checks: a less plain layout cannot do better
            found = _crc_layout(usable, common, raw=raw, coding=coding, whitening=whitening, bit_order=bit_order)
            if found is not None and (best is None or found.frames_crc_ok > best.frames_crc_ok):
                best = found
    if best is not None:
        return _with_symbols(best)
    if fallback is None:
        return _Layout()
    # Without a CRC match the conventions cannot be told apart: IEEE 802.3 when the chips pair up.
    coding, raw, usable = fallback
    shared = _shared_word(usable)
    if shared is None:
        return _Layout()
    n, word, ends = shared
    carriers = [(b, p, e) for (b, p), e in zip(usable, ends) if e >= 0]
    preamble = int(np.median([e - n - p[0] for _, p, e in carriers]))
    tail = min(len(b) - e for b, _, e in carriers)
    # No CRC to bound the frame: the length is what the shortest burst holds after the sync word.
    return _with_symbols(_Layout(word, n, max(0, preamble), tail // 8 if tail >= 8 else None, None, 0, coding))


def _with_symbols(layout: _Layout) -> _Layout:
    """The preamble counted in symbols on the air (it is not coded: one symbol each, not one bit)."""
    if layout.coding == "nrz" or layout.preamble_bits is None:
        return layout
    return dataclasses.replace(layout, preamble_bits=2 * layout.preamble_bits)


def _demodulated_bits(capture: Capture, signal: SignalSpec, *, block_samples: int, progress: bool) -> list[np.ndarray]:
    """Hard bits of the first few bursts, from the project's receiver in raw mode (stops reading early)."""
    link = Link(signal=signal, frame=FrameSpec(sync_word=None, crc="none"))
    out = []
    gen = iter_bursts(capture, link, block_samples=block_samples, progress=progress)
    try:
        for burst in gen:
            if burst.piece == 0 and burst.n_symbols >= 4 * MIN_PREAMBLE_BITS:
                out.append(np.asarray(burst.bits, np.uint8))
                if len(out) >= MAX_EXCERPTS:
                    break
    finally:
        gen.close()
    return out


# --------------------------------------------------------------------------- the survey


def survey(
    capture: Capture,
    *,
    max_signals: int = 4,
    block_samples: int = DEFAULT_BLOCK_SAMPLES,
    nfft: int | None = None,
    framing: bool = True,
    progress: bool = False,
) -> SurveyResult:
    """Find and characterise the bursty binary-FSK signals of a capture.

    Parameters
    ----------
    capture : Capture
        From :func:`iqdemod.open_capture`; read several times, in blocks.
    max_signals : int
        Most signals reported (the strongest).
    block_samples : int
        Samples read per block (the results do not depend on it).
    nfft : int, optional
        FFT size of the spectrum; default the power of two nearest fs / 150 Hz.
    framing : bool
        Also demodulate a few bursts of each signal and look for the sync
        word, the length and the CRC.
    progress : bool
        Show tqdm bars (stderr) over each pass.

    Returns
    -------
    SurveyResult

    Raises
    ------
    CaptureError
        When the capture is shorter than one FFT.
    IqdemodError
        For a bad `max_signals`.
    """
    if isinstance(max_signals, bool) or not isinstance(max_signals, int) or max_signals < 1:
        raise IqdemodError(f"max_signals {max_signals!r}: must be a whole number >= 1")
    info = capture.info
    fs = info.sample_rate_hz
    plan = plan_spectrum(fs, nfft=nfft)
    state = plan.initial_state()
    bar = _progress(capture, progress, "survey: spectrum")
    try:
        for block in capture.blocks(block_samples):
            state = spectrum_update(block, plan, state)
            if bar is not None:
                bar.update(len(block))
    finally:
        if bar is not None:
            bar.close()
    spec = _finish_spectrum(plan, state)
    bands = _find_bands(spec)[: max(12, 3 * max_signals)]  # pieces of one spectrum count separately
    signals: list[SignalFound] = []
    if bands:
        watches = [_watch(fs, b.low_hz, b.high_hz, spec, b.excess_db) for b in bands]
        acts = _watch_bands(capture, watches, block_samples=block_samples, progress=progress,
                            desc="survey: bursts")
        groups = _group_bands(acts)
        strength = {id(g): max(bands[i].excess_db for i in g) for g in groups}
        groups.sort(key=lambda g: -strength[id(g)])
        merged = [g for g in groups if len(g) > 1]
        whole: dict[int, _Activity] = {}
        if merged:
            wide = [_watch(fs, min(acts[i].watch.low_hz for i in g), max(acts[i].watch.high_hz for i in g), spec)
                    for g in merged]
            again = _watch_bands(capture, wide, block_samples=block_samples, progress=progress,
                                 desc="survey: bursts (joined bands)")
            whole = {id(g): a for g, a in zip(merged, again)}
        for g in groups:
            act = whole.get(id(g), acts[g[0]])
            w = act.watch
            # a weaker band inside a signal already found is a piece of its spectrum
            if any(s.band_low_hz - s.baud <= (w.low_hz + w.high_hz) / 2 <= s.band_high_hz + s.baud for s in signals):
                continue
            found = _characterise(capture, act, fs, block_samples=block_samples, framing=framing, progress=progress)
            if found is not None:
                signals.append(found)
    signals = _distinct(signals)
    signals.sort(key=lambda s: -(s.power_db if math.isfinite(s.power_db) else -math.inf))
    return SurveyResult(
        capture=Path(info.path).name,
        sample_rate_hz=fs,
        duration_s=info.duration_s,
        centre_hz=info.centre_hz,
        signals=tuple(signals[:max_signals]),
        fft_size=plan.nfft,
        spectrum_hz=spec.freqs_hz,
        spectrum_db=_db(spec.mean),
        peak_db=_db(spec.peaks[0]),
    )


def _distinct(signals: list[SignalFound]) -> list[SignalFound]:
    """Drop a signal found twice (two bands of one transmitter not joined): keep the one seen with more bursts."""
    out: list[SignalFound] = []
    for s in sorted(signals, key=lambda s: (-s.bursts, -s.power_db)):
        if any(abs(s.offset_hz - o.offset_hz) < 0.5 * o.shift_hz and abs(s.baud / o.baud - 1) < 0.05 for o in out):
            continue
        out.append(s)
    return out


def _characterise(capture: Capture, act: _Activity, fs: float, *, block_samples: int, framing: bool,
                  progress: bool) -> SignalFound | None:
    w = act.watch
    if not act.excerpts:
        return None
    half_band = (w.high_hz - w.low_hz) / 2
    mod = _modulation(act.excerpts, w.rate_hz, half_band, w.detector.frame_len)
    if mod is None or mod.eye < MIN_EYE:  # not two tones keyed at that rate: a piece of something else
        return None
    centre = w.tuner.offset_hz
    lo, hi = centre + mod.tone_low_hz, centre + mod.tone_high_hz
    offset = (lo + hi) / 2
    durations = [(b - a) / fs for a, b in act.intervals]
    ebn0, power = _ebn0_and_power(act.excerpts, w, act.floor, mod.baud)
    shape = _pulse_shape(act.excerpts, w, mod)
    first = act.excerpts[0]
    example = Excerpt(first.samples.copy(), w.rate_hz, centre, max(0.0, w.input_sample(first.start)) / fs)
    layout = _Layout()
    checked = 0
    if framing:
        try:
            sig = SignalSpec(baud=mod.baud, shift_hz=hi - lo, offset_hz=offset,
                             **(_pulse_options(shape.pulse, shape.bt) if shape else {}))
            Link(signal=sig).check_rate(fs)
        except IqdemodError:
            sig = None
        if sig is not None:
            bits = _demodulated_bits(capture, sig, block_samples=block_samples, progress=progress)
            checked = len(bits)
            layout = _frame_layout(bits)
    return SignalFound(
        offset_hz=float(offset),
        tone_low_hz=float(lo),
        tone_high_hz=float(hi),
        baud=float(mod.baud),
        bursts=len(act.intervals),
        burst_lengths_s=BurstLengths.of(durations),
        ebn0_db=float(ebn0),
        power_db=float(power),
        band_low_hz=float(w.low_hz),
        band_high_hz=float(w.high_hz),
        sync_guess=None if layout.sync_word is None else f"{layout.sync_word:#0{2 + (layout.sync_bits + 3) // 4}x}",
        sync_bits=layout.sync_bits,
        preamble_bits=layout.preamble_bits,
        length=layout.length,
        crc=layout.crc,
        bursts_checked=checked,
        frames_crc_ok=layout.frames_crc_ok,
        example=example,
        coding=layout.coding,
        whitening=layout.whitening,
        length_counts=layout.length_counts,
        bit_order=layout.bit_order,
        crc_order=layout.crc_order,
        pulse=None if shape is None else shape.pulse,
        bt=None if shape is None else shape.bt,
        beyond_carson_db=None if shape is None else shape.beyond_carson_db,
    )


# --------------------------------------------------------------------------- the picture


def require_plotting() -> None:
    """Check that matplotlib is there (see :func:`iqdemod.plots.require_matplotlib`)."""
    from .plots import require_matplotlib

    require_matplotlib()


def plot_survey(result: SurveyResult, path: str | os.PathLike) -> None:
    """Write a PNG: the averaged spectrum with the signals marked, and a waterfall of one burst.

    The file is written atomically (a temporary name in the same folder, then
    renamed). Needs matplotlib (the ``plot`` extra).

    Raises
    ------
    IqdemodError
        When matplotlib is not installed.
    """
    from .plots import new_figure, save_figure

    fig = new_figure(figsize=(10, 7.5), layout="constrained")
    top, bottom = fig.subplots(2, 1, height_ratios=(1, 1.2))
    khz = result.spectrum_hz / 1e3
    if len(khz):
        top.plot(khz, result.peak_db, color="0.75", lw=0.7, label="peak hold (short averages)")
        top.plot(khz, result.spectrum_db, color="C0", lw=0.8, label="averaged (Welch)")
    for i, s in enumerate(result.signals):
        top.axvspan(s.band_low_hz / 1e3, s.band_high_hz / 1e3, color=f"C{i + 1}", alpha=0.15)
        for tone in (s.tone_low_hz, s.tone_high_hz):
            top.axvline(tone / 1e3, color=f"C{i + 1}", lw=0.8, ls="--")
        top.annotate(f"#{i + 1} {s.baud:.0f} Bd, h={s.h:.2f}", (s.offset_hz / 1e3, 1.0),
                     xycoords=("data", "axes fraction"), ha="center", va="bottom", fontsize=8, color=f"C{i + 1}")
    top.set_xlabel("frequency relative to the capture centre (kHz)")
    top.set_ylabel("PSD (dBFS/Hz)")
    top.set_title(f"{result.capture}: {result.sample_rate_hz / 1e3:g} kS/s, {result.duration_s:.3g} s, "
                  f"{len(result.signals)} signal(s)", fontsize=10, pad=14)
    top.legend(loc="upper left", fontsize=8, framealpha=0.9)
    top.grid(alpha=0.3)
    example = next((s for s in result.signals if s.example is not None), None)
    if example is None:
        bottom.text(0.5, 0.5, "no burst found", ha="center", va="center", transform=bottom.transAxes)
        bottom.set_axis_off()
    else:
        ex = example.example
        x = ex.samples.astype(np.complex128)
        # about four symbols per segment: both tones resolved, and the keying still visible in time
        nper = int(min(2048, max(16, 2 ** round(math.log2(max(16.0, 4 * ex.rate_hz / example.baud))))))
        nper = min(nper, max(16, len(x) // 4))
        f, t, sxx = _sig.spectrogram(x, fs=ex.rate_hz, window="hann", nperseg=nper, noverlap=nper * 7 // 8,
                                     nfft=4 * nper, return_onesided=False, mode="psd")
        f = np.fft.fftshift(f)
        sxx = np.fft.fftshift(sxx, axes=0)
        img = 10 * np.log10(np.maximum(sxx, 1e-30))
        vmax = float(np.max(img))
        mesh = bottom.pcolormesh((ex.centre_hz + f) / 1e3, (ex.t_s + t) * 1e3, img.T, shading="auto",
                                 vmin=vmax - 50, vmax=vmax, cmap="viridis")
        for tone in (example.tone_low_hz, example.tone_high_hz):
            bottom.axvline(tone / 1e3, color="w", lw=0.6, ls="--")
        span = example.band_high_hz - example.band_low_hz
        fs2 = result.sample_rate_hz / 2
        bottom.set_xlim(max(ex.centre_hz - ex.rate_hz / 2, example.band_low_hz - span / 2, -fs2) / 1e3,
                        min(ex.centre_hz + ex.rate_hz / 2, example.band_high_hz + span / 2, fs2) / 1e3)
        fig.colorbar(mesh, ax=bottom, label="dB/Hz")
        bottom.set_xlabel("frequency relative to the capture centre (kHz)")
        bottom.set_ylabel("time (ms)")
        sync = f", sync {example.sync_guess}" if example.sync_guess else ""
        bottom.set_title(f"one burst of signal #{result.signals.index(example) + 1}: offset "
                         f"{example.offset_hz / 1e3:.3f} kHz, {example.baud:.0f} Bd, "
                         f"shift {example.shift_hz:.0f} Hz{sync}", fontsize=10)
    save_figure(fig, path)
