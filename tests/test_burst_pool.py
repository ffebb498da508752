"""The per-burst work in a worker process (iqdemod.burst_pool) gives exactly the frames of one process.

The captures come from the tests' own modulator (tests/fsk_modulator.py). What is checked is an
identity, not a figure: demodulate_burst is a pure function of (buffer, plan), so every field of
every frame must come back the same however the work was shared, in order, also when the worker
dies on the way or lags so far that the calling process does most of the work.
"""

from __future__ import annotations

import os
import pickle
import subprocess
import sys
import textwrap
import time
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


def _burst_fields(bursts):
    return [(b.index, b.piece, b.sample, b.n_symbols, b.freq_error_hz, b.clock_error_ppm, b.bits.tobytes(),
             b.z0sq.tobytes(), b.z1sq.tobytes(), _fields(b.frames)) for b in bursts]


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


@pytest.fixture(scope="module")
def buffers(capture):
    """The capture's detector buffers and the receiver that found them."""
    with iqdemod.open_capture(capture.meta) as cap:
        rx = receiver.Receiver(rw.link_for(capture.offset_hz), cap.info)
        found = [item for block in cap.blocks(1 << 15) for item in rx.buffers(block)] + rx.end_buffers()
    assert len(found) >= 6
    return rx, found


@pytest.fixture(params=["fork", "interpreter"])
def start(request, monkeypatch):
    """Both ways the worker starts: a copy of this process, a fresh interpreter.

    Other test modules leave idle threads behind in this process (dask's offload pool, for one),
    which would make every pool here start an interpreter. Idle, they hold no lock, so for the
    "fork" case the pool is told it may fork all the same; the rule itself (another thread
    running: an interpreter) is checked in a fresh interpreter below.
    """
    if request.param == "fork":
        if not (hasattr(os, "fork") and sys.platform.startswith("linux")):
            pytest.skip("the worker is a copy of the caller on Linux only")
        monkeypatch.setattr(burst_pool, "may_fork", lambda: True)
        made = burst_pool._Forked.__init__
        forked = []

        def note(self):
            made(self)
            forked.append(self.pid)

        monkeypatch.setattr(burst_pool._Forked, "__init__", note)
        monkeypatch.setattr(burst_pool, "START", "fork")
        yield "fork"
        assert forked, "no worker was forked"
        return
    monkeypatch.setattr(burst_pool, "START", request.param)
    yield request.param


@pytest.fixture()
def interpreter(monkeypatch):
    """The worker started as a fresh interpreter (what these tests are about does not arise in a copy)."""
    monkeypatch.setattr(burst_pool, "START", "interpreter")


@pytest.fixture()
def pools(monkeypatch):
    """Every BurstPool made during the test."""
    made = []
    original = burst_pool.BurstPool.__init__

    def init(self, *args, **kw):
        original(self, *args, **kw)
        made.append(self)

    monkeypatch.setattr(burst_pool.BurstPool, "__init__", init)
    return made


def _pooled(capture, monkeypatch, **settings):
    monkeypatch.setattr(burst_pool, "POOL_MIN_SAMPLES", 1)
    monkeypatch.setattr(burst_pool, "usable_cores", lambda: 2)  # a runner with one core would decode alone
    for name, value in settings.items():
        monkeypatch.setattr(burst_pool, name, value)
    return list(iqdemod.decode(capture.meta, rw.link_for(capture.offset_hz)))


def _worker_only(monkeypatch):
    """The caller takes no buffer from the worker's queue: the worker does every one it is given."""
    monkeypatch.setattr(burst_pool.BurstPool, "_take", lambda self, **kw: None)


def test_a_worker_gives_the_same_frames(capture, alone, monkeypatch, pools, start):
    assert _fields(_pooled(capture, monkeypatch)) == alone


def test_the_worker_alone_gives_the_same_bursts_in_order(buffers, monkeypatch, pools, start):
    """Every buffer demodulated by the worker: the same bursts, field for field, in the order put."""
    rx, found = buffers
    expected = [(k, _burst_fields(burst_pool.demodulate_burst(raw, rx.plans[k], capture="x"))) for k, raw in found]
    _worker_only(monkeypatch)
    got = []
    with burst_pool.BurstPool(rx.plans, "x") as pool:
        for k, raw in found:
            pool.put(k, raw)
            got += [(k, _burst_fields(b)) for k, b in pool.ready()]
        got += [(k, _burst_fields(b)) for k, b in pool.finish()]
        assert pool.answered == len(found)
    assert got == expected


