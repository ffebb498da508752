"""Tuning: mix the signal centre to 0 Hz and decimate to a few samples per symbol.

The mixer is phase continuous across blocks because every phase is a function
of the global sample index. For speed it runs in two parts:

- a *coarse* oscillator whose frequency is rounded so that it repeats exactly
  every ``TABLE_LEN`` samples; it is a precomputed complex64 table, one
  complex multiply per input sample;
- the small remainder (below ``fs / (2·TABLE_LEN)``) is removed after
  decimation, where samples are few.

Decimation is a linear-phase Kaiser-window FIR (Kaiser, "Nonrecursive digital
filter design using the I0-sinh window function", 1974) applied polyphase by
``scipy.signal.upfirdn``, so its cost per input sample is taps / decimation.

The state (:class:`TunerState`) goes in and comes back, as scipy.signal's
``zi``/``zf`` do; the caller's state is never changed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import signal as _sig

from .link import SignalSpec

__all__ = ["TunerPlan", "TunerState", "plan_tuner", "tune", "TABLE_LEN"]

TABLE_LEN = 1 << 13
STOPBAND_DB = 60.0


@dataclass(frozen=True, eq=False)
class TunerPlan:
    """Everything fixed about the tuner for one capture.

    Attributes
    ----------
    sample_rate_hz : float
        Input rate.
    offset_hz : float
        The frequency mixed to 0 Hz.
    decimation : int
    taps : numpy.ndarray
        float32 low-pass FIR, unit gain at 0 Hz, length ``prefix + 1`` at most.
    passband_hz : float
        Half-width of the band kept flat.
    """

    sample_rate_hz: float
    offset_hz: float
    decimation: int
    taps: np.ndarray
    passband_hz: float

    @property
    def output_rate_hz(self) -> float:
        return self.sample_rate_hz / self.decimation

    @property
    def delay_samples(self) -> float:
        """Group delay of the FIR, input samples."""
        return (len(self.taps) - 1) / 2

    @property
    def _prefix(self) -> int:
        # history kept before the next output, a whole number of output steps
        d = self.decimation
        return -(-(len(self.taps) - 1) // d) * d

    @property
    def coarse_hz(self) -> float:
        fs = self.sample_rate_hz
        return round(self.offset_hz * TABLE_LEN / fs) * fs / TABLE_LEN

    @property
    def fine_hz(self) -> float:
        return self.offset_hz - self.coarse_hz

    def table(self) -> np.ndarray:
        k = np.arange(TABLE_LEN)
        cycles = round(self.offset_hz * TABLE_LEN / self.sample_rate_hz)
        return np.exp(-2j * np.pi * cycles * k / TABLE_LEN).astype(np.complex64)

    def initial_state(self) -> "TunerState":
        """The state before the first sample: zero history, index 0."""
        return TunerState(n_in=0, n_out=0, buffer=np.zeros(self._prefix, np.complex64))


@dataclass(frozen=True, eq=False)
class TunerState:
    """What the tuner carries between blocks.

    Attributes
    ----------
    n_in : int
        Input samples consumed so far.
    n_out : int
        Output samples produced so far (the index of the next one).
    buffer : numpy.ndarray
        Mixed input samples from index ``n_out·D − prefix`` up to ``n_in``.
    """

    n_in: int
    n_out: int
    buffer: np.ndarray


def plan_tuner(sample_rate_hz: float, signal: SignalSpec, offset_hz: float) -> TunerPlan:
    """Choose the decimation and design the FIR for a signal.

    The kept band is ``±(shift/2 + pull-in + baud)`` around the signal centre:
    both tones, the largest carrier error searched for, and each tone's main
    lobe. The output rate is at least four times that half-band and at least
    eight samples per symbol.
    """
    fs = float(sample_rate_hz)
    passband = signal.shift_hz / 2 + signal.pull_in_hz + signal.baud
    passband = min(passband, 0.45 * fs)
    wanted = max(4.0 * passband, 8.0 * signal.baud)
    decimation = max(1, int(fs // wanted))
    out_rate = fs / decimation
    if decimation == 1:
        taps = np.ones(1, np.float32)
    else:
        stop = out_rate - passband  # aliases land outside ±passband
        width = (stop - passband) / (fs / 2)
        n_taps, beta = _sig.kaiserord(STOPBAND_DB, width)
        n_taps |= 1  # odd: integer group delay
        taps = _sig.firwin(n_taps, (passband + stop) / 2, window=("kaiser", beta), fs=fs)
        taps = (taps / taps.sum()).astype(np.float32)
    return TunerPlan(fs, float(offset_hz), decimation, taps, passband)


def _mix(x: np.ndarray, n0: int, table: np.ndarray) -> np.ndarray:
    """x·table[(n0 + n) mod TABLE_LEN], without building an index array."""
    out = np.empty_like(x)
    n = len(x)
    p = n0 % TABLE_LEN
    head = min(n, (TABLE_LEN - p) % TABLE_LEN)
    if head:
        np.multiply(x[:head], table[p : p + head], out=out[:head])
    body = (n - head) // TABLE_LEN * TABLE_LEN
    if body:
        np.multiply(
            x[head : head + body].reshape(-1, TABLE_LEN),
            table,
            out=out[head : head + body].reshape(-1, TABLE_LEN),
        )
    rest = n - head - body
    if rest:
        np.multiply(x[head + body :], table[:rest], out=out[head + body :])
    return out


def tune(x: np.ndarray, plan: TunerPlan, state: TunerState, *, table: np.ndarray | None = None) -> tuple[np.ndarray, TunerState]:
    """Mix and decimate one block.

    Parameters
    ----------
    x : numpy.ndarray
        complex64 input block.
    plan : TunerPlan
    state : TunerState
        From :meth:`TunerPlan.initial_state` or the previous call.
    table : numpy.ndarray, optional
        ``plan.table()``, passed in to avoid rebuilding it every block.

    Returns
    -------
    y : numpy.ndarray
        complex64 output samples; output ``m`` is centred on input sample
        ``m·D − delay_samples``.
    state : TunerState
        The state after this block.
    """
    if table is None:
        table = plan.table()
    x = np.asarray(x, dtype=np.complex64)
    mixed = _mix(x, state.n_in, table)
    buf = np.concatenate([state.buffer, mixed])
    d = plan.decimation
    n_in = state.n_in + len(x)
    prefix = plan._prefix
    # outputs m with m·D <= n_in − 1, from state.n_out on
    last = (n_in - 1) // d
    count = max(0, last - state.n_out + 1)
    if count == 0:
        return np.zeros(0, np.complex64), TunerState(n_in, state.n_out, buf)
    if d == 1:
        y = buf[prefix : prefix + count].copy()
    else:
        seg = buf[: prefix + (count - 1) * d + 1]
        full = _sig.upfirdn(plan.taps, seg, 1, d)
        y = full[prefix // d : prefix // d + count].astype(np.complex64, copy=False)
    n_out = state.n_out + count
    keep_from = count * d  # buffer index of sample n_out·D − prefix
    new_state = TunerState(n_in, n_out, buf[keep_from:].copy())
    if plan.fine_hz:
        m = np.arange(state.n_out, n_out, dtype=np.float64)
        cycles = np.mod(plan.fine_hz * (m * d - plan.delay_samples) / plan.sample_rate_hz, 1.0)
        y = y * np.exp(-2j * np.pi * cycles).astype(np.complex64)
    return y, new_state
