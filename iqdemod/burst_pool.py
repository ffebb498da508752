"""The per-burst work in a second process, so that the front end and the demodulator each have a core.

In one process the two share the interpreter lock. The front end's FFTs and
reads release it, but the per-burst work is many small numpy calls that mostly
hold it: on the throughput benchmark (60 s of cf32, 600 bursts) the two
threads together spent 2.4 s of CPU on what takes 1.0 s (front end) and 0.6 s
(bursts) apart, and run as two processes they take no longer than apart.

A :class:`BurstPool` keeps one worker process (:mod:`iqdemod.burst_worker`),
fed through pipes: the receiver's plans once, then the detector buffers, a few
at a time (``IN_FLIGHT``); a thread reads the answers back. It is not
:mod:`multiprocessing`: *spawn* would run the caller's main script again in
the child (a script without the ``if __name__ == "__main__"`` guard would
fail). On Linux, when no other thread of the caller runs (``START``), the
worker is a copy of this process (``os.fork``): it starts at once, with numpy
and the plans already in memory, where a fresh interpreter spends about 0.2 s
of CPU importing them (on the GFSK benchmark the decode is about 15 % faster).
A fork copies other threads' locks in whatever state they are in, so with
threads running, and on other systems, the worker is a fresh interpreter that
imports from the caller's own ``sys.path`` (not from its working directory),
so it runs the same iqdemod. Either way it has a session of its own, ignores
Ctrl-C (the caller ends it) and writes nothing to the caller's standard
output. Results come back in the order the buffers went in. :func:`iqdemod.demod.demodulate_burst`
is a pure function of (buffer, plan), so the frames are the same either way
(``tests/test_burst_pool.py`` checks it).

Nothing waits on a worker that is not keeping up: when more than ``BACKLOG``
buffers wait for it (it lags, or is still starting on a busy capture), the
calling process demodulates the oldest waiting buffers itself. At the end of
the input it takes them from the back of the queue while the worker works
from the front. A buffer the worker fails on is done by the calling process,
which raises the error there, after every earlier buffer's bursts (as one
process would). A worker that dies leaves its buffers to the calling process.
"""

from __future__ import annotations

import collections
import contextlib
import gc
import json
import os
import pickle
import signal
import subprocess
import sys
import threading
import time
import warnings
from typing import Iterator, Sequence

from .bursts import RawBurst
from .cores import WAKE_S, leave_signals_to_main, stop_signals, usable_cores
from .demod import Burst, demodulate_burst
from .plan import ReceiverPlan

__all__ = ["BurstPool", "POOL_MIN_SAMPLES", "BACKLOG", "IN_FLIGHT", "START", "may_fork", "worth_a_pool"]

POOL_MIN_SAMPLES = 1 << 24  # below this (16 s at 1 MS/s) the worker's start would cost more than it saves
BACKLOG = 256  # buffers waiting for the worker before the calling process takes some itself
IN_FLIGHT = 4  # buffers sent to the worker and not yet answered
WORKER_MODULE = "iqdemod.burst_worker"  # imported by the worker's start-up code, which then runs its _main
# How the worker starts: "auto" forks this process on Linux when no other thread runs, else starts a fresh
# interpreter; "fork" or "interpreter" insist (a fork still needs os.fork and no other thread).
START = "auto"

# -P: nothing from the working directory; the caller's sys.path, then the module
_BOOTSTRAP = ("import importlib, json, os, sys; sys.path[:] = json.loads(os.environ['IQDEMOD_WORKER_PATH']); "
              "getattr(importlib.import_module(os.environ['IQDEMOD_WORKER_MODULE']), '_main', lambda: None)()")

_HELD, _SENT, _HERE, _MINE = "held", "sent", "here", "mine"


class _Raised:
    """The exception a buffer's demodulation raised, kept until that buffer's turn in the output."""

    def __init__(self, exc: BaseException):
        self.exc = exc


def worth_a_pool(n_samples: int | None) -> bool:
    """Whether a capture of `n_samples` input samples (None: unknown, a stream) is decoded with a worker.

    Examples
    --------
    >>> worth_a_pool(None), worth_a_pool(1000)
    (False, False)
    """
    return bool(n_samples) and n_samples >= POOL_MIN_SAMPLES and usable_cores() >= 2


