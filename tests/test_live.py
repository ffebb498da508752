"""Live decoding: a capture through a pipe, and a file decoded while it is still being written.

The capture comes from the tests' independent modulator (tests/fsk_modulator.py); the installed
`iqdemod` script is run as an operator would run it.
"""

import json
import shutil
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "checks"))
import realworld_acceptance as rw  # noqa: E402

IQDEMOD = shutil.which("iqdemod") or str(Path(sys.executable).with_name("iqdemod"))
LINK = ["--datatype", "cf32_le", "--rate", str(int(rw.RATE)), "--offset", str(int(rw.OFFSET_HZ)), "--baud", "9600",
        "--shift", "9600", "--sync", "0x9B3C57E1", "--length", "24", "--crc", "CRC-16/IBM-3740", "-q"]


def comparable(line: str) -> dict:
    rec = json.loads(line)
    rec.pop("capture")  # the name differs: the file, '-', the growing copy
    return rec


@pytest.fixture(scope="module")
def raw_capture(tmp_path_factory):
    # eight frames 0.5–10 ms apart, and the recording goes on for 100 ms after the last, as a
    # receiver's recording does (the last frame is complete once the noise after it is read)
    import numpy as np

    import fsk_modulator as fm

    txs, end = rw._train(np.random.default_rng(21), 8, gap_s=(0.5e-3, 10e-3), ebn0_db=18.0, offset_hz=rw.OFFSET_HZ)
    x, _ = fm.render(txs, rate=rw.RATE, n_samples=int((end + 0.1) * rw.RATE), noise_rms=rw._noise_for(0.1), seed=21)
    raw = tmp_path_factory.mktemp("live") / "buoys.cf32"
    x.astype(np.complex64).tofile(raw)
    whole = subprocess.run([IQDEMOD, "decode", str(raw), *LINK], capture_output=True, text=True, check=True)
    frames = [comparable(line) for line in whole.stdout.splitlines()]
    assert len(frames) == 8
    return raw, frames


def test_a_pipe_gives_exactly_the_frames_of_the_file(raw_capture):
    raw, frames = raw_capture
    with open(raw, "rb") as fh:  # as `cat capture | iqdemod decode - …`
        piped = subprocess.run([IQDEMOD, "decode", "-", *LINK], stdin=fh, capture_output=True, text=True, check=True)
    assert [comparable(line) for line in piped.stdout.splitlines()] == frames


def test_a_growing_file_is_decoded_while_it_is_written(raw_capture, tmp_path):
    raw, frames = raw_capture
    data = raw.read_bytes()
    growing = tmp_path / "growing.cf32"
    growing.write_bytes(b"")
    pieces = 10
    step = -(-len(data) // pieces)
    done = {}

    def writer():  # appends the capture in pieces over about 5 s
        with open(growing, "ab") as fh:
            for i in range(0, len(data), step):
                fh.write(data[i : i + step])
                fh.flush()
                time.sleep(0.5)
        done["t"] = time.monotonic()

    proc = subprocess.Popen([IQDEMOD, "decode", str(growing), "--follow", "--idle", "2", *LINK],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    thread = threading.Thread(target=writer)
    thread.start()
    arrived = []
    for line in proc.stdout:  # each frame as soon as it is written
        arrived.append((time.monotonic(), comparable(line)))
    proc.wait(timeout=60)
    thread.join()
    assert proc.returncode == 0, proc.stderr.read()
    assert [rec for _, rec in arrived] == frames
    assert all(t < done["t"] for t, _ in arrived)  # each frame out before the writer finished


def test_a_raw_recording_gets_its_start_time(raw_capture):
    import datetime

    raw, _ = raw_capture
    out = subprocess.run([IQDEMOD, "decode", str(raw), *LINK, "--start-time", "2026-11-30T22:15:07Z"],
                         capture_output=True, text=True, check=True)
    start = datetime.datetime(2026, 11, 30, 22, 15, 7, tzinfo=datetime.timezone.utc)
    for line in out.stdout.splitlines():
        rec = json.loads(line)
        when = datetime.datetime.strptime(rec["time_utc"], "%Y-%m-%dT%H:%M:%S.%fZ").replace(tzinfo=datetime.timezone.utc)
        assert abs((when - start).total_seconds() - rec["t_s"]) <= 1e-6
    bad = subprocess.run([IQDEMOD, "decode", str(raw), *LINK, "--start-time", "yesterday"], capture_output=True,
                         text=True)
    assert bad.returncode == 1 and bad.stderr.count("Error:") == 1 and "Traceback" not in bad.stderr
