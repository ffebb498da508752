"""Line codings and data scramblers that telemetry frames use, in one place.

One part, many users: the framer (:mod:`iqdemod.framing`), the generator
(:mod:`iqdemod.synth`) and the survey (:mod:`iqdemod.survey`) all call these
functions.

- **PN9 whitening** (REFERENCE §9, common practice; the polynomial is the
  PN9 of ITU-T O.150): the LFSR x⁹ + x⁵ + 1 with its 9-bit register seeded
  with all ones. Each byte of the sequence is the register's low 8 bits, after
  which the register steps 8 times. The bytes are XORed onto the data bytes,
  first byte first; XOR twice gives the data back.
- **Manchester** (REFERENCE §9): IEEE 802.3 sends a 0 as the chips 1,0 and a
  1 as 0,1; the G. E. Thomas convention ("manchester-inverted") is the
  opposite. A chip pair 0,0 or 1,1 is no symbol: a *coding error*.
- **Soft Manchester decisions** (REFERENCE §10): with the two tones'
  square-law statistics z0sq, z1sq of each chip, the bit decision of a pair
  (a, b) compares the two hypotheses' summed statistics. For IEEE 802.3, bit
  1 (chips 0,1) scores z0sq[a] + z1sq[b] and bit 0 (chips 1,0) scores
  z1sq[a] + z0sq[b]: square-law combining of two branches (Proakis).
- **Bit order**: bytes sent least significant bit first are the bytes with
  their bits reversed, sent MSB first.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

__all__ = [
    "CODINGS",
    "WHITENINGS",
    "BIT_ORDERS",
    "pn9",
    "whiten",
    "bytes_to_bits",
    "bits_to_bytes",
    "reverse_bits",
    "manchester_encode",
    "manchester_decode",
    "manchester_soft",
    "symbols_per_bit",
]

CODINGS = ("nrz", "manchester", "manchester-inverted")
WHITENINGS = ("none", "pn9")
BIT_ORDERS = ("msb", "lsb")

_PN9_SEED = 0x1FF


@lru_cache(maxsize=8)
def _pn9_cached(n_bytes: int) -> bytes:
    s = _PN9_SEED
    out = bytearray(n_bytes)
    for i in range(n_bytes):
        out[i] = s & 0xFF
        for _ in range(8):
            fb = (s ^ (s >> 5)) & 1  # taps of x⁹ + x⁵ + 1 in this right-shifting form
            s = (s >> 1) | (fb << 8)
    return bytes(out)


def pn9(n_bytes: int) -> bytes:
    """The first `n_bytes` bytes of the PN9 whitening sequence (register seeded 0x1FF).

    Parameters
    ----------
    n_bytes : int
        How many bytes, >= 0.

    Returns
    -------
    bytes

    Examples
    --------
    >>> pn9(4).hex()
    'ffe11d9a'
    """
    n = int(n_bytes)
    if n < 0:
        raise ValueError(f"n_bytes {n_bytes}: must be >= 0")
    # Frames are at most a few hundred bytes: compute a generous prefix once and slice it.
    size = max(512, 1 << max(0, n - 1).bit_length())
    return _pn9_cached(size)[:n]


def whiten(data: bytes, whitening: str = "pn9") -> bytes:
    """XOR the whitening sequence onto `data`, first byte first (its own inverse).

    Parameters
    ----------
    data : bytes
    whitening : {"pn9", "none"}

    Examples
    --------
    >>> whiten(bytes(3)).hex()
    'ffe11d'
    >>> whiten(whiten(b"buoy 7")) == b"buoy 7"
    True
    """
    if whitening == "none":
        return bytes(data)
    if whitening != "pn9":
        raise ValueError(f"whitening {whitening!r}: expected one of {', '.join(WHITENINGS)}")
    d = np.frombuffer(bytes(data), dtype=np.uint8)
    seq = np.frombuffer(pn9(len(d)), dtype=np.uint8)
    return (d ^ seq).tobytes()


_REVERSED = np.array([int(f"{b:08b}"[::-1], 2) for b in range(256)], dtype=np.uint8)


def reverse_bits(data: bytes) -> bytes:
    """Each byte with its bit order reversed (LSB-first bytes ↔ MSB-first bytes).

    Examples
    --------
    >>> reverse_bits(bytes([0x01, 0xA0])).hex()
    '8005'
    """
    return _REVERSED[np.frombuffer(bytes(data), dtype=np.uint8)].tobytes()


def bytes_to_bits(data: bytes, order: str = "msb") -> np.ndarray:
    """The bits of `data` in the order they are sent, uint8 0/1.

    Parameters
    ----------
    data : bytes
    order : {"msb", "lsb"}
        Most or least significant bit of each byte first.

    Examples
    --------
    The byte 0xA5 (bits 1010 0101) sent most, then least significant bit first:

    >>> bytes_to_bits(bytes([0xA5])).tolist()
    [1, 0, 1, 0, 0, 1, 0, 1]
    >>> bytes_to_bits(bytes([0x01]), "lsb").tolist()
    [1, 0, 0, 0, 0, 0, 0, 0]
    """
    if order not in BIT_ORDERS:
        raise ValueError(f"bit order {order!r}: expected one of {', '.join(BIT_ORDERS)}")
    return np.unpackbits(np.frombuffer(bytes(data), dtype=np.uint8), bitorder="big" if order == "msb" else "little")


def bits_to_bytes(bits: np.ndarray, order: str = "msb") -> bytes:
    """Pack bits sent in `order` into bytes; a short last byte is padded with zeros.

    Examples
    --------
    >>> bits_to_bytes(bytes_to_bits(b"\\x5a", "lsb"), "lsb").hex()
    '5a'
    """
    if order not in BIT_ORDERS:
        raise ValueError(f"bit order {order!r}: expected one of {', '.join(BIT_ORDERS)}")
    return np.packbits(np.asarray(bits, dtype=np.uint8), bitorder="big" if order == "msb" else "little").tobytes()


def symbols_per_bit(coding: str) -> int:
    """Symbols on the air per data bit: 1 for NRZ, 2 (chips) for Manchester.

    Examples
    --------
    >>> symbols_per_bit("nrz"), symbols_per_bit("manchester"), symbols_per_bit("manchester-inverted")
    (1, 2, 2)
    """
    if coding not in CODINGS:
        raise ValueError(f"coding {coding!r}: expected one of {', '.join(CODINGS)}")
    return 1 if coding == "nrz" else 2


def _inverted(coding: str) -> bool:
    if coding not in CODINGS or coding == "nrz":
        raise ValueError(f"coding {coding!r}: expected \"manchester\" or \"manchester-inverted\"")
    return coding == "manchester-inverted"


def manchester_encode(bits: np.ndarray, coding: str = "manchester") -> np.ndarray:
    """Manchester chips of `bits` (two per bit), uint8.

    Parameters
    ----------
    bits : array_like of 0/1
    coding : {"manchester", "manchester-inverted"}
        IEEE 802.3 (0 → 1,0; 1 → 0,1) or G. E. Thomas (0 → 0,1; 1 → 1,0).

    Examples
    --------
    >>> bits_to_bytes(manchester_encode(bytes_to_bits(b"\\xa5"))).hex()
    '6699'
    """
    b = np.asarray(bits, dtype=np.uint8) & 1
    first = b if _inverted(coding) else 1 - b
    return np.stack([first, 1 - first], axis=-1).reshape(-1).astype(np.uint8)


def manchester_decode(chips: np.ndarray, coding: str = "manchester") -> tuple[np.ndarray, np.ndarray]:
    """Hard decoding of chip pairs (chips 0,1 / 2,3 / …; an odd last chip is dropped).

    A pair that is no symbol (0,0 or 1,1) is decided by its first chip and
    flagged.

    Returns
    -------
    bits : numpy.ndarray of uint8
    invalid : numpy.ndarray of bool
        True where the pair was 0,0 or 1,1 (a coding error).

    Examples
    --------
    REFERENCE §9 (IEEE 802.3 clause 7): the byte 0xA5 is sent as the chips
    0x66 0x99, and the Thomas convention's chips 0x99 0x66 decode to it too:

    >>> bits, invalid = manchester_decode(bytes_to_bits(bytes([0x66, 0x99])))
    >>> bits_to_bytes(bits).hex(), int(invalid.sum())
    ('a5', 0)
    >>> bits, _ = manchester_decode(bytes_to_bits(bytes([0x99, 0x66])), "manchester-inverted")
    >>> bits_to_bytes(bits).hex()
    'a5'

    A pair 1,1 is no symbol: decided by its first chip and flagged.

    >>> bits, invalid = manchester_decode([0, 1, 1, 1, 1, 0])
    >>> bits.tolist(), invalid.tolist()
    ([1, 0, 0], [False, True, False])
    """
    c = np.asarray(chips, dtype=np.uint8) & 1
    n = len(c) // 2
    a, b = c[0 : 2 * n : 2], c[1 : 2 * n : 2]
    bits = a if _inverted(coding) else 1 - a
    return bits.astype(np.uint8), a == b


def manchester_soft(z0sq: np.ndarray, z1sq: np.ndarray, coding: str = "manchester"
                    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Soft decoding of chip pairs from the chips' square-law statistics.

    Chips 0,1 form the first pair, 2,3 the next; an odd last chip is dropped.
    Bit 1 (IEEE 802.3: chips 0,1) scores ``z0sq[a] + z1sq[b]``, bit 0 (chips
    1,0) scores ``z1sq[a] + z0sq[b]``; the larger wins (REFERENCE §10:
    square-law combining of two branches). A pair whose hard chip decisions
    (z1sq > z0sq) are equal is a coding error, whatever the soft decision.

    Parameters
    ----------
    z0sq, z1sq : numpy.ndarray
        Square-law statistics of the bit-0 and the bit-1 tone, per chip.
    coding : {"manchester", "manchester-inverted"}

    Returns
    -------
    bits : numpy.ndarray of uint8
    invalid : numpy.ndarray of bool
        Coding errors.
    metric : numpy.ndarray of float
        Score of the chosen bit minus that of the other (>= 0).

    Examples
    --------
    >>> z0 = np.array([0.1, 2.0, 1.5, 0.2]); z1 = np.array([1.8, 0.3, 0.9, 0.1])
    >>> bits, invalid, _ = manchester_soft(z0, z1)
    >>> bits.tolist(), invalid.tolist()
    ([0, 1], [False, True])
    """
    z0 = np.asarray(z0sq, dtype=np.float64)
    z1 = np.asarray(z1sq, dtype=np.float64)
    if z0.shape != z1.shape:
        raise ValueError(f"z0sq {z0.shape} and z1sq {z1.shape}: must have the same shape")
    n = len(z0) // 2
    a0, b0 = z0[0 : 2 * n : 2], z0[1 : 2 * n : 2]
    a1, b1 = z1[0 : 2 * n : 2], z1[1 : 2 * n : 2]
    score_lo_hi = a0 + b1  # chips 0,1
    score_hi_lo = a1 + b0  # chips 1,0
    lo_hi = score_lo_hi > score_hi_lo
    bits = (~lo_hi if _inverted(coding) else lo_hi).astype(np.uint8)
    invalid = (a1 > a0) == (b1 > b0)
    return bits, invalid, np.abs(score_lo_hi - score_hi_lo)
