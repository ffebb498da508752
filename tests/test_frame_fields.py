"""What an operator reads per frame: absolute time, level, frequency, clock and CRC detail.

Captures from the tests' independent modulator (tests/fsk_modulator.py) with a SigMF centre
frequency and start time; the truths are the modulator's own.
"""

import datetime
import sys
from pathlib import Path

import numpy as np
import pytest

import iqdemod

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "checks"))
import realworld_acceptance as rw  # noqa: E402

import fsk_modulator as fm  # noqa: E402


def capture(tmp_path, datatype, *, ebn0=18.0, n=8, seed=3):
    rng = np.random.default_rng(seed)
    txs, t = [], 0.004
    for _ in range(n):
        tx = fm.Tx(t_s=t, payload=rng.bytes(24), amplitude=float(rng.uniform(0.05, 0.2)), offset_hz=rw.OFFSET_HZ,
                   carrier_error_hz=float(rng.uniform(-1500, 1500)), clock_ppm=float(rng.uniform(-60, 60)))
        txs.append(tx)
        t += rw.FRAME_SYMBOLS / tx.baud_tx + 0.004
    sigma = 0.1 * np.sqrt(rw.RATE / rw.BAUD / 10 ** (ebn0 / 10))
    x, truth = fm.render(txs, rate=rw.RATE, n_samples=rw._n(t), noise_rms=sigma, seed=seed)
    meta = fm.write_sigmf(tmp_path / datatype, x, rate=rw.RATE, datatype=datatype, centre_hz=433_920_000.0,
                          datetime="2026-11-30T22:15:07.250000Z")
    return meta, truth


@pytest.mark.parametrize("datatype", ["cu8", "ci16_le"])
def test_time_level_and_frequency_of_each_frame(tmp_path, datatype):
    meta, truth = capture(tmp_path, datatype)
    frames = [f for f in iqdemod.decode(meta, rw.link_for(rw.OFFSET_HZ)) if f.crc_ok]
    pairs, _ = rw.match_frames(frames, truth)
    assert len(pairs) == len(truth)
    start = datetime.datetime(2026, 11, 30, 22, 15, 7, 250000, tzinfo=datetime.timezone.utc)
    for tr, f in pairs:
        rec = f.as_record()
        when = datetime.datetime.strptime(rec["time_utc"], "%Y-%m-%dT%H:%M:%S.%fZ").replace(tzinfo=datetime.timezone.utc)
        assert abs((when - start).total_seconds() - f.t_s) <= 1e-6  # SigMF core:datetime + t_s, to 1 µs
        # the carrier as sent: capture centre + the truth's frequency relative to it
        assert rec["frequency_hz"] == pytest.approx(433_920_000.0 + tr["carrier_hz"], abs=50)
        # the frame's true power re full scale: its amplitude squared (full scale 1.0)
        assert rec["level_dbfs"] == pytest.approx(20 * np.log10(tr["amplitude"]), abs=1.0)
        assert rec["clock_ppm"] == pytest.approx(tr["clock_ppm"], abs=250)  # one short frame: a rough figure
        assert "crc_received_hex" not in rec


def test_bad_frames_show_both_crcs(tmp_path):
    meta, _ = capture(tmp_path, "cf32_le", ebn0=7.0, n=30, seed=9)
    bad = [f.as_record() for f in iqdemod.decode(meta, rw.link_for(rw.OFFSET_HZ)) if not f.crc_ok]
    assert bad
    for rec in bad:
        if rec.get("truncated"):
            continue
        got, want = int(rec["crc_received_hex"], 16), int(rec["crc_computed_hex"], 16)
        assert len(rec["crc_received_hex"]) == len(rec["crc_computed_hex"]) == 4  # CRC-16
        assert got ^ want != 0


def test_no_time_without_a_start_time(tmp_path):
    meta, _ = capture(tmp_path, "cf32_le", n=2)
    text = meta.read_text().replace('"core:datetime": "2026-11-30T22:15:07.250000Z"', '"core:comment": "none"')
    meta.write_text(text)
    rec = next(iter(iqdemod.decode(meta, rw.link_for(rw.OFFSET_HZ)))).as_record()
    assert "time_utc" not in rec and "frequency_hz" in rec
