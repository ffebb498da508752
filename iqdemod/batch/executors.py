"""Where the captures are processed: in this process, on a pool of worker processes, or on Dask.

Every executor is started with the captures to do, hands back ``(task, outcome)`` pairs as
they finish, and is closed with ``close(interrupted=…)``.

Threads: a batch uses as many cores as it has jobs, each job one thread. A single decode
takes two cores by itself (the front end's FFT threads, ``channel.FFT_WORKERS``, and reading a
block ahead in a second thread, ``receiver.PIPELINE``), and numpy's BLAS may start a thread per
core; with one job per core those threads only fight over the cores, so each job runs with one
of each.
"""

from __future__ import annotations

import contextlib
import ctypes
import os
import signal
import sys
import threading
import time
from concurrent.futures import ProcessPoolExecutor, as_completed
from typing import Iterator

from ..cores import usable_cores
from ..errors import IqdemodError, quote
from .journal import LOCK_FDS
from .worker import CaptureOutcome, CaptureTask, failed, process_capture

__all__: list[str] = []

_THREAD_VARS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "VECLIB_MAXIMUM_THREADS",
                "NUMEXPR_NUM_THREADS")
# (setter, getter) of the thread count of each math library numpy or scipy may have loaded
_THREAD_FUNCS = (
    ("openblas_set_num_threads", "openblas_get_num_threads"),
    ("openblas_set_num_threads64_", "openblas_get_num_threads64_"),
    ("scipy_openblas_set_num_threads", "scipy_openblas_get_num_threads"),
    ("scipy_openblas_set_num_threads64_", "scipy_openblas_get_num_threads64_"),
    ("MKL_Set_Num_Threads", "MKL_Get_Max_Threads"),
    ("bli_thread_set_num_threads", "bli_thread_get_num_threads"),
    ("omp_set_num_threads", "omp_get_max_threads"),
)
_MATH_LIBRARIES = ("openblas", "mkl", "blis", "gomp", "libomp", "iomp")


def _loaded_math_libraries() -> list[ctypes.CDLL]:
    """The math libraries mapped into this process (Linux; elsewhere none are found)."""
    try:
        with open("/proc/self/maps", encoding="utf-8") as fh:
            paths = {line.split(None, 5)[5].strip() for line in fh if line.count(" ") >= 5 and "/" in line}
    except OSError:
        return []
    libs = []
    for path in sorted(paths):
        if any(key in os.path.basename(path).lower() for key in _MATH_LIBRARIES):
            with contextlib.suppress(OSError):
                libs.append(ctypes.CDLL(path))
    return libs


def set_math_threads(n: int) -> list[tuple[object, int | None]]:
    """Set every loaded math library to `n` threads; return (setter, previous count) of each set.

    A forked worker inherits numpy's BLAS with the parent's thread count, which the thread
    variables can no longer change. Best effort: a library without a setter is left alone.

    Examples
    --------
    Which math libraries are loaded depends on the machine, so this shows the
    use: one thread, then each library set back to its own count:

    >>> import ctypes
    >>> previous = set_math_threads(1)
    >>> all(old is None or old >= 1 for _, old in previous)
    True
    >>> for setter, old in previous:
    ...     if old is not None:
    ...         _ = setter(ctypes.c_int(old))
    """
    done = []
    for lib in _loaded_math_libraries():
        for set_name, get_name in _THREAD_FUNCS:
            setter, getter = getattr(lib, set_name, None), getattr(lib, get_name, None)
            if setter is None:
                continue
            with contextlib.suppress(Exception):
                old = int(getter()) if getter is not None else None
                setter(ctypes.c_int(n))
                done.append((setter, old))
    return done


@contextlib.contextmanager
def one_thread() -> Iterator[None]:
    """This process decodes with one thread while inside (FFT, read-ahead and BLAS); restored after.

    Examples
    --------
    >>> from iqdemod import channel, receiver
    >>> before = channel.FFT_WORKERS, receiver.PIPELINE
    >>> with one_thread():
    ...     channel.FFT_WORKERS, receiver.PIPELINE
    (1, False)
    >>> (channel.FFT_WORKERS, receiver.PIPELINE) == before
    True
    """
    from .. import channel, receiver

    saved = channel.FFT_WORKERS, receiver.PIPELINE
    channel.FFT_WORKERS, receiver.PIPELINE = 1, False
    blas = set_math_threads(1)
    try:
        yield
    finally:
        channel.FFT_WORKERS, receiver.PIPELINE = saved
        for setter, old in reversed(blas):
            if old is not None:
                with contextlib.suppress(Exception):
                    setter(ctypes.c_int(old))


