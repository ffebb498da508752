"""The front end's fine mixer: the small rotation left after mixing by a whole FFT bin.

:mod:`iqdemod.channel` mixes a signal to 0 Hz by selecting FFT bins, which
moves it by a whole bin; the remainder, below half a bin, is taken out after
decimation, where samples are few. That rotation is this module's only
function. (The survey's own tuner that lived here is gone: the survey now
tunes with the receiver's front end. The rotation belongs in ``channel.py``
and moves there with the front end's next change.)
"""

from __future__ import annotations

import numpy as np

__all__ = ["fine_rotation"]


def fine_rotation(plan, n_out: int, count: int) -> np.ndarray:
    """exp(−j2π·fine·t) at outputs n_out … n_out + count − 1 (t at each output's centre).

    Parameters
    ----------
    plan : iqdemod.channel.ChannelPlan
        Any plan with ``fine_hz``, ``decimation``, ``sample_rate_hz`` and
        ``delay_samples``.
    n_out : int
        Index of the first output.
    count : int
        Outputs wanted.

    Returns
    -------
    numpy.ndarray
        complex64, `count` unit phasors.

    Examples
    --------
    A remainder of 10 Hz at 1 kS/s, no decimation or delay: a tenth of a turn
    every ten samples.

    >>> from types import SimpleNamespace
    >>> plan = SimpleNamespace(fine_hz=10.0, decimation=1, sample_rate_hz=1000.0, delay_samples=0.0)
    >>> turns = np.angle(fine_rotation(plan, 0, 11)) / (2 * np.pi)
    >>> [round(float(t), 4) for t in turns[[0, 10]]]
    [0.0, -0.1]
    """
    d = plan.decimation
    step = plan.fine_hz * d / plan.sample_rate_hz  # cycles per output sample
    base = _steps(step, count)
    start = np.mod(plan.fine_hz * (n_out * d - plan.delay_samples) / plan.sample_rate_hz, 1.0)
    return base * np.complex64(np.exp(-2j * np.pi * start))


_STEP_CACHE: dict[float, np.ndarray] = {}


def _steps(step: float, count: int) -> np.ndarray:
    # exp(−j2π·step·k) for k < count, kept per step and grown as needed (exact phases from k, not a recurrence)
    table = _STEP_CACHE.get(step)
    if table is None or len(table) < count:
        k = np.arange(max(count, 1 << 16), dtype=np.float64)
        table = np.exp(-2j * np.pi * np.mod(step * k, 1.0)).astype(np.complex64)
        if len(_STEP_CACHE) > 32:
            _STEP_CACHE.clear()
        _STEP_CACHE[step] = table
    return table[:count]
