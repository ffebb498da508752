"""Stop signals for every command: SIGTERM, SIGHUP and SIGQUIT end a run the way Ctrl-C does.

Standard library only, so that the group module can use it without slowing ``--help``.
"""

from __future__ import annotations

import signal

__all__ = ["STOP_SIGNALS", "Terminated", "stop_signals_raise", "restore_signals"]

# Signals that end a run like SIGTERM does: the temporary files are removed, the exit status is 128 + signal.
STOP_SIGNALS = tuple(getattr(signal, name) for name in ("SIGTERM", "SIGHUP", "SIGQUIT") if hasattr(signal, name))


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
    there, so nothing is changed and the result is empty.
    """
    previous = {}
    for sig in STOP_SIGNALS:
        try:
            previous[sig] = signal.signal(sig, _raise_terminated)
        except ValueError:  # not the main thread: leave them
            break
    return previous


def restore_signals(previous: dict) -> None:
    """Put back the handlers :func:`stop_signals_raise` replaced (a library caller's own come back)."""
    for sig, old in previous.items():
        signal.signal(sig, old)