def _worker_init(parent_pid: int, lock_fd: int | None) -> None:
    # Ctrl-C reaches the whole process group; only the parent decides what happens then. A
    # forked worker would also have inherited the command line's SIGTERM handler; the parent
    # stops a worker with SIGTERM, which must simply end it.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    for name in ("SIGHUP", "SIGQUIT"):  # these reach the whole group as well (a closed terminal, a quit key)
        if hasattr(signal, name):
            signal.signal(getattr(signal, name), signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    if lock_fd is not None:  # a forked worker's copies of the locks must not outlive the parent
        for fd in {lock_fd, *LOCK_FDS}:
            with contextlib.suppress(OSError):
                os.close(fd)
    from .. import channel, receiver

    channel.FFT_WORKERS, receiver.PIPELINE = 1, False  # for good: the pool already uses every core
    set_math_threads(1)

    # A pool worker holds both ends of its task queue, so it never sees the parent die: when
    # the parent is killed outright (SIGKILL), nobody would ever collect its work. Leave then.
    def watch() -> None:
        while True:
            time.sleep(0.5)
            if os.getppid() != parent_pid:
                os._exit(1)

    threading.Thread(target=watch, name="iqdemod-parent-watch", daemon=True).start()


@contextlib.contextmanager
def _single_threaded_children() -> Iterator[None]:
    """Spawned workers start with one math-library thread each (the pool already uses every core).

    The variables are read when numpy loads its BLAS, so they must be in the environment the
    children start with; the parent's own settings come back afterwards.
    """
    saved = {k: os.environ.get(k) for k in _THREAD_VARS}
    for k in _THREAD_VARS:
        if saved[k] is None:
            os.environ[k] = "1"
    try:
        yield
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)


def _pool_context():
    """fork on Linux while this process has no other thread; else fresh interpreters (spawn).

    A forked worker starts at once with numpy, scipy and iqdemod already imported, where a
    spawned one spends a second or more importing them; but a fork copies any other thread's
    locks in whatever state they are in, so it is used only when there is no other thread
    (the pool is started before the progress bar's monitor thread exists).
    """
    import multiprocessing

    if (sys.platform.startswith("linux") and threading.active_count() == 1
            and "fork" in multiprocessing.get_all_start_methods()):
        return multiprocessing.get_context("fork")
    return multiprocessing.get_context("spawn")


class Inline:
    """Captures processed one after the other in this process.

    `threads` False (``jobs=1``): one thread, as each job of a pool has; True (one capture,
    more jobs allowed): the decode may use its own threads.
    """

    def __init__(self, tasks: list[CaptureTask], *, threads: bool = False):
        self.tasks = tasks
        self.threads = threads

    def __iter__(self) -> Iterator[tuple[CaptureTask, CaptureOutcome]]:
        with contextlib.nullcontext() if self.threads else one_thread():
            for t in self.tasks:
                yield t, process_capture(t)

    def close(self, *, interrupted: bool) -> None:
        pass


class Pool:
    """A process pool; every capture is submitted (and every worker started) at construction."""

    def __init__(self, tasks: list[CaptureTask], jobs: int, lock_fd: int | None):
        ctx = _pool_context()
        forked = ctx.get_start_method() == "fork"  # only a forked worker holds a copy of the lock's fd
        self.pool = ProcessPoolExecutor(max_workers=jobs, mp_context=ctx, initializer=_worker_init,
                                        initargs=(os.getpid(), lock_fd if forked else None))
        try:
            with _single_threaded_children():  # spawned workers start in submit(); forked ones in the first
                self.futures = {self.pool.submit(process_capture, t): t for t in tasks}
        except BaseException:
            self.close(interrupted=True)
            raise

    def __iter__(self) -> Iterator[tuple[CaptureTask, CaptureOutcome]]:
        for fut in as_completed(self.futures):
            t = self.futures[fut]
            try:
                outcome = fut.result()
            except Exception as exc:  # noqa: BLE001 - e.g. BrokenProcessPool: the row says so
                outcome = failed(t, exc)
            yield t, outcome

    def close(self, *, interrupted: bool) -> None:
        if not interrupted:
            self.pool.shutdown(wait=True)
            return
        # Interrupted: drop the queue and stop the captures in flight now, not when they end.
        procs = list((getattr(self.pool, "_processes", None) or {}).values())  # shutdown() forgets them
        self.pool.shutdown(wait=False, cancel_futures=True)
        for p in procs:
            with contextlib.suppress(Exception):
                p.terminate()
        for p in procs:
            with contextlib.suppress(Exception):
                p.join(5)


def _require_distributed():
    try:
        import distributed
    except ImportError:
        raise IqdemodError("--cluster needs dask.distributed: pip install 'iqdemod[cluster]'") from None
    return distributed


