"""The per-burst work in a worker process (iqdemod.burst_pool) gives exactly the frames of one process.

The captures come from the tests' own modulator (tests/fsk_modulator.py). What is checked is an
identity, not a figure: demodulate_burst is a pure function of (buffer, plan), so every field of
every frame must come back the same however the work was shared, in order, also when the worker
dies on the way or lags so far that the calling process does most of the work.
"""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

import iqdemod
from iqdemod import burst_pool, receiver

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "checks"))
sys.path.insert(0, str(Path(__file__).resolve().parent))
import realworld_acceptance as rw  # noqa: E402
import fsk_modulator as fm  # noqa: E402


def _fields(frames):
    return [(f.sample, f.payload, f.crc_ok, f.ebn0_db, f.freq_error_hz, f.clock_ppm, f.level_dbfs, f.n_symbols)
            for f in frames]


@pytest.fixture(scope="module")
def capture(tmp_path_factory):
    """Twelve frames 0.5–10 ms apart, each with its own carrier and clock error (cf32)."""
    return rw.spaced_bursts(tmp_path_factory.mktemp("pool"), seed=11, n_frames=12)


@pytest.fixture(scope="module")
def alone(capture):
    """The frames decoded in one process (the capture is below the pool's size)."""
    assert not burst_pool.worth_a_pool(iqdemod.open_capture(capture.meta).info.n_samples)
    frames = list(iqdemod.decode(capture.meta, rw.link_for(capture.offset_hz)))
    assert sum(f.crc_ok for f in frames) == len(capture.truth)
    return _fields(frames)


def _pooled(capture, monkeypatch, **settings):
    monkeypatch.setattr(burst_pool, "POOL_MIN_SAMPLES", 1)
    for name, value in settings.items():
        monkeypatch.setattr(burst_pool, name, value)
    return list(iqdemod.decode(capture.meta, rw.link_for(capture.offset_hz)))


def test_a_worker_gives_the_same_frames(capture, alone, monkeypatch):
    assert _fields(_pooled(capture, monkeypatch)) == alone


def test_the_caller_doing_most_of_the_work_gives_the_same_frames(capture, alone, monkeypatch):
    assert _fields(_pooled(capture, monkeypatch, BACKLOG=0, IN_FLIGHT=1)) == alone


def test_a_worker_that_dies_leaves_its_work_to_the_caller(capture, alone, monkeypatch):
    """The worker killed after its first answer: every frame still comes, once and in order."""
    killed = []
    original = burst_pool.BurstPool._heads

    def heads(self):
        for item in original(self):
            if not killed and self._proc is not None:
                self._proc.kill()
                killed.append(True)
            yield item

    monkeypatch.setattr(burst_pool.BurstPool, "_heads", heads)
    assert _fields(_pooled(capture, monkeypatch)) == alone
    assert killed


def test_a_missing_worker_program_leaves_the_work_to_the_caller(capture, alone, monkeypatch):
    monkeypatch.setattr(sys, "executable", "/nonexistent/python")
    assert _fields(_pooled(capture, monkeypatch)) == alone


FAILING_WORKER = """
import pickle, sys
inp, out = sys.stdin.buffer, sys.stdout.buffer
pickle.load(inp)
while True:
    try:
        seq, link, raw = pickle.load(inp)
    except EOFError:
        break
    pickle.dump((seq, None, True), out)
    out.flush()
"""


@pytest.fixture()
def failing_worker(tmp_path, monkeypatch):
    """A worker that reports every buffer as failed (as iqdemod.burst_worker does when demodulation raises)."""
    (tmp_path / "failing_worker.py").write_text(FAILING_WORKER)
    monkeypatch.setenv("PYTHONPATH", str(tmp_path))
    monkeypatch.setattr(burst_pool, "WORKER_MODULE", "failing_worker")


def test_a_failed_buffer_is_done_again_by_the_caller(capture, alone, monkeypatch, failing_worker):
    assert _fields(_pooled(capture, monkeypatch, BACKLOG=10**6)) == alone


