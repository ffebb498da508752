"""Framing: sync search with tolerance, length (fixed and prefix8), CRC."""

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from iqdemod.crc import crc_compute
from iqdemod.framing import bits_to_bytes, find_frames, frame_bits, int_to_bits
from iqdemod.link import FrameSpec

SPEC = FrameSpec(sync_word=0x9B3C57E1, sync_bits=32, sync_tolerance=3, length=8, crc="CRC-16/IBM-3740")


def test_frame_layout_is_sync_payload_crc_msb_first():
    payload = b"123456789"[:8]
    bits = frame_bits(payload, SPEC)
    assert bits_to_bytes(bits[:32]) == bytes.fromhex("9B3C57E1")
    assert bits_to_bytes(bits[32:96]) == payload
    # CRC register value sent MSB first (catalogue CRC-16/IBM-3740)
    assert int("".join(map(str, bits[96:])), 2) == crc_compute("CRC-16/IBM-3740", payload)


def test_prefix8_crc_covers_the_length_byte():
    spec = FrameSpec(sync_word=0x2DD4, sync_bits=16, length="prefix8", crc="CRC-16/XMODEM")
    bits = frame_bits(b"harbour", spec)
    assert bits_to_bytes(bits[16:24]) == bytes([7])
    hits = find_frames(np.concatenate([np.zeros(5, np.uint8), bits]), spec)
    assert len(hits) == 1 and hits[0].payload == b"harbour" and hits[0].crc_ok and hits[0].length == 7


def test_bad_crc_is_reported_not_dropped():
    bits = frame_bits(bytes(8), SPEC).copy()
    bits[40] ^= 1
    (hit,) = find_frames(bits, SPEC)
    assert not hit.crc_ok and hit.sync_errors == 0


def test_truncated_frame():
    bits = frame_bits(bytes(range(8)), SPEC)[:60]
    (hit,) = find_frames(bits, SPEC)
    assert hit.truncated and not hit.crc_ok


def test_two_frames_back_to_back():
    a, b = frame_bits(b"AAAAAAAA", SPEC), frame_bits(b"BBBBBBBB", SPEC)
    hits = find_frames(np.concatenate([a, b]), SPEC)
    assert [h.payload for h in hits] == [b"AAAAAAAA", b"BBBBBBBB"] and all(h.crc_ok for h in hits)


@settings(max_examples=150, deadline=None)
@given(
    noise=st.lists(st.integers(0, 1), min_size=0, max_size=200),
    offset=st.integers(0, 150),
    flips=st.sets(st.integers(0, 31), max_size=3),
    payload=st.binary(min_size=8, max_size=8),
)
def test_planted_sync_is_found_at_any_offset_with_tolerated_errors(noise, offset, flips, payload):
    stream = np.array(noise + [0] * 200, np.uint8)[: offset + 200]
    stream = np.resize(stream, offset)
    frame = frame_bits(payload, SPEC).copy()
    for i in flips:
        frame[i] ^= 1
    bits = np.concatenate([stream, frame, np.array(noise, np.uint8)])
    hits = find_frames(bits, SPEC)
    good = [h for h in hits if h.crc_ok and h.payload == payload]
    assert good and good[0].bit_index == offset and good[0].sync_errors == len(flips)


@settings(max_examples=100, deadline=None)
@given(st.lists(st.integers(0, 1), max_size=2000), st.sampled_from([8, "prefix8"]), st.integers(0, 8))
def test_framer_on_random_bits_never_crashes(bits, length, tol):
    spec = FrameSpec(sync_word=0xA5, sync_bits=8, sync_tolerance=min(tol, 7), length=length, crc="CRC-8/SMBUS")
    for hit in find_frames(np.array(bits, np.uint8), spec):
        assert 0 <= hit.bit_index < len(bits) and hit.sync_errors <= spec.sync_tolerance


def test_int_to_bits():
    assert list(int_to_bits(0b1011, 4)) == [1, 0, 1, 1]
