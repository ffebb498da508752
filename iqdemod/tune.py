"""Tuning: mix the signal centre to 0 Hz and decimate to a few samples per symbol.

The mixer is phase continuous across blocks because every phase is a function
of the global sample index. For speed it runs in two parts:

- a *coarse* oscillator whose frequency is rounded so that it repeats exactly
  every ``TABLE_LEN`` samples; it is a precomputed complex64 table, one
  complex multiply per input sample;
- the small remainder (below ``fs / (2·TABLE_LEN)``) is removed after
  decimation, where samples are few.

Decimation is a linear-phase Kaiser-window FIR (Kaiser, "Nonrecursive digital
filter design using the I0-sinh window function", 1974) applied in polyphase
form, so its cost per input sample is taps / decimation. The polyphase sum is
written as a few small matrix products over the block reshaped to rows of D
samples, which BLAS runs near the memory bandwidth.

The state (:class:`TunerState`) goes in and comes back, as scipy.signal's
``zi``/``zf`` do; the caller's state is never changed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import signal as _sig  # filter design only

from .link import SignalSpec

__all__ = ["TunerPlan", "TunerState", "plan_tuner", "tune", "fine_rotation", "TABLE_LEN"]

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

    def polyphase(self) -> np.ndarray:
        """The taps as one matrix for the row-wise products (float32, shape (2B, 2D)).

        Row r of the input holds samples rD … rD + D − 1 as interleaved
        (re, im) float32, and P = prefix / D. Output m is
        Σ_b row(m + P − b) · h[bD − c] summed over the columns c: rows 2b and
        2b + 1 of this matrix give the real and imaginary part of sub-filter b.
        """
        d = self.decimation
        h = self.taps.astype(np.float32)
        n_b = (len(h) - 1 + d - 1) // d + 1
        g = np.zeros((n_b, 2 * d, 2), np.float32)
        for b in range(n_b):
            for c in range(d):
                k = b * d - c
                if 0 <= k < len(h):
                    g[b, 2 * c, 0] = g[b, 2 * c + 1, 1] = h[k]
        return np.ascontiguousarray(np.concatenate(list(g), axis=1).T)

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


def _mix(x: np.ndarray, n0: int, table: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """x·table[(n0 + n) mod TABLE_LEN] into `out`, without building an index array."""
    if out is None:
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


def tune(
    x: np.ndarray,
    plan: TunerPlan,
    state: TunerState,
    *,
    table: np.ndarray | None = None,
    polyphase: np.ndarray | None = None,
) -> tuple[np.ndarray, TunerState]:
    """Mix and decimate one block.

    Parameters
    ----------
    x : numpy.ndarray
        complex64 input block.
    plan : TunerPlan
    state : TunerState
        From :meth:`TunerPlan.initial_state` or the previous call.
    table, polyphase : numpy.ndarray, optional
        ``plan.table()`` and ``plan.polyphase()``, passed in to avoid rebuilding
        them every block.

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
    buf = np.empty(len(state.buffer) + len(x), np.complex64)
    buf[: len(state.buffer)] = state.buffer
    _mix(x, state.n_in, table, out=buf[len(state.buffer) :])
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
        g = plan.polyphase() if polyphase is None else polyphase
        p = prefix // d
        rows_needed = count + p
        seg = buf[: rows_needed * d]
        if len(seg) < rows_needed * d:  # the last row is partial: only its first sample is used
            seg = np.concatenate([seg, np.zeros(rows_needed * d - len(seg), np.complex64)])
        rows = seg.view(np.float32).reshape(rows_needed, 2 * d)
        z = g @ rows.T  # (2B, rows): every sub-filter on every row, in one product
        re = z[0, p : p + count].copy()
        im = z[1, p : p + count].copy()
        for b in range(1, len(g) // 2):
            re += z[2 * b, p - b : p - b + count]
            im += z[2 * b + 1, p - b : p - b + count]
        y = np.empty(count, np.complex64)
        y.real = re
        y.imag = im
    n_out = state.n_out + count
    keep_from = count * d  # buffer index of sample n_out·D − prefix
    new_state = TunerState(n_in, n_out, buf[keep_from:].copy())
    if plan.fine_hz:
        y *= fine_rotation(plan, state.n_out, count)
    return y, new_state


def fine_rotation(plan, n_out: int, count: int) -> np.ndarray:
    """exp(−j2π·fine·t) at outputs n_out … n_out + count − 1 (t at each output's centre).

    `plan` is any tuner plan with ``fine_hz``, ``decimation``, ``sample_rate_hz`` and
    ``delay_samples`` (this module's and :class:`iqdemod.channel.ChannelPlan`).
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
