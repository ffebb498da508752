"""An independent binary-FSK test modulator: frames, CPFSK waveforms, whole captures, SigMF files.

This module exists so that tests of the receiver get their captures from a generator that cannot
share a bug with the project's own generator and framer. It therefore imports nothing from
``iqdemod`` and is written from the textbook definitions only:

- continuous-phase FSK / CPM, phase φ(t) = φ0 + 2π·h·Σ a_i·q(t − iT), with q the integral of the
  frequency pulse g and q(∞) = ½ (Anderson, Aulin & Sundberg, *Digital Phase Modulation*, 1986 —
  from memory; the same form is in Proakis, *Digital Communications*, the CPM section [book]);
- the Gaussian frequency pulse of GMSK/GFSK: the rectangular NRZ pulse convolved with a Gaussian
  of standard deviation σ = √(ln 2)/(2π·BT) symbols (Murota & Hirade, IEEE Trans. Commun. 29(7),
  1981 — from memory);
- the Eb/N0 definition of /work/shared/REFERENCE.md §8, the impairment models of §11 and the frame
  codings of §9;
- CRCs from the stdlib (``binascii.crc_hqx``, ``zlib.crc32``), named as in the CRC catalogue (§5);
- SigMF v1.2 metadata (§6).

Only numpy and the stdlib are needed. No radio framework needed.
"""

from __future__ import annotations

import binascii
import datetime as _dt
import json
import math
import zlib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

__all__ = [
    "CRCS",
    "pn9",
    "manchester",
    "crc_bytes",
    "frame_bits",
    "cpfsk",
    "Tx",
    "Neighbour",
    "amplitude_for_ebn0",
    "iq_imbalance",
    "render",
    "write_sigmf",
]

# name -> (width in bytes, function of the covered bytes). Names as in the CRC catalogue.
CRCS = {
    "CRC-16/IBM-3740": (2, lambda d: binascii.crc_hqx(d, 0xFFFF)),
    "CRC-16/XMODEM": (2, lambda d: binascii.crc_hqx(d, 0)),
    "CRC-32/ISO-HDLC": (4, lambda d: zlib.crc32(d) & 0xFFFFFFFF),
}


# --------------------------------------------------------------------------------------------
# Frame codings
# --------------------------------------------------------------------------------------------

def pn9(n_bytes: int) -> bytes:
    """The PN9 whitening sequence, REFERENCE §9: x⁹ + x⁵ + 1, register seeded 0x1FF.

    Each output byte is the register's low 8 bits, then the register steps 8 times.
    """
    s = 0x1FF
    out = bytearray()
    for _ in range(n_bytes):
        out.append(s & 0xFF)
        for _ in range(8):
            fb = (s ^ (s >> 5)) & 1
            s = (s >> 1) | (fb << 8)
    return bytes(out)


def manchester(bits, *, inverted: bool = False) -> np.ndarray:
    """Manchester chips: IEEE 802.3 sends 0 as 1,0 and 1 as 0,1; ``inverted`` is the G. E. Thomas form."""
    b = np.asarray(bits, dtype=np.uint8) & 1
    first = b if inverted else 1 - b
    return np.stack([first, 1 - first], axis=1).reshape(-1).astype(np.uint8)


def crc_bytes(data: bytes, crc: str | None, *, order: str = "big") -> bytes:
    """The CRC of `data` as the bytes sent on air (``order`` "big": most significant byte first)."""
    if crc is None:
        return b""
    if crc not in CRCS:
        raise ValueError(f"crc {crc!r}: expected one of {sorted(CRCS)} or None")
    if order not in ("big", "little"):
        raise ValueError(f"crc_order {order!r}: expected 'big' or 'little'")
    width, fn = CRCS[crc]
    return int(fn(bytes(data))).to_bytes(width, order)


def _bits_of(data: bytes, order: str) -> np.ndarray:
    bits = np.unpackbits(np.frombuffer(bytes(data), dtype=np.uint8))
    if order == "lsb":
        bits = bits.reshape(-1, 8)[:, ::-1].reshape(-1)
    elif order != "msb":
        raise ValueError(f"bit_order {order!r}: expected 'msb' or 'lsb'")
    return bits


