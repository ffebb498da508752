"""Frame codings: PN9 whitening, Manchester (hard and soft), bit order, CRC byte order, length fields.

Check values come from shared/REFERENCE.md §9–10, the stdlib (binascii.crc_hqx is CRC-16/IBM-3740
with init 0xFFFF, REFERENCE §5) and the independent test modulator tests/fsk_modulator.py.
"""

from __future__ import annotations

import binascii
import doctest
import itertools

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from scipy import stats

import fsk_modulator as ref
from iqdemod import coding, framing
from iqdemod.errors import EstimateError, LinkError
from iqdemod.framing import body_bytes, find_frames, frame_bits, frame_symbols
from iqdemod.link import FrameSpec
from iqdemod.profile import link_to_toml, load_link


def test_doctests():
    assert doctest.testmod(coding).failed == 0
    assert doctest.testmod(framing).failed == 0


# --------------------------------------------------------------------------- REFERENCE §9 check values


def test_pn9_first_16_bytes():
    # REFERENCE §9 (common practice; ITU-T O.150 PN9 polynomial): the first 16 bytes, seed 0x1FF
    assert coding.pn9(16).hex() == "ffe11d9aed853324ea7ad2397097570a"


def test_pn9_is_a_maximal_length_sequence():
    # Each byte holds the register's next 8 output bits, the first in bit 0 (REFERENCE §9's step
    # rule), so the bytes read LSB first are the LFSR's output. A maximal-length 9-bit LFSR has
    # period 2⁹ − 1 = 511 and 256 ones per period (common practice).
    bits = coding.bytes_to_bits(coding.pn9(200), "lsb")
    assert np.array_equal(bits[511:1022], bits[:511])
    assert all(not np.array_equal(bits[p : p + 511], bits[:511]) for p in range(1, 511))
    assert bits[:511].sum() == 256


def test_whitening_is_its_own_inverse_and_matches_the_modulator():
    data = bytes(range(40))
    assert coding.whiten(coding.whiten(data)) == data
    assert coding.whiten(data) == bytes(a ^ b for a, b in zip(data, ref.pn9(40)))  # independent PN9
    assert coding.whiten(data, "none") == data


def test_manchester_of_a5_both_conventions():
    # REFERENCE §9: 0xA5 → chips 0x66 0x99 (IEEE 802.3) and 0x99 0x66 (G. E. Thomas)
    bits = coding.bytes_to_bits(b"\xa5")
    assert coding.bits_to_bytes(coding.manchester_encode(bits, "manchester")).hex() == "6699"
    assert coding.bits_to_bytes(coding.manchester_encode(bits, "manchester-inverted")).hex() == "9966"


def test_crc_sent_little_endian():
    # REFERENCE §9: CRC-16/IBM-3740 of "123456789" is 0x29B1 (catalogue check value, §5; stdlib
    # binascii.crc_hqx with init 0xFFFF); sent little-endian the bytes on air are b1 29
    assert binascii.crc_hqx(b"123456789", 0xFFFF) == 0x29B1
    spec = FrameSpec(sync_word=0x2DD4, sync_bits=16, length=9, crc="CRC-16/IBM-3740", crc_order="little")
    bits = frame_bits(b"123456789", spec)
    assert coding.bits_to_bytes(bits[-16:]).hex() == "b129"
    big = frame_bits(b"123456789", FrameSpec(sync_word=0x2DD4, sync_bits=16, length=9))
    assert coding.bits_to_bytes(big[-16:]).hex() == "29b1"


def test_lsb_first_bytes():
    # common practice: LSB first means the byte's bit 0 goes out first
    assert coding.bytes_to_bits(b"\x01", "lsb").tolist() == [1, 0, 0, 0, 0, 0, 0, 0]
    assert coding.reverse_bits(b"\x01\x80\x0f") == b"\x80\x01\xf0"


