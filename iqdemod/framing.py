"""Framing: find sync words in hard bits, read the length, check the CRC.

Frame layout on the air (bits MSB first)::

    [preamble 1010…]  sync word  [length byte if "prefix8"]  payload  CRC

With ``length = "prefix8"`` the CRC covers the length byte and the payload;
with a fixed length it covers the payload. The CRC register value is sent MSB
first, whatever the CRC's own bit reflection.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from .crc import crc_compute, crc_spec
from .link import FrameSpec

__all__ = ["FrameHit", "find_frames", "frame_bits", "int_to_bits", "bits_to_bytes", "PREAMBLE_BITS"]

PREAMBLE_BITS = 32  # the generator's default preamble length (alternating 1010…)


@dataclass(frozen=True)
class FrameHit:
    """One sync word found in a bit stream, and what follows it.

    Attributes
    ----------
    bit_index : int
        Index of the sync word's first bit in the stream.
    sync_errors : int
        Bit errors in the sync word.
    length : int
        Payload bytes (declared by the length byte for "prefix8").
    payload : bytes
        The payload as read (possibly shorter when `truncated`).
    crc_ok : bool
    n_bits : int
        Bits of the frame from the sync word's first bit to the CRC's last.
    truncated : bool
        The stream ended before the frame did.
    """

    bit_index: int
    sync_errors: int
    length: int
    payload: bytes
    crc_ok: bool
    n_bits: int
    truncated: bool = False


def int_to_bits(value: int, n: int) -> np.ndarray:
    """`value` as `n` bits, MSB first, uint8."""
    return np.array([(value >> (n - 1 - i)) & 1 for i in range(n)], dtype=np.uint8)


def bits_to_bytes(bits: np.ndarray) -> bytes:
    """Pack bits (MSB first) into bytes; a short last byte is padded with zeros."""
    return np.packbits(np.asarray(bits, dtype=np.uint8)).tobytes()


def _bytes_to_bits(data: bytes) -> np.ndarray:
    return np.unpackbits(np.frombuffer(data, dtype=np.uint8))


def frame_bits(payload: bytes, spec: FrameSpec) -> np.ndarray:
    """The bits of one frame from the sync word on: sync, [length], payload, CRC.

    Raises
    ------
    ValueError
        When the payload does not fit the spec's length.
    """
    if spec.sync_word is None:
        raise ValueError("frame_bits needs a sync word (raw mode has no frames)")
    if spec.length == "prefix8":
        if not 1 <= len(payload) <= 255:
            raise ValueError(f"payload of {len(payload)} bytes: prefix8 takes 1–255")
        body = bytes([len(payload)]) + payload
    else:
        if len(payload) != spec.length:
            raise ValueError(f"payload of {len(payload)} bytes: the link says {spec.length}")
        body = payload
    parts = [int_to_bits(spec.sync_word, spec.sync_bits), _bytes_to_bits(body)]
    if spec.crc != "none":
        c = crc_spec(spec.crc)
        parts.append(int_to_bits(crc_compute(c, body), c.width))
    return np.concatenate(parts)


def _read_frame(bits: np.ndarray, start: int, errors: int, spec: FrameSpec) -> FrameHit:
    pos = start + spec.sync_bits
    n_total = len(bits)
    crc_w = spec.crc_bits
    if spec.length == "prefix8":
        if pos + 8 > n_total:
            return FrameHit(start, errors, 0, b"", False, n_total - start, True)
        length = int(bits_to_bytes(bits[pos : pos + 8])[0])
        head = bits[pos : pos + 8]
        pos += 8
        if length == 0:  # not a frame this layout can carry
            return FrameHit(start, errors, 0, b"", False, pos - start, False)
    else:
        length = int(spec.length)
        head = bits[pos:pos]
    end_payload = pos + 8 * length
    end = end_payload + crc_w
    if end > n_total:
        avail = bits[pos : min(end_payload, n_total)]
        avail = avail[: len(avail) // 8 * 8]
        return FrameHit(start, errors, length, bits_to_bytes(avail), False, n_total - start, True)
    payload = bits_to_bytes(bits[pos:end_payload])
    if spec.crc == "none":
        ok = True
    else:
        c = crc_spec(spec.crc)
        body = bits_to_bytes(np.concatenate([head, bits[pos:end_payload]]))
        sent = int("".join("1" if b else "0" for b in bits[end_payload:end]), 2)
        ok = crc_compute(c, body) == sent
    return FrameHit(start, errors, length, payload, ok, end - start, False)


def sync_errors(bits: np.ndarray, spec: FrameSpec) -> np.ndarray:
    """Hamming distance of the sync word at every start position (int array)."""
    n = spec.sync_bits
    if len(bits) < n:
        return np.zeros(0, dtype=np.int64)
    pattern = int_to_bits(spec.sync_word, n).astype(np.int8)
    windows = sliding_window_view(np.asarray(bits, dtype=np.int8), n)
    return np.count_nonzero(windows != pattern, axis=1)


def find_frames(bits: np.ndarray, spec: FrameSpec) -> list[FrameHit]:
    """Find every frame in a burst's hard bits.

    A sync word is accepted with up to ``spec.sync_tolerance`` bit errors; where
    several nearby positions qualify, the one with fewest errors wins. After a
    frame whose CRC is good the search resumes past its end, otherwise just past
    its sync word (a bad length byte must not hide the next frame).

    Parameters
    ----------
    bits : numpy.ndarray
        Hard bits (0/1) in time order.
    spec : FrameSpec

    Returns
    -------
    list of FrameHit
    """
    if spec.sync_word is None:
        raise ValueError("find_frames needs a sync word (raw mode has no frames)")
    bits = np.asarray(bits, dtype=np.uint8)
    dist = sync_errors(bits, spec)
    candidates = np.flatnonzero(dist <= spec.sync_tolerance)
    hits: list[FrameHit] = []
    resume = 0
    n = spec.sync_bits
    for idx in candidates:
        if idx < resume:
            continue
        # Among candidates within half a sync word, take the best match.
        near = candidates[(candidates >= idx) & (candidates < idx + max(1, n // 2))]
        best = int(near[np.argmin(dist[near])])
        hit = _read_frame(bits, best, int(dist[best]), spec)
        hits.append(hit)
        resume = best + (hit.n_bits if hit.crc_ok else n)
    return hits
