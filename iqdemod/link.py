"""The link description: what is on the air and how frames are laid out.

A link comes from a TOML *link profile* and/or keyword overrides (the command
line's flags), read by :mod:`iqdemod.profile`. The profile has three tables::

    [capture]                 # only needed for raw files without metadata
    datatype = "cu8"
    sample_rate = 1024000
    [signal]
    offset_hz = 137000        # signal centre relative to the capture centre
    # frequency_hz = 434057000  # or absolute, when the capture centre is known
    baud = 9600
    shift_hz = 9600           # upper tone minus lower tone; bit 1 = upper tone
    invert = false            # true: bit 1 = lower tone
    [frame]
    sync_word = "0x9B3C57E1"
    sync_bits = 32
    sync_tolerance = 3
    length = 24               # payload bytes, or "prefix8"
    crc = "CRC-16/IBM-3740"
    # coding = "nrz"          # or "manchester", "manchester-inverted" (baud = chip rate)
    # whitening = "none"      # or "pn9"
    # bit_order = "msb"       # crc_order = "big"; length_counts = "payload"; length_offset = 0

Everything here is validated when it is built (``__post_init__``); checks that
need the capture's sample rate are in :meth:`Link.check_rate`.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .coding import BIT_ORDERS, CODINGS, WHITENINGS, symbols_per_bit
from .capture import MAX_SAMPLE_RATE_HZ
from .crc import crc_spec
from .errors import CaptureError, LinkError, quote

__all__ = ["CaptureFormat", "SignalSpec", "FrameSpec", "Link", "sync_label", "default_sync_tolerance"]

MAX_LENGTH_BYTES = 4096
PULSES = ("rect", "gaussian")
DETECTORS = ("per-symbol", "multi-symbol")
MIN_BT, MAX_BT = 0.1, 2.0
MAX_SYNC_BITS = 64
CRC_ORDERS = ("big", "little")
LENGTH_COUNTS = ("payload", "payload+crc", "frame")
# Frequencies (baud, shift, offset, pull-in, absolute centre) beyond this are refused, Hz: far
# above any radio carrier, and it keeps every product of them finite.
MAX_FREQUENCY_HZ = 1e12
# A link profile is a few hundred bytes; beyond this it is refused unread.
MAX_PROFILE_BYTES = 1 << 20
MAX_SIGNALS = 64  # links decoded in one pass from one profile
# The correlators need at least this many capture samples per symbol (the tuner decimates to
# about 8 samples per symbol and cannot add samples the capture does not have).
MIN_SAMPLES_PER_SYMBOL = 8
# The largest buffer one burst may need (complex64 samples of the longest burst piece at the
# decimated rate). A plan that would need more is refused before anything is allocated.
BURST_BUFFER_BUDGET_BYTES = 256 << 20
# The longest channel filter allowed, taps. The front end's FFT blocks hold 8 × taps samples
# (complex64, a few copies at a time), so this keeps them near 256 MB.
MAX_FILTER_TAPS = 1_000_000


def finite_number(name: str, value: Any, *, limit: float = math.inf, unit: str = "") -> float:
    """`value` as a finite float within ±`limit`, or a LinkError naming `name` (and the value, cut short).

    Python and numpy numbers are accepted; a bool is not a number here.
    """
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise LinkError(f"{name} {quote(value)}: must be a number")
    try:
        x = float(value)
    except OverflowError:
        x = math.inf
    if not math.isfinite(x):
        raise LinkError(f"{name} {quote(value)}{' ' + unit if unit else ''}: must be finite")
    if abs(x) > limit:
        raise LinkError(f"{name} {x:g}: must be within ±{limit:g}")
    return x


def _number(name: str, value: Any, *, limit: float = MAX_FREQUENCY_HZ) -> float:
    return finite_number(name, value, limit=limit)


def _hex(word: int) -> str:
    """A sync word in hex, cut like :func:`quote` when it is long."""
    text = f"{word:#x}"
    return text if len(text) <= 80 else f"{text[:79]}… ({word.bit_length()} bits)"


def _integer(name: str, value: Any) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        if isinstance(value, float) and value.is_integer():
            return int(value)
        raise LinkError(f"{name} {quote(value)}: must be a whole number")
    return int(value)


#: A sync word's default tolerance lets random bits pass for it at fewer than this share of positions.
FALSE_SYNC_SHARE = 1e-3


def default_sync_tolerance(sync_bits: int) -> int:
    """Bit errors accepted in a sync word of `sync_bits` bits when the link does not say: the most,
    up to 3, for which random bits match the word at fewer than ``FALSE_SYNC_SHARE`` of positions.

    Random bits match an n-bit word with at most t errors with probability
    Σ_{k≤t} C(n, k)/2ⁿ: 1.3·10⁻⁶ for 32 bits and 3 errors, 2.6·10⁻⁴ for 16 bits
    and 1, but 2.1·10⁻³ for 16 bits and 2, a false sync word every ~500 bits
    of payload. Three errors in 32 bits is common practice.

    Examples
    --------
    >>> [default_sync_tolerance(n) for n in (8, 12, 16, 24, 32, 64)]
    [0, 0, 1, 3, 3, 3]
    """
    n = int(sync_bits)
    tol, matched = 0, 1
    while tol < min(3, n - 1):
        matched += math.comb(n, tol + 1)
        if matched / 2.0**n >= FALSE_SYNC_SHARE:
            break
        tol += 1
    return tol


@dataclass(frozen=True)
class CaptureFormat:
    """How to read a raw capture that has no metadata of its own.

    Attributes
    ----------
    datatype : str or None
        A SigMF ``core:datatype`` string such as ``"cu8"`` or ``"cf32_le"``.
    sample_rate : float or None
        Samples per second.
    """

    datatype: str | None = None
    sample_rate: float | None = None

    def __post_init__(self) -> None:
        if self.datatype is not None:
            from .capture import parse_datatype  # late: capture imports link's errors only

            try:
                parse_datatype(self.datatype)
            except CaptureError as exc:  # in a link description it is the link's bad value
                raise LinkError(str(exc)) from None
        if self.sample_rate is not None:
            rate = _number("sample rate", self.sample_rate, limit=float("inf"))
            if not 0 < rate <= MAX_SAMPLE_RATE_HZ:
                raise LinkError(f"sample rate {rate:g} Hz: must be > 0 and at most {MAX_SAMPLE_RATE_HZ:g}")
            object.__setattr__(self, "sample_rate", rate)


@dataclass(frozen=True)
class SignalSpec:
    """The FSK signal: where it is and how it is keyed.

    Attributes
    ----------
    baud : float
        Symbol rate, symbols per second (one bit per symbol).
    shift_hz : float
        Upper tone minus lower tone, Hz (> 0).
    offset_hz : float or None
        Signal centre relative to the capture centre, Hz (+ = above).
    frequency_hz : float or None
        Absolute signal centre, Hz; used with the capture's centre frequency.
    invert : bool
        False: bit 1 is the upper tone (mark). True: bit 1 is the lower tone.
    max_freq_error_hz : float or None
        How far the transmitter's carrier may be off, Hz; default shift/2.
    pulse : str
        The frequency pulse: "rect" (plain FSK) or "gaussian" (GFSK).
    bt : float
        Bandwidth–time product of the Gaussian pulse (used with pulse = "gaussian").
    detector : str or None
        "per-symbol" (the one-symbol correlator bank) or "multi-symbol"
        (phase-continuous hypotheses over a window of symbols); None takes the
        default: multi-symbol for a Gaussian pulse or a non-integer h,
        per-symbol for a rectangular pulse at integer h.
    detector_symbols : int
        The multi-symbol detector's window, symbols (odd, 3–7).
    """

    baud: float
    shift_hz: float
    offset_hz: float | None = None
    frequency_hz: float | None = None
    invert: bool = False
    max_freq_error_hz: float | None = None
    pulse: str = "rect"
    bt: float = 0.5
    detector: str | None = None
    detector_symbols: int = 5

    def __post_init__(self) -> None:
        baud = _number("baud", self.baud)
        if baud <= 0:
            raise LinkError(f"baud {self.baud:g}: must be > 0")
        shift = _number("shift_hz", self.shift_hz)  # the profile's key: a flag's value is checked by its flag
        if shift <= 0:
            raise LinkError(f"shift_hz {self.shift_hz:g} Hz: must be > 0 (upper tone minus lower tone)")
        object.__setattr__(self, "baud", baud)
        object.__setattr__(self, "shift_hz", shift)
        if self.offset_hz is not None:
            object.__setattr__(self, "offset_hz", _number("offset_hz", self.offset_hz))
        if self.frequency_hz is not None:
            freq = _number("frequency_hz", self.frequency_hz)
            if freq <= 0:
                raise LinkError(f"frequency_hz {freq:g} Hz: must be > 0")
            object.__setattr__(self, "frequency_hz", freq)
        if self.offset_hz is not None and self.frequency_hz is not None:
            raise LinkError("offset_hz and frequency_hz both given: give one of them")
        if not isinstance(self.invert, bool):
            raise LinkError(f"invert {quote(self.invert)}: must be true or false")
        if self.max_freq_error_hz is not None:
            err = _number("max_freq_error_hz", self.max_freq_error_hz)
            if err < 0:
                raise LinkError(f"max_freq_error_hz {err:g} Hz: must be >= 0")
            object.__setattr__(self, "max_freq_error_hz", err)
        if self.pulse not in PULSES:
            raise LinkError(f"pulse {quote(self.pulse)}: must be one of {', '.join(PULSES)}")
        bt = _number("bt", self.bt)
        if not MIN_BT <= bt <= MAX_BT:
            raise LinkError(f"bt {bt:g}: must be within {MIN_BT:g}–{MAX_BT:g} (Gaussian bandwidth × symbol time)")
        object.__setattr__(self, "bt", bt)
        if self.detector is not None and self.detector not in DETECTORS:
            raise LinkError(f"detector {quote(self.detector)}: must be one of {', '.join(DETECTORS)}")
        n = _integer("detector_symbols", self.detector_symbols)
        if n not in (3, 5, 7):
            raise LinkError(f"detector_symbols {n}: must be 3, 5 or 7 (an odd window; the middle symbol is decided)")
        object.__setattr__(self, "detector_symbols", n)

    @property
    def multi_symbol(self) -> bool:
        """Whether the multi-symbol detector decides (the setting, or the default for this pulse and h)."""
        if self.detector is not None:
            return self.detector == "multi-symbol"
        return self.pulse == "gaussian" or abs(self.h - round(self.h)) > 1e-6 or round(self.h) == 0

    @property
    def h(self) -> float:
        """Modulation index, shift × symbol time."""
        return self.shift_hz / self.baud

    @property
    def pull_in_hz(self) -> float:
        """Largest carrier error the receiver searches for, Hz."""
        return self.shift_hz / 2 if self.max_freq_error_hz is None else self.max_freq_error_hz

    def offset_for(self, centre_hz: float | None) -> float:
        """The signal centre relative to a capture centred on `centre_hz`, Hz."""
        if self.frequency_hz is not None:
            if centre_hz is None:
                raise LinkError(
                    f"frequency {self.frequency_hz:g} Hz given, but the capture has no centre "
                    "frequency: give offset_hz (--offset) instead"
                )
            return self.frequency_hz - centre_hz
        return 0.0 if self.offset_hz is None else self.offset_hz


@dataclass(frozen=True)
class FrameSpec:
    """Frame layout: sync word, payload length, CRC, and how they are coded on the air.

    Attributes
    ----------
    sync_word : int or None
        The sync word; None means raw mode (one record of hard bits per burst).
    sync_bits : int
        How many bits of `sync_word` are sent (1–64).
    sync_tolerance : int or None
        Bit errors accepted in the sync word (with Manchester, twice as many chip
        errors). None (the default): :func:`default_sync_tolerance` of `sync_bits`,
        3 for a 32-bit word, fewer for a short one.
    length : int or "prefix8"
        Payload bytes (1–4096), or "prefix8": the first byte after the sync word
        is the payload length, and the CRC covers that byte and the payload.
    crc : str
        A name from the CRC catalogue, or "none". Sent after the payload.
    coding : {"nrz", "manchester", "manchester-inverted"}
        Line coding of everything after the preamble (sync word, length,
        payload, CRC). Manchester: IEEE 802.3 (0 → chips 1,0; 1 → 0,1), or the
        inverse (G. E. Thomas); the signal's baud is then the chip rate.
    whitening : {"none", "pn9"}
        PN9 XORed over everything after the sync word (REFERENCE §9).
    bit_order : {"msb", "lsb"}
        Bit order of every byte after the sync word (the sync word is MSB first).
    crc_order : {"big", "little"}
        Byte order of the CRC value on the air.
    length_counts : {"payload", "payload+crc", "frame"}
        What a "prefix8" length byte counts ("frame": length byte, payload and CRC).
    length_offset : int
        Added to the counted bytes to give the length byte ("prefix8" only).
    """

    sync_word: int | None = None
    sync_bits: int = 32
    sync_tolerance: int | None = None
    length: int | str = 24
    crc: str = "CRC-16/IBM-3740"
    coding: str = "nrz"
    whitening: str = "none"
    bit_order: str = "msb"
    crc_order: str = "big"
    length_counts: str = "payload"
    length_offset: int = 0

    def __post_init__(self) -> None:
        bits = _integer("sync_bits", self.sync_bits)
        if not 1 <= bits <= MAX_SYNC_BITS:
            raise LinkError(f"sync_bits {bits}: must be within 1–{MAX_SYNC_BITS}")
        object.__setattr__(self, "sync_bits", bits)
        if self.sync_word is not None:
            word = _integer("sync_word", self.sync_word)
            if word < 0 or word >= 1 << bits:
                raise LinkError(f"sync word {_hex(word)}: does not fit in {bits} bits")
            object.__setattr__(self, "sync_word", word)
        tol = default_sync_tolerance(bits) if self.sync_tolerance is None else _integer("sync_tolerance",
                                                                                         self.sync_tolerance)
        if not 0 <= tol < bits:
            raise LinkError(f"sync_tolerance {tol}: must be within 0–{bits - 1}")
        object.__setattr__(self, "sync_tolerance", tol)
        if isinstance(self.length, str):
            if self.length != "prefix8":
                raise LinkError(f"length {quote(self.length)}: must be 1–{MAX_LENGTH_BYTES} or \"prefix8\"")
        else:
            n = _integer("length", self.length)
            if not 1 <= n <= MAX_LENGTH_BYTES:
                raise LinkError(f"length {quote(n)}: must be within 1–{MAX_LENGTH_BYTES} bytes or \"prefix8\"")
            object.__setattr__(self, "length", n)
        if not isinstance(self.crc, str) or len(self.crc) > 40:  # the catalogue's names are short
            raise LinkError(f"crc {quote(self.crc)}: must be a CRC catalogue name such as \"CRC-16/IBM-3740\", "
                            "or \"none\"")
        object.__setattr__(self, "crc", "none" if self.crc.lower() == "none" else crc_spec(self.crc).name)
        self._check_codings()

    def _check_codings(self) -> None:
        for key, allowed in (("coding", CODINGS), ("whitening", WHITENINGS), ("bit_order", BIT_ORDERS),
                             ("crc_order", CRC_ORDERS), ("length_counts", LENGTH_COUNTS)):
            value = getattr(self, key)
            text = value.strip().lower() if isinstance(value, str) else None
            if text not in allowed:
                raise LinkError(f"{key} {value!r}: must be one of " + ", ".join(f'"{a}"' for a in allowed))
            object.__setattr__(self, key, text)
        offset = _integer("length_offset", self.length_offset)
        if not -255 <= offset <= 255:
            raise LinkError(f"length_offset {offset}: must be within -255–255")
        object.__setattr__(self, "length_offset", offset)
        if self.length != "prefix8" and (self.length_counts != "payload" or offset != 0):
            raise LinkError(
                f"length_counts {self.length_counts!r} / length_offset {offset}: only for length = \"prefix8\" "
                "(a fixed length has no length byte)"
            )

    @property
    def raw(self) -> bool:
        """True when there is no sync word: hard bits per burst, no framing."""
        return self.sync_word is None

    @property
    def crc_bits(self) -> int:
        return 0 if self.crc == "none" else crc_spec(self.crc).width

    @property
    def symbols_per_bit(self) -> int:
        """Symbols on the air per bit: 1, or 2 chips with Manchester."""
        return symbols_per_bit(self.coding)

    @property
    def max_bits(self) -> int:
        """The longest frame, sync word included, in symbols on the air (bits, or Manchester chips)."""
        payload = 256 if self.length == "prefix8" else int(self.length)
        return (self.sync_bits + 8 * (payload + (self.length == "prefix8")) + self.crc_bits) * self.symbols_per_bit


@dataclass(frozen=True)
class Link:
    """A whole link description: capture format, signal and frame layout."""

    signal: SignalSpec
    frame: FrameSpec = field(default_factory=FrameSpec)
    capture: CaptureFormat = field(default_factory=CaptureFormat)

    def check_rate(self, sample_rate: float, centre_hz: float | None = None) -> float:
        """Check the signal fits a capture at `sample_rate`; return its offset, Hz.

        Raises
        ------
        LinkError
            When the baud is not below half the sample rate, or the tones (with
            the carrier pull-in) fall outside the captured band.
        """
        rate = float(sample_rate)
        if not rate > 0:
            raise LinkError(f"sample rate {rate:g} Hz: must be > 0")
        if rate > MAX_SAMPLE_RATE_HZ:
            raise LinkError(f"sample rate {rate:g} Hz: must be at most {MAX_SAMPLE_RATE_HZ:g} Hz")
        sig = self.signal
        if sig.baud >= rate / 2:
            raise LinkError(f"baud {sig.baud:g}: must be below half the sample rate ({rate / 2:g})")
        if rate / sig.baud < MIN_SAMPLES_PER_SYMBOL:
            raise LinkError(
                f"baud {sig.baud:g} at sample rate {rate:g} Hz: {rate / sig.baud:.3g} samples per symbol, the "
                f"receiver needs at least {MIN_SAMPLES_PER_SYMBOL} (a capture at {MIN_SAMPLES_PER_SYMBOL * sig.baud:g} "
                "Hz or more)"
            )
        _, taps = self._tuner_estimate(rate)
        if taps > MAX_FILTER_TAPS:
            raise LinkError(
                f"baud {sig.baud:g} with shift {sig.shift_hz:g} Hz at sample rate {rate:g} Hz: the tuner's filter "
                f"would need about {taps:.3g} taps, above the {MAX_FILTER_TAPS:.3g} allowed (so narrow a signal in "
                "so wide a capture: resample the capture first, or raise the baud)"
            )
        need = self.burst_buffer_bytes(rate)
        if need > BURST_BUFFER_BUDGET_BYTES:
            raise LinkError(
                f"baud {sig.baud:g} with shift {sig.shift_hz:g} Hz and carrier pull-in {sig.pull_in_hz:g} Hz at "
                f"sample rate {rate:g} Hz: one burst would need a {need / 2**20:.3g} MB buffer, above the "
                f"{BURST_BUFFER_BUDGET_BYTES >> 20} MB budget (the band to keep is too wide for so slow a symbol "
                "rate: lower the shift or --max-freq-error, or raise the baud)"
            )
        offset = sig.offset_for(centre_hz)
        edge = abs(offset) + sig.shift_hz / 2
        if edge >= rate / 2:
            raise LinkError(
                f"offset {offset:g} Hz with shift {sig.shift_hz:g} Hz: the tones reach {edge:g} Hz "
                f"from the centre, outside the captured band (±{rate / 2:g} Hz)"
            )
        return offset

    def _tuner_estimate(self, sample_rate: float) -> tuple[float, int]:
        """(decimated rate in Hz, filter taps) the receiver's front end will choose.

        Its own design rule (:func:`iqdemod.channel.channel_size`), which builds nothing.
        """
        from .channel import channel_size  # late: the front end imports this module

        decimation, taps, _, _, _ = channel_size(float(sample_rate), self.signal)
        return float(sample_rate) / decimation, int(taps)

    def burst_buffer_bytes(self, sample_rate: float) -> float:
        """Bytes of the buffer that holds the longest burst piece (complex64 at the decimated rate).

        An estimate from the tuner's design rule (see :meth:`_tuner_estimate`).
        """
        from .plan import MAX_BURST_SYMBOLS  # late: the plan imports this module

        decimated, _ = self._tuner_estimate(sample_rate)
        overlap = self.frame.max_bits + 64 if not self.frame.raw else 64
        symbols = max(MAX_BURST_SYMBOLS, 4 * overlap)
        return symbols * decimated / self.signal.baud * 8.0

    def replace(self, **overrides: Any) -> "Link":
        """A copy with flag-style overrides (see :func:`iqdemod.profile.load_link` for the names)."""
        from .profile import link_with  # late: the profile reader builds on this module

        return link_with(self.as_tables(), overrides)

    def as_tables(self) -> dict[str, dict[str, Any]]:
        """The link as the tables of a profile (the sync word as an integer)."""
        return {
            "capture": dataclasses.asdict(self.capture),
            "signal": dataclasses.asdict(self.signal),
            "frame": dataclasses.asdict(self.frame),
        }

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready form; the sync word as a hex string."""
        tables = self.as_tables()
        word = tables["frame"]["sync_word"]
        tables["frame"]["sync_word"] = None if word is None else f"{word:#x}"
        return tables


def sync_label(sync_word: int | str, bits: int) -> str:
    """A sync word as the project shows it in text: upper-case hex and its length.

    Parameters
    ----------
    sync_word : int or str
        The word, or its hex string (as in a link profile).
    bits : int
        Bits of the word that are sent.

    Returns
    -------
    str

    Examples
    --------
    >>> sync_label("0x9b3c57e1", 32)
    '0x9B3C57E1 (32 bits)'
    >>> sync_label(0x2D, 12)
    '0x02D (12 bits)'
    """
    word = int(sync_word, 16) if isinstance(sync_word, str) else int(sync_word)
    return f"0x{word:0{(bits + 3) // 4}X} ({bits} bits)"
