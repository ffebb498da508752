"""The receiver's front end: DC removal, IQ-imbalance correction and the channel filter, in one FFT pass.

Cheap receivers add their own defects to every recording: a DC offset on the
centre, and an IQ imbalance that mirrors every strong signal onto the other
side of the centre. Neighbours share the band. This stage removes all three
before anything else looks at the samples, and hands out the signal's channel
mixed to 0 Hz and decimated to a few samples per symbol.

It works by *overlap-save fast convolution* (Stockham, "High-speed
convolution and correlation", AFIPS 1966; Oppenheim & Schafer,
*Discrete-Time Signal Processing*, the section on block convolution). The
input is cut into blocks of N samples on a fixed grid of the global sample
index, each overlapping the one before by the filter's length. One FFT per
block gives, for the price of that FFT:

- **DC removal**: bin 0 holds the block's mean. The DC line is the running
  mean of the block means (over ``DC_BLOCKS`` blocks once that many have
  passed), and is subtracted from bin 0 alone. This is the "long running mean
  subtracted" DC blocker (common practice; shared/REFERENCE.md §11). Averaging
  over many blocks matters for a signal on the centre: one block's mean holds
  a share of the signal's own low frequencies (about −28 dB of it for 9600 Bd
  FSK over 25 ms, measured), which a one-block blocker would tear out.
- **Mixing**: the signal's centre is a whole bin c; taking the K bins around
  it is the mix to 0 Hz. The remainder below half a bin is removed after
  decimation, where samples are few.
- **IQ-imbalance correction**: an imbalance turns the ideal, circular signal
  s into x = K1·s + K2·s*; the image is undone by y = x − w·x*, with w chosen
  so that y is circular again (E[y²] = 0). That is the circularity-based
  compensator of Anttila, Valkama & Renfors ("Circularity-based I/Q imbalance
  compensation in wideband direct-conversion receivers", IEEE Trans. Veh.
  Technol. 57(4), 2008, cited from memory). The moments E[x²] and E[|x|²] are
  summed over every block so far, including the current one, so the first
  block is corrected too. In the FFT, x* is the conjugate of the mirrored
  bins, so the correction costs O(K) per block.
- **Channel filter and decimation**: the K bins are weighted by the response
  of a linear-phase Kaiser-window FIR (Kaiser, 1974) whose pass band holds the
  signal (Carson's rule, shift + 2·baud, widened by the carrier pull-in) and
  whose stop band, at least ``STOPBAND_DB`` down, starts half a baud further
  out. A K-point inverse FFT of them is the filtered signal decimated by
  D = N / K. The filter can be as sharp as the overlap allows, at no extra
  cost per sample.

The output equals, up to the filter's stop-band level, the linear convolution
of the corrected input with ``taps`` sampled every D input samples: output m
is centred on input sample m·D − ``delay_samples``, as the receiver expects.
The state (:class:`ChannelState`) goes in and comes back, as scipy.signal's
``zi``/``zf`` do; the caller's state is never changed, and the output does not
depend on how the input was cut into reads.
"""

from __future__ import annotations

import dataclasses
import functools
import math
import os
from dataclasses import dataclass

import numpy as np

from .frontend_moments import FrontEndMoments, FrontEndReport, front_end_report, run_moments
from .link import SignalSpec

__all__ = ["ChannelPlan", "ChannelState", "FrontEndMoments", "FrontEndReport", "front_end_report", "plan_channel",
           "plan_channels", "channel_size", "channelize", "channelize_many", "flush_channels", "flush_channel",
           "STOPBAND_DB", "kaiser_beta", "kaiser_lowpass"]

STOPBAND_DB = 70.0
MIN_FFT = 1 << 14  # smallest block: keeps the per-block overhead small against the FFT itself
BATCH = 16  # whole blocks transformed in one FFT call
FFT_WORKERS = max(1, min(2, os.cpu_count() or 1))


