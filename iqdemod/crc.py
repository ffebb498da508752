"""CRCs by their names in the public CRC catalogue.

Source: Greg Cook, "Catalogue of parametrised CRC algorithms" (the parameters
width, poly, init, refin, refout, xorout and the check value, the CRC of the
ASCII bytes "123456789"). Each entry below carries its catalogue check value,
and the tests recompute it.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

from .errors import LinkError

__all__ = ["CrcSpec", "CRC_CATALOGUE", "crc_spec", "crc_compute", "crc_table", "crc_init", "crc_update", "crc_final"]


@dataclass(frozen=True)
class CrcSpec:
    """One parametrised CRC (Williams' model, as used by the catalogue)."""

    name: str
    width: int
    poly: int
    init: int
    refin: bool
    refout: bool
    xorout: int
    check: int

    def __post_init__(self) -> None:
        if not 1 <= self.width <= 64:
            raise LinkError(f"CRC width {self.width}: must be 1–64")


_ENTRIES = [
    CrcSpec("CRC-8/SMBUS", 8, 0x07, 0x00, False, False, 0x00, 0xF4),
    CrcSpec("CRC-8/MAXIM-DOW", 8, 0x31, 0x00, True, True, 0x00, 0xA1),
    CrcSpec("CRC-16/IBM-3740", 16, 0x1021, 0xFFFF, False, False, 0x0000, 0x29B1),
    CrcSpec("CRC-16/XMODEM", 16, 0x1021, 0x0000, False, False, 0x0000, 0x31C3),
    CrcSpec("CRC-16/KERMIT", 16, 0x1021, 0x0000, True, True, 0x0000, 0x2189),
    CrcSpec("CRC-16/ARC", 16, 0x8005, 0x0000, True, True, 0x0000, 0xBB3D),
    CrcSpec("CRC-16/IBM-SDLC", 16, 0x1021, 0xFFFF, True, True, 0xFFFF, 0x906E),
    CrcSpec("CRC-16/DNP", 16, 0x3D65, 0x0000, True, True, 0xFFFF, 0xEA82),
    CrcSpec("CRC-32/ISO-HDLC", 32, 0x04C11DB7, 0xFFFFFFFF, True, True, 0xFFFFFFFF, 0xCBF43926),
    CrcSpec("CRC-32/ISCSI", 32, 0x1EDC6F41, 0xFFFFFFFF, True, True, 0xFFFFFFFF, 0xE3069283),
]
CRC_CATALOGUE: dict[str, CrcSpec] = {spec.name: spec for spec in _ENTRIES}
_BY_FOLDED_NAME = {key.lower(): spec for key, spec in CRC_CATALOGUE.items()}


def crc_spec(name: str) -> CrcSpec:
    """Look up a catalogue CRC by name (case-insensitive).

    Raises
    ------
    LinkError
        For a name not in :data:`CRC_CATALOGUE`.

    Examples
    --------
    Names are matched without regard to case; the parameters are the
    catalogue's (Greg Cook's CRC catalogue, CRC-16/IBM-3740):

    >>> spec = crc_spec("crc-16/ibm-3740")
    >>> spec.name, hex(spec.poly), hex(spec.init), hex(spec.check)
    ('CRC-16/IBM-3740', '0x1021', '0xffff', '0x29b1')
    """
    spec = _BY_FOLDED_NAME.get(str(name).strip().lower())
    if spec is not None:
        return spec
    raise LinkError(f"CRC {name!r}: unknown (known: {', '.join(CRC_CATALOGUE)}, or \"none\")")


def _reflect(value, width: int):
    """`value` with its low `width` bits reversed; an int, or an integer numpy array element-wise."""
    out = value & 0
    for i in range(width):
        out |= ((value >> i) & 1) << (width - 1 - i)
    return out


@lru_cache(maxsize=None)
def _table(spec: CrcSpec) -> tuple[int, ...]:
    # A byte-wise table for the reflected or the normal register, whichever the CRC uses.
    mask = (1 << spec.width) - 1
    table = []
    if spec.refin:
        poly = _reflect(spec.poly, spec.width)
        for byte in range(256):
            reg = byte
            for _ in range(8):
                reg = (reg >> 1) ^ poly if reg & 1 else reg >> 1
            table.append(reg & mask)
    else:
        top = 1 << (spec.width - 1)
        for byte in range(256):
            reg = byte << (spec.width - 8) if spec.width >= 8 else byte
            for _ in range(8):
                reg = ((reg << 1) ^ spec.poly) if reg & top else reg << 1
            table.append(reg & mask)
    return tuple(table)


def crc_table(spec: CrcSpec) -> tuple[int, ...]:
    """The byte-wise table of `spec`'s register (reflected when ``refin``).

    Examples
    --------
    Entry 1 of a normal (non-reflected) table is the polynomial itself, and
    entry 0x80 of a reflected one the reflected polynomial (0xEDB88320 for
    CRC-32/ISO-HDLC, whose polynomial is 0x04C11DB7 in the CRC catalogue):

    >>> table = crc_table(crc_spec("CRC-16/XMODEM"))
    >>> len(table), hex(table[1])
    (256, '0x1021')
    >>> hex(crc_table(crc_spec("CRC-32/ISO-HDLC"))[0x80])
    '0xedb88320'
    """
    if spec.width < 8:
        raise LinkError(f"CRC {spec.name}: widths below 8 bits are not supported")
    return _table(spec)


def crc_init(spec: CrcSpec) -> int:
    """The register before the first byte (the catalogue's init, reflected when ``refin``).

    Examples
    --------
    >>> hex(crc_init(crc_spec("CRC-16/IBM-3740")))
    '0xffff'
    >>> hex(crc_init(crc_spec("CRC-16/KERMIT")))
    '0x0'
    """
    return _reflect(spec.init, spec.width) if spec.refin else spec.init


def crc_update(spec: CrcSpec, reg, byte, table):
    """The register after one more byte.

    Works on Python ints and, element-wise, on int64 numpy arrays of
    registers and bytes (the survey steps many candidate frames at once);
    `table` is :func:`crc_table` as a tuple or as a numpy array.

    Examples
    --------
    Feeding the catalogue's check string byte by byte, then finishing with
    :func:`crc_final`, gives the catalogue check value (CRC-16/IBM-3740 of
    "123456789" is 0x29B1, Greg Cook's CRC catalogue); the standard library's
    ``binascii.crc_hqx`` with init 0xFFFF computes the same CRC:

    >>> import binascii
    >>> spec = crc_spec("CRC-16/IBM-3740")
    >>> table, reg = crc_table(spec), crc_init(spec)
    >>> for byte in b"123456789":
    ...     reg = crc_update(spec, reg, byte, table)
    >>> hex(crc_final(spec, reg)), hex(binascii.crc_hqx(b"123456789", 0xFFFF))
    ('0x29b1', '0x29b1')

    Many registers step at once as int64 numpy arrays:

    >>> import numpy as np
    >>> regs = np.full(3, crc_init(spec), dtype=np.int64)
    >>> for byte in b"123456789":
    ...     regs = crc_update(spec, regs, byte, np.array(table, dtype=np.int64))
    >>> [hex(int(v)) for v in crc_final(spec, regs)]
    ['0x29b1', '0x29b1', '0x29b1']
    """
    if spec.refin:
        return (reg >> 8) ^ table[(reg ^ byte) & 0xFF]
    mask = (1 << spec.width) - 1
    return ((reg << 8) & mask) ^ table[((reg >> (spec.width - 8)) ^ byte) & 0xFF]


def crc_final(spec: CrcSpec, reg):
    """The CRC value from the register (reflection of the output, xorout); ints or int64 arrays.

    Examples
    --------
    The register after "123456789" for CRC-32/ISO-HDLC; the final value is the
    catalogue check 0xCBF43926 (Greg Cook's CRC catalogue), as ``zlib.crc32``
    of the standard library gives:

    >>> import zlib
    >>> spec = crc_spec("CRC-32/ISO-HDLC")
    >>> table, reg = crc_table(spec), crc_init(spec)
    >>> for byte in b"123456789":
    ...     reg = crc_update(spec, reg, byte, table)
    >>> hex(crc_final(spec, reg)), hex(zlib.crc32(b"123456789"))
    ('0xcbf43926', '0xcbf43926')
    """
    if spec.refin != spec.refout:
        reg = _reflect(reg, spec.width)
    return (reg ^ spec.xorout) & ((1 << spec.width) - 1)


def crc_compute(spec: CrcSpec | str, data: bytes) -> int:
    """The CRC of `data` as the catalogue defines it (final value, after xorout).

    Examples
    --------
    Check values of the public CRC catalogue (Greg Cook): the CRC of the ASCII
    bytes "123456789". The standard library computes some of the same CRCs:
    ``binascii.crc_hqx(d, 0xFFFF)`` is CRC-16/IBM-3740, ``binascii.crc_hqx(d, 0)``
    is CRC-16/XMODEM and ``zlib.crc32`` is CRC-32/ISO-HDLC:

    >>> import binascii, zlib
    >>> check = b"123456789"
    >>> hex(crc_compute("CRC-16/IBM-3740", check)), hex(binascii.crc_hqx(check, 0xFFFF))
    ('0x29b1', '0x29b1')
    >>> hex(crc_compute("CRC-16/XMODEM", check)), hex(binascii.crc_hqx(check, 0))
    ('0x31c3', '0x31c3')
    >>> hex(crc_compute("CRC-32/ISO-HDLC", check)), hex(zlib.crc32(check))
    ('0xcbf43926', '0xcbf43926')
    >>> hex(crc_compute(crc_spec("CRC-16/KERMIT"), check))
    '0x2189'
    """
    if isinstance(spec, str):
        spec = crc_spec(spec)
    table = crc_table(spec)
    reg = crc_init(spec)
    for byte in data:
        reg = crc_update(spec, reg, byte, table)
    return crc_final(spec, reg)
