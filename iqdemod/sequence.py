"""Multi-symbol non-coherent detection of continuous-phase and Gaussian FSK.

The one-symbol correlator bank (:mod:`iqdemod.correlate`) is the optimum
non-coherent receiver only when every symbol is a plain tone: a rectangular
frequency pulse and orthogonal tones. With a Gaussian frequency pulse (GFSK)
each symbol's waveform depends on its neighbours and the tones are not
orthogonal, and that receiver loses several dB. This module observes a window
of N symbols (odd) plus the bits whose pulses reach into it, correlates the
received samples with every phase-continuous hypothesis of the link's pulse and
modulation index, and decides the middle symbol from the non-coherent metric
|⟨r, s_h⟩|², maximised over the hypotheses of each value of the middle bit
(Osborne & Luntz, "Coherent and noncoherent detection of CPFSK", IEEE Trans.
Commun. 22(8), 1974 — from memory; the multiple-symbol view of the same idea is
Divsalar & Simon, "Multiple-symbol differential detection of MPSK", IEEE Trans.
Commun. 38(3), 1990 — from memory). The carrier phase at the start of the
window is unknown and drops out of |·|²; the phase *continuity* inside the
window is what the detector exploits.

Signal model (continuous-phase modulation; Proakis, *Digital Communications*,
the CPM section [book])::

    s(t) = exp(j·φ(t)),   φ(t) = 2π·h·Σ_i a_i·q(t − iT − T/2),   a_i = 2·bit_i − 1

with q the integral of the frequency pulse g, rising from 0 to ½ over the
pulse's span (centred on its symbol's middle), so that every symbol turns the
phase by exactly π·h·a_i. Bit 1 is the upper tone (+h/2·baud) unless the plan
says ``invert``. The Gaussian pulse is a one-symbol rectangle convolved with a
Gaussian of standard deviation σ = √(ln 2)/(2π·BT) symbols (Murota & Hirade,
IEEE Trans. Commun. 29(7), 1981 — from memory), truncated to ``span_symbols``
about its centre and rescaled so that it rises from exactly 0 to exactly ½.

How the work is organised (vectorised: loops run over hypotheses' slots,
polyphase phases and blocks of symbols, never over single symbols):

1. Per symbol slot k, the received samples are correlated with every *local
   segment*: the waveform inside one slot depends only on the bits whose
   pulses overlap the slot (``2·context + 1`` bits; one for rect), apart from a
   phase accumulated from the earlier bits. The segments are taken from a
   small polyphase bank evaluated at each slot's own fractional offset
   (``phases`` offsets per sample), so a fractional number of samples per
   symbol and a drifting clock are handled without interpolating the signal.
   Each sample belongs to exactly one slot, so the sum of the slot
   correlations *is* the correlation of the sampled signal with the sampled
   hypothesis; the only approximation is the offset quantisation (at most
   1/(2·phases) sample; its cost is measured in ``checks/sequence_detector.py``
   and the tests against ``exact=True``).
2. Per window, each hypothesis' N slot correlations are rotated by the phase
   its earlier bits accumulated and summed; |·|² over all 2^(N + 2·context)
   hypotheses, split by the middle bit, gives the two statistics.

Conventions shared with the receiver: positions are in samples of the burst
buffer with the cumulative-sum convention of :mod:`iqdemod.correlate` (sample
n covers [n, n + 1), so its value is the signal at position n + ½); a symbol
slot [s_k, s_k + period) holds the samples whose centres fall inside it.
Statistics are normalised like the one-symbol |z|²: a noise-free
unit-amplitude signal gives 1 for the right hypothesis.

The link's pulse and hypotheses are planned in :mod:`iqdemod.sequence_plan`, the
pulse-aware Eb/N0 estimators are in :mod:`iqdemod.sequence_estimate`, the
predicted bit error rate in :mod:`iqdemod.sequence_theory`.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field

import numpy as np

from .correlate import phasor
from .errors import LinkError
from .sequence_plan import PULSES, SequencePlan, frequency_pulse, phase_pulse, phase_trajectory, plan_sequence

__all__ = [
    "PULSES",
    "SequencePlan",
    "SequenceDecisions",
    "plan_sequence",
    "phase_pulse",
    "frequency_pulse",
    "phase_trajectory",
    "detect",
    "check_inputs",
    "slot_samples",
]

_CHUNK_ELEMENTS = 1 << 15  # hypotheses × symbols per block of the combining step: it stays in cache
#: The combining step's precisions (:func:`detect`'s `precision`): numpy's complex type of each.
PRECISIONS = {"double": np.complex128, "single": np.complex64}


@functools.lru_cache(maxsize=64)
def _slot_tables(n_slots: int, context: int, h_signed: float) -> tuple[tuple[np.ndarray, ...], tuple[np.ndarray, ...]]:
    """For hypotheses over `n_slots` consecutive slots (natural code order, earliest bit first):
    per slot i, the row of a (pattern, accumulated phase) table, and that table's phases.

    Hypothesis h's slot i contributes exp(−jΘ_i(h))·Y_i[p_i(h)], with Θ_i the
    phase its bits before slot i's pattern turned (π·h per bit); Θ_i takes only
    i + 1 values, so slot i's table is Y_i[p]·exp(−jθ_v) over (p, v) and every
    hypothesis reads one row of it.
    """
    c = context
    n_bits = n_slots + 2 * c
    codes = np.arange(1 << n_bits)
    bits = (codes[:, None] >> (n_bits - 1 - np.arange(n_bits))) & 1
    weights = 1 << np.arange(2 * c, -1, -1)
    ones = np.concatenate([np.zeros((len(bits), 1), np.int64), np.cumsum(bits, axis=1)], axis=1)
    index, rot = [], []
    for i in range(n_slots):
        pat = bits[:, i : i + 2 * c + 1] @ weights
        index.append(pat * (i + 1) + ones[:, i])  # Σ a over the i earlier bits is 2v − i
        rot.append(np.exp(-1j * np.pi * h_signed * (2 * np.arange(i + 1) - i)))
    return tuple(index), tuple(rot)


def _partial(yt: np.ndarray, a: int, b: int, i0: int, n_slots: int, plan: SequencePlan) -> np.ndarray:
    """Correlations of every partial hypothesis over slots i0 … i0 + n_slots − 1 of windows a … b − 1.

    `yt` holds the padded slot correlations as (pattern, slot); the result is
    (2^(n_slots + 2·context), b − a), phase referred to the first slot.
    """
    index, rot = _slot_tables(n_slots, plan.context, plan.h * plan.tone_sign)
    acc = None
    for i in range(n_slots):
        seg = yt[:, a + i0 + i : b + i0 + i]
        table = (seg[:, None, :] * rot[i].astype(yt.dtype, copy=False)[None, :, None]).reshape(-1, b - a)
        rows = table[index[i]]
        acc = rows if acc is None else np.add(acc, rows, out=acc)
    return acc


# --------------------------------------------------------------------------- slots


BANK_PERIOD_STEP = 1e-3  # samples: the bank's period is the measured one to this step (see _slot_correlations)


@functools.lru_cache(maxsize=32)
def _bank(plan: SequencePlan, period: float, n_samples: int) -> np.ndarray:
    """Conjugate segment templates at ``plan.phases + 1`` fractional offsets: (F + 1, P, M), M = `n_samples`."""
    f = plan.phases
    m = np.arange(n_samples)
    tau = np.arange(f + 1)[:, None] / f + m[None, :]
    out = np.exp(-1j * plan.segment_phases(tau / period)).transpose(1, 0, 2).copy()
    out.setflags(write=False)
    return out


def slot_samples(x: np.ndarray, starts: np.ndarray, period: float):
    """Each slot's samples (zero where absent), their offsets from the slot start and the count.

    Returns xg (K, M), first offset f (K,) in [0, 1), valid mask (K, M), index (K, M).

    Examples
    --------
    Slots of 4 samples starting at 0.5, 4.5 and 7.25 (sample n is centred on
    n + 0.5): the last slot's first sample is 7, 0.25 after its start, and its
    fourth sample (10) lies past the end of x:

    >>> xg, f, valid, idx = slot_samples(np.arange(10) + 0j, np.array([0.5, 4.5, 7.25]), 4.0)
    >>> xg.real.tolist()
    [[0.0, 1.0, 2.0, 3.0], [4.0, 5.0, 6.0, 7.0], [7.0, 8.0, 9.0, 0.0]]
    >>> f.tolist(), valid.sum(axis=1).tolist(), idx[2].tolist()
    ([0.0, 0.0, 0.25], [4, 4, 3], [7, 8, 9, 10])
    """
    m = np.arange(int(math.ceil(period)))
    n0 = np.ceil(starts - 0.5).astype(np.int64)
    f = n0 + 0.5 - starts
    idx = n0[:, None] + m[None, :]
    valid = (f[:, None] + m[None, :] < period) & (idx >= 0) & (idx < len(x))
    xg = np.where(valid, x[np.clip(idx, 0, max(len(x) - 1, 0))], 0.0) if len(x) else np.zeros(idx.shape, complex)
    return xg, f, valid, idx


def _slot_correlations(x, starts, period, plan, exact):
    """Y[k, p] = Σ x·conj(segment p) over slot k, and the sample count of each slot."""
    xg, f, valid, _ = slot_samples(x, starts, period)
    cnt = valid.sum(axis=1)
    if exact:
        u = (f[:, None] + np.arange(xg.shape[1])[None, :]) / period
        w = np.exp(-1j * plan.segment_phases(u))  # (P, K, M)
        y = np.einsum("km,pkm->kp", xg, w)
    else:
        # Every transmission measures its own period (its clock): the bank is kept for the period
        # rounded to BANK_PERIOD_STEP, so that the transmissions of one transmitter share it. The
        # templates' phase then errs by under 2π·h·(step/2)/period·(samples per slot)/period, below
        # 10⁻³ rad at 8 samples a symbol: far inside the bank's own 1/(2F)-sample offset steps.
        bank = _bank(plan, round(float(period) / BANK_PERIOD_STEP) * BANK_PERIOD_STEP, xg.shape[1])
        which = np.rint(f * plan.phases).astype(np.int64)
        # one batched product: slot k's samples against the templates at its own offset
        y = np.matmul(bank[which], xg[:, :, None])[:, :, 0]
    return y, cnt


# --------------------------------------------------------------------------- detection


@dataclass(frozen=True, eq=False)
class SequenceDecisions:
    """Decisions and statistics of the multi-symbol detector, one entry per symbol slot.

    Attributes
    ----------
    bits : numpy.ndarray
        uint8 decided bits.
    m0, m1 : numpy.ndarray
        float64: the largest metric |⟨r, s_h⟩|² among the hypotheses whose
        middle bit is 0 / 1, divided by the square of the window's sample
        count, so that a noise-free unit-amplitude signal gives 1 for the
        right hypothesis (the scale of the one-symbol |z|²). With noise of
        total variance σ² per sample a wrong-everywhere hypothesis sits near
        σ²/(window samples); the SNR of the right metric is N·Es/N0.
    z : numpy.ndarray
        complex128: the winning hypothesis' normalised window correlation
        (|z|² = max(m0, m1)); its phase is that of the window's first slot.
    window_symbols : numpy.ndarray
        int: slots that held samples in each symbol's window (N inside the
        burst; fewer at the edges, where the window shrinks).
    plan : SequencePlan
    """

    bits: np.ndarray = field(repr=False)
    m0: np.ndarray = field(repr=False)
    m1: np.ndarray = field(repr=False)
    z: np.ndarray = field(repr=False)
    window_symbols: np.ndarray = field(repr=False)
    plan: SequencePlan

    @property
    def n_symbols(self) -> int:
        return int(self.bits.size)


def check_inputs(x, starts, period_samples, offset_hz, rate_hz):
    """Check the detector's and estimators' common inputs; return (x, starts, period) ready to use.

    `x` comes back as complex128 with `offset_hz` mixed out (at `rate_hz`),
    `starts` as float64 and the period as a float.

    Raises
    ------
    LinkError
        For x not 1-D, starts not finite or not increasing, a period below 2
        samples, or an offset without a valid rate.

    Examples
    --------
    A tone at 1 kHz, sampled at 8 kHz, with its 1 kHz offset removed is a
    constant:

    >>> x = np.exp(2j * np.pi * 1000 * np.arange(8) / 8000)
    >>> y, starts, period = check_inputs(x, [0.5, 4.5], 4, 1000.0, 8000.0)
    >>> bool(np.allclose(y, 1)), starts.tolist(), period
    (True, [0.5, 4.5], 4.0)
    >>> check_inputs(x, [4.5, 0.5], 4, 0.0, None)
    Traceback (most recent call last):
    ...
    iqdemod.errors.LinkError: starts: must increase
    """
    x = np.asarray(x)
    if x.ndim != 1:
        raise LinkError(f"x of shape {x.shape}: must be a 1-D array of complex samples")
    x = x.astype(np.complex128, copy=False)
    starts = np.asarray(starts, dtype=np.float64)
    if starts.ndim != 1 or not np.all(np.isfinite(starts)):
        raise LinkError("starts: must be a 1-D array of finite positions (samples)")
    period = float(period_samples)
    if not (math.isfinite(period) and period >= 2.0):
        raise LinkError(f"period_samples {period_samples!r}: must be a finite number >= 2")
    if starts.size > 1 and np.any(np.diff(starts) <= 0):
        raise LinkError("starts: must increase")
    if offset_hz:
        if rate_hz is None or not (math.isfinite(float(rate_hz)) and float(rate_hz) > 0):
            raise LinkError(f"rate_hz {rate_hz!r}: must be > 0 to remove offset_hz {offset_hz!r}")
        if not math.isfinite(float(offset_hz)):
            raise LinkError(f"offset_hz {offset_hz!r}: must be finite")
        x = x * phasor(-float(offset_hz) / float(rate_hz), len(x))
    return x, starts, period


def detect(
    x,
    starts,
    period_samples: float,
    plan: SequencePlan,
    *,
    offset_hz: float = 0.0,
    rate_hz: float | None = None,
    exact: bool = False,
    precision: str = "double",
) -> SequenceDecisions:
    """Decide every symbol of a burst with the multi-symbol non-coherent detector.

    Parameters
    ----------
    x : array_like of complex
        The burst's baseband samples at the rate the timing was measured at
        (the decimated rate in the receiver), signal centred on 0 Hz.
    starts : array_like of float
        Start of every symbol slot, samples (cumulative-sum convention: sample
        n covers [n, n + 1)); e.g. :func:`iqdemod.timing.symbol_starts`.
        Consecutive symbols, increasing; parts of slots outside `x` count as
        absent samples.
    period_samples : float
        Symbol period, samples (the measured one, so a clock error is followed).
    plan : SequencePlan
    offset_hz, rate_hz : float
        A carrier error still in `x`, removed here (needs `rate_hz`, the rate of `x`).
    exact : bool
        Evaluate every slot's templates at its exact offset instead of from the
        polyphase bank (slower; the reference the bank's loss is measured against).
    precision : {"double", "single"}
        Arithmetic of the step that puts the hypotheses together from the slot
        correlations. "single" (complex64, what the receiver uses) moves half
        the bytes: at N = 5, BT 0.5 the whole detector takes 3.4 µs a symbol
        against 4.8 (300-symbol bursts, ``checks/sequence_detector.py``). It
        errs by about 2·10⁻⁷ of each metric, far inside any margin noise leaves:
        its decisions are those of "double" (``tests/test_sequence.py``).

    Returns
    -------
    SequenceDecisions

    Notes
    -----
    Edges: a symbol whose window reaches past the first or last slot keeps the
    slots that exist (the window shrinks; no padding with guessed samples). Its
    statistics are normalised by its own sample count, so they keep the unit
    scale but have a lower SNR. Bits before the first slot are hypothesised
    like any other (a burst that starts from silence differs there only in
    the pulse tails reaching into the first slot).

    Examples
    --------
    >>> plan = plan_sequence(h=1.0, n_symbols=3)
    >>> bits = np.array([1, 0, 0, 1, 1, 0, 1])
    >>> x = np.exp(1j * phase_trajectory(bits, np.arange(56) / 8, plan))  # sample n at time n/8 symbols
    >>> out = detect(x, np.arange(7) * 8.0 + 0.5, 8.0, plan)
    >>> out.bits.tolist() == bits.tolist(), round(float(max(out.m0[3], out.m1[3])), 6)
    (True, 1.0)
    """
    if not isinstance(plan, SequencePlan):
        raise LinkError("plan: must be a SequencePlan (see plan_sequence)")
    if precision not in PRECISIONS:
        raise LinkError(f"precision {precision!r}: must be one of {', '.join(PRECISIONS)}")
    x, starts, period = check_inputs(x, starts, period_samples, offset_hz, rate_hz)
    k = starts.size
    n_sym = plan.n_symbols
    half = n_sym // 2
    if k == 0:
        empty = np.zeros(0)
        return SequenceDecisions(np.zeros(0, np.uint8), empty, empty.copy(), np.zeros(0, complex),
                                 np.zeros(0, np.int64), plan)
    y, cnt = _slot_correlations(x, starts, period, plan, exact)
    p = plan.n_patterns
    ypad = np.concatenate([np.zeros((half, p), complex), y, np.zeros((half, p), complex)])
    cpad = np.concatenate([np.zeros(half, np.int64), cnt, np.zeros(half, np.int64)])
    present = np.concatenate([[0], np.cumsum(cpad > 0)])
    csum = np.concatenate([[0], np.cumsum(cpad)])
    window_samples = (csum[n_sym : n_sym + k] - csum[:k]).astype(np.float64)
    window_symbols = present[n_sym : n_sym + k] - present[:k]

    yt = np.ascontiguousarray(ypad.T, dtype=PRECISIONS[precision])
    n_left, left_code, right_row = plan.combine_tables
    n_right = n_sym - n_left
    n_h = plan.n_hypotheses
    half_h = n_h // 2
    turn = np.exp(-1j * np.pi * plan.h * plan.tone_sign * (2 * np.arange(n_left + 1) - n_left)).astype(yt.dtype)
    m0 = np.empty(k)
    m1 = np.empty(k)
    z = np.empty(k, dtype=np.complex128)
    block = max(1, _CHUNK_ELEMENTS // n_h)
    for a in range(0, k, block):  # blocks of symbols, to bound memory
        b = min(k, a + block)
        right = _partial(yt, a, b, n_left, n_right, plan)
        right = (right[:, None, :] * turn[None, :, None]).reshape(-1, b - a)
        acc = right[right_row]
        if n_left:
            acc += _partial(yt, a, b, 0, n_left, plan)[left_code]
        power = acc.real**2
        power += acc.imag**2
        cols = np.arange(b - a)
        best0 = np.argmax(power[:half_h], axis=0)
        best1 = np.argmax(power[half_h:], axis=0) + half_h
        m0[a:b] = power[best0, cols]
        m1[a:b] = power[best1, cols]
        z[a:b] = np.where(m1[a:b] > m0[a:b], acc[best1, cols], acc[best0, cols])
    with np.errstate(divide="ignore", invalid="ignore"):
        scale = np.where(window_samples > 0, 1.0 / np.maximum(window_samples, 1.0), 0.0)
    m0 *= scale**2
    m1 *= scale**2
    z *= scale
    bits = (m1 > m0).astype(np.uint8)
    return SequenceDecisions(bits, m0, m1, z, window_symbols.astype(np.int64), plan)
