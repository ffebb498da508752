"""CRCs against the public CRC catalogue and the standard library."""

import binascii
import zlib

import pytest
from hypothesis import given, strategies as st

from iqdemod.crc import CRC_CATALOGUE, crc_compute, crc_spec
from iqdemod.errors import LinkError

CHECK = b"123456789"

# Check values: "Catalogue of parametrised CRC algorithms" (Greg Cook) [spec], as listed in
# REFERENCE.md §5 for the first five; the other entries' check values are the catalogue's,
# quoted from memory, and each is recomputed here.
REFERENCE_CHECKS = {
    "CRC-16/IBM-3740": 0x29B1,
    "CRC-16/XMODEM": 0x31C3,
    "CRC-16/KERMIT": 0x2189,
    "CRC-16/ARC": 0xBB3D,
    "CRC-32/ISO-HDLC": 0xCBF43926,
}


@pytest.mark.parametrize("name,check", sorted(REFERENCE_CHECKS.items()))
def test_reference_check_values(name, check):
    # REFERENCE §5, CRC catalogue [spec]
    assert crc_compute(name, CHECK) == check


@pytest.mark.parametrize("name", sorted(CRC_CATALOGUE))
def test_every_entry_meets_its_catalogue_check(name):
    spec = CRC_CATALOGUE[name]
    assert crc_compute(spec, CHECK) == spec.check


@given(st.binary(max_size=300))
def test_against_stdlib(data):
    # stdlib cross-checks named in REFERENCE §5
    assert crc_compute("CRC-16/IBM-3740", data) == binascii.crc_hqx(data, 0xFFFF)
    assert crc_compute("CRC-16/XMODEM", data) == binascii.crc_hqx(data, 0)
    assert crc_compute("CRC-32/ISO-HDLC", data) == zlib.crc32(data)


def test_names_are_case_insensitive_and_unknown_is_an_error():
    assert crc_spec("crc-16/ibm-3740").name == "CRC-16/IBM-3740"
    with pytest.raises(LinkError, match="CRC 'CRC-99/NOPE': unknown"):
        crc_spec("CRC-99/NOPE")