def test_length_fields_count_differently():
    base = dict(sync_word=0x2DD4, sync_bits=16, length="prefix8", crc="CRC-16/XMODEM")
    assert body_bytes(b"abc", FrameSpec(**base))[0] == 3
    assert body_bytes(b"abc", FrameSpec(**base, length_counts="payload+crc"))[0] == 5
    assert body_bytes(b"abc", FrameSpec(**base, length_counts="frame"))[0] == 6
    assert body_bytes(b"abc", FrameSpec(**base, length_counts="frame", length_offset=-1))[0] == 5
    # the CRC covers the length byte and the payload (CRC-16/XMODEM = binascii.crc_hqx(d, 0))
    body = body_bytes(b"abc", FrameSpec(**base, length_counts="payload+crc"))
    assert int.from_bytes(body[-2:], "big") == binascii.crc_hqx(body[:-2], 0)


# --------------------------------------------------------------------------- against the independent modulator

LAYOUTS = [
    dict(coding=c, whitening=w, bit_order=b, crc_order=o, length_counts=n, length_offset=k)
    for c, w, b, o, (n, k) in itertools.product(
        coding.CODINGS, coding.WHITENINGS, coding.BIT_ORDERS, ("big", "little"),
        [("payload", 0), ("payload+crc", 0), ("frame", 0), ("payload", 2), ("frame", -1)],
    )
]


@pytest.mark.parametrize("crc", ["CRC-16/IBM-3740", "CRC-32/ISO-HDLC"])
@pytest.mark.parametrize("prefix", [False, True])
def test_every_layout_matches_the_independent_modulator_and_reads_back(crc, prefix):
    rng = np.random.default_rng(14)
    for kw in LAYOUTS:
        if not prefix and (kw["length_counts"], kw["length_offset"]) != ("payload", 0):
            continue
        payload = rng.integers(0, 256, int(rng.integers(1, 40)), dtype=np.uint8).tobytes()
        spec = FrameSpec(sync_word=0x9B3C57E1, sync_bits=32, length="prefix8" if prefix else len(payload),
                         crc=crc, **kw)
        theirs = ref.frame_bits(payload, sync=0x9B3C57E1, sync_bits=32, preamble_bits=0,
                                length="prefix8" if prefix else "fixed", crc=crc, **kw)
        ours = frame_symbols(payload, spec)
        assert np.array_equal(ours, theirs), kw
        stream = np.concatenate([rng.integers(0, 2, 37).astype(np.uint8), ours, rng.integers(0, 2, 11).astype(np.uint8)])
        hits = [h for h in find_frames(stream, spec) if h.crc_ok]
        assert len(hits) == 1, kw
        (hit,) = hits
        assert hit.payload == payload and hit.length == len(payload) and hit.bit_index == 37
        assert hit.n_bits == len(ours) and hit.coding_errors == 0 and hit.sync_errors == 0


@settings(max_examples=60, deadline=None)
@given(payload=st.binary(min_size=1, max_size=30), layout=st.sampled_from(LAYOUTS),
       lead=st.integers(0, 40), flips=st.sets(st.integers(0, 63), max_size=4))
