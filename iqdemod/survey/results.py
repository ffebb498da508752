"""What the survey hands back: the signals it found, and the link profile each one turns into."""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np

from ..crc import CRC_CATALOGUE
from ..errors import IqdemodError
from ..link import MAX_BT, MAX_SYNC_BITS, MIN_BT, PULSES, CaptureFormat, FrameSpec, Link, SignalSpec, sync_label

__all__ = ["BurstLengths", "Excerpt", "SignalFound", "SurveyResult", "sync_label", "pulse_options"]


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
        """The summary of a list of durations (seconds).

        Examples
        --------
        >>> BurstLengths.of([0.02, 0.01, 0.03])
        BurstLengths(n=3, min=0.01, median=0.02, max=0.03)
        """
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
    """One FSK signal found by :func:`~iqdemod.survey.survey`.

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
    level_dbfs : float
        Signal power while on, dB re full scale (the name the decoder's frames use).
    band_low_hz, band_high_hz : float
        Where the signal was seen in the spectrum, relative to the capture centre.
    sync_word : str or None
        The sync word as hex (bit 1 = upper tone, MSB first), or None; the
        link profile's key and form (:func:`sync_label` shows it in text).
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
        With Manchester, `baud` is the chip rate and `sync_word` is in bits.
    bursts_checked, frames_crc_ok : int
        Bursts demodulated for the framing search, and how many of them carry a
        frame with a good CRC under the layout found.
    pulse : {"rect", "gaussian"} or None
        The frequency pulse the bursts' spectrum fits best (see
        :func:`~iqdemod.survey.pulse.pulse_shape`); None when the bursts were
        too short or too few to measure a spectrum.
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
    level_dbfs: float
    band_low_hz: float
    band_high_hz: float
    sync_word: str | None = None
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
        if (self.sync_word is None) != (self.sync_bits is None):
            raise IqdemodError(
                f"sync word {self.sync_word!r} with sync_bits {self.sync_bits!r}: give both or neither"
            )
        if self.sync_bits is not None and not 1 <= self.sync_bits <= MAX_SYNC_BITS:
            raise IqdemodError(f"sync_bits {self.sync_bits}: must be within 1–{MAX_SYNC_BITS}")
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

    @property
    def sync_text(self) -> str | None:
        """The sync word as text shows it, "0x9B3C57E1 (32 bits)" (see :func:`sync_label`), or None."""
        return None if self.sync_word is None else sync_label(self.sync_word, int(self.sync_bits))

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
            Bit errors accepted in the sync word; default the link's own
            (:func:`iqdemod.link.default_sync_tolerance`).
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

        Examples
        --------
        >>> s = SignalFound(offset_hz=40e3, tone_low_hz=35.2e3, tone_high_hz=44.8e3, baud=9600.0, bursts=10,
        ...                 burst_lengths_s=BurstLengths.of([0.04]), ebn0_db=16.0, level_dbfs=-20.0,
        ...                 band_low_hz=25e3, band_high_hz=55e3, sync_word="0x9b3c57e1", sync_bits=32,
        ...                 length=24, crc="CRC-16/IBM-3740")
        >>> link = s.to_link()
        >>> (link.signal.baud, link.signal.shift_hz, hex(link.frame.sync_word), link.frame.sync_tolerance)
        (9600.0, 9600.0, '0x9b3c57e1', 3)
        """
        # to a precision well below what the survey measures (a baud to 0.001 Bd, frequencies to 0.1 Hz),
        # so that the written profile reads as figures, not as floating-point noise
        sig = SignalSpec(baud=round(float(self.baud), 3), shift_hz=round(float(self.shift_hz), 1),
                         offset_hz=round(float(self.offset_hz), 1),
                         **pulse_options(self.pulse, self.bt))
        if self.sync_word is None or self.length is None:
            frame = FrameSpec(sync_word=None, crc="none")
        else:
            bits = int(self.sync_bits)
            tol = None if sync_tolerance is None else int(sync_tolerance)
            frame = FrameSpec(sync_word=int(self.sync_word, 16), sync_bits=bits, sync_tolerance=tol,
                              length=self.length, crc=self.crc or "none", coding=self.coding,
                              whitening=self.whitening, bit_order=self.bit_order, crc_order=self.crc_order,
                              length_counts=self.length_counts if self.length == "prefix8" else "payload")
        return Link(signal=sig, frame=frame, capture=capture or CaptureFormat())


def pulse_options(pulse: str | None, bt: float | None) -> dict:
    """SignalSpec keywords for a pulse found (none for rect or unknown: the link's default).

    Examples
    --------
    >>> pulse_options("gaussian", 0.5), pulse_options("rect", None)
    ({'pulse': 'gaussian', 'bt': 0.5}, {})
    """
    return {"pulse": "gaussian", "bt": float(bt)} if pulse == "gaussian" else {}


@dataclass(frozen=True, eq=False)
class SurveyResult:
    """What :func:`~iqdemod.survey.survey` found in a capture.

    Attributes
    ----------
    capture : str
        The capture's name.
    sample_rate_hz : float
    duration_s : float
    centre_hz : float or None
        The capture's centre frequency, when its metadata gives one.
    signals : tuple of SignalFound
        Strongest (highest level while on) first.
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