@dataclass(frozen=True, eq=False)
class ChannelPlan:
    """Everything fixed about the front end for one capture.

    Attributes
    ----------
    sample_rate_hz : float
        Input rate.
    offset_hz : float
        The frequency mixed to 0 Hz (the signal centre relative to the capture centre).
    decimation : int
        D, input samples per output sample.
    taps : numpy.ndarray
        float64 linear-phase low-pass FIR at the input rate, unit gain at 0 Hz:
        the filter the FFT applies (also used for the receiver's noise-bandwidth figure).
    passband_hz, stopband_hz : float
        Edges of the flat band and of the stop band, Hz from the signal centre.
    fft_size : int
        N, samples per FFT block, a multiple of D.
    lead_samples : int
        Samples each block shares with the one before (a multiple of D, at
        least the filter's length − 1); −1 for the filter's own length rounded
        up to whole outputs. Several channels cut from one FFT pass
        (:func:`plan_channels`) share N and the lead, so they share the blocks.
    """

    sample_rate_hz: float
    offset_hz: float
    decimation: int
    taps: np.ndarray
    passband_hz: float
    stopband_hz: float
    fft_size: int
    lead_samples: int = -1

    def __post_init__(self) -> None:
        if self.fft_size % self.decimation:
            raise ValueError(f"FFT size {self.fft_size} is not a multiple of the decimation {self.decimation}")
        if len(self.taps) > self.fft_size // 2:
            raise ValueError(f"filter of {len(self.taps)} taps is too long for FFT blocks of {self.fft_size}")
        if self.lead_samples >= 0 and (self.lead_samples % self.decimation or self.lead_samples < len(self.taps) - 1
                                       or self.lead_samples >= self.fft_size):
            raise ValueError(f"lead of {self.lead_samples} samples: must be a multiple of {self.decimation}, at "
                             f"least {len(self.taps) - 1} and below {self.fft_size}")

    @property
    def output_rate_hz(self) -> float:
        return self.sample_rate_hz / self.decimation

    @property
    def delay_samples(self) -> float:
        """Group delay of the filter, input samples."""
        return (len(self.taps) - 1) / 2

    @property
    def n_bins(self) -> int:
        """K, the bins kept per block (the inverse FFT's size)."""
        return self.fft_size // self.decimation

    @property
    def lead_outputs(self) -> int:
        """Outputs at the start of each block spoilt by the circular wrap, discarded."""
        if self.lead_samples >= 0:
            return self.lead_samples // self.decimation
        return -(-(len(self.taps) - 1) // self.decimation)

    @property
    def hop(self) -> int:
        """New input samples per block (a multiple of D)."""
        return self.fft_size - self.lead_outputs * self.decimation

    @property
    def centre_bin(self) -> int:
        return int(round(self.offset_hz * self.fft_size / self.sample_rate_hz))

    @property
    def coarse_hz(self) -> float:
        return self.centre_bin * self.sample_rate_hz / self.fft_size

    @property
    def fine_hz(self) -> float:
        return self.offset_hz - self.coarse_hz

    @functools.cached_property
    def bins(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(kept bins, their mirror bins −k, filter response on them), in the inverse FFT's order."""
        n, k = self.fft_size, self.n_bins
        rel = np.fft.fftfreq(k, 1.0 / k).astype(np.int64)  # 0, 1, …, K/2−1, −K/2, …, −1
        sel = (self.centre_bin + rel) % n
        mirror = (-sel) % n
        # the FIR's N-point DFT at the kept offsets (one FFT, not a K × taps matrix); 1/D folds in
        # the inverse FFT's scaling
        resp = np.fft.fft(self.taps, n)[rel % n] / self.decimation
        return sel, mirror, resp.astype(np.complex64)

    def initial_state(self) -> "ChannelState":
        """The state before the first sample: the lead of the first block is zeros."""
        lead = self.lead_outputs * self.decimation
        return ChannelState(pending=np.zeros(lead, np.complex64), n_in=0, next_sample=0, moments=FrontEndMoments())


@dataclass(frozen=True, eq=False)
class ChannelState:
    """What the front end carries between reads.

    Attributes
    ----------
    pending : numpy.ndarray
        complex64 input samples not yet consumed, from the next block's first sample on
        (the lead of zeros before the first sample included).
    n_in : int
        Input samples fed so far.
    next_sample : int
        Input index of the next output's sample: a channel of decimation D has
        handed out ``next_sample // D`` outputs (every channel of one pass
        stops on a multiple of each D).
    moments : FrontEndMoments
    """

    pending: np.ndarray
    n_in: int
    next_sample: int
    moments: FrontEndMoments


def channel_size(sample_rate_hz: float, signal: SignalSpec) -> tuple[int, int, int, float, float]:
    """The design rule alone, cheap: (decimation, filter taps, FFT size, pass band, stop band).

    What :func:`plan_channel` will build, without building it, so that a plan
    too large to hold can be refused first (:meth:`iqdemod.link.Link.check_rate`).

    Examples
    --------
    A 1200-baud buoy signal with 1200 Hz shift in a 48 kHz capture: decimate
    by 5 (9.6 kHz, 8 samples per symbol), a 347-tap filter, FFT blocks of
    20 480 samples, pass band ±2400 Hz (shift/2 + baud + pull-in shift/2),
    stop band from ±3000 Hz:

    >>> from iqdemod.link import SignalSpec
    >>> channel_size(48000, SignalSpec(baud=1200, shift_hz=1200))
    (5, 347, 20480, 2400.0, 3000.0)
    """
    fs = float(sample_rate_hz)
    passband = min(signal.shift_hz / 2 + signal.baud + signal.pull_in_hz, 0.45 * fs)
    stopband = min(passband + signal.baud / 2, 0.5 * fs)
    decimation = _smooth_at_most(int(fs // max(2.0 * stopband, 8.0 * signal.baud)))
    out_rate = fs / decimation
    stopband = min(stopband, out_rate / 2)
    if stopband - passband < 1e-3 * fs:  # no room for a transition: the capture band is the channel
        passband = max(stopband - 1e-3 * fs, 0.0)
    n_taps = _kaiser_taps(STOPBAND_DB, (stopband - passband) / (fs / 2))
    target = max(MIN_FFT, 8 * n_taps)
    bins = 1 << max(1, math.ceil(math.log2(target / decimation)))
    return decimation, n_taps, bins * decimation, passband, stopband


def _smooth_at_most(n: int) -> int:
    """The largest 5-smooth number (2^a·3^b·5^c) not above `n`, at least 1.

    The FFT blocks are the decimation times a power of two: a decimation
    with a large prime factor (13) makes every block's FFT about 30 % slower
    than its smooth neighbour (12), measured with scipy.fft on this project's
    benchmark sizes (26 624 against 24 576 points).

    Examples
    --------
    >>> [_smooth_at_most(n) for n in (1, 7, 13, 14, 23, 26)]
    [1, 6, 12, 12, 20, 25]
    """
    for d in range(max(1, n), 0, -1):
        m = d
        for p in (2, 3, 5):
            while m % p == 0:
                m //= p
        if m == 1:
            return d
    return 1


def plan_channel(sample_rate_hz: float, signal: SignalSpec, offset_hz: float) -> ChannelPlan:
    """Choose the decimation, design the channel filter and size the FFT blocks for a signal.

    The pass band is ±(shift/2 + baud + pull-in) around the signal centre:
    Carson's bandwidth, shift + 2·baud, widened by the largest carrier error
    searched for. The stop band starts half a baud further out. The output
    rate is at least eight samples per symbol and holds the whole stop-band
    edge.

    Examples
    --------
    >>> from iqdemod.link import SignalSpec
    >>> plan = plan_channel(48000, SignalSpec(baud=1200, shift_hz=1200), 6000.0)
    >>> plan.decimation, plan.output_rate_hz, len(plan.taps), round(float(plan.taps.sum()), 12)
    (5, 9600.0, 347, 1.0)
    """
    fs = float(sample_rate_hz)
    decimation, n_taps, fft_size, passband, stopband = channel_size(fs, signal)
    taps = kaiser_lowpass(n_taps, (passband + stopband) / 2 / fs, STOPBAND_DB)
    return ChannelPlan(fs, float(offset_hz), decimation, taps, passband, stopband, fft_size)


def plan_channels(sample_rate_hz: float, signals: "list[tuple[SignalSpec, float]]") -> tuple[ChannelPlan, ...]:
    """Plans for several signals of one capture that share one FFT pass (one block grid).

    Each channel keeps its own decimation and filter (:func:`plan_channel`);
    the blocks' size N is a power of two times the least common multiple of the
    decimations, and every block overlaps the one before by the longest filter,
    rounded up to that multiple, so each block's FFT serves every channel. One
    signal gets exactly :func:`plan_channel`'s plan.

    Parameters
    ----------
    signals : list of (SignalSpec, float)
        Each signal with its offset from the capture centre, Hz.

    Examples
    --------
    Two buoys in one 48 kHz capture: each keeps its decimation, both share
    the block size and the lead:

    >>> from iqdemod.link import SignalSpec
    >>> plans = plan_channels(48000, [(SignalSpec(baud=1200, shift_hz=1200), -6000.0),
    ...                               (SignalSpec(baud=2400, shift_hz=2400), 9000.0)])
    >>> [(p.decimation, p.output_rate_hz, p.fft_size, p.lead_samples) for p in plans]
    [(5, 9600.0, 20480, 350), (2, 24000.0, 20480, 350)]
    """
    plans = [plan_channel(sample_rate_hz, sig, off) for sig, off in signals]
    if len(plans) <= 1:
        return tuple(plans)
    step = math.lcm(*(p.decimation for p in plans))
    longest = max(len(p.taps) for p in plans)
    lead = -(-(longest - 1) // step) * step
    target = max(MIN_FFT, 8 * longest, 2 * lead)
    fft_size = step << max(1, math.ceil(math.log2(target / step)))
    return tuple(dataclasses.replace(p, fft_size=fft_size, lead_samples=lead) for p in plans)


def _kaiser_taps(ripple_db: float, width: float) -> int:
    """Kaiser's formula for the length of a window design (odd: an integer delay).

    N = (A − 7.95)/(2.285·Δω) + 1 with Δω = π·width, width the transition as
    a fraction of the Nyquist band (Kaiser 1974; Oppenheim & Schafer, the
    section on the Kaiser window method).
    """
    return int(math.ceil((ripple_db - 7.95) / (2.285 * math.pi * width) + 1)) | 1


def kaiser_beta(attenuation_db: float) -> float:
    """Kaiser's β for a stop band `attenuation_db` down (Kaiser 1974; Oppenheim & Schafer).

    Examples
    --------
    >>> round(kaiser_beta(70.0), 4)  # 0.1102·(A − 8.7) above 50 dB
    6.7553
    >>> round(kaiser_beta(40.0), 4)  # 0.5842·(A − 21)^0.4 + 0.07886·(A − 21) from 21 to 50 dB
    3.3953
    """
    a = float(attenuation_db)
    if a > 50:
        return 0.1102 * (a - 8.7)
    if a >= 21:
        return 0.5842 * (a - 21) ** 0.4 + 0.07886 * (a - 21)
    return 0.0


def kaiser_lowpass(n_taps: int, cutoff: float, attenuation_db: float) -> np.ndarray:
    """A linear-phase low-pass FIR by the window method: the ideal sinc response times a Kaiser window.

    `cutoff` is in cycles per sample (½ is the Nyquist frequency); the taps
    are scaled to unit gain at 0 Hz. The filter design of
    ``scipy.signal.firwin(n, cutoff, window=("kaiser", β), fs=1)`` in a few
    lines of numpy, so the receiver's start-up does not import scipy.signal.

    Examples
    --------
    >>> import numpy as np
    >>> from scipy import signal
    >>> taps = kaiser_lowpass(101, 0.1, 70.0)
    >>> reference = signal.firwin(101, 0.1, window=("kaiser", kaiser_beta(70.0)), fs=1.0)
    >>> bool(np.allclose(taps, reference / reference.sum(), rtol=0, atol=1e-15)), round(float(taps.sum()), 12)
    (True, 1.0)
    """
    m = np.arange(n_taps) - (n_taps - 1) / 2.0
    taps = 2.0 * cutoff * np.sinc(2.0 * cutoff * m) * np.kaiser(n_taps, kaiser_beta(attenuation_db))
    return taps / taps.sum()


def _block(plans: tuple[ChannelPlan, ...], xb: np.ndarray, new: int, moments: FrontEndMoments,
           block_start: int) -> tuple[list[np.ndarray], FrontEndMoments]:
    """One overlap-save block that is not all input: the stream's first (zeros before sample 0)
    or its last (zeros after the end). `xb` holds N samples from global index `block_start` on;
    the `new` samples after the lead are fresh. The zeros must stay zeros, so the DC line is
    removed in time from the real samples only."""
    from scipy import fft as _fft

    plan = plans[0]
    n = plan.fft_size
    lo = max(0, -block_start)
    hi = n - plan.hop + new
    mean = complex(xb[lo:hi].mean()) if hi > lo else 0j
    fresh = xb[n - plan.hop : n - plan.hop + new]
    moments, ws, dcs = run_moments(moments, np.array([mean]), np.array([np.vdot(fresh, fresh).real]),
                              np.array([np.dot(fresh, fresh)]), new, np.array([fresh.sum(dtype=np.complex128)]))
    xb = xb.copy()
    xb[lo:hi] -= np.complex64(dcs[0])
    spec = _fft.fft(xb)[None, :]
    starts = np.array([block_start])
    return [_to_channel(p, spec, ws, starts) for p in plans], moments


def _whole_blocks(plans: tuple[ChannelPlan, ...], rows: np.ndarray, moments: FrontEndMoments, next_sample: int
                  ) -> tuple[list[np.ndarray], FrontEndMoments]:
    """Overlap-save blocks that are whole input (no zeros before or after), as rows of one array.

    The same arithmetic as :func:`_block`, done for all rows at once: one FFT,
    then per channel one gather and one inverse FFT. Only the running DC line
    and IQ moments go block by block, in order. `next_sample` is the input
    index of the first row's first fresh sample.
    """
    from scipy import fft as _fft

    n, hop = plans[0].fft_size, plans[0].hop
    lead = n - hop
    count = rows.shape[0]
    specs = _fft.fft(rows, axis=1, workers=FFT_WORKERS)
    means = specs[:, 0].astype(np.complex128) / n
    fresh = [rows[r, lead:] for r in range(count)]
    sums = np.array([np.vdot(f, f).real for f in fresh])
    squares = np.array([np.dot(f, f) for f in fresh])
    moments, ws, dcs = run_moments(moments, means, sums, squares, hop)
    specs[:, 0] -= (n * dcs).astype(np.complex64)  # x − dc, for free
    starts = next_sample + np.arange(count) * hop - lead
    return [_to_channel(p, specs, ws, starts) for p in plans], moments


def _to_channel(plan: ChannelPlan, specs: np.ndarray, ws: np.ndarray, starts: np.ndarray) -> np.ndarray:
    """Blocks' spectra (rows) to channel samples: the image undone (y = x − w·x*, in bins),
    the filter's response, the inverse FFT, and the mix brought from each block's start
    (`starts`, global input indices) to the global sample index."""
    from scipy import fft as _fft

    n = plan.fft_size
    sel, mirror, resp = plan.bins
    y_spec = specs[:, sel]
    if np.any(np.abs(ws) > 1e-9):
        y_spec -= ws.astype(np.complex64)[:, None] * np.conj(specs[:, mirror])
    y_spec *= resp
    y = _fft.ifft(y_spec, axis=1, workers=FFT_WORKERS, overwrite_x=True)[:, plan.lead_outputs :]
    turns = (plan.centre_bin * starts) % n
    y *= np.exp(-2j * np.pi * turns / n).astype(np.complex64)[:, None]
    return y.reshape(-1)


def channelize(x: np.ndarray, plan: ChannelPlan, state: ChannelState) -> tuple[np.ndarray, ChannelState]:
    """Run the front end over one read.

    Parameters
    ----------
    x : numpy.ndarray
        complex64 input samples following those already fed.
    plan : ChannelPlan
    state : ChannelState
        From :meth:`ChannelPlan.initial_state` or the previous call.

    Returns
    -------
    y : numpy.ndarray
        complex64 channel samples at ``plan.output_rate_hz``, centred on the
        signal; output m is centred on input sample m·D − ``delay_samples``.
        Outputs lag the input by up to one block; :func:`flush_channel` hands
        out the rest.
    state : ChannelState

    Examples
    --------
    A tone 600 Hz above a signal centred 6 kHz above the capture centre
    comes out at +600 Hz and unit amplitude at 9.6 kHz. Fed in two reads
    with the state carried, then flushed, the output is one output per D
    input samples, the same as one call on the whole input:

    >>> import numpy as np
    >>> from iqdemod.link import SignalSpec
    >>> plan = plan_channel(48000, SignalSpec(baud=1200, shift_hz=1200), 6000.0)
    >>> x = np.exp(2j * np.pi * 6600 * np.arange(48000) / 48000).astype(np.complex64)
    >>> y1, state = channelize(x[:30000], plan, plan.initial_state())
    >>> y2, state = channelize(x[30000:], plan, state)
    >>> y3, state = flush_channel(plan, state)
    >>> y = np.concatenate([y1, y2, y3])
    >>> len(y), len(x) // plan.decimation
    (9600, 9600)
    >>> step = np.angle(np.sum(y[201:400] * np.conj(y[200:399])))
    >>> round(float(step / (2 * np.pi) * plan.output_rate_hz), 2), round(float(np.abs(y[200:400]).mean()), 4)
    (600.0, 1.0)
    >>> whole, end = channelize(x, plan, plan.initial_state())
    >>> bool(np.array_equal(np.concatenate([whole, flush_channel(plan, end)[0]]), y))
    True
    """
    ys, state = channelize_many(x, (plan,), state)
    return ys[0], state


def flush_channel(plan: ChannelPlan, state: ChannelState) -> tuple[np.ndarray, ChannelState]:
    """End of input: the outputs for the samples still held (zeros after the last sample).

    Examples
    --------
    The front end holds back up to a block; at the end of the input the rest comes out:

    >>> import numpy as np
    >>> from iqdemod.link import SignalSpec
    >>> plan = plan_channel(48000, SignalSpec(baud=1200, shift_hz=1200), 6000.0)
    >>> y, state = channelize(np.ones(10000, np.complex64), plan, plan.initial_state())
    >>> rest, state = flush_channel(plan, state)
    >>> len(y), len(rest), state.n_in
    (0, 2000, 10000)
    """
    ys, state = flush_channels((plan,), state)
    return ys[0], state


def channelize_many(x: np.ndarray, plans: tuple[ChannelPlan, ...], state: ChannelState
                    ) -> tuple[list[np.ndarray], ChannelState]:
    """:func:`channelize` for several channels of one capture in one pass: one FFT per block serves all.

    `plans` come from :func:`plan_channels` (one block grid); the state from
    ``plans[0].initial_state()``. Returns each channel's samples, in the plans' order.
    The DC line and the IQ correction are the capture's, so every channel shares them.

    Examples
    --------
    Two buoys (tones 300 Hz below the first centre, 1200 Hz above the second)
    cut from one FFT pass:

    >>> import numpy as np
    >>> from iqdemod.link import SignalSpec
    >>> plans = plan_channels(48000, [(SignalSpec(baud=1200, shift_hz=1200), -6000.0),
    ...                               (SignalSpec(baud=2400, shift_hz=2400), 9000.0)])
    >>> n = np.arange(48000)
    >>> x = (np.exp(-2j * np.pi * 6300 * n / 48000) + 0.5 * np.exp(2j * np.pi * 10200 * n / 48000)).astype(np.complex64)
    >>> ys, state = channelize_many(x, plans, plans[0].initial_state())
    >>> ends, state = flush_channels(plans, state)
    >>> for p, a, b in zip(plans, ys, ends):
    ...     y = np.concatenate([a, b])[200:400]
    ...     f = np.angle(np.sum(y[1:] * np.conj(y[:-1]))) / (2 * np.pi) * p.output_rate_hz
    ...     print(len(a) + len(b), round(float(f), 1), round(float(np.abs(y).mean()), 3))
    9600 -300.0 1.0
    24000 1200.0 0.5
    """
    with np.errstate(over="ignore", invalid="ignore"):  # samples near float32's limit (a float file read with
        # the wrong --datatype) overflow the moments: the receiver then finds nothing, and says which settings to check
        return _advance(np.asarray(x, dtype=np.complex64), tuple(plans), state, final=False)


def flush_channels(plans: tuple[ChannelPlan, ...], state: ChannelState) -> tuple[list[np.ndarray], ChannelState]:
    """End of input for :func:`channelize_many`.

    Examples
    --------
    >>> import numpy as np
    >>> from iqdemod.link import SignalSpec
    >>> plans = plan_channels(48000, [(SignalSpec(baud=1200, shift_hz=1200), -6000.0),
    ...                               (SignalSpec(baud=2400, shift_hz=2400), 9000.0)])
    >>> ys, state = channelize_many(np.ones(10000, np.complex64), plans, plans[0].initial_state())
    >>> ends, state = flush_channels(plans, state)
    >>> [len(a) + len(b) for a, b in zip(ys, ends)]  # 10 000 input samples / D
    [2000, 5000]
    """
    with np.errstate(over="ignore", invalid="ignore"):  # as channelize_many
        return _advance(np.zeros(0, np.complex64), tuple(plans), state, final=True)


def _advance(x: np.ndarray, plans: tuple[ChannelPlan, ...], state: ChannelState, *, final: bool
             ) -> tuple[list[np.ndarray], ChannelState]:
    plan = plans[0]
    n, hop = plan.fft_size, plan.hop
    lead = n - hop
    held = state.pending
    total = len(held) + len(x)  # samples available from the next block's start

    def take(a: int, b: int) -> np.ndarray:
        """Samples a … b − 1 of held + x, copying only when the range straddles the two."""
        if a >= len(held):
            return x[a - len(held) : b - len(held)]
        if b <= len(held):
            return held[a:b]
        return np.concatenate([held[a:], x[: b - len(held)]])

    moments = state.moments
    next_sample = state.next_sample
    out: list[list[np.ndarray]] = [[] for _ in plans]
    pos = 0
    while True:
        avail = total - pos
        if avail >= n and next_sample - lead >= 0:  # a block after the first: all input, no leading zeros
            # whole blocks of input: one FFT call for up to BATCH of them (rows overlap)
            if pos >= len(held):
                count = min(BATCH, (avail - n) // hop + 1)
                first = pos - len(held)
                rows = np.lib.stride_tricks.as_strided(x[first:], shape=(count, n),
                                                       strides=(hop * x.strides[0], x.strides[0]), writeable=False)
            else:  # one block across the held samples and this read
                count, rows = 1, take(pos, pos + n)[None, :]
            ys, moments = _whole_blocks(plans, rows, moments, next_sample)
            next_sample += count * hop
            pos += count * hop
        elif avail >= n or (final and avail > lead):
            if avail >= n:
                xb, new = take(pos, pos + n), hop
            else:
                xb = np.zeros(n, np.complex64)
                xb[:avail] = take(pos, total)
                new = avail - lead
            ys, moments = _block(plans, xb, new, moments, next_sample - lead)
            if new < hop:  # the last block: outputs m with m·D inside the input only
                ys = [y[: -(-new // p.decimation)] for y, p in zip(ys, plans)]
            next_sample += hop
            pos += hop
        else:
            break
        for o, y in zip(out, ys):
            o.append(y)
    # keep what the next block needs, as a copy: never a view of the caller's block
    rest = np.zeros(0, np.complex64) if final or pos >= total else np.array(take(pos, total), np.complex64)
    result = []
    for o, p in zip(out, plans):
        y = np.concatenate(o) if len(o) > 1 else (o[0] if o else np.zeros(0, np.complex64))
        if p.fine_hz and len(y):
            y = y * _fine_rotation(p, state.next_sample // p.decimation, len(y))
        result.append(y.astype(np.complex64, copy=False))
    return result, dataclasses.replace(state, pending=rest, n_in=state.n_in + len(x), next_sample=next_sample,
                                       moments=moments)


def _fine_rotation(plan: ChannelPlan, n_out: int, count: int) -> np.ndarray:
    """exp(−j2π·fine·t) at outputs n_out … n_out + count − 1 (t at each output's centre): the part
    of the mix to 0 Hz below half an FFT bin, done at the output rate."""
    d = plan.decimation
    step = plan.fine_hz * d / plan.sample_rate_hz  # cycles per output sample
    start = np.mod(plan.fine_hz * (n_out * d - plan.delay_samples) / plan.sample_rate_hz, 1.0)
    return _rotation(step, count) * np.complex64(np.exp(-2j * np.pi * start))


@functools.lru_cache(maxsize=32)
def _rotation_table(step: float, length: int) -> np.ndarray:
    k = np.arange(length, dtype=np.float64)
    table = np.exp(-2j * np.pi * np.mod(step * k, 1.0)).astype(np.complex64)
    table.setflags(write=False)
    return table


def _rotation(step: float, count: int) -> np.ndarray:
    """exp(−j2π·step·k) for k < count: exact phases from k, not a recurrence; tables kept per step."""
    length = 1 << max(16, (max(count, 1) - 1).bit_length())
    return _rotation_table(step, length)[:count]