def test_manchester_sync_tolerates_chip_errors(payload, layout, lead, flips):
    layout = {**layout, "coding": "manchester"}
    spec = FrameSpec(sync_word=0x9B3C57E1, sync_tolerance=2, length="prefix8", crc="CRC-16/IBM-3740", **layout)
    chips = frame_symbols(payload, spec).copy()
    for f in flips:  # chip errors in the coded sync word (64 chips); 2 bits of tolerance = 4 chips
        chips[f] ^= 1
    stream = np.concatenate([np.resize(np.array([1, 0], np.uint8), lead), chips])
    good = [h for h in find_frames(stream, spec) if h.crc_ok]
    assert len(good) == 1 and good[0].payload == payload and good[0].sync_errors == len(flips)
    # a pair with one flipped chip is no symbol; both chips flipped make the other (valid) symbol
    assert good[0].coding_errors == sum(len({f for f in flips if f // 2 == p}) == 1 for p in range(32))


def test_coding_errors_are_counted_and_soft_decisions_use_the_statistics():
    spec = FrameSpec(sync_word=0x9B3C57E1, length=8, crc="CRC-16/IBM-3740", coding="manchester")
    chips = frame_symbols(b"buoy 042", spec)
    z1 = np.where(chips == 1, 4.0, 0.2)
    z0 = np.where(chips == 1, 0.2, 4.0)
    # a payload chip whose hard decision is wrong but weakly so: the pair (a, b) becomes 1,1 or 0,0
    k = 64 + 20  # a first chip of a pair inside the payload
    wrong, right = (z0, z1) if chips[k] == 1 else (z1, z0)
    wrong[k], right[k] = 1.3, 1.2  # the hard chip flips, by a small lead; its partner is clear
    hard = (z1 > z0).astype(np.uint8)
    assert hard[k] != chips[k]
    (soft,) = find_frames(hard, spec, stats=(z0, z1))
    assert soft.crc_ok and soft.payload == b"buoy 042" and soft.coding_errors == 1
    # without the statistics the invalid pair is decided by its first chip: the bit is wrong
    (only_hard,) = find_frames(hard, spec)
    assert not only_hard.crc_ok and only_hard.coding_errors == 1


def test_nrz_find_frames_ignores_stats():
    spec = FrameSpec(sync_word=0x9B3C57E1, length=8)
    bits = frame_symbols(b"12345678", spec)
    z = np.ones(len(bits))
    assert find_frames(bits, spec, stats=(z, z)) == find_frames(bits, spec)


# --------------------------------------------------------------------------- REFERENCE §10 by Monte Carlo


def _manchester_mc(ebn0_db: float, n_bits: int, seed: int, coding_name: str) -> int:
    """Bit errors of the library's soft Manchester decision on simulated chip statistics.

    Model (REFERENCE §10): each chip carries Eb/2 on its tone; complex correlator noise of unit
    variance (N0 = 1) on both tones' correlators, independent per chip; random carrier phase.
    """
    rng = np.random.default_rng(seed)
    bits = rng.integers(0, 2, n_bits).astype(np.uint8)
    chips = coding.manchester_encode(bits, coding_name)
    amp = np.sqrt(10 ** (ebn0_db / 10) / 2)
    phase = np.exp(2j * np.pi * rng.random(chips.size))
    noise = (rng.standard_normal((2, chips.size)) + 1j * rng.standard_normal((2, chips.size))) / np.sqrt(2)
    z1 = noise[1] + np.where(chips == 1, amp * phase, 0)
    z0 = noise[0] + np.where(chips == 0, amp * phase, 0)
    got, _, _ = coding.manchester_soft(np.abs(z0) ** 2, np.abs(z1) ** 2, coding_name)
    return int(np.count_nonzero(got != bits))


@pytest.mark.parametrize("ebn0_db, pb", [(8, 3.8142e-02), (10, 7.5802e-03)])
@pytest.mark.parametrize("coding_name", ["manchester", "manchester-inverted"])
def test_soft_manchester_decision_agrees_with_reference_table(ebn0_db, pb, coding_name):
    # REFERENCE §10 table (square-law combining, L = 2; Proakis [book]); exact binomial test
    n = 200_000
    k = _manchester_mc(ebn0_db, n, seed=ebn0_db * 7 + len(coding_name), coding_name=coding_name)
    assert stats.binomtest(k, n, pb).pvalue > 1e-3, (k, n * pb)
    # and it is not the NRZ figure at the same Eb/N0 (½·exp(−γ/2), REFERENCE §1)
    nrz = 0.5 * np.exp(-(10 ** (ebn0_db / 10)) / 2)
    assert stats.binomtest(k, n, nrz).pvalue < 1e-6


# --------------------------------------------------------------------------- the link profile


@pytest.mark.parametrize("key, value, message", [
    ("coding", "biphase", "coding 'biphase'"),
    ("whitening", "pn15", "whitening 'pn15'"),
    ("bit_order", "middle", "bit_order 'middle'"),
    ("crc_order", "mixed", "crc_order 'mixed'"),
    ("length_counts", "bytes", "length_counts 'bytes'"),
    ("length_offset", 1.5, "length_offset 1.5"),
    ("length_offset", 300, "length_offset 300"),
])
def test_bad_values_name_the_key(key, value, message):
    with pytest.raises(LinkError, match=message):
        FrameSpec(sync_word=0x12, sync_bits=8, length="prefix8", **{key: value})


def test_length_counts_needs_a_length_byte():
    with pytest.raises(LinkError, match="only for length"):
        FrameSpec(sync_word=0x12, sync_bits=8, length=8, length_counts="frame")


def test_profile_and_flags(tmp_path):
    p = tmp_path / "buoy.toml"
    p.write_text('[signal]\nbaud = 9600\nshift = 9600\n'.replace("shift", "shift_hz") +
                 '[frame]\nsync_word = "0x9B3C57E1"\nlength = "prefix8"\ncoding = "Manchester"\n'
                 'whitening = "pn9"\nbit_order = "lsb"\ncrc_order = "little"\nlength_counts = "frame"\n'
                 'length_offset = -1\n')
    link = load_link(p)
    f = link.frame
    assert (f.coding, f.whitening, f.bit_order, f.crc_order, f.length_counts, f.length_offset) == (
        "manchester", "pn9", "lsb", "little", "frame", -1)
    assert f.symbols_per_bit == 2
    again = link.replace(coding="nrz", whitening="none")
    assert again.frame.coding == "nrz" and again.frame.whitening == "none" and again.frame.bit_order == "lsb"
    # the profile written back reads back the same
    q = tmp_path / "back.toml"
    q.write_text(link_to_toml(link))
    assert load_link(q) == link


# --------------------------------------------------------------------------- REFERENCE §10 formula


@pytest.mark.parametrize("ebn0_db, manchester, nrz", [
    (8, 3.8142e-02, 2.1324e-02), (10, 7.5802e-03, 3.3690e-03), (12, 5.3926e-04, 1.8089e-04),
    (14, 7.2688e-06, 1.7558e-06),
])
def test_manchester_pb_matches_the_reference_table(ebn0_db, manchester, nrz):
    # REFERENCE §10 table (Proakis, square-law combining of L = 2 branches [book])
    from iqdemod import predict as P

    g = P.from_db(ebn0_db)
    assert P.pb_manchester(g) == pytest.approx(manchester, rel=1e-4)
    assert P.pb_square_law_combining(g, 1) == pytest.approx(nrz, rel=1e-4)  # L = 1 is REFERENCE §1
    assert P.pb_square_law_combining(g, 2) == pytest.approx(0.125 * np.exp(-g / 2) * (4 + g / 2), rel=1e-12)


def test_manchester_inverse_and_scheme_name():
    from iqdemod import predict as P

    need = P.ebn0_db_for_pb(7.5802e-03, "manchester")
    assert need == pytest.approx(10.0, abs=1e-3)  # REFERENCE §10 table, read backwards
    # statistics arguments are EstimateErrors since issue 11 (an IqdemodError, as LinkError is)
    with pytest.raises(EstimateError, match="options"):
        P.ebn0_db_for_pb(1e-5, "manchester", h=1.0)
    with pytest.raises(EstimateError, match="n_branches"):
        P.pb_square_law_combining(1.0, 0)


@settings(max_examples=80, deadline=None)
@given(data=st.data(), layout=st.sampled_from(LAYOUTS), n=st.integers(0, 700), soft=st.booleans())
def test_find_frames_on_noise_stays_in_bounds(data, layout, n, soft):
    spec = FrameSpec(sync_word=0x2DD4, sync_bits=16, sync_tolerance=3, length="prefix8", crc="CRC-8/SMBUS", **layout)
    seed = data.draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    symbols = rng.integers(0, 2, n).astype(np.uint8)
    stats_ = (rng.exponential(size=n), rng.exponential(size=n)) if soft else None
    for hit in find_frames(symbols, spec, stats=stats_):
        assert 0 <= hit.bit_index < n and 0 < hit.n_bits <= n - hit.bit_index
        assert 0 <= hit.coding_errors <= hit.n_bits // 2 and hit.sync_errors <= 2 * spec.sync_tolerance
        assert len(hit.payload) <= hit.length or hit.length == 0