def may_fork() -> bool:
    """Whether the worker may be a copy of this process (see ``START``): os.fork exists, no other
    thread runs, and Linux (elsewhere system libraries are not safe to use in a forked child).

    Threads are Python's here. The math libraries' own worker threads (numpy's BLAS, the FFT's pool)
    are not counted: they take part in fork through their own handlers (``pthread_atfork``), and the
    batch's forked pool has relied on that from the start. Python 3.12 warns about them on every
    fork; that warning is silenced where the pool forks, on purpose.

    Examples
    --------
    With a thread running, or told to, the worker is a fresh interpreter:

    >>> import threading
    >>> import iqdemod.burst_pool as bp
    >>> stop = threading.Event()
    >>> other = threading.Thread(target=stop.wait)
    >>> other.start()
    >>> bp.may_fork()
    False
    >>> stop.set(); other.join()
    >>> saved, bp.START = bp.START, "interpreter"
    >>> bp.may_fork()
    False
    >>> bp.START = saved
    """
    if START == "interpreter" or not hasattr(os, "fork") or threading.active_count() != 1:
        return False
    return START == "fork" or sys.platform.startswith("linux")


def _interpreter() -> subprocess.Popen:
    """The worker as a fresh interpreter that imports the caller's iqdemod."""
    path = [os.fspath(p) for p in sys.path if isinstance(p, (str, os.PathLike))]
    env = dict(os.environ, IQDEMOD_WORKER_PATH=json.dumps(path), IQDEMOD_WORKER_MODULE=WORKER_MODULE)
    # Its own session (a new process group on Windows): Ctrl-C at the terminal goes to the
    # calling process alone, which ends the worker (a worker caught starting up would print a
    # traceback).
    alone: dict = ({"creationflags": subprocess.CREATE_NEW_PROCESS_GROUP} if os.name == "nt"
                   else {"start_new_session": True})
    return subprocess.Popen([sys.executable, "-P", "-c", _BOOTSTRAP], stdin=subprocess.PIPE,
                            stdout=subprocess.PIPE, env=env, **alone)


def _close(fds) -> None:
    for fd in fds:
        with contextlib.suppress(OSError):
            os.close(fd)


class _Forked:
    """The worker as a copy of this process: what the pool uses of a :class:`subprocess.Popen`
    (``stdin``, ``stdout``, ``pid``, ``kill``, ``wait``)."""

    def __init__(self) -> None:
        from .burst_worker import serve_forked

        fds: list[int] = []
        try:
            for _ in range(3):
                fds += os.pipe()
        except OSError:
            _close(fds)
            raise
        jobs_in, jobs_out, answers_in, answers_out, ready_in, ready_out = fds
        for stream in (sys.stdout, sys.stderr):  # what is buffered here must not be written again by the copy
            with contextlib.suppress(Exception):
                stream.flush()
        # Until the copy has its own session and signal settings, a Ctrl-C at the terminal would reach
        # it and run this process's handlers there: the stop signals wait, blocked, over the fork. And
        # what this process holds is frozen for the collector, so the copy never runs a finaliser of
        # the caller's (the copy's own garbage is collected as usual).
        masked = hasattr(signal, "pthread_sigmask")
        old_mask = signal.pthread_sigmask(signal.SIG_BLOCK, stop_signals()) if masked else None
        gc.freeze()
        try:
            with warnings.catch_warnings():  # Python 3.12+ counts the math libraries' threads too: see may_fork
                warnings.filterwarnings("ignore", r"This process .*is multi-threaded", DeprecationWarning)
                pid = os.fork()
        except OSError:
            gc.unfreeze()
            if masked:
                signal.pthread_sigmask(signal.SIG_SETMASK, old_mask)
            _close(fds)
            raise
        if pid == 0:  # the copy: whatever happens, it never returns into the caller's code
            try:
                serve_forked(jobs_in, answers_out, close=(jobs_out, answers_in, ready_in), ready=ready_out,
                             mask=old_mask)
            finally:
                os._exit(1)
        gc.unfreeze()
        if masked:
            signal.pthread_sigmask(signal.SIG_SETMASK, old_mask)  # a stop that came meanwhile is acted on now
        _close((jobs_in, answers_out, ready_out))
        try:  # on once the copy has its session and its signals (it closes its end then, or ends)
            os.read(ready_in, 1)
        except BaseException:  # a stop while waiting: the copy goes, and nothing of it is left open
            _close((jobs_out, answers_in))
            with contextlib.suppress(OSError):
                os.kill(pid, signal.SIGKILL)
                os.waitpid(pid, 0)
            raise
        finally:
            os.close(ready_in)
        self.pid = pid
        self.stdin = os.fdopen(jobs_out, "wb")
        self.stdout = os.fdopen(answers_in, "rb")
        self.returncode: int | None = None

    def kill(self) -> None:
        if self.returncode is None:
            with contextlib.suppress(ProcessLookupError):
                os.kill(self.pid, signal.SIGKILL)

    def wait(self, timeout: float | None = None) -> int:
        """Its exit status, once it has ended; :class:`subprocess.TimeoutExpired` after `timeout` seconds.

        A caller that lets the system reap its children (SIGCHLD ignored) leaves no status to
        collect: then 0, as :class:`subprocess.Popen` says."""
        deadline = None if timeout is None else time.monotonic() + timeout
        while self.returncode is None:
            try:
                pid, status = os.waitpid(self.pid, 0 if deadline is None else os.WNOHANG)
            except ChildProcessError:
                self.returncode = 0
                break
            if pid:
                self.returncode = os.waitstatus_to_exitcode(status)
            elif time.monotonic() >= deadline:
                raise subprocess.TimeoutExpired("iqdemod burst worker", timeout)
            else:
                time.sleep(0.005)
        return self.returncode


