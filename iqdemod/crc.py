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
    """The byte-wise table of `spec`'s register (reflected when ``refin``)."""
    if spec.width < 8:
        raise LinkError(f"CRC {spec.name}: widths below 8 bits are not supported")
    return _table(spec)


def crc_init(spec: CrcSpec) -> int:
    """The register before the first byte (the catalogue's init, reflected when ``refin``)."""
    return _reflect(spec.init, spec.width) if spec.refin else spec.init


def crc_update(spec: CrcSpec, reg, byte, table):
    """The register after one more byte.

    Works on Python ints and, element-wise, on int64 numpy arrays of
    registers and bytes (the survey steps many candidate frames at once);
    `table` is :func:`crc_table` as a tuple or as a numpy array.
    """
    if spec.refin:
        return (reg >> 8) ^ table[(reg ^ byte) & 0xFF]
    mask = (1 << spec.width) - 1
    return ((reg << 8) & mask) ^ table[((reg >> (spec.width - 8)) ^ byte) & 0xFF]


def crc_final(spec: CrcSpec, reg):
    """The CRC value from the register (reflection of the output, xorout); ints or int64 arrays."""
    if spec.refin != spec.refout:
        reg = _reflect(reg, spec.width)
    return (reg ^ spec.xorout) & ((1 << spec.width) - 1)


def crc_compute(spec: CrcSpec | str, data: bytes) -> int:
    """The CRC of `data` as the catalogue defines it (final value, after xorout)."""
    if isinstance(spec, str):
        spec = crc_spec(spec)
    table = crc_table(spec)
    reg = crc_init(spec)
    for byte in data:
        reg = crc_update(spec, reg, byte, table)
    return crc_final(spec, reg)
