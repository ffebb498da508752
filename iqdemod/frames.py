"""What the receiver hands out: a demodulated transmission (:class:`Burst`) and its frames (:class:`Frame`).

A :class:`Frame` is one sync word found, with its payload, CRC verdict and the
figures an operator reads (Eb/N0, level, frequency, clock, time);
:meth:`Frame.as_record` is the ``decode`` output contract (JSON Lines). A
:class:`Burst` keeps the two decision statistics of every symbol for the
link-health stage.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .estimate import EbN0Estimate
from .framing import bits_to_bytes

__all__ = ["Frame", "Burst"]


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
    link : str or None
        The name of the link that found it, when several links are decoded in one pass.
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
    link: str | None = None

    @property
    def raw(self) -> bool:
        return self.bits is not None

    def as_record(self) -> dict:
        """The JSON Lines record of this frame (the decode output contract)."""
        ebn0 = None if self.ebn0_db is None or not np.isfinite(self.ebn0_db) else round(float(self.ebn0_db), 2)
        rec = {"capture": self.capture, "t_s": round(self.t_s, 7), "sample": self.sample, "burst": self.burst}
        if self.link is not None:
            rec["link"] = self.link
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
    link : str or None
        The name of the link that found it, when several links are decoded in
        one pass (as its frames' ``link``).
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
    link: str | None = None
