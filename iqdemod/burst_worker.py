"""The worker process of :class:`iqdemod.burst_pool.BurstPool`: detector buffers in on stdin, bursts out on stdout.

Started by the pool, never by hand: as a fresh interpreter (its start-up code imports this module and
calls ``_main``, which serves stdin and stdout), or as a copy of the calling process
(:func:`serve_forked`, which serves two pipes). The stream is a sequence of pickles: first ``(plans, capture)``, then one job
``(seq, link, buffer)`` after another; each answer is ``(seq, bursts, failed)``,
where `failed` is True when :func:`iqdemod.demod.demodulate_burst` raised (the
pool then demodulates that buffer itself, so the error surfaces there, with
its own traceback). The worker ends when its input ends. Anything printed
goes to stderr: stdout carries only the answers.
"""

from __future__ import annotations

import contextlib
import os
import pickle
import signal
import sys
import traceback
from typing import BinaryIO, NoReturn

from .cores import stop_signals

__all__ = ["serve", "serve_forked"]


def serve(inp: BinaryIO, out: BinaryIO) -> None:
    """Answer jobs read from `inp` on `out` until `inp` ends (the protocol above).

    Examples
    --------
    One detector buffer of a buoy frame, as the pool would send it, answered
    with its bursts:

    >>> import io, pickle
    >>> import numpy as np
    >>> from iqdemod.bursts import RawBurst
    >>> from iqdemod.framing import frame_bits
    >>> from iqdemod.plan import plan_receiver
    >>> from iqdemod.profile import load_link
    >>> link = load_link(None, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> plan = plan_receiver(link, 48000)
    >>> bits = np.concatenate([np.tile([1, 0], 16), frame_bits(b"buoy-7 12.5C", link.frame), np.zeros(8, np.uint8)])
    >>> x = np.exp(2j * np.pi * np.cumsum(np.repeat(np.where(bits == 1, 600.0, -600.0), 8)) / 9600)
    >>> y = np.concatenate([np.zeros(400), x, np.zeros(400)]).astype(np.complex64)
    >>> job = (7, 0, RawBurst(0, 0, y, (400, 400 + len(x))))  # (seq, link, buffer)
    >>> jobs = io.BytesIO(pickle.dumps(((plan,), "buoys")) + pickle.dumps(job))
    >>> answers = io.BytesIO()
    >>> serve(jobs, answers)
    >>> seq, bursts, failed = pickle.loads(answers.getvalue())
    >>> seq, failed, [(f.payload, f.crc_ok) for b in bursts for f in b.frames]
    (7, False, [(b'buoy-7 12.5C', True)])
    """
    from iqdemod.demod import demodulate_burst

    try:
        plans, capture = pickle.load(inp)
    except EOFError:
        return
    while True:
        try:
            seq, link, raw = pickle.load(inp)
        except EOFError:
            return
        try:
            answer = (seq, demodulate_burst(raw, plans[link], capture=capture), False)
        except Exception:  # noqa: BLE001 - the pool repeats the work and raises it there
            answer = (seq, None, True)
        try:
            pickle.dump(answer, out, protocol=pickle.HIGHEST_PROTOCOL)
            out.flush()
        except BrokenPipeError:  # the pool has gone
            return


def serve_forked(jobs: int, answers: int, *, close: tuple[int, ...], ready: int | None = None,
                 mask: set | None = None) -> NoReturn:
    """The worker in a copy of the calling process (os.fork): serve the pipe `jobs`, answer on
    `answers`, then end at once (never returning into the caller's code).

    It takes a session of its own and ignores Ctrl-C, as the interpreter worker does, and puts
    back the default action of the signals the caller may have its own handlers for (they
    would run the caller's code here). It closes the caller's ends of the pipes, `close`
    (else its input would never end), and points descriptor 1 at stderr: the caller's
    standard output (its frames, perhaps) gets nothing from it. Then it closes `ready` (when
    given), so the caller, which reads it to its end, goes on only once this is all done, as it
    would after starting an interpreter, and sets the signal mask back to `mask` (when given: the
    caller blocks the stop signals over the fork, so none reaches the copy before this).

    Examples
    --------
    A copy of this process answers a buffer of noise alone (no sync word in it; POSIX only):

    >>> import os, pickle
    >>> import numpy as np
    >>> from iqdemod.bursts import RawBurst
    >>> from iqdemod.plan import plan_receiver
    >>> from iqdemod.profile import load_link
    >>> plan = plan_receiver(load_link(None, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16,
    ...                                length=12), 48000)
    >>> jobs_in, jobs_out = os.pipe()
    >>> answers_in, answers_out = os.pipe()
    >>> pid = os.fork()
    >>> if pid == 0:  # the copy: it serves, then ends
    ...     serve_forked(jobs_in, answers_out, close=(jobs_out, answers_in))
    >>> os.close(jobs_in); os.close(answers_out)
    >>> noise = np.random.default_rng(1).normal(0, 0.01, (4000, 2)).astype(np.float32).view(np.complex64)[:, 0]
    >>> with os.fdopen(jobs_out, "wb") as jobs:
    ...     _ = jobs.write(pickle.dumps(((plan,), "quiet")) + pickle.dumps((3, 0, RawBurst(0, 0, noise, (0, 4000)))))
    >>> with os.fdopen(answers_in, "rb") as answers:
    ...     seq, bursts, failed = pickle.load(answers)
    >>> seq, failed, sum(len(b.frames) for b in bursts), os.waitpid(pid, 0)[1]
    (3, False, 0, 0)
    """
    status = 0
    try:
        os.setsid()
        for sig in stop_signals():
            signal.signal(sig, signal.SIG_IGN if sig == signal.SIGINT else signal.SIG_DFL)
        for fd in close:
            os.close(fd)
        os.dup2(2, 1)
        sys.stdout = sys.stderr
        if ready is not None:
            os.close(ready)
        if mask is not None:
            signal.pthread_sigmask(signal.SIG_SETMASK, mask)
        serve(os.fdopen(jobs, "rb"), os.fdopen(answers, "wb"))
    except BaseException:  # noqa: BLE001 - the caller sees its input end and does the work itself
        status = 1
        with contextlib.suppress(Exception):
            traceback.print_exc()
    finally:
        with contextlib.suppress(Exception):
            sys.stderr.flush()
        os._exit(status)


def _main() -> None:
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C is the calling process's to handle: it ends us
    # The answers get descriptor 1 to themselves: a copy of it carries them, and 1 itself then points
    # at stderr, so nothing else printed (by Python or by a C library) can land among them.
    out = os.fdopen(os.dup(1), "wb")
    os.dup2(2, 1)
    sys.stdout = sys.stderr
    serve(sys.stdin.buffer, out)
    # Every answer is flushed as it is written, and the pool waits for this process to end: the
    # interpreter's own teardown (numpy and every module unloaded, about 30 ms) is skipped.
    for stream in (out, sys.stderr):
        try:
            stream.flush()
        except (OSError, ValueError):  # the pool has gone, or stderr was closed
            pass
    os._exit(0)


if __name__ == "__main__":
    _main()