class BurstPool:
    """Detector buffers in, their demodulated bursts out in the same order, the work shared with a worker.

    Parameters
    ----------
    plans : sequence of ReceiverPlan
        The receiver's plans, one per link; :meth:`put`'s `link` indexes them.
    capture : str
        The name the frames carry.

    Attributes
    ----------
    answered : int
        Buffers the worker has demodulated so far (the rest were done here).

    Examples
    --------
    Used as a context manager: :meth:`put` each buffer, take what is
    :meth:`ready` as you go, and :meth:`finish` at the end. Here, a capture
    of three buoy frames whose buffers are all put first:

    >>> import os, tempfile
    >>> from iqdemod.profile import load_link
    >>> from iqdemod.receiver import Receiver
    >>> from iqdemod.capture import open_capture
    >>> from iqdemod.synth import SynthConfig, synthesize
    >>> link = load_link(None, rate=48000, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> tmp = tempfile.TemporaryDirectory()
    >>> base = os.path.join(tmp.name, "buoys")
    >>> truth = synthesize(base, SynthConfig(link=link, ebn0_db=(14.0,), n_frames=3, seed=5))
    >>> with open_capture(base + ".sigmf-meta") as capture:
    ...     rx = Receiver(link, capture.info)
    ...     found = [item for block in capture.blocks() for item in rx.buffers(block)] + rx.end_buffers()
    >>> with BurstPool(rx.plans, "buoys") as pool:
    ...     for k, raw in found:
    ...         pool.put(k, raw)
    ...     done = list(pool.finish())
    >>> [f.crc_ok for k, bursts in done for b in bursts for f in b.frames]
    [True, True, True]
    >>> tmp.cleanup()
    """

    def __init__(self, plans: Sequence[ReceiverPlan], capture: str):
        self._plans = tuple(plans)
        self._capture = capture
        self._seq = 0
        self.answered = 0
        # Entries in order: [seq, link, buffer, state]; the state is _HELD, _SENT, _HERE, _MINE,
        # the bursts or a _Raised. The writer and reader threads and the caller share them under
        # one condition.
        self._queue: collections.deque[list] = collections.deque()
        self._held: collections.deque[list] = collections.deque()  # not yet sent, oldest first
        self._mine: collections.deque[list] = collections.deque()  # the worker failed on them: done here
        self._sent: dict[int, list] = {}
        self._cv = threading.Condition()
        self._alive = True  # the worker answers
        self._closing = False
        self._proc: subprocess.Popen | None = None
        self._threads: list[threading.Thread] = []
        try:
            # Pickled here, before any thread runs: the receiver's threads fill the plans' caches
            # as they go, and a dictionary must not change while it is pickled.
            self._first = pickle.dumps((self._plans, capture), protocol=pickle.HIGHEST_PROTOCOL)
        except Exception:  # noqa: BLE001 - a plan that cannot be pickled: every buffer is done here
            self._alive = False
            return
        try:
            self._proc = _Forked() if may_fork() else _interpreter()
        except (OSError, TypeError, ValueError):  # no interpreter to start (an embedded one has no sys.executable)
            self._alive = False
            return
        self._threads = [threading.Thread(target=self._write, name="iqdemod-burst-jobs", daemon=True),
                         threading.Thread(target=self._read, name="iqdemod-burst-answers", daemon=True)]
        for t in self._threads:
            t.start()

    def __enter__(self) -> "BurstPool":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        """End the worker; buffers not yet handed back are dropped."""
        with self._cv:
            self._closing, self._alive = True, False
            self._queue.clear()
            self._held.clear()
            self._mine.clear()
            self._sent.clear()
            self._cv.notify_all()
        proc, self._proc = self._proc, None
        if proc is None:
            return
        writer, reader = self._threads
        writer.join(timeout=2.0)
        if writer.is_alive():  # stuck writing to a worker that reads no more: end it, which frees the pipe
            proc.kill()
        try:
            proc.stdin.close()
        except (OSError, ValueError):
            pass
        try:
            proc.wait(timeout=2.0)
        except subprocess.TimeoutExpired:  # busy with a buffer nobody wants any more
            proc.kill()
            proc.wait()
        reader.join(timeout=2.0)
        proc.stdout.close()

    def put(self, link: int, raw: RawBurst) -> None:
        """Hand over one detector buffer of link number `link`."""
        entry = [self._seq, link, raw, _HELD]
        self._seq += 1
        with self._cv:
            self._queue.append(entry)
            self._held.append(entry)
            self._cv.notify_all()

    def ready(self) -> Iterator[tuple[int, list[Burst]]]:
        """(link, bursts) of the buffers demodulated so far, in order; takes on work if the worker lags.

        Raises what a buffer's demodulation raised, when that buffer's turn comes.
        """
        while True:
            yield from self._heads()
            with self._cv:
                entry = self._take(newest=False, beyond=BACKLOG if self._alive else 0)
            if entry is None:
                return
            self._here(entry)

    def finish(self) -> Iterator[tuple[int, list[Burst]]]:
        """End of input: every remaining buffer's (link, bursts), in order (errors as :meth:`ready`)."""
        while True:
            yield from self._heads()
            with self._cv:
                if not self._queue:
                    return
                entry = self._take(newest=True)  # the worker works from the front
                if entry is None:  # all with the worker: wait for its next answer
                    if not self._alive and not self._done(self._queue[0]):
                        raise RuntimeError("burst pool: a buffer is neither done nor held (a bug)")
                    self._cv.wait_for(lambda: not self._alive or self._done(self._queue[0])
                                      or bool(self._held) or bool(self._mine), timeout=WAKE_S)  # stops act
                    continue
            self._here(entry)

    # ------------------------------------------------------------------ internals
    @staticmethod
    def _done(entry: list) -> bool:
        return not isinstance(entry[3], str)

    def _heads(self) -> Iterator[tuple[int, list[Burst]]]:
        while True:
            with self._cv:
                if not self._queue or not self._done(self._queue[0]):
                    return
                entry = self._queue.popleft()
            if isinstance(entry[3], _Raised):
                raise entry[3].exc
            yield entry[1], entry[3]

    def _take(self, *, newest: bool, beyond: int = 0) -> list | None:
        """The entry the caller demodulates next, or None; call under the lock.

        One the worker failed on, first; otherwise a held one (the oldest or the newest), when
        more than `beyond` are held.
        """
        if self._mine:
            return self._mine.popleft()
        if len(self._held) <= beyond:
            return None
        entry = self._held.pop() if newest else self._held.popleft()
        entry[3] = _HERE
        return entry

    def _here(self, entry: list) -> None:
        """Demodulate an entry in this process; an exception waits for the entry's turn (see _heads)."""
        try:
            result: object = demodulate_burst(entry[2], self._plans[entry[1]], capture=self._capture)
        except Exception as exc:  # noqa: BLE001 - raised in order by _heads
            result = _Raised(exc)
        with self._cv:
            entry[2], entry[3] = None, result

    def _write(self) -> None:
        """The writer thread: the plans, then held buffers, oldest first, while fewer than IN_FLIGHT are out."""
        leave_signals_to_main()
        stdin = self._proc.stdin
        data = self._first
        while True:
            try:
                stdin.write(data)
                stdin.flush()
            except (OSError, ValueError):  # the worker has gone
                self._lost()
                return
            with self._cv:
                self._cv.wait_for(lambda: self._closing or not self._alive
                                  or (len(self._sent) < IN_FLIGHT and bool(self._held)))
                if self._closing or not self._alive:
                    return
                entry = self._held.popleft()
                entry[3] = _SENT
                self._sent[entry[0]] = entry
            try:
                data = pickle.dumps((entry[0], entry[1], entry[2]), protocol=pickle.HIGHEST_PROTOCOL)
            except Exception:  # noqa: BLE001 - a buffer that cannot be pickled: the worker is given up
                self._lost()
                return

    def _read(self) -> None:
        """The reader thread: the worker's answers, until it ends."""
        leave_signals_to_main()
        stream = self._proc.stdout
        while True:
            try:
                seq, bursts, failed = pickle.load(stream)
            except Exception:  # noqa: BLE001 - the worker ended, or its answer is unreadable: it is given up
                self._lost()
                return
            with self._cv:
                entry = self._sent.pop(seq, None)
                if entry is not None:
                    if failed:  # never sent again: the caller repeats it, so that its error is raised here
                        entry[3] = _MINE
                        self._mine.append(entry)
                    else:
                        entry[2], entry[3] = None, bursts
                        self.answered += 1
                self._cv.notify_all()

    def _lost(self) -> None:
        """The worker has gone: what it held goes back to the caller, in order."""
        with self._cv:
            self._alive = False
            back = sorted(self._sent.values(), key=lambda e: e[0])
            self._sent.clear()
            for entry in reversed(back):
                entry[3] = _HELD
                self._held.appendleft(entry)
            self._cv.notify_all()
