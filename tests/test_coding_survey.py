"""The survey infers the coding and the whitening of a frame layout (issue 14).

Captures come from the independent test modulator (tests/fsk_modulator.py), through the helpers of
tests/test_coding_receiver.py.
"""

from __future__ import annotations

import pytest

import iqdemod
from iqdemod.profile import link_to_toml, load_link
from iqdemod.survey import survey
from test_coding_receiver import BAUD, OFFSET, modulated_capture

CASES = {
    "manchester": dict(coding="manchester"),
    "pn9": dict(whitening="pn9"),
    "manchester-inverted with pn9": dict(coding="manchester-inverted", whitening="pn9"),
}


@pytest.mark.parametrize("name", list(CASES))
def test_survey_suggests_coding_and_whitening_and_its_profile_decodes(tmp_path, name):
    layout = CASES[name]
    meta, payloads = modulated_capture(tmp_path / "buoys", layout, ebn0_db=16.0, frames=12, seed=7)
    with iqdemod.open_capture(meta) as cap:
        result = survey(cap)
    assert len(result.signals) == 1
    (sig,) = result.signals
    assert sig.coding == layout.get("coding", "nrz")
    assert sig.whitening == layout.get("whitening", "none")
    assert sig.baud == pytest.approx(BAUD, rel=0.01)  # the chip rate: baud is the rate on the air
    assert sig.offset_hz == pytest.approx(OFFSET, abs=0.05 * BAUD)
    assert sig.sync_word == "0x9b3c57e1" and sig.length == "prefix8" and sig.crc == "CRC-16/IBM-3740"
    assert sig.as_dict()["coding"] == sig.coding
    # the profile it writes reads back and decodes every frame
    profile = tmp_path / "suggested.toml"
    profile.write_text(link_to_toml(sig.to_link()))
    link = load_link(profile)
    assert link.frame.coding == sig.coding and link.frame.whitening == sig.whitening
    frames = list(iqdemod.decode(meta, link))
    assert [f.payload for f in frames if f.crc_ok] == payloads


def test_survey_finds_what_the_length_byte_counts(tmp_path):
    layout = dict(length_counts="payload+crc")
    meta, payloads = modulated_capture(tmp_path / "lc", layout, ebn0_db=16.0, frames=10, seed=8)
    with iqdemod.open_capture(meta) as cap:
        (sig,) = survey(cap).signals
    assert (sig.coding, sig.whitening, sig.length, sig.length_counts) == ("nrz", "none", "prefix8", "payload+crc")
    assert [f.payload for f in iqdemod.decode(meta, sig.to_link()) if f.crc_ok] == payloads


def test_survey_finds_lsb_first_bytes_and_a_little_endian_crc(tmp_path):
    layout = dict(bit_order="lsb", crc_order="little")
    meta, payloads = modulated_capture(tmp_path / "lsb", layout, ebn0_db=16.0, frames=10, seed=9)
    with iqdemod.open_capture(meta) as cap:
        (sig,) = survey(cap).signals
    assert (sig.coding, sig.whitening, sig.bit_order, sig.crc_order) == ("nrz", "none", "lsb", "little")
    assert [f.payload for f in iqdemod.decode(meta, sig.to_link()) if f.crc_ok] == payloads