def frame_bits(
    payload: bytes,
    *,
    sync: int = 0x9B3C57E1,
    sync_bits: int = 32,
    preamble_bits: int = 32,
    length: str = "fixed",
    crc: str | None = "CRC-16/IBM-3740",
    coding: str = "nrz",
    whitening: str = "none",
    bit_order: str = "msb",
    crc_order: str = "big",
    length_counts: str = "payload",
    length_offset: int = 0,
) -> np.ndarray:
    """The bits (or Manchester chips) of one frame, as sent: one uint8 0/1 per symbol.

    Layout: preamble 1010… (`preamble_bits` symbols, not coded), sync word (MSB first), then the
    body: [length byte] payload CRC.

    Parameters
    ----------
    payload : bytes
    sync, sync_bits : int
        The sync word and its width; sent most significant bit first.
    preamble_bits : int
        Symbols of alternating 1, 0, … before the sync word.
    length : {"fixed", "prefix8"}
        "prefix8" puts a length byte before the payload.
    crc : str or None
        "CRC-16/IBM-3740", "CRC-16/XMODEM", "CRC-32/ISO-HDLC" or None. It covers the length byte
        (when present) and the payload, computed before whitening (common practice).
    coding : {"nrz", "manchester", "manchester-inverted"}
        Manchester (REFERENCE §9, IEEE 802.3: 0 → 1,0; 1 → 0,1; "inverted" is the Thomas form)
        is applied from the sync word on; the preamble is sent as it is.
    whitening : {"none", "pn9"}
        PN9 (REFERENCE §9) XORed byte-wise over the body (everything after the sync word).
    bit_order : {"msb", "lsb"}
        Bit order of the body bytes on air.
    crc_order : {"big", "little"}
        Byte order of the CRC on air.
    length_counts : {"payload", "payload+crc", "frame"}
        What the length byte counts ("frame" = length byte + payload + CRC), plus `length_offset`.
    """
    payload = bytes(payload)
    if sync_bits < 0 or sync_bits > 64 or (sync_bits and sync >> sync_bits):
        raise ValueError(f"sync word {sync:#x} does not fit {sync_bits} bits")
    if preamble_bits < 0:
        raise ValueError(f"preamble_bits {preamble_bits}: must be >= 0")
    crc_width = 0 if crc is None else CRCS.get(crc, (None,))[0]
    if crc_width is None:
        raise ValueError(f"crc {crc!r}: expected one of {sorted(CRCS)} or None")
    if length == "fixed":
        head = b""
    elif length == "prefix8":
        counted = {"payload": len(payload), "payload+crc": len(payload) + crc_width,
                   "frame": 1 + len(payload) + crc_width}
        if length_counts not in counted:
            raise ValueError(f"length_counts {length_counts!r}: expected one of {sorted(counted)}")
        value = counted[length_counts] + int(length_offset)
        if not 0 <= value <= 255:
            raise ValueError(f"length byte {value}: must be 0…255")
        head = bytes([value])
    else:
        raise ValueError(f"length {length!r}: expected 'fixed' or 'prefix8'")
    body = head + payload
    body += crc_bytes(body, crc, order=crc_order)
    if whitening == "pn9":
        body = bytes(a ^ b for a, b in zip(body, pn9(len(body))))
    elif whitening != "none":
        raise ValueError(f"whitening {whitening!r}: expected 'none' or 'pn9'")
    sync_arr = np.array([(sync >> (sync_bits - 1 - i)) & 1 for i in range(sync_bits)], dtype=np.uint8)
    coded = np.concatenate([sync_arr, _bits_of(body, bit_order)])
    if coding == "manchester":
        coded = manchester(coded)
    elif coding == "manchester-inverted":
        coded = manchester(coded, inverted=True)
    elif coding != "nrz":
        raise ValueError(f"coding {coding!r}: expected 'nrz', 'manchester' or 'manchester-inverted'")
    preamble = (np.arange(preamble_bits) % 2 == 0).astype(np.uint8)  # 1, 0, 1, 0, …
    return np.concatenate([preamble, coded]).astype(np.uint8)


# --------------------------------------------------------------------------------------------
# CPFSK
# --------------------------------------------------------------------------------------------