class Cluster:
    """A running Dask scheduler: one task per capture, results as they complete."""

    def __init__(self, tasks: list[CaptureTask], address: str):
        self.distributed = _require_distributed()
        try:
            self.client = self.distributed.Client(address, timeout="20s", set_as_default=False)
        except (OSError, TimeoutError, ValueError) as exc:
            raise IqdemodError(f"cluster {quote(address)}: cannot connect ({exc})") from None
        self.by_key: dict = {}
        self.futures: list = []
        try:
            for t in tasks:
                fut = self.client.submit(process_capture, t, pure=False)
                self.by_key[fut.key] = t
                self.futures.append(fut)
        except BaseException:
            self.close(interrupted=True)
            raise

    def __iter__(self) -> Iterator[tuple[CaptureTask, CaptureOutcome]]:
        for fut in self.distributed.as_completed(self.futures, loop=self.client.loop):
            t = self.by_key[fut.key]
            try:
                outcome = fut.result()
            except Exception as exc:  # noqa: BLE001 - e.g. KilledWorker: the row says so
                outcome = failed(t, exc)
            fut.release()
            yield t, outcome

    def close(self, *, interrupted: bool) -> None:
        if interrupted:
            with contextlib.suppress(Exception):
                self.client.cancel(self.futures)
        self.client.close()


def check_cluster_address(address: str) -> None:
    """Fail fast, once: a malformed address, or a scheduler that does not answer within 5 s.

    Examples
    --------
    A malformed address, and a port where no scheduler listens (port 9, the
    discard service, closed here), are refused at once:

    >>> check_cluster_address("buoys-scheduler")
    Traceback (most recent call last):
    ...
    iqdemod.errors.IqdemodError: cluster 'buoys-scheduler': not a scheduler address such as tcp://10.0.0.5:8786 (...)
    >>> check_cluster_address("tcp://127.0.0.1:9")
    Traceback (most recent call last):
    ...
    iqdemod.errors.IqdemodError: cluster 'tcp://127.0.0.1:9': cannot connect (...)
    """
    import socket

    _require_distributed()
    from distributed.comm import parse_address, parse_host_port

    try:
        scheme, location = parse_address(address)
        host, port = parse_host_port(location)
    except (ValueError, TypeError) as exc:
        raise IqdemodError(f"cluster {quote(address)}: not a scheduler address such as tcp://10.0.0.5:8786 "
                           f"({str(exc)[:80]})") from None
    if scheme not in ("tcp", "tls"):
        return  # other transports: the client says what it thinks
    try:
        with socket.create_connection((host, port), timeout=5):
            pass
    except OSError as exc:
        raise IqdemodError(f"cluster {quote(address)}: cannot connect ({exc.strerror or exc})") from None


def default_jobs() -> int:
    """One job per core this process may run on.

    Examples
    --------
    >>> import os
    >>> default_jobs() == len(os.sched_getaffinity(0))
    True
    """
    return usable_cores()


def start(tasks: list[CaptureTask], *, jobs: int | None, cluster: str | None, lock_fd: int | None):
    """The executor for `tasks`: the cluster when given, else a pool of `jobs`, else this process.

    Biggest captures go first, so that the workers' last captures end close together.

    Examples
    --------
    One job: the captures are done in this process, one after the other.
    A synthetic capture of four buoy frames at 14 dB:

    >>> import os, tempfile
    >>> from iqdemod.profile import load_link
    >>> from iqdemod.synth import SynthConfig, synthesize
    >>> link = load_link(None, rate=48000, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> tmp = tempfile.TemporaryDirectory()
    >>> base = os.path.join(tmp.name, "night0")
    >>> _ = synthesize(base, SynthConfig(link=link, ebn0_db=(14.0,), n_frames=4, seed=5))
    >>> task = CaptureTask(capture="night0.sigmf-meta", path=base + ".sigmf-meta", link=link)
    >>> executor = start([task], jobs=1, cluster=None, lock_fd=None)
    >>> type(executor).__name__
    'Inline'
    >>> [(t.capture, outcome.row.status, outcome.row.frames_crc_ok) for t, outcome in executor]
    [('night0.sigmf-meta', 'ok', 4)]
    >>> executor.close(interrupted=False)
    >>> tmp.cleanup()
    """
    n_jobs = default_jobs() if jobs is None else jobs
    longest_first = sorted(tasks, key=lambda t: -(t.size_bytes or 0))
    if cluster is not None:
        return Cluster(longest_first, cluster)
    if n_jobs == 1 or len(tasks) <= 1:
        return Inline(tasks, threads=n_jobs > 1)
    return Pool(longest_first, min(n_jobs, len(tasks)), lock_fd)
