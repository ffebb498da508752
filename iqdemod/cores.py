"""How many cores this process may use: the one count behind batch's default jobs and the per-burst worker."""

from __future__ import annotations

import os

__all__ = ["usable_cores"]


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