def _phase_pulse(pulse: str, bt: float, span: float):
    """(q, half_support) for a pulse centred on its symbol's middle; q rises from 0 to ½.

    rect: g = 1/(2T) over the symbol, so q(t) = clip(t + ½, 0, 1)/2 (t in symbols from the centre).
    gaussian: g = rect ⊛ Gaussian(σ = √(ln 2)/(2π·BT)). With Φ the normal CDF and φ its density,
    ∫Φ(x/σ)dx = x·Φ(x/σ) + σ·φ(x/σ), so q(t) = [G(t + ½) − G(t − ½)]/2 with that G. It is truncated
    to `span` symbols in total (±span/2 about the centre) and rescaled so that it rises from exactly
    0 to exactly ½: every symbol then turns the phase by exactly π·h·a, as in the rect case.
    """
    if pulse == "rect":
        return (lambda t: np.clip(t + 0.5, 0.0, 1.0) / 2.0), 0.5
    if pulse != "gaussian":
        raise ValueError(f"pulse {pulse!r}: expected 'rect' or 'gaussian'")
    if not bt > 0:
        raise ValueError(f"bt {bt}: must be > 0")
    if not span >= 1:
        raise ValueError(f"span {span}: must be >= 1 symbol")
    sigma = math.sqrt(math.log(2.0)) / (2.0 * math.pi * bt)
    half = span / 2.0

    def raw(t):
        t = np.asarray(t, dtype=float)

        def g_int(x):
            return x * _erf_cdf(x / sigma) + sigma * np.exp(-0.5 * (x / sigma) ** 2) / math.sqrt(2 * math.pi)

        return (g_int(t + 0.5) - g_int(t - 0.5)) / 2.0

    lo, hi = raw(-half), raw(half)

    def q(t):
        t = np.asarray(t, dtype=float)
        inside = (raw(np.clip(t, -half, half)) - lo) / (hi - lo) / 2.0
        return np.where(t <= -half, 0.0, np.where(t >= half, 0.5, inside))

    return q, half


_ERFC = np.frompyfunc(math.erfc, 1, 1)


def _erf_cdf(x):
    # Φ(x) = erfc(−x/√2)/2. math.erfc is accurate to double precision; the module keeps to numpy
    # and the stdlib so that it stays a reference independent of the libraries under test.
    return 0.5 * np.asarray(_ERFC(-np.asarray(x, dtype=float) / math.sqrt(2.0)), dtype=float)


def _cpfsk_phase(bits, t_sym, *, h, pulse="rect", bt=0.5, span=4):
    """Modulation phase (rad) at times `t_sym` (symbols from the start of the first bit).

    φ(t) = 2π·h·Σ_i a_i·q(t − i − ½), a_i = 2·bit − 1. Symbols whose pulse has ended contribute
    π·h·a_i each (a cumulative sum); only the few pulses still under way at t are evaluated.
    """
    a = 2.0 * (np.asarray(bits, dtype=np.int64) & 1) - 1.0
    t = np.asarray(t_sym, dtype=float)
    q, half = _phase_pulse(pulse, bt, span)
    n = a.size
    done = np.concatenate([[0.0], np.cumsum(a)])  # done[k] = Σ_{i<k} a_i
    # pulse i is under way on (i + ½ − half, i + ½ + half); finished when i < t + ½ − half.
    k_done = np.clip(np.floor(t + 0.5 - half).astype(np.int64), 0, n)  # symbols 0…k_done−1 have ended
    phase = math.pi * h * done[k_done]
    width = int(math.ceil(2 * half)) + 1
    for j in range(width):
        i = k_done + j
        ok = i < n
        ii = np.where(ok, i, 0)
        phase += np.where(ok, 2.0 * math.pi * h * a[ii] * q(t - ii - 0.5), 0.0)
    return phase


