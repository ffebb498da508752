"""Issue 14 on the command line (flags for every [frame] key) and in the project's generator."""

from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner

import fsk_modulator as ref
import iqdemod
from iqdemod.synth import SynthConfig, _plan_bursts, synthesize
from iqdemod_cli.main import main
from test_coding_receiver import BAUD, OFFSET, modulated_capture

FLAGS = ["--offset", str(OFFSET), "--baud", str(BAUD), "--shift", str(BAUD), "--sync", "0x9B3C57E1",
         "--length", "prefix8", "--crc", "CRC-16/IBM-3740"]


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


def test_decode_and_health_with_the_new_flags(tmp_path):
    layout = dict(coding="manchester-inverted", whitening="pn9", bit_order="lsb", crc_order="little",
                  length_counts="frame", length_offset=2)
    meta, payloads = modulated_capture(tmp_path / "c", layout, ebn0_db=16.0, frames=6, seed=2)
    flags = FLAGS + ["--coding", "Manchester-Inverted", "--whitening", "pn9", "--bit-order", "lsb",
                     "--crc-order", "little", "--length-counts", "frame", "--length-offset", "2"]
    res = run("decode", meta, *flags)
    assert res.exit_code == 0, res.stderr
    records = [json.loads(line) for line in res.stdout.splitlines()]
    assert [bytes.fromhex(r["payload_hex"]) for r in records if r["crc_ok"]] == payloads
    res = run("health", meta, *flags, "--json")
    assert res.exit_code == 0, res.stderr
    report = json.loads(res.stdout)
    assert report["pb_model"] == "manchester-square-law-combining-L2" and report["frames_crc_ok"] == 6


@pytest.mark.parametrize("flag, value", [("--coding", "biphase"), ("--whitening", "pn15"), ("--bit-order", "mid"),
                                         ("--length-counts", "bytes")])
def test_bad_flag_values_are_usage_errors(tmp_path, flag, value):
    res = run("decode", tmp_path / "none.sigmf-meta", *FLAGS, flag, value)
    assert res.exit_code == 2 and "Invalid value" in res.stderr


def test_length_counts_without_a_length_byte_is_one_error_line(tmp_path):
    meta, _ = modulated_capture(tmp_path / "c", {}, ebn0_db=16.0, frames=1, seed=2)
    res = run("decode", meta, *FLAGS[:-4], "--length", "16", "--length-counts", "frame")
    # flags that are wrong together, whatever the capture: a usage error (README "Exit status": 2)
    assert res.exit_code == 2 and res.stderr.startswith("Error:") and "length_counts" in res.stderr


LAYOUTS = [dict(coding="manchester"), dict(whitening="pn9"), dict(bit_order="lsb", crc_order="little"),
           dict(length_counts="payload+crc"),
           dict(coding="manchester-inverted", whitening="pn9", length_counts="frame", length_offset=-1)]


@pytest.mark.parametrize("layout", LAYOUTS, ids=lambda d: ",".join(f"{k}={v}" for k, v in d.items()))
def test_generator_sends_what_the_independent_modulator_sends(layout):
    link = iqdemod.load_link(None, rate=256_000, offset=OFFSET, baud=BAUD, shift=BAUD, sync="0x9B3C57E1",
                             length="prefix8", **layout)
    cfg = SynthConfig(link=link, ebn0_db=(20.0,), n_frames=3, seed=3)
    for plan in _plan_bursts(cfg, np.random.default_rng(cfg.seed)):
        theirs = ref.frame_bits(plan["payload"], sync=0x9B3C57E1, sync_bits=32, preamble_bits=cfg.preamble_bits,
                                length="prefix8", crc="CRC-16/IBM-3740", **layout)
        assert np.array_equal(plan["bits"][: len(theirs)], theirs)


def test_generator_eb_is_the_energy_of_a_bit(tmp_path):
    # REFERENCE §8: Eb/N0 = A²·(fs/Rb)/σ² with Rb the bit rate, baud/2 with Manchester. Measured on the
    # capture: burst power minus noise power gives A².
    for coding, rb in (("nrz", BAUD), ("manchester", BAUD / 2)):
        link = iqdemod.load_link(None, rate=256_000, offset=OFFSET, baud=BAUD, shift=BAUD, sync="0x9B3C57E1",
                                 length=16, coding=coding)
        truth = synthesize(tmp_path / coding, SynthConfig(link=link, ebn0_db=(20.0,), n_frames=4, seed=1,
                                                          noise_rms=0.05))
        x = np.fromfile(tmp_path / f"{coding}.sigmf-data", dtype="<c8")
        power = np.mean([np.mean(np.abs(x[f["start_sample"] + 100 : f["start_sample"] + 2000]) ** 2)
                         for f in truth["frames"]])
        a2 = power - 0.05**2
        assert a2 == pytest.approx(10 ** 2.0 * 0.05**2 * rb / 256_000, rel=0.03)


def test_survey_writes_a_profile_with_the_coding_that_decode_accepts(tmp_path):
    meta, payloads = modulated_capture(tmp_path / "m", dict(coding="manchester", whitening="pn9"), ebn0_db=16.0,
                                       frames=8, seed=4)
    profile = tmp_path / "buoy.toml"
    res = run("survey", meta, "--write-link", profile, "-q", "--json")
    assert res.exit_code == 0, res.stderr
    (sig,) = json.loads(res.stdout)["signals"]
    assert (sig["coding"], sig["whitening"]) == ("manchester", "pn9")
    text = profile.read_text()
    assert 'coding = "manchester"' in text and 'whitening = "pn9"' in text
    res = run("decode", meta, "--link", profile)
    assert res.exit_code == 0, res.stderr
    good = [bytes.fromhex(r["payload_hex"]) for r in map(json.loads, res.stdout.splitlines()) if r["crc_ok"]]
    assert good == payloads