def test_the_caller_doing_most_of_the_work_gives_the_same_frames(capture, alone, monkeypatch, pools, start):
    assert _fields(_pooled(capture, monkeypatch, BACKLOG=0, IN_FLIGHT=1)) == alone


def test_a_worker_killed_with_buffers_in_hand_leaves_them_to_the_caller(capture, alone, monkeypatch, pools, start):
    """The worker killed while buffers are with it: every frame still comes, once and in order."""
    killed = []
    original = burst_pool.BurstPool._heads

    def heads(self):
        if not killed and self._proc is not None:
            deadline = time.monotonic() + 10
            while not self._sent and time.monotonic() < deadline:  # wait until some are in flight
                time.sleep(0.001)
            with self._cv:
                in_hand = len(self._sent)
            self._proc.kill()
            killed.append(in_hand)
        yield from original(self)

    monkeypatch.setattr(burst_pool.BurstPool, "_heads", heads)
    # the caller takes buffers only once the worker is gone: those in its hand included
    take = burst_pool.BurstPool._take
    monkeypatch.setattr(burst_pool.BurstPool, "_take", lambda self, **kw: None if self._alive else take(self, **kw))
    assert _fields(_pooled(capture, monkeypatch)) == alone
    assert killed and killed[0] > 0


def test_a_missing_python_leaves_the_work_to_the_caller(capture, alone, monkeypatch, pools, interpreter):
    monkeypatch.setattr(sys, "executable", "/nonexistent/python")
    assert _fields(_pooled(capture, monkeypatch)) == alone
    assert pools and pools[0].answered == 0


FAILING_WORKER = """
import pickle, sys
inp, out = sys.stdin.buffer, sys.stdout.buffer
pickle.load(inp)
seen = set()
while True:
    try:
        seq, link, raw = pickle.load(inp)
    except EOFError:
        break
    if seq in seen:
        sys.exit(3)  # given the same buffer twice
    seen.add(seq)
    pickle.dump((seq, None, True), out)
    out.flush()
"""


@pytest.fixture()
def failing_worker(tmp_path, monkeypatch):
    """A worker that reports every buffer as failed (as iqdemod.burst_worker does when demodulation raises)
    and quits if it is ever sent a buffer twice."""
    (tmp_path / "failing_worker.py").write_text(FAILING_WORKER)
    monkeypatch.syspath_prepend(str(tmp_path))  # the worker imports from the caller's sys.path
    monkeypatch.setattr(burst_pool, "WORKER_MODULE", "failing_worker")


def test_a_failed_buffer_is_done_by_the_caller_and_not_sent_again(capture, alone, monkeypatch, failing_worker,
                                                                   pools, interpreter):
    assert _fields(_pooled(capture, monkeypatch, BACKLOG=10**6)) == alone
    assert pools[0].answered == 0 and pools[0]._proc is None


def test_an_error_comes_after_every_earlier_frame(capture, monkeypatch, failing_worker, start):
    """A buffer that raises: the frames of the buffers before it come first, as in one process."""
    def broken_after(limit, demodulate):
        def run(raw, plan, *, capture=""):
            if raw.index >= limit:
                raise RuntimeError("demodulator failed")
            return demodulate(raw, plan, capture=capture)
        return run

    def frames_until_error():
        got = []
        with pytest.raises(RuntimeError, match="demodulator failed"):
            for f in iqdemod.decode(capture.meta, rw.link_for(capture.offset_hz)):
                got.append(f.sample)
        return got

    monkeypatch.setattr(receiver, "demodulate_burst", broken_after(4, receiver.demodulate_burst))
    one_process = frames_until_error()
    monkeypatch.setattr(burst_pool, "demodulate_burst", broken_after(4, burst_pool.demodulate_burst))
    # a copy of this process runs iqdemod.burst_worker.serve, which takes the demodulator from iqdemod.demod
    # (an interpreter worker here is the failing one, which fails every buffer)
    monkeypatch.setattr(iqdemod.demod, "demodulate_burst", broken_after(4, iqdemod.demod.demodulate_burst))
    monkeypatch.setattr(burst_pool, "POOL_MIN_SAMPLES", 1)
    monkeypatch.setattr(burst_pool, "usable_cores", lambda: 2)  # also on a runner with one core
    monkeypatch.setattr(burst_pool, "BACKLOG", 10**6)
    assert frames_until_error() == one_process and len(one_process) >= 3


