"""Stop signals for every command: SIGTERM, SIGHUP and SIGQUIT end a run the way Ctrl-C does.

The standard library and :mod:`iqdemod.cores` only (no numpy), so that the group module can use it
without slowing ``--help``.
"""

from __future__ import annotations

import contextlib
import signal
from typing import Iterator

from iqdemod.cores import stop_signals

__all__ = ["STOP_SIGNALS", "Terminated", "stop_signals_raise", "restore_signals", "stop_exception", "signal_of",
           "StopGate", "stops_gated"]

# Signals that end a run like SIGTERM does: the temporary files are removed, the exit status is 128 + signal.
# (The library's stop signals less Ctrl-C, which Python already raises as KeyboardInterrupt.)
STOP_SIGNALS = tuple(sorted(stop_signals() - {signal.SIGINT}))


class Terminated(KeyboardInterrupt):
    """SIGTERM, SIGHUP or SIGQUIT, raised in the main thread.

    A KeyboardInterrupt, so that whatever cleans up after Ctrl-C (every open
    output, batch's journal and workers) cleans up after these too; the exit
    status is 128 + `signum` instead of Ctrl-C's 130.
    """

    def __init__(self, signum: int = signal.SIGTERM):
        super().__init__(signum)
        self.signum = signum


def _raise_terminated(signum, frame):
    raise Terminated(signum)


def stop_signals_raise() -> dict:
    """Make the stop signals raise :class:`Terminated`; return the handlers they replaced.

    Outside the main thread (a test runner's worker) signals cannot be caught
    there, so nothing is changed and the result is empty. A signal the process
    was started ignoring stays ignored: ``nohup`` ignores SIGHUP so that a long
    batch outlives its terminal, and a shell's background job ignores SIGINT
    (as Python itself leaves an ignored SIGINT alone).
    """
    return _install(STOP_SIGNALS, _raise_terminated)


def _install(signals, handler) -> dict:
    """`handler` for each of `signals` the process does not ignore; the handlers replaced, by signal.

    Outside the main thread nothing is installed (signals are caught only there)."""
    previous = {}
    for sig in signals:
        try:
            if signal.getsignal(sig) == signal.SIG_IGN:
                continue
            previous[sig] = signal.signal(sig, handler)
        except ValueError:  # not the main thread: leave them
            break
    return previous


def restore_signals(previous: dict) -> None:
    """Put back the handlers :func:`stop_signals_raise` replaced (a library caller's own come back)."""
    for sig, old in previous.items():
        signal.signal(sig, old)


def stop_exception(signum: int) -> KeyboardInterrupt:
    """What stop signal `signum` raises: KeyboardInterrupt for SIGINT (Ctrl-C), :class:`Terminated` for the others."""
    return KeyboardInterrupt() if signum == signal.SIGINT else Terminated(signum)


def signal_of(exc: KeyboardInterrupt) -> int:
    """The signal behind a stop: a :class:`Terminated` knows its own, any other KeyboardInterrupt is SIGINT."""
    return exc.signum if isinstance(exc, Terminated) else signal.SIGINT


class StopGate:
    """Stop signals held back over steps that must not be cut in two, such as a frame's line and its count.

    While the gate holds (:meth:`held`, or :meth:`hold` … :meth:`release`;
    holds may nest), the first stop signal is noted and raised when the
    outermost hold ends; a second one raises at once, so that a step stuck
    (writing into a pipe nobody reads) can still be stopped. While it does not
    hold, a stop signal raises at once, as without the gate. Made and installed
    by :func:`stops_gated`.
    """

    def __init__(self) -> None:
        self._depth = 0
        self._pending: int | None = None

    def handle(self, signum, frame) -> None:
        """The signal handler (Python runs it in the main thread, between two steps of its code)."""
        if self._depth and self._pending is None:
            self._pending = signum
            return
        self._depth, self._pending = 0, None
        raise stop_exception(signum)

    def hold(self) -> None:
        """Hold stop signals from now on (until the matching :meth:`release`)."""
        self._depth += 1

    def release(self, *, deliver: bool = True) -> None:
        """End one hold; after the outermost, a signal noted meanwhile is raised now.

        With `deliver` false every hold ends and a noted signal is dropped (a run that
        is already stopping has no use for another stop).
        """
        self._depth = max(0, self._depth - 1) if deliver else 0
        if self._depth:
            return
        signum, self._pending = self._pending, None
        if signum is not None and deliver:
            raise stop_exception(signum)

    @contextlib.contextmanager
    def held(self) -> Iterator[None]:
        """Hold stop signals over the block; one that came meanwhile is raised at its end."""
        self.hold()
        try:
            yield
        finally:
            self.release()


@contextlib.contextmanager
def stops_gated() -> Iterator[StopGate]:
    """SIGINT and the stop signals go through a :class:`StopGate` for the block; the old handlers come back after.

    A signal the process was started with ignored (``nohup``, a background job
    of a shell without job control) stays ignored. Outside the main thread
    nothing is installed and the gate never holds anything back.
    """
    gate = StopGate()
    previous: dict = {}
    try:
        previous = _install((signal.SIGINT, *STOP_SIGNALS), gate.handle)
        yield gate
    finally:
        restore_signals(previous)