def cpfsk(bits, *, sps: float, h: float, pulse: str = "rect", bt: float = 0.5, span: float = 4,
          phase0: float = 0.0) -> np.ndarray:
    """Unit-amplitude continuous-phase binary FSK at baseband.

    Parameters
    ----------
    bits : array of 0/1
        Bit 1 is the upper tone (+h/2·baud above the centre), bit 0 the lower one.
    sps : float
        Samples per symbol; may be fractional (a clock error is expressed through it).
    h : float
        Modulation index (tone shift / baud).
    pulse : {"rect", "gaussian"}
        Rectangular (plain CPFSK) or Gaussian frequency pulse (GFSK).
    bt : float
        Bandwidth–time product of the Gaussian pulse.
    span : float
        Total length of the truncated Gaussian pulse, symbols (±span/2 about the symbol's middle).
    phase0 : float
        φ0 (rad) in φ(t) = φ0 + 2π·h·Σ a_i·q(t − i·T). With the rect pulse it is the phase of the
        first sample; a Gaussian pulse has already turned the phase a little by then.

    Returns
    -------
    numpy.ndarray of complex128
        ceil(len(bits)·sps) samples; sample k is at time k/sps symbols after the first bit's start.
        The phase is the integral of the instantaneous frequency evaluated at each sample's time,
        and every symbol turns it by exactly π·h·(±1) over its whole pulse.

    Examples
    --------
    >>> x = cpfsk([1, 1, 0], sps=8, h=1.0)
    >>> x.shape, round(float(abs(x).max()), 12)
    ((24,), 1.0)
    """
    if not sps > 0:
        raise ValueError(f"sps {sps}: must be > 0")
    bits = np.asarray(bits)
    n_out = int(math.ceil(bits.size * sps - 1e-9))
    t = np.arange(n_out) / sps
    return np.exp(1j * (phase0 + _cpfsk_phase(bits, t, h=h, pulse=pulse, bt=bt, span=span)))


# --------------------------------------------------------------------------------------------
# Whole captures
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class Tx:
    """One transmission in a capture.

    Give either `payload` (framed with :func:`frame_bits` and `framing`) or `bits` (sent as they
    are; `sync_index` then says where the sync word starts, for the truth). Give either `ebn0_db`
    (the amplitude follows from the capture's noise, REFERENCE §8) or `amplitude`.

    Attributes
    ----------
    t_s : float
        Start of the first symbol, seconds from the capture start.
    offset_hz : float
        Nominal signal centre relative to the capture centre.
    carrier_error_hz : float
        The transmitter's carrier error, added to `offset_hz`.
    clock_ppm : float
        The transmitter's symbol-clock error: its baud is baud·(1 + ppm·1e-6).
    phase0 : float or None
        Carrier phase at the first symbol, rad; None draws one at random.
    """

    t_s: float
    payload: bytes | None = None
    bits: np.ndarray | None = field(default=None, compare=False)
    ebn0_db: float | None = None
    amplitude: float | None = None
    offset_hz: float = 0.0
    carrier_error_hz: float = 0.0
    clock_ppm: float = 0.0
    baud: float = 9600.0
    h: float = 1.0
    pulse: str = "rect"
    bt: float = 0.5
    span: float = 4
    framing: dict = field(default_factory=dict)
    sync_index: int | None = None
    phase0: float | None = None

    def __post_init__(self):
        if (self.payload is None) == (self.bits is None):
            raise ValueError("Tx: give exactly one of payload and bits")
        if (self.ebn0_db is None) == (self.amplitude is None):
            raise ValueError("Tx: give exactly one of ebn0_db and amplitude")
        if not self.baud > 0:
            raise ValueError(f"Tx baud {self.baud}: must be > 0")
        if not self.t_s >= 0:
            raise ValueError(f"Tx t_s {self.t_s}: must be >= 0")

    def symbols(self) -> tuple[np.ndarray, int | None]:
        """(symbols sent, index of the sync word's first symbol or None)."""
        if self.payload is not None:
            return frame_bits(self.payload, **self.framing), self.framing.get("preamble_bits", 32)
        return np.asarray(self.bits, dtype=np.uint8), self.sync_index

    @property
    def baud_tx(self) -> float:
        return self.baud * (1.0 + self.clock_ppm * 1e-6)


@dataclass(frozen=True)
class Neighbour:
    """An interfering FSK signal of random bits.

    Attributes
    ----------
    offset_hz : float
        Its centre relative to the capture centre.
    level_db : float
        Its amplitude relative to the first transmission's in `render` (1.0 full scale when there
        is none), dB: 20·log10 of the amplitude ratio.
    on_s, off_s : float or None
        None: always on. Otherwise it is keyed on for `on_s` and off for `off_s`, repeatedly, from
        a random point of the cycle.
    """

    offset_hz: float
    level_db: float
    baud: float = 9600.0
    h: float = 1.0
    pulse: str = "rect"
    bt: float = 0.5
    on_s: float | None = None
    off_s: float | None = None

    def __post_init__(self):
        if (self.on_s is None) != (self.off_s is None):
            raise ValueError("Neighbour: give both on_s and off_s, or neither")