def test_a_demodulator_error_is_raised_in_the_caller(capture, monkeypatch, failing_worker):
    def broken(raw, plan, *, capture=""):
        raise RuntimeError("demodulator failed")

    monkeypatch.setattr(burst_pool, "demodulate_burst", broken)
    with pytest.raises(RuntimeError, match="demodulator failed"):
        _pooled(capture, monkeypatch, BACKLOG=10**6)


def test_plans_that_cannot_be_pickled_leave_the_work_to_the_caller(capture, alone, monkeypatch):
    """No worker is started; every buffer is demodulated by the caller, in order."""
    original = burst_pool.BurstPool.__init__

    def init(self, plans, name):
        original(self, tuple(plans) + (lambda: None,), name)  # a lambda does not pickle

    monkeypatch.setattr(burst_pool.BurstPool, "__init__", init)
    assert _fields(_pooled(capture, monkeypatch)) == alone


def test_the_worker_has_a_session_of_its_own(capture):
    """Ctrl-C at a terminal reaches the caller only; the caller ends the worker (no child traceback)."""
    link = rw.link_for(capture.offset_hz)
    with iqdemod.open_capture(capture.meta) as cap:
        rx = receiver.Receiver(link, cap.info)
    with burst_pool.BurstPool(rx.plans, "x") as pool:
        assert os.getsid(pool._proc.pid) != os.getsid(0)
        proc = pool._proc
    assert proc.poll() is not None  # ended with the pool


def test_no_pool_for_streams_small_captures_or_batch_workers(monkeypatch):
    assert not burst_pool.worth_a_pool(None)
    assert not burst_pool.worth_a_pool(burst_pool.POOL_MIN_SAMPLES - 1)
    assert burst_pool.worth_a_pool(burst_pool.POOL_MIN_SAMPLES) == ((os.cpu_count() or 1) >= 2)
    assert receiver.PIPELINE  # batch workers turn it off, and with it the pool


def test_a_script_without_a_main_guard_runs_once(tmp_path):
    """The worker is a plain child process: the caller's script is not run again in it."""
    x, _ = fm.render([fm.Tx(t_s=0.002, payload=b"buoy", ebn0_db=18.0, offset_hz=rw.OFFSET_HZ)], rate=rw.RATE,
                     n_samples=rw._n(0.04), noise_rms=rw._noise_for(0.1), seed=1)
    meta = fm.write_sigmf(tmp_path / "one", x, rate=rw.RATE)
    script = tmp_path / "no_guard.py"
    script.write_text(textwrap.dedent(f"""
        import iqdemod
        from iqdemod import burst_pool
        burst_pool.POOL_MIN_SAMPLES = 1
        print("script ran")
        link = iqdemod.load_link(None, offset={rw.OFFSET_HZ}, baud=9600, shift=9600, sync="0x9B3C57E1", length=4,
                                 crc="CRC-16/IBM-3740")
        print("frames", sum(f.crc_ok for f in iqdemod.decode({str(meta)!r}, link)))
    """))
    out = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, timeout=120, cwd=tmp_path)
    assert out.returncode == 0, out.stderr
    assert out.stdout.splitlines() == ["script ran", "frames 1"]


def test_answers_come_back_in_order(capture, monkeypatch):
    """Buffers put one by one, answers taken as they come: their order is the order put."""
    link = rw.link_for(capture.offset_hz)
    with iqdemod.open_capture(capture.meta) as cap:
        rx = receiver.Receiver(link, cap.info)
        found = [item for block in cap.blocks(1 << 15) for item in rx.buffers(block)] + rx.end_buffers()
    starts = [raw.start for _, raw in found]
    got = []
    with burst_pool.BurstPool(rx.plans, "x") as pool:
        for k, raw in found:
            pool.put(k, raw)
            got += [b.index for _, bursts in pool.ready() for b in bursts[:1]]
        got += [b.index for _, bursts in pool.finish() for b in bursts[:1]]
    assert np.all(np.diff(got) > 0) and len(starts) == len(found)