def test_plans_that_cannot_be_pickled_leave_the_work_to_the_caller(capture, alone, monkeypatch):
    """No worker is started; every buffer is demodulated by the caller, in order."""
    original = burst_pool.BurstPool.__init__

    def init(self, plans, name):
        original(self, tuple(plans) + (lambda: None,), name)  # a lambda does not pickle
        assert self._proc is None

    monkeypatch.setattr(burst_pool.BurstPool, "__init__", init)
    assert _fields(_pooled(capture, monkeypatch)) == alone


@pytest.mark.skipif(not hasattr(os, "getsid"), reason="sessions are POSIX")
def test_the_worker_has_a_session_of_its_own(buffers, start):
    """Ctrl-C at a terminal reaches the caller only; the caller ends the worker (no child traceback)."""
    rx, _ = buffers
    with burst_pool.BurstPool(rx.plans, "x") as pool:
        assert os.getsid(pool._proc.pid) != os.getsid(0)


def test_the_worker_does_not_import_from_the_working_directory(buffers, tmp_path, monkeypatch, interpreter):
    """A folder named iqdemod in the working directory is not what the worker runs."""
    (tmp_path / "iqdemod").mkdir()
    (tmp_path / "iqdemod" / "__init__.py").write_text("raise SystemExit(7)\n")
    monkeypatch.chdir(tmp_path)
    rx, found = buffers
    _worker_only(monkeypatch)
    with burst_pool.BurstPool(rx.plans, "x") as pool:
        for k, raw in found[:3]:
            pool.put(k, raw)
        assert len(list(pool.finish())) == 3
        assert pool.answered == 3


def test_no_pool_for_streams_small_captures_or_batch_workers(monkeypatch):
    assert not burst_pool.worth_a_pool(None)
    assert not burst_pool.worth_a_pool(burst_pool.POOL_MIN_SAMPLES - 1)
    assert receiver.PIPELINE  # batch workers turn it off, and with it the pool


@pytest.mark.parametrize("how", ["auto", "interpreter"])
def test_a_script_without_a_main_guard_runs_once(tmp_path, how):
    """The worker is a copy of the caller (Linux, no other thread) or a fresh interpreter, never a run of
    the caller's script again; it writes nothing to the caller's standard output, and nothing the caller
    had buffered there comes out twice."""
    x, _ = fm.render([fm.Tx(t_s=0.002, payload=b"buoy", ebn0_db=18.0, offset_hz=rw.OFFSET_HZ)], rate=rw.RATE,
                     n_samples=rw._n(0.04), noise_rms=rw._noise_for(0.1), seed=1)
    meta = fm.write_sigmf(tmp_path / "one", x, rate=rw.RATE)
    script = tmp_path / "no_guard.py"
    script.write_text(textwrap.dedent(f"""
        import sys
        import iqdemod
        from iqdemod import burst_pool
        burst_pool.POOL_MIN_SAMPLES = 1
        burst_pool.usable_cores = lambda: 2  # also on a runner with one core
        burst_pool.START = {how!r}
        burst_pool.BurstPool._take = lambda self, **kw: None  # the worker does it
        made = burst_pool._Forked.__init__

        def note(self):
            made(self)
            sys.stderr.write("worker forked\\n")

        burst_pool._Forked.__init__ = note
        sys.stdout.write("script ran, ")  # still in the buffer (stdout is a pipe) when the worker starts
        link = iqdemod.load_link(None, offset={rw.OFFSET_HZ}, baud=9600, shift=9600, sync="0x9B3C57E1", length=4,
                                 crc="CRC-16/IBM-3740")
        print("frames", sum(f.crc_ok for f in iqdemod.decode({str(meta)!r}, link)))
    """))
    out = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, timeout=120, cwd=tmp_path)
    assert out.returncode == 0, out.stderr
    assert out.stdout == "script ran, frames 1\n"
    assert ("worker forked" in out.stderr) == (how == "auto" and sys.platform.startswith("linux")), out.stderr


