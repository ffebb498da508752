"""How many cores this process may use (the one count behind batch's default jobs and the per-burst worker), and
the rules of the decoder's own threads with stop signals."""

from __future__ import annotations

import os
import signal

__all__ = ["usable_cores", "leave_signals_to_main", "stop_signals", "WAKE_S"]

#: The longest the main thread waits on one of the decoder's threads in one go: a stop signal that the
#: system handed to another thread is acted on within this (Python runs handlers in the main thread
#: only, between steps of its code, and a wait without a timeout is not woken by a signal taken
#: elsewhere).
WAKE_S = 0.1


def usable_cores() -> int:
    """Cores this process may run on: its CPU affinity where the system tells it (a container's or
    ``taskset``'s limit), otherwise the machine's count; at least 1.

    Examples
    --------
    >>> import os
    >>> usable_cores() == len(os.sched_getaffinity(0))
    True
    """
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def leave_signals_to_main() -> None:
    """Called first in each of the decoder's own threads: stop signals (Ctrl-C, SIGTERM, SIGHUP,
    SIGQUIT) are blocked in it, so the system hands them to the main thread, whose wait they
    then interrupt; the thread itself never handles a signal (Python runs handlers in the main
    thread only). Where threads cannot block signals, nothing is done.

    Examples
    --------
    >>> import signal, threading
    >>> seen = []
    >>> t = threading.Thread(target=lambda: (leave_signals_to_main(),
    ...                                      seen.append(signal.SIGINT in signal.pthread_sigmask(signal.SIG_BLOCK, []))))
    >>> t.start(); t.join()
    >>> seen, signal.SIGINT in signal.pthread_sigmask(signal.SIG_BLOCK, [])  # this thread's mask is untouched
    ([True], False)
    """
    if hasattr(signal, "pthread_sigmask"):
        signal.pthread_sigmask(signal.SIG_BLOCK, stop_signals())


def stop_signals() -> set:
    """The signals that stop a run: Ctrl-C (SIGINT), SIGTERM, SIGHUP and SIGQUIT, those this system has.

    Examples
    --------
    >>> import signal
    >>> signal.SIGINT in stop_signals()
    True
    """
    return {getattr(signal, name) for name in ("SIGINT", "SIGTERM", "SIGHUP", "SIGQUIT") if hasattr(signal, name)}
