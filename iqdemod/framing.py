"""Framing: find sync words in hard decisions, read the length, check the CRC.

Frame layout on the air::

    [preamble 1010…]  sync word  [length byte if "prefix8"]  payload  CRC

The link's :class:`~iqdemod.link.FrameSpec` says how the frame is coded
(the coding functions are in :mod:`iqdemod.coding`):

- the sync word is sent MSB first; every byte after it in ``bit_order``;
- the CRC covers the length byte (if any) and the payload, and its value is
  sent in ``crc_order`` (big-endian: most significant byte first);
- ``whitening = "pn9"`` XORs PN9 over everything after the sync word
  (length, payload and CRC), applied after the CRC is computed;
- a "prefix8" length byte counts the payload, the payload and the CRC, or
  the whole frame after the sync word, plus ``length_offset``;
- ``coding = "manchester"`` (or "manchester-inverted") sends every bit from
  the sync word on as two chips; the preamble stays alternating symbols.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from .coding import bits_to_bytes as _pack, bytes_to_bits, manchester_decode, manchester_encode, manchester_soft, whiten
from .crc import crc_compute, crc_spec
from .link import FrameSpec

__all__ = ["FrameHit", "find_frames", "frame_bits", "frame_symbols", "body_bytes", "int_to_bits", "bits_to_bytes",
           "PREAMBLE_BITS"]

PREAMBLE_BITS = 32  # the generator's default preamble length (alternating 1010…)


@dataclass(frozen=True)
class FrameHit:
    """One sync word found in a bit stream, and what follows it.

    Attributes
    ----------
    Positions and lengths count symbols on the air: bits, or with Manchester
    coding chips (two per bit).

    Attributes
    ----------
    bit_index : int
        Index of the sync word's first symbol in the stream.
    sync_errors : int
        Symbol errors in the sync word (bit errors; chip errors with Manchester).
    length : int
        Payload bytes (declared by the length byte for "prefix8").
    payload : bytes
        The payload as read (possibly shorter when `truncated`).
    crc_ok : bool
    n_bits : int
        Symbols of the frame from the sync word's first to the CRC's last.
    truncated : bool
        The stream ended before the frame did.
    coding_errors : int
        Manchester chip pairs in the frame that are no symbol (0,0 or 1,1).
    crc_received, crc_computed : int or None
        The CRC as sent and as computed over what was received (None without
        a CRC, or when the frame was cut short).
    """

    bit_index: int
    sync_errors: int
    length: int
    payload: bytes
    crc_ok: bool
    n_bits: int
    truncated: bool = False
    coding_errors: int = 0
    crc_received: int | None = None
    crc_computed: int | None = None


def int_to_bits(value: int, n: int) -> np.ndarray:
    """`value` as `n` bits, MSB first, uint8.

    Examples
    --------
    >>> int_to_bits(0xB, 4).tolist()
    [1, 0, 1, 1]
    >>> bits_to_bytes(int_to_bits(0x2DD4, 16)).hex()
    '2dd4'
    """
    return np.array([(value >> (n - 1 - i)) & 1 for i in range(n)], dtype=np.uint8)


def bits_to_bytes(bits: np.ndarray, order: str = "msb") -> bytes:
    """Pack bits (MSB first, or `order`) into bytes; a short last byte is padded with zeros.

    Examples
    --------
    >>> bits_to_bytes([1, 0, 1, 0, 0, 1, 0, 1]).hex()
    'a5'
    >>> bits_to_bytes([1, 1, 1]).hex()  # padded with zeros to a whole byte
    'e0'
    """
    return _pack(bits, order)


def _bytes_to_bits(data: bytes) -> np.ndarray:
    return np.unpackbits(np.frombuffer(data, dtype=np.uint8))


def _crc_bytes(spec: FrameSpec) -> int:
    return spec.crc_bits // 8


def _length_extra(spec: FrameSpec) -> int:
    """Bytes a "prefix8" length byte counts beyond the payload, `length_offset` included."""
    extra = {"payload": 0, "payload+crc": _crc_bytes(spec), "frame": 1 + _crc_bytes(spec)}[spec.length_counts]
    return extra + spec.length_offset


def body_bytes(payload: bytes, spec: FrameSpec) -> bytes:
    """What follows the sync word, before whitening: [length byte] payload CRC.

    The CRC covers the length byte (if any) and the payload; it is sent in
    ``spec.crc_order``.

    Raises
    ------
    ValueError
        When the payload does not fit the spec's length.

    Examples
    --------
    >>> spec = FrameSpec(sync_word=0x2DD4, sync_bits=16, length=9, crc="CRC-16/IBM-3740", crc_order="little")
    >>> body_bytes(b"123456789", spec)[-2:].hex()  # REFERENCE §9: the check value 0x29B1, low byte first
    'b129'
    """
    payload = bytes(payload)
    if spec.length == "prefix8":
        if not 1 <= len(payload) <= 255:
            raise ValueError(f"payload of {len(payload)} bytes: prefix8 takes 1–255")
        value = len(payload) + _length_extra(spec)
        if not 0 <= value <= 255:
            raise ValueError(f"payload of {len(payload)} bytes: the length byte would be {value}, outside 0–255")
        body = bytes([value]) + payload
    else:
        if len(payload) != spec.length:
            raise ValueError(f"payload of {len(payload)} bytes: the link says {spec.length}")
        body = payload
    if spec.crc != "none":
        c = crc_spec(spec.crc)
        body += crc_compute(c, body).to_bytes(c.width // 8, spec.crc_order)
    return body


def frame_bits(payload: bytes, spec: FrameSpec) -> np.ndarray:
    """The bits of one frame from the sync word on: sync, then the (whitened) body.

    The sync word is sent MSB first; the body bytes (:func:`body_bytes`,
    whitened as ``spec.whitening`` says) in ``spec.bit_order``. These are
    data bits: with Manchester, :func:`frame_symbols` gives the chips.

    Raises
    ------
    ValueError
        When the payload does not fit the spec's length.

    Examples
    --------
    A buoy's 9-byte frame with a 16-bit sync word and a CRC-16/IBM-3740 sent
    low byte first: 16 + 8·(9 + 2) bits. The last two bytes are the catalogue
    check value 0x29B1 of "123456789" sent little-endian (REFERENCE §9):

    >>> spec = FrameSpec(sync_word=0x2DD4, sync_bits=16, length=9, crc="CRC-16/IBM-3740", crc_order="little")
    >>> bits = frame_bits(b"123456789", spec)
    >>> len(bits), bits_to_bytes(bits[:16]).hex(), bits_to_bytes(bits[-16:]).hex()
    (104, '2dd4', 'b129')
    """
    if spec.sync_word is None:
        raise ValueError("frame_bits needs a sync word (raw mode has no frames)")
    body = whiten(body_bytes(payload, spec), spec.whitening)
    return np.concatenate([int_to_bits(spec.sync_word, spec.sync_bits), bytes_to_bits(body, spec.bit_order)])


def frame_symbols(payload: bytes, spec: FrameSpec) -> np.ndarray:
    """The symbols of one frame on the air from the sync word on (Manchester chips, or the bits).

    Examples
    --------
    With Manchester coding every bit from the sync word on is two chips;
    IEEE 802.3 (0 → 1,0; 1 → 0,1) sends 0x2D (0010 1101) as the chips 0xA6 0x59:

    >>> spec = FrameSpec(sync_word=0x2DD4, sync_bits=16, length=9, coding="manchester")
    >>> chips = frame_symbols(b"123456789", spec)
    >>> len(chips), bits_to_bytes(chips[:16]).hex()
    (208, 'a659')
    >>> len(frame_symbols(b"123456789", FrameSpec(sync_word=0x2DD4, sync_bits=16, length=9)))
    104
    """
    bits = frame_bits(payload, spec)
    return bits if spec.coding == "nrz" else manchester_encode(bits, spec.coding)


class _Body(NamedTuple):
    """What follows a sync word: (payload length, payload, CRC good, end symbol, truncated, CRCs)."""

    length: int
    payload: bytes
    ok: bool
    end: int
    truncated: bool
    crc_received: int | None = None
    crc_computed: int | None = None


def _read_body(bits: np.ndarray, pos: int, spec: FrameSpec) -> _Body:
    """Read the body starting at bit `pos`."""
    n_total = len(bits)
    crc_n = _crc_bytes(spec)
    head = 0
    if spec.length == "prefix8":
        if pos + 8 > n_total:
            return _Body(0, b"", False, n_total, True)
        value = whiten(bits_to_bytes(bits[pos : pos + 8], spec.bit_order), spec.whitening)[0]
        length = value - _length_extra(spec)
        if not 1 <= length <= 255:  # not a frame this layout can carry
            return _Body(0, b"", False, pos + 8, False)
        head = 1
    else:
        length = int(spec.length)
    end = pos + 8 * (head + length + crc_n)
    if end > n_total:
        avail = bits[pos : min(end, n_total)]
        data = whiten(bits_to_bytes(avail[: len(avail) // 8 * 8], spec.bit_order), spec.whitening)
        return _Body(length, data[head : head + length], False, n_total, True)
    data = whiten(bits_to_bytes(bits[pos:end], spec.bit_order), spec.whitening)
    covered, sent = data[: head + length], data[head + length :]
    payload = covered[head:]
    if spec.crc == "none":
        return _Body(length, payload, True, end, False)
    received = int.from_bytes(sent, spec.crc_order)
    computed = crc_compute(crc_spec(spec.crc), covered)
    return _Body(length, payload, computed == received, end, False, received, computed)


def sync_symbols(spec: FrameSpec) -> np.ndarray:
    """The sync word as it goes on the air: its bits, or their Manchester chips (uint8)."""
    bits = int_to_bits(spec.sync_word, spec.sync_bits)
    return bits if spec.coding == "nrz" else manchester_encode(bits, spec.coding)


def sync_errors(bits: np.ndarray, spec: FrameSpec) -> np.ndarray:
    """Hamming distance of the sync word at every start position (int array)."""
    n = spec.sync_bits
    if len(bits) < n:
        return np.zeros(0, dtype=np.int64)
    return _distances(np.asarray(bits), int_to_bits(spec.sync_word, n))


def _distances(symbols: np.ndarray, pattern: np.ndarray) -> np.ndarray:
    """Hamming distance of `pattern` against `symbols` at every start (0/1 arrays; int array).

    With ±1 symbols, agreements minus disagreements is their correlation c, so
    the distance is (n − c)/2: one correlation, exact in floating point (whole
    numbers far below 2⁵³).
    """
    n = len(pattern)
    if len(symbols) < n:
        return np.zeros(0, dtype=np.int64)
    corr = np.correlate(2.0 * symbols - 1.0, 2.0 * np.asarray(pattern, np.float64) - 1.0, mode="valid")
    return np.rint((n - corr) / 2).astype(np.int64)


def _candidates(dist: np.ndarray, tolerance: int, n: int):
    """Sync positions within `tolerance`; among candidates within half a word, the best match."""
    candidates = np.flatnonzero(dist <= tolerance)
    for idx in candidates:
        near = candidates[(candidates >= idx) & (candidates < idx + max(1, n // 2))]
        yield int(idx), int(near[np.argmin(dist[near])])


def find_frames(bits: np.ndarray, spec: FrameSpec, *, stats: tuple[np.ndarray, np.ndarray] | None = None
                ) -> list[FrameHit]:
    """Find every frame in a burst's hard decisions.

    A sync word is accepted with up to ``spec.sync_tolerance`` bit errors; where
    several nearby positions qualify, the one with fewest errors wins. After a
    frame whose CRC is good the search resumes past its end, otherwise just past
    its sync word (a bad length byte must not hide the next frame).

    With Manchester coding, `bits` are the chips' hard decisions: the coded
    sync word is found in the chip stream (up to twice the tolerance in chip
    errors), the chips are paired from there, and each pair is decided from
    the chips' square-law statistics when `stats` are given
    (:func:`iqdemod.coding.manchester_soft`), otherwise from the hard chips.

    Parameters
    ----------
    bits : numpy.ndarray
        Hard decisions (0/1) of the symbols in time order: bits, or chips.
    spec : FrameSpec
    stats : (z0sq, z1sq), optional
        Square-law statistics of every symbol (used with Manchester only; NRZ
        frames are read from the hard bits as before).

    Returns
    -------
    list of FrameHit
        Positions and lengths in symbols on the air.

    Examples
    --------
    A frame behind an alternating preamble, with one bit of its sync word
    flipped, is found and its CRC checks:

    >>> import numpy as np
    >>> spec = FrameSpec(sync_word=0x2DD4, sync_bits=16, sync_tolerance=2, length=9)
    >>> bits = np.concatenate([np.tile([1, 0], 16), frame_bits(b"buoy-0042", spec), np.zeros(8, np.uint8)])
    >>> bits[32 + 3] ^= 1
    >>> [(h.bit_index, h.sync_errors, h.payload, h.crc_ok, h.n_bits) for h in find_frames(bits, spec)]
    [(32, 1, b'buoy-0042', True, 104)]
    """
    if spec.sync_word is None:
        raise ValueError("find_frames needs a sync word (raw mode has no frames)")
    bits = np.asarray(bits, dtype=np.uint8)
    if spec.coding != "nrz":
        return _find_coded(bits, spec, stats)
    dist = sync_errors(bits, spec)
    hits: list[FrameHit] = []
    resume = 0
    n = spec.sync_bits
    for idx, best in _candidates(dist, spec.sync_tolerance, n):
        if idx < resume:
            continue
        body = _read_body(bits, best + n, spec)
        hit = FrameHit(best, int(dist[best]), body.length, body.payload, body.ok, body.end - best, body.truncated,
                       crc_received=body.crc_received, crc_computed=body.crc_computed)
        hits.append(hit)
        resume = best + (hit.n_bits if hit.crc_ok else n)
    return hits


def _find_coded(chips: np.ndarray, spec: FrameSpec, stats) -> list[FrameHit]:
    pattern = sync_symbols(spec).astype(np.int8)
    n = len(pattern)
    if len(chips) < n:
        return []
    dist = _distances(chips, pattern)
    if stats is not None:
        z0, z1 = (np.asarray(z, dtype=np.float64) for z in stats)
        if z0.shape != chips.shape or z1.shape != chips.shape:
            raise ValueError(f"stats of {z0.shape}/{z1.shape} for {chips.shape} symbols: must match")
    # both pairings of the stream, decoded once
    phases = []
    for p in (0, 1):
        if stats is not None:
            b, invalid, _ = manchester_soft(z0[p:], z1[p:], spec.coding)
        else:
            b, invalid = manchester_decode(chips[p:], spec.coding)
        phases.append((b, np.concatenate([[0], np.cumsum(invalid)])))
    hits: list[FrameHit] = []
    resume = 0
    for idx, best in _candidates(dist, 2 * spec.sync_tolerance, n):
        if idx < resume:
            continue
        b, invalid_sum = phases[best % 2]
        k = best // 2
        body = _read_body(b, k + spec.sync_bits, spec)
        coding_errors = int(invalid_sum[min(body.end, len(b))] - invalid_sum[k])
        n_chips = min(2 * (body.end - k), len(chips) - best)
        hit = FrameHit(best, int(dist[best]), body.length, body.payload, body.ok, n_chips, body.truncated,
                       coding_errors, body.crc_received, body.crc_computed)
        hits.append(hit)
        resume = best + (hit.n_bits if hit.crc_ok else n)
    return hits