WHICH_START = """
import os, pickle, sys, threading
from iqdemod import burst_pool
rx_plans, found = pickle.load(open(sys.argv[1], "rb"))
burst_pool.BurstPool._take = lambda self, **kw: None  # the worker does them
assert threading.active_count() == 1, threading.enumerate()
with burst_pool.BurstPool(rx_plans, "x") as pool:
    kind = type(pool._proc).__name__
    pid = pool._proc.pid
    for k, raw in found[:3]:
        pool.put(k, raw)
    done = len(list(pool.finish())), pool.answered
try:
    os.waitpid(pid, os.WNOHANG)
    reaped = False
except ChildProcessError:
    reaped = True  # ended and waited for: no zombie left behind
stop = threading.Event()
other = threading.Thread(target=stop.wait)
other.start()
with burst_pool.BurstPool(rx_plans, "x") as pool:
    kind_with_thread = type(pool._proc).__name__
stop.set()
other.join()
print(kind, done, reaped, kind_with_thread)
"""


@pytest.mark.skipif(not (hasattr(os, "fork") and sys.platform.startswith("linux")), reason="forks on Linux only")
def test_the_worker_is_a_copy_of_the_caller_unless_another_thread_runs(buffers, tmp_path):
    """A fork copies other threads' locks as they happen to be: with a thread running, a fresh interpreter.
    Checked in a fresh interpreter of its own (this one has threads other tests left)."""
    rx, found = buffers
    (tmp_path / "jobs.pkl").write_bytes(pickle.dumps((rx.plans, found[:3])))
    out = subprocess.run([sys.executable, "-c", WHICH_START, str(tmp_path / "jobs.pkl")], capture_output=True,
                         text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    assert out.stdout.split() == ["_Forked", "(3,", "3)", "True", "Popen"]


@pytest.fixture()
def forking(monkeypatch):
    """The pool forks here although other tests left idle threads (see `start`)."""
    if not (hasattr(os, "fork") and sys.platform.startswith("linux")):
        pytest.skip("the worker is a copy of the caller on Linux only")
    monkeypatch.setattr(burst_pool, "may_fork", lambda: True)


def test_a_copy_that_fails_as_it_starts_never_returns_into_the_callers_code(capture, alone, monkeypatch, pools,
                                                                          forking, tmp_path):
    """A stop (or any error) in the copy before it serves ends the copy there: the caller's own code (this
    test) runs once, and the caller does every buffer itself."""
    from iqdemod import burst_worker

    def stopped(*args, **kwargs):
        raise KeyboardInterrupt  # as a Ctrl-C that reached the copy would

    monkeypatch.setattr(burst_worker, "serve_forked", stopped)
    frames = _pooled(capture, monkeypatch)
    with open(tmp_path / "ran", "a") as fh:  # a copy that came back here would add its own line
        fh.write(f"{os.getpid()}\n")
    assert _fields(frames) == alone and pools[0].answered == 0
    assert (tmp_path / "ran").read_text() == f"{os.getpid()}\n"


def _open_fds() -> int:
    return len(os.listdir("/proc/self/fd"))


@pytest.mark.skipif(not os.path.isdir("/proc/self/fd"), reason="counts descriptors in /proc")
def test_a_stop_while_the_copy_starts_leaves_no_worker_and_no_descriptor(buffers, monkeypatch, forking):
    rx, _ = buffers
    real_read, real_fork = os.read, os.fork
    children = []

    def interrupted(fd, n):
        monkeypatch.setattr(os, "read", real_read)
        raise KeyboardInterrupt  # a Ctrl-C while the caller waits for the copy to be ready

    def fork():
        pid = real_fork()
        if pid:
            children.append(pid)
        return pid

    before = _open_fds()
    monkeypatch.setattr(os, "read", interrupted)
    monkeypatch.setattr(os, "fork", fork)
    with pytest.raises(KeyboardInterrupt):
        burst_pool.BurstPool(rx.plans, "x")
    assert _open_fds() == before and len(children) == 1
    with pytest.raises(ChildProcessError):  # killed and reaped
        os.waitpid(children[0], os.WNOHANG)


def test_a_caller_that_ignores_its_children_can_still_close_the_pool(buffers, monkeypatch, forking):
    """With SIGCHLD ignored the system reaps the copy itself; closing the pool must not fail on that."""
    import signal

    rx, found = buffers
    _worker_only(monkeypatch)
    old = signal.signal(signal.SIGCHLD, signal.SIG_IGN)
    try:
        with burst_pool.BurstPool(rx.plans, "x") as pool:
            for k, raw in found[:2]:
                pool.put(k, raw)
            assert len(list(pool.finish())) == 2 and pool.answered == 2
    finally:
        signal.signal(signal.SIGCHLD, old)