def amplitude_for_ebn0(ebn0_db: float, *, noise_rms: float, rate: float, baud: float) -> float:
    """Tone amplitude A with A²·(fs/Rb)/σ² = Eb/N0 (REFERENCE §8); σ = `noise_rms` (total, complex)."""
    return float(noise_rms * math.sqrt(10 ** (ebn0_db / 10) * baud / rate))


def iq_imbalance(x: np.ndarray, *, gain_db: float, phase_deg: float) -> np.ndarray:
    """The receiver's IQ imbalance, REFERENCE §11: I' = I, Q' = g·(sin φ·I + cos φ·Q)."""
    g = 10 ** (gain_db / 20)
    phi = math.radians(phase_deg)
    i, q = x.real, x.imag
    return i + 1j * (g * (math.sin(phi) * i + math.cos(phi) * q))


def _place(x, syms, *, t0_s, rate, baud_tx, f_hz, amp, h, pulse, bt, span, phase0):
    """Add A·exp(j(2π·f·t + θ + φ_mod(t))) to x over the symbols' time span."""
    n_total = x.size
    dur = syms.size / baud_tx
    n0 = max(0, int(math.ceil(t0_s * rate - 1e-9)))
    n1 = min(n_total, int(math.ceil((t0_s + dur) * rate - 1e-9)))
    if n1 <= n0:
        return
    n = np.arange(n0, n1)
    t_sym = (n / rate - t0_s) * baud_tx
    ph = _cpfsk_phase(syms, t_sym, h=h, pulse=pulse, bt=bt, span=span)
    # carrier phase referred to the first symbol's start, so phase0 means what it says
    x[n0:n1] += amp * np.exp(1j * (2 * math.pi * f_hz * (n / rate - t0_s) + phase0 + ph))


def render(
    txs,
    *,
    rate: float,
    n_samples: int,
    noise_rms: float,
    seed: int,
    dc: complex = 0j,
    iq_gain_db: float = 0.0,
    iq_phase_deg: float = 0.0,
    neighbours=(),
) -> tuple[np.ndarray, list[dict]]:
    """Build a capture: transmissions + neighbours + complex white noise, then the receiver's front end.

    Order: signals and noise add at the antenna; the front end then applies the IQ imbalance
    (:func:`iq_imbalance`) and adds the constant `dc` (REFERENCE §11).

    Parameters
    ----------
    txs : sequence of Tx
    rate : float
        Sample rate, Hz.
    n_samples : int
    noise_rms : float
        σ, the square root of the total complex noise variance per sample (σ²/2 per real
        dimension), full scale 1.0.
    seed : int
        Seeds the noise, the neighbours' bits and the random carrier phases.
    neighbours : sequence of Neighbour

    Returns
    -------
    x : numpy.ndarray of complex128
    truth : list of dict
        One per transmission with a sync word, in the order of `txs`: ``t_s`` (the sync word's first
        symbol, seconds from the capture start, at the transmitter's own clock), ``sample``
        (round(t_s·rate)), ``payload_hex`` (None for raw bits), ``ebn0_db`` (A²·fs/Rb/σ²; None
        without noise), ``carrier_hz`` (offset + carrier error), ``amplitude``, ``clock_ppm``,
        ``end_s`` (end of the last symbol) and ``tx`` (index in `txs`).
    """
    rng = np.random.default_rng(seed)
    txs = list(txs)
    x = np.zeros(int(n_samples), dtype=np.complex128)
    truth = []
    amps = []
    for k, tx in enumerate(txs):
        amp = tx.amplitude if tx.amplitude is not None else amplitude_for_ebn0(
            tx.ebn0_db, noise_rms=noise_rms, rate=rate, baud=tx.baud)
        amps.append(amp)
        syms, sync_at = tx.symbols()
        f_hz = tx.offset_hz + tx.carrier_error_hz
        phase0 = tx.phase0 if tx.phase0 is not None else rng.uniform(0, 2 * math.pi)
        _place(x, syms, t0_s=tx.t_s, rate=rate, baud_tx=tx.baud_tx, f_hz=f_hz, amp=amp, h=tx.h,
               pulse=tx.pulse, bt=tx.bt, span=tx.span, phase0=phase0)
        if sync_at is not None:
            t_sync = tx.t_s + sync_at / tx.baud_tx
            truth.append(dict(
                tx=k,
                t_s=t_sync,
                sample=int(round(t_sync * rate)),
                payload_hex=None if tx.payload is None else bytes(tx.payload).hex(),
                ebn0_db=(10 * math.log10(amp ** 2 * (rate / tx.baud) / noise_rms ** 2)) if noise_rms > 0 else None,
                carrier_hz=f_hz,
                amplitude=amp,
                clock_ppm=tx.clock_ppm,
                end_s=tx.t_s + syms.size / tx.baud_tx,
            ))
    ref_amp = amps[0] if amps else 1.0
    duration = n_samples / rate
    for nb in neighbours:
        amp = ref_amp * 10 ** (nb.level_db / 20)
        spans = [(0.0, duration)]
        if nb.on_s is not None:
            period = nb.on_s + nb.off_s
            start = -rng.uniform(0, period)
            spans = []
            while start < duration:
                spans.append((max(start, 0.0), min(start + nb.on_s, duration)))
                start += period
        for a, b in spans:
            n_sym = int(math.ceil((b - a) * nb.baud))
            if n_sym <= 0:
                continue
            syms = rng.integers(0, 2, n_sym).astype(np.uint8)
            _place(x, syms, t0_s=a, rate=rate, baud_tx=nb.baud, f_hz=nb.offset_hz, amp=amp, h=nb.h,
                   pulse=nb.pulse, bt=nb.bt, span=4, phase0=rng.uniform(0, 2 * math.pi))
    if noise_rms > 0:
        x += (noise_rms / math.sqrt(2)) * (rng.standard_normal(x.size) + 1j * rng.standard_normal(x.size))
    if iq_gain_db or iq_phase_deg:
        x = iq_imbalance(x, gain_db=iq_gain_db, phase_deg=iq_phase_deg)
    if dc:
        x += dc
    return x, truth


