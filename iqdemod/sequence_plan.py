"""The multi-symbol detector's plan: the link's frequency pulse, phase pulse and hypotheses.

Everything :mod:`iqdemod.sequence` needs that depends on the link alone (the
pulse, its span, the window of N symbols and their 2^(N + 2·context)
hypotheses, the polyphase slot tables), built once per link by
:func:`plan_sequence`; the signal model and the sources are in
:mod:`iqdemod.sequence`'s description.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

from .errors import LinkError

__all__ = ["PULSES", "SequencePlan", "plan_sequence", "phase_pulse", "frequency_pulse", "phase_trajectory"]

PULSES = ("rect", "gaussian")

#: Most hypotheses a plan may enumerate (2^13): N = 9 with two context bits each side.
MAX_HYPOTHESES = 1 << 13
#: Points a symbol in the Gaussian phase pulse's interpolation table (SequencePlan._q_table).
Q_TABLE_STEPS = 4096
#: Automatic span: the shortest odd span whose truncation moves less than this share of a
#: symbol's phase step (the Gaussian tails beyond it are left out of the model).
_TAIL_SHARE = 1e-3


def _gaussian_raw_q(t, sigma):
    """Untruncated Gaussian phase pulse at t (symbols from the symbol's middle), rising 0 → ½.

    g = rect(1 symbol) ⊛ N(0, σ²) is [Φ((t + ½)/σ) − Φ((t − ½)/σ)]/2; with
    ∫Φ(x/σ)dx = x·Φ(x/σ) + σ·φ(x/σ) its integral is [G(t + ½) − G(t − ½)]/2.
    """
    from scipy import special  # late: the decoder's import need not pay for it

    t = np.asarray(t, dtype=np.float64)

    def big_g(x):
        return x * special.ndtr(x / sigma) + sigma * np.exp(-0.5 * (x / sigma) ** 2) / math.sqrt(2 * math.pi)

    return (big_g(t + 0.5) - big_g(t - 0.5)) / 2.0


def _auto_span(sigma: float) -> int:
    """Shortest odd span (symbols) whose cut-off tails hold less than ``_TAIL_SHARE`` of the pulse."""
    for span in range(1, 33, 2):
        half = span / 2.0
        tails = 2.0 * (float(_gaussian_raw_q(-half, sigma)) + 0.5 - float(_gaussian_raw_q(half, sigma)))
        if tails < _TAIL_SHARE:
            return span
    return 33


@dataclass(frozen=True)
class SequencePlan:
    """Fixed settings of the multi-symbol detector for one link.

    Build it with :func:`plan_sequence`, which fills in the automatic span.

    Attributes
    ----------
    h : float
        Modulation index, tone shift / baud (> 0).
    pulse : {"rect", "gaussian"}
        Frequency pulse.
    bt : float
        Bandwidth–time product of the Gaussian pulse (ignored for rect).
    n_symbols : int
        Observation window N, odd, 1–9 (1 with rect is the one-symbol receiver).
    span_symbols : int
        Total length of the (truncated) frequency pulse in the detector's
        model, symbols; 1 for rect.
    invert : bool
        Bit 1 is the lower tone.
    phases : int
        Fractional offsets per sample in the polyphase template bank (>= 1).
    """

    h: float
    pulse: str = "rect"
    bt: float = 0.5
    n_symbols: int = 5
    span_symbols: int = 1
    invert: bool = False
    phases: int = 32

    def __post_init__(self):
        h = float(self.h)
        if not (math.isfinite(h) and h > 0):
            raise LinkError(f"modulation index h {self.h!r}: must be a finite number > 0")
        object.__setattr__(self, "h", h)
        if self.pulse not in PULSES:
            raise LinkError(f"pulse {self.pulse!r}: must be one of {', '.join(PULSES)}")
        bt = float(self.bt)
        if not (math.isfinite(bt) and 0.1 <= bt <= 10.0):
            raise LinkError(f"BT {self.bt!r}: must be within [0.1, 10]")
        object.__setattr__(self, "bt", bt)
        n = self.n_symbols
        if isinstance(n, bool) or int(n) != n or not 1 <= n <= 9 or int(n) % 2 == 0:
            raise LinkError(f"n_symbols {n!r}: must be an odd integer from 1 to 9")
        object.__setattr__(self, "n_symbols", int(n))
        span = self.span_symbols
        if isinstance(span, bool) or int(span) != span or not 1 <= span <= 33:
            raise LinkError(f"span_symbols {span!r}: must be an integer from 1 to 33")
        if self.pulse == "rect" and span != 1:
            raise LinkError(f"span_symbols {span!r}: a rectangular pulse spans 1 symbol")
        object.__setattr__(self, "span_symbols", int(span))
        ph = self.phases
        if isinstance(ph, bool) or int(ph) != ph or not 1 <= ph <= 1024:
            raise LinkError(f"phases {ph!r}: must be an integer from 1 to 1024")
        object.__setattr__(self, "phases", int(ph))
        object.__setattr__(self, "invert", bool(self.invert))
        if self.n_hypotheses > MAX_HYPOTHESES:
            raise LinkError(
                f"n_symbols {self.n_symbols} with a pulse of {self.span_symbols} symbols: "
                f"{self.n_hypotheses} hypotheses, more than {MAX_HYPOTHESES}; use a shorter window"
            )

    # ------------------------------------------------------------------ derived sizes

    @property
    def context(self) -> int:
        """Bits each side of a slot whose pulses reach into it: floor(span / 2)."""
        return self.span_symbols // 2

    @property
    def n_bits(self) -> int:
        """Bits a window hypothesis fixes: N + 2·context."""
        return self.n_symbols + 2 * self.context

    @property
    def n_hypotheses(self) -> int:
        return 1 << self.n_bits

    @property
    def n_patterns(self) -> int:
        """Local segment waveforms per slot: 2^(2·context + 1)."""
        return 1 << (2 * self.context + 1)

    @property
    def sigma_symbols(self) -> float:
        """σ of the Gaussian filter, symbols: √(ln 2)/(2π·BT)."""
        return math.sqrt(math.log(2.0)) / (2.0 * math.pi * self.bt)

    @property
    def tone_sign(self) -> float:
        """+1, or −1 when bit 1 is the lower tone (``invert``): the sign of a bit's phase turn."""
        return -1.0 if self.invert else 1.0

    # ------------------------------------------------------------------ pulse

    def q(self, t) -> np.ndarray:
        """The phase pulse at t (symbols from the symbol's middle): 0 before the span, ½ after."""
        t = np.asarray(t, dtype=np.float64)
        if self.pulse == "rect":
            return np.clip(t + 0.5, 0.0, 1.0) / 2.0
        half = self.span_symbols / 2.0
        lo, hi = self._q_ends
        inside = (_gaussian_raw_q(np.clip(t, -half, half), self.sigma_symbols) - lo) / (hi - lo) / 2.0
        return np.where(t <= -half, 0.0, np.where(t >= half, 0.5, inside))

    def q_tabled(self, t) -> np.ndarray:
        """:meth:`q` from a table (Gaussian pulse; rect is exact anyway), for the detector's
        templates and the estimator's fit, where it is evaluated at every sample of a burst.

        Within 1.2·10⁻⁸·BT of :meth:`q` (see ``_q_table``); :meth:`q` itself stays exact for
        the waveforms (:func:`phase_trajectory`) that tests hold to 10⁻⁹.

        Examples
        --------
        >>> plan = plan_sequence(h=0.5, pulse="gaussian", bt=0.5)
        >>> t = np.linspace(-2.0, 2.0, 9)
        >>> bool(np.max(np.abs(plan.q_tabled(t) - plan.q(t))) < 1e-8), plan.q_tabled([-2.0, 2.0]).tolist()
        (True, [0.0, 0.5])
        """
        if self.pulse == "rect":
            return self.q(t)
        table, slope = self._q_table
        n = len(slope)  # intervals of the uniform grid, Q_TABLE_STEPS a symbol from −span/2
        pos = np.clip((np.asarray(t, dtype=np.float64) + self.span_symbols / 2.0) * Q_TABLE_STEPS, 0.0, float(n))
        i = np.minimum(pos.astype(np.intp), n - 1)
        return table[i] + (pos - i) * slope[i]  # 0 before the span, ½ after (the table's ends)

    @functools.cached_property
    def _q_table(self) -> tuple[np.ndarray, np.ndarray]:
        """The Gaussian phase pulse over its span, ``Q_TABLE_STEPS`` points a symbol, and the step to
        each next point, for :meth:`q_tabled`.

        Linear interpolation between points Δ apart errs by at most Δ²/8·max|q''| (the
        interpolation remainder), and |q''| = |g'| ≤ 1/(2σ√(2π)·2(hi − lo)) for the truncated,
        renormalised pulse; with σ = √(ln 2)/(2π·BT) that is about 1.1·10⁻⁸·BT at Δ = 1/4096
        symbol (5.6·10⁻⁹ at BT 0.5; measured, the bound is reached), a phase error of a few
        10⁻⁷ rad over a template. The table replaces an evaluation of Φ and exp at every
        template and fit sample (most of the fit's time).
        """
        half = self.span_symbols / 2.0
        lo, hi = self._q_ends
        grid = np.linspace(-half, half, self.span_symbols * Q_TABLE_STEPS + 1)
        table = (_gaussian_raw_q(grid, self.sigma_symbols) - lo) / (hi - lo) / 2.0
        table[0], table[-1] = 0.0, 0.5
        slope = np.diff(table)  # the grid is uniform: a point's interval is found by arithmetic, no search
        table.setflags(write=False)
        slope.setflags(write=False)
        return table, slope

    @functools.cached_property
    def _q_ends(self) -> tuple[float, float]:
        half = self.span_symbols / 2.0
        s = self.sigma_symbols
        return float(_gaussian_raw_q(-half, s)), float(_gaussian_raw_q(half, s))

    def segment_phases(self, u) -> np.ndarray:
        """Phase (rad) of every local pattern at slot fractions `u` (symbols since the slot start).

        Returns an array of shape ``(n_patterns,) + u.shape``: pattern p's bits
        (most significant first) are those of symbols k − context … k + context;
        the phase accumulated by earlier bits is left out.
        """
        qd = self._neighbour_q(u)  # (2c+1,) + u.shape
        a = 2.0 * _pattern_bits(self.context) - 1.0  # (P, 2c+1)
        return 2.0 * np.pi * self.h * self.tone_sign * np.tensordot(a, qd, axes=(1, 0))

    def pattern_phases(self, u, patterns) -> np.ndarray:
        """:meth:`segment_phases` of one pattern per slot: row k of `u` (slot k's fractions) with
        pattern ``patterns[k]``; shape ``u.shape``. The pulse is evaluated once, not once per pattern.
        """
        qd = self._neighbour_q(u)  # (2c+1, K, M)
        a = 2.0 * _pattern_bits(self.context)[np.asarray(patterns)] - 1.0  # (K, 2c+1)
        return 2.0 * np.pi * self.h * self.tone_sign * np.einsum("kd,dkm->km", a, qd)

    def _neighbour_q(self, u) -> np.ndarray:
        """The phase pulse of symbols k − context … k + context at slot fractions `u` of symbol k."""
        u = np.asarray(u, dtype=np.float64)
        d = np.arange(-self.context, self.context + 1, dtype=np.float64)
        return self.q_tabled(u[None, ...] - d.reshape((-1,) + (1,) * u.ndim) - 0.5)

    # ------------------------------------------------------------------ hypotheses

    @functools.cached_property
    def hypotheses(self) -> np.ndarray:
        """uint8 bits of every window hypothesis, shape (n_hypotheses, n_bits), earliest bit first.

        Ordered so that the first half has middle bit 0 and the second half 1.
        """
        b = self.n_bits
        codes = np.arange(self.n_hypotheses)
        bits = ((codes[:, None] >> (b - 1 - np.arange(b))) & 1).astype(np.uint8)
        order = np.argsort(bits[:, self.context + self.n_symbols // 2], kind="stable")
        out = bits[order]
        out.setflags(write=False)
        return out

    @functools.cached_property
    def combine_tables(self) -> tuple[int, np.ndarray, np.ndarray]:
        """How a window's metric is put together from two half-windows (meet in the middle).

        The window's first ``n_left`` slots depend on hypothesis bits
        0 … n_left + 2·context − 1 (the *left code*), the others on bits
        n_left … n_bits − 1 (the *right code*). The right half's correlation is
        computed with its own first slot as phase reference, so in the full
        hypothesis it is turned by the phase of the left half's first n_left
        bits, π·h·(2v − n_left) with v of them ones. Returns n_left, the left
        code of every hypothesis, and the row (right code, v) of the turned
        right table; ``n_left = 0`` means no split (N = 1; the right table is
        then the whole window).
        """
        c, n_sym, b = self.context, self.n_symbols, self.n_bits
        bits = self.hypotheses.astype(np.int64)
        n_left = (n_sym + 1) // 2 if n_sym > 1 else 0

        def code(first: int, last: int) -> np.ndarray:  # bits first … last − 1 as an integer
            return bits[:, first:last] @ (1 << np.arange(last - first - 1, -1, -1))

        left = code(0, n_left + 2 * c) if n_left else np.zeros(len(bits), np.int64)
        right = code(n_left, b)
        v = bits[:, :n_left].sum(axis=1)
        return n_left, left, right * (n_left + 1) + v


def _pattern_bits(context: int) -> np.ndarray:
    """Bits of every local pattern (P, 2·context + 1), most significant (earliest) first."""
    w = 2 * context + 1
    p = np.arange(1 << w)
    return ((p[:, None] >> (w - 1 - np.arange(w))) & 1).astype(np.float64)


def plan_sequence(
    *,
    h: float,
    pulse: str = "rect",
    bt: float = 0.5,
    n_symbols: int = 5,
    span_symbols: int | None = None,
    invert: bool = False,
    phases: int = 32,
) -> SequencePlan:
    """Plan the multi-symbol detector for a link.

    Parameters
    ----------
    h : float
        Modulation index (tone shift / baud).
    pulse : {"rect", "gaussian"}
    bt : float
        Gaussian BT (0.1–10; ignored for rect).
    n_symbols : int
        Window N: odd, 1–9 (3–7 are the useful ones; 1 with rect is the
        one-symbol square-law receiver).
    span_symbols : int, optional
        Pulse length in the model. Default: 1 for rect; for a Gaussian pulse
        the shortest odd span whose cut tails hold less than 0.1 % of the
        phase step (BT 0.5 → 3, BT 0.3 → 5). A transmitter that truncates
        its pulse differently differs only in those tails.
    invert : bool
        Bit 1 on the lower tone.
    phases : int
        Fractional offsets per sample of the template bank.

    Returns
    -------
    SequencePlan

    Raises
    ------
    LinkError
        For a bad link parameter (each message names it).

    Examples
    --------
    >>> plan = plan_sequence(h=0.5, pulse="gaussian", bt=0.5, n_symbols=5)
    >>> plan.span_symbols, plan.context, plan.n_hypotheses
    (3, 1, 128)
    """
    if span_symbols is None:
        if pulse == "gaussian":
            bt_f = float(bt)
            if not (math.isfinite(bt_f) and 0.1 <= bt_f <= 10.0):
                raise LinkError(f"BT {bt!r}: must be within [0.1, 10]")
            span_symbols = _auto_span(math.sqrt(math.log(2.0)) / (2.0 * math.pi * bt_f))
        else:
            span_symbols = 1
    return SequencePlan(h=h, pulse=pulse, bt=bt, n_symbols=n_symbols, span_symbols=span_symbols,
                        invert=invert, phases=phases)


def frequency_pulse(t, plan: SequencePlan) -> np.ndarray:
    """The frequency pulse g(t) of `plan`, t in symbols from the symbol's middle; ∫g = ½.

    Units: the instantaneous frequency of bit a is 2·h·a·g(t) cycles per symbol,
    so a rect pulse (g = ½ over one symbol) gives ±h/2·baud.

    Examples
    --------
    >>> plan = plan_sequence(h=1.0, pulse="gaussian", bt=0.5)
    >>> t = np.linspace(-2, 2, 40001)
    >>> round(float(np.sum(frequency_pulse(t, plan)) * (t[1] - t[0])), 4)
    0.5
    """
    t = np.asarray(t, dtype=np.float64)
    if plan.pulse == "rect":
        return np.where((t >= -0.5) & (t < 0.5), 0.5, 0.0)
    half = plan.span_symbols / 2.0
    s = plan.sigma_symbols
    lo, hi = plan._q_ends
    from scipy import special  # late: the decoder's import need not pay for it

    raw = (special.ndtr((t + 0.5) / s) - special.ndtr((t - 0.5) / s)) / 2.0
    return np.where(np.abs(t) <= half, raw / (2.0 * (hi - lo)), 0.0)


def phase_pulse(t, plan: SequencePlan) -> np.ndarray:
    """The phase pulse q(t) = ∫g, t in symbols from the symbol's middle: 0 → ½.

    Examples
    --------
    >>> plan = plan_sequence(h=0.5, pulse="gaussian", bt=0.3)
    >>> np.round(phase_pulse([-3.0, 0.0, 3.0], plan), 12).tolist()
    [0.0, 0.25, 0.5]
    """
    return plan.q(t)


def phase_trajectory(bits, t_symbols, plan: SequencePlan) -> np.ndarray:
    """Modulation phase (rad) of `bits` at times `t_symbols` (symbols from the first bit's start).

    φ(t) = 2π·h·Σ_i a_i·q(t − i − ½); bits before the first do not exist (a = 0).

    Examples
    --------
    >>> plan = plan_sequence(h=0.5)
    >>> phase_trajectory([1, 1, 0], [0.0, 1.0, 2.0, 3.0], plan) / np.pi
    array([0. , 0.5, 1. , 0.5])
    """
    a = (2.0 * (np.asarray(bits, dtype=np.int64) & 1) - 1.0) * plan.tone_sign
    t = np.asarray(t_symbols, dtype=np.float64)
    half = plan.span_symbols / 2.0
    done = np.concatenate([[0.0], np.cumsum(a)])
    k_done = np.clip(np.floor(t + 0.5 - half).astype(np.int64), 0, a.size)  # pulses ended before t
    phase = np.pi * plan.h * done[k_done]
    for j in range(plan.span_symbols + 1):
        i = k_done + j
        ok = i < a.size
        ii = np.where(ok, i, 0)
        phase = phase + np.where(ok, 2.0 * np.pi * plan.h * a[ii] * plan.q(t - ii - 0.5), 0.0)
    return phase


