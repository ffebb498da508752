"""Gaussian and continuous-phase FSK through the whole receiver.

Captures come from the tests' independent modulator (tests/fsk_modulator.py) through the builder of
checks/gfsk_acceptance.py, which runs the same rows with hundreds of frames. Eb/N0 follows
shared/REFERENCE.md §8.
"""

import sys
from pathlib import Path

import numpy as np
import pytest

import iqdemod
from iqdemod.errors import LinkError
from iqdemod.profile import link_to_toml, load_link

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "checks"))
import gfsk_acceptance as ga  # noqa: E402


@pytest.mark.parametrize("h,bt,ebn0", [(0.5, 0.5, 13.0), (1.0, 0.3, 14.0)])
def test_every_gfsk_frame_right(tmp_path, h, bt, ebn0):
    meta, truth = ga.build(tmp_path, "g", ebn0_db=ebn0, h=h, bt=bt, n_frames=12, seed=31)
    frames = list(iqdemod.decode(meta, ga.link_for(h, bt)))
    right, errors, bits, missed = ga.score(frames, truth)
    assert right == 12 and missed == 0
    assert sum(f.crc_ok for f in frames) == 12  # no false good frame
    err = np.array([f.ebn0_db - ebn0 for f in frames if f.crc_ok])
    assert abs(err.mean()) < 0.5  # the pulse-aware estimate (the line for the capture: 0.5 dB)


def test_the_one_symbol_bank_is_not_enough_for_gfsk(tmp_path):
    """GFSK BT 0.5, h ½ at 12 dB: the multi-symbol detector decodes what the one-symbol bank loses
    (REFERENCE §12: 2.7e-2 against 4.8e-5 bit errors with known timing)."""
    meta, truth = ga.build(tmp_path, "g", ebn0_db=12.0, h=0.5, bt=0.5, n_frames=12, seed=5)
    multi = ga.score(list(iqdemod.decode(meta, ga.link_for(0.5, 0.5))), truth)[0]
    single = ga.score(list(iqdemod.decode(meta, ga.link_for(0.5, 0.5).replace(detector="per-symbol"))), truth)[0]
    assert multi == 12 and single <= 6


def test_health_knows_the_pulse(tmp_path):
    meta, _ = ga.build(tmp_path, "g", ebn0_db=14.0, h=0.5, bt=0.5, n_frames=20, seed=8)
    r = iqdemod.health.assess(meta, ga.link_for(0.5, 0.5))
    assert r.ebn0_db == pytest.approx(14.0, abs=0.5)
    assert r.pb_model.startswith("multi-symbol-5-gaussian")
    assert r.verdict.startswith("consistent")
    assert r.margin_db == pytest.approx(r.ebn0_db - r.ebn0_needed_db)


def test_detector_defaults_follow_the_pulse_and_h():
    base = dict(baud=9600, shift=9600, offset=0, rate=1_024_000)
    assert not load_link(None, **base).signal.multi_symbol  # rectangular, h = 1: the one-symbol bank
    assert load_link(None, **base, gaussian=0.5).signal.multi_symbol
    assert load_link(None, **{**base, "shift": 4800}).signal.multi_symbol  # h = ½
    assert not load_link(None, **base, gaussian=0.5, detector="per-symbol").signal.multi_symbol


def test_pulse_keys_are_checked_and_round_trip(tmp_path):
    link = load_link(None, baud=9600, shift=4800, offset=0, gaussian=0.3, detector_symbols=7)
    p = tmp_path / "l.toml"
    p.write_text(link_to_toml(link))
    back = load_link(p)
    assert (back.signal.pulse, back.signal.bt, back.signal.detector_symbols) == ("gaussian", 0.3, 7)
    for bad in (dict(gaussian=0.01), dict(detector="viterbi"), dict(detector_symbols=4)):
        with pytest.raises(LinkError):
            load_link(None, baud=9600, shift=4800, offset=0, **bad)
    p.write_text('[signal]\nbaud = 9600\nshift_hz = 4800\npulse = "raised-cosine"\n')
    with pytest.raises(LinkError, match="pulse"):
        load_link(p)