# --------------------------------------------------------------------------------------------
# SigMF
# --------------------------------------------------------------------------------------------

def write_sigmf(base_path, x, *, rate: float, datatype: str = "cf32_le", centre_hz: float | None = None,
                datetime=None, scale: float = 1.0) -> Path:
    """Write ``NAME.sigmf-meta`` and ``NAME.sigmf-data`` (SigMF v1.2, REFERENCE §6); return the meta path.

    Full scale is 1.0 (the samples are multiplied by `scale` first). ``cf32_le``: numpy ``<c8``.
    ``ci16_le``: round(32767·x), clipped to the int16 range. ``cu8``: round(127.5 + 127.5·x),
    clipped to 0…255 (the common convention of 8-bit unsigned IQ, common practice; numpy rounds
    half to even). The caller keeps the signal well inside full scale for the integer types.
    """
    base = Path(base_path)
    y = np.asarray(x, dtype=np.complex128) * scale
    inter = np.empty(2 * y.size, dtype=float)
    inter[0::2], inter[1::2] = y.real, y.imag
    if datatype == "cf32_le":
        raw = inter.astype("<f4")
    elif datatype == "ci16_le":
        raw = np.clip(np.rint(32767.0 * inter), -32768, 32767).astype("<i2")
    elif datatype == "cu8":
        raw = np.clip(np.rint(127.5 + 127.5 * inter), 0, 255).astype(np.uint8)
    else:
        raise ValueError(f"datatype {datatype!r}: expected 'cf32_le', 'ci16_le' or 'cu8'")
    data_path = base.with_name(base.name + ".sigmf-data")
    meta_path = base.with_name(base.name + ".sigmf-meta")
    raw.tofile(data_path)
    capture = {"core:sample_start": 0}
    if centre_hz is not None:
        capture["core:frequency"] = float(centre_hz)
    if datetime is not None:
        if isinstance(datetime, _dt.datetime):
            d = datetime.astimezone(_dt.timezone.utc) if datetime.tzinfo else datetime
            datetime = d.strftime("%Y-%m-%dT%H:%M:%S.%fZ")
        capture["core:datetime"] = str(datetime)
    meta = {
        "global": {"core:datatype": datatype, "core:version": "1.2.0", "core:sample_rate": float(rate)},
        "captures": [capture],
        "annotations": [],
    }
    meta_path.write_text(json.dumps(meta, indent=2) + "\n", encoding="utf-8")
    return meta_path
