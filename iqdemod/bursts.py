"""Finding bursts: an energy detector with a tracked noise floor and hysteresis.

The decimated stream is cut into *detector frames* of ``frame_len`` samples
(about 16 symbols). Each frame's statistic is the power in the signal's band
(both tones plus the carrier pull-in), taken from an FFT of the frame, so that
noise outside that band does not dilute a weak burst. The noise floor comes
from minimum statistics (Martin, "Noise power spectral density estimation based
on optimal smoothing and minimum statistics", IEEE Trans. Speech Audio Process.
9(5), 2001): the smallest frame statistic over the last ``HISTORY_BLOCKS``
floor blocks of ``BLOCK_FRAMES`` frames, divided by the expected minimum of as
many pure-noise frames (each the mean of K exponential FFT bins, so Gamma(K)/K).
A channel that is busy most of the time still shows its floor in the gaps.
That estimate is a guard: the frames of a block below ``ON_RATIO`` × the guard
are the quiet ones, and their mean, smoothed over blocks, is the floor. A burst starts when a frame exceeds ``ON_RATIO`` × the
floor and ends after ``HANG_FRAMES`` frames in a row below ``OFF_RATIO`` × the
floor (hysteresis, as in a classic squelch). A burst whose only loud frame is
its first (``MIN_CORE_FRAMES``) is the noise's own peak and is dropped.

Because frames and floor blocks sit on a fixed grid of the global sample index,
the bursts found do not depend on how the input was cut into blocks. A burst
is handed out whole, with ``PRE_FRAMES`` frames of margin before its start and
the hang-over frames after it. A burst longer than ``max_frames`` is handed
out in pieces that overlap by ``overlap_frames``, so memory stays bounded.
"""

from __future__ import annotations

import dataclasses
import functools
from dataclasses import dataclass, field

import numpy as np

from .numeric import band_power

__all__ = ["DetectorPlan", "DetectorState", "RawBurst", "plan_detector", "detect", "flush"]

ON_RATIO = 1.6
OFF_RATIO = 1.25
HANG_FRAMES = 2
PRE_FRAMES = 2
BLOCK_FRAMES = 32
HISTORY_BLOCKS = 8
FRAME_SYMBOLS = 16
MIN_CORE_FRAMES = 2  # a burst must stay over the off-threshold this long (M-of-N logic, common practice)


@dataclass(frozen=True, eq=False)
class DetectorPlan:
    """Fixed settings of the detector.

    Attributes
    ----------
    frame_len : int
        Samples per detector frame (a power of two).
    band_bins : numpy.ndarray
        Boolean mask of the FFT bins inside the signal's band.
    max_frames : int
        Longest burst piece handed out, in frames.
    overlap_frames : int
        Overlap between the pieces of a long burst, in frames.
    settle_frames : int
        Frames at the start of the stream that hold the front end's start-up
        (its filter over the zeros before the first sample); they take no part
        in the noise floor.
    on_ratio, off_ratio : float
        The hysteresis' thresholds, times the floor (``ON_RATIO``, ``OFF_RATIO``
        for the receiver's frames; the survey scales them with its bins).
    quiet_ratio : float
        Frames below this times the minimum-statistics guard are the quiet
        ones the floor is measured on (``ON_RATIO``).
    """

    frame_len: int
    band_bins: np.ndarray
    max_frames: int
    overlap_frames: int
    settle_frames: int = 0
    on_ratio: float = ON_RATIO
    off_ratio: float = OFF_RATIO
    quiet_ratio: float = ON_RATIO

    def initial_state(self) -> "DetectorState":
        return DetectorState()


@dataclass(frozen=True, eq=False)
class DetectorState:
    """What the detector carries between blocks (see :func:`detect`)."""

    pending: np.ndarray = field(default_factory=lambda: np.zeros(0, np.complex64))
    pending_start: int = 0  # global index of pending[0]
    next_frame: int = 0
    floor: float | None = None
    minima: tuple[float, ...] = ()  # the smallest frame statistic of each recent floor block
    in_burst: bool = False
    burst_start: int = 0  # global sample index where the current piece's buffer starts
    core_start: int = 0  # global index of the first frame above the on-threshold
    quiet: int = 0  # frames in a row below the off-threshold
    n_bursts: int = 0
    piece: int = 0  # piece number within a long burst


@dataclass(frozen=True, eq=False)
class RawBurst:
    """A burst's samples at the decimated rate.

    Attributes
    ----------
    index : int
        Burst number in the capture, from 0.
    start : int
        Global decimated-sample index of ``samples[0]``.
    samples : numpy.ndarray
        complex64 samples, margins included.
    core : tuple of int
        (first, end) sample positions within `samples` where the detector saw
        the signal.
    piece : int
        0 for a whole burst or the first piece of a long one.
    """

    index: int
    start: int
    samples: np.ndarray
    core: tuple[int, int]
    piece: int = 0


def plan_detector(rate_hz: float, *, baud: float, band_hz: float, max_symbols: int, overlap_symbols: int,
                  settle_samples: int = 0, on_ratio: float = ON_RATIO, off_ratio: float = OFF_RATIO,
                  quiet_ratio: float = ON_RATIO) -> DetectorPlan:
    """Detector settings for a decimated stream at `rate_hz`.

    Parameters
    ----------
    band_hz : float
        Half-width of the signal band the statistic sums over.
    max_symbols, overlap_symbols : int
        Longest burst piece and the overlap between pieces, in symbols.
    settle_samples : int
        Samples at the start spoilt by the front end's start-up.
    on_ratio, off_ratio, quiet_ratio
        The hysteresis and the floor's quiet frames (see :class:`DetectorPlan`);
        the receiver's by default.

    Examples
    --------
    At 16 kHz and 1 kbaud a detector frame is 16 symbols of 16 samples; the
    statistic sums the FFT bins within ±1 kHz:

    >>> plan = plan_detector(16000, baud=1000, band_hz=1000, max_symbols=4096, overlap_symbols=64)
    >>> plan.frame_len, int(plan.band_bins.sum()), plan.max_frames
    (256, 33, 256)
    """
    sps = rate_hz / baud
    frame_len = int(2 ** round(np.log2(max(32.0, FRAME_SYMBOLS * sps))))
    freqs = np.fft.fftfreq(frame_len, 1.0 / rate_hz)
    band = np.abs(freqs) <= band_hz
    if band.sum() < 2:
        band = np.abs(freqs) <= 2 * rate_hz / frame_len
    frame_sym = frame_len / sps
    return DetectorPlan(
        frame_len=frame_len,
        band_bins=band,
        max_frames=max(8, int(np.ceil(max_symbols / frame_sym))),
        overlap_frames=int(np.ceil(overlap_symbols / frame_sym)) + PRE_FRAMES,
        settle_frames=-(-int(settle_samples) // frame_len),
        on_ratio=float(on_ratio),
        off_ratio=float(off_ratio),
        quiet_ratio=float(quiet_ratio),
    )


def _frame_power(x: np.ndarray, plan: DetectorPlan) -> np.ndarray:
    return band_power(x.reshape(-1, plan.frame_len), plan.band_bins)


@functools.lru_cache(maxsize=64)
def _minimum_bias(n_bins: int, n_frames: int) -> float:
    """Expected-ish minimum of `n_frames` pure-noise frame statistics, relative to their mean.

    A frame statistic is the mean of `n_bins` independent exponential bins,
    Gamma(K, 1/K); its 1/(n+1) quantile stands for the smallest of n.
    """
    from scipy.special import gammaincinv  # the Gamma(K, 1) quantile, without importing scipy.stats

    return float(gammaincinv(n_bins, 1.0 / (n_frames + 1)) / n_bins)


def _floor_from(minima: tuple[float, ...], n_bins: int) -> float:
    return min(minima) / _minimum_bias(n_bins, BLOCK_FRAMES * len(minima))


def _run_block(power: np.ndarray, first_frame: int, st: dict, plan: DetectorPlan, out: list) -> None:
    """Hysteresis over one floor block; appends burst tuples (see :func:`_emit`) to `out`."""
    floor = st["floor"]
    on, off = plan.on_ratio * floor, plan.off_ratio * floor
    fl = plan.frame_len
    start = 0
    if not st["in_burst"]:  # quiet frames change nothing: go straight to the first loud one
        loud = power > on
        if not loud.any():
            return
        start = int(np.argmax(loud))
    for i, p in enumerate(power[start:].tolist(), start):
        f = first_frame + i
        if not st["in_burst"]:
            if p > on:
                st.update(in_burst=True, core_start=f * fl, quiet=0, piece=0)
                st["burst_start"] = max(0, (f - PRE_FRAMES) * fl)
            continue
        st["quiet"] = st["quiet"] + 1 if p < off else 0
        if st["quiet"] >= HANG_FRAMES:
            end = (f + 1) * fl
            core_end = end - HANG_FRAMES * fl
            # One frame over the threshold and then quiet is the noise's own peak, not a
            # transmission (every frame layout spans several detector frames): dropped.
            if st["piece"] or core_end - st["core_start"] >= MIN_CORE_FRAMES * fl:
                out.append((st["burst_start"], st["core_start"], core_end, end, st["piece"], True))
            st.update(in_burst=False, quiet=0)
        elif (f + 1) * fl - st["burst_start"] >= plan.max_frames * fl:
            end = (f + 1) * fl
            out.append((st["burst_start"], st["core_start"], end, end, st["piece"], False))
            restart = end - plan.overlap_frames * fl
            st.update(burst_start=restart, core_start=restart, piece=st["piece"] + 1)


def _emit(found, st: dict, pending: np.ndarray, pending_start: int, bursts: list) -> None:
    """Cut the bursts in `found` out of `pending`; tuples are (start, core0, core1, end, piece, ended)."""
    for start, core0, core1, end, piece, ended in found:
        a, b = start - pending_start, min(end - pending_start, len(pending))
        bursts.append(
            RawBurst(
                index=st["n_bursts"],
                start=start,
                samples=pending[a:b].copy(),
                core=(core0 - start, min(core1 - start, b - a)),
                piece=piece,
            )
        )
        if ended:  # a piece cut for length shares its burst's index with the next piece
            st["n_bursts"] += 1


# the fields the hysteresis works on, carried through a dict while a block is processed
_CARRIED = ("floor", "minima", "in_burst", "burst_start", "core_start", "quiet", "n_bursts", "piece")


def _advance(state: DetectorState, y: np.ndarray, plan: DetectorPlan, *, final: bool) -> tuple[list[RawBurst], DetectorState]:
    pending = np.concatenate([state.pending, np.asarray(y, np.complex64)]) if len(y) else state.pending
    st = {k: getattr(state, k) for k in _CARRIED}
    n_bins = int(plan.band_bins.sum())
    fl = plan.frame_len
    block = BLOCK_FRAMES * fl
    next_frame = state.next_frame
    bursts: list[RawBurst] = []
    # the frame statistics of every whole block available, in one transform
    a0 = next_frame * fl - state.pending_start
    whole = (len(pending) - a0) // block
    powers = _frame_power(pending[a0 : a0 + whole * block], plan) if whole else np.zeros(0)
    while True:
        a = next_frame * fl - state.pending_start
        avail = len(pending) - a
        if avail >= block:
            n_frames = BLOCK_FRAMES
            power = powers[(a - a0) // fl : (a - a0) // fl + n_frames]
        elif final and avail >= fl:
            n_frames = avail // fl
            power = _frame_power(pending[a : a + n_frames * fl], plan)
        else:
            break
        # Minimum statistics find the floor even on a busy channel; the quiet frames under
        # that guard then give the precise value. The block's own frames count, so the
        # first block is judged too.
        settled = power[max(0, plan.settle_frames - next_frame) :]
        if len(settled):
            st["minima"] = (st["minima"] + (float(settled.min()),))[-HISTORY_BLOCKS:]
        guard = _floor_from(st["minima"], n_bins) if st["minima"] else float(np.median(power))
        quiet = settled[settled < plan.quiet_ratio * guard]
        level = float(np.add.reduce(quiet)) / len(quiet) if len(quiet) >= 8 else guard  # the mean, without its wrapper
        st["floor"] = level if st["floor"] is None else 0.7 * st["floor"] + 0.3 * level
        found: list = []
        _run_block(power, next_frame, st, plan, found)
        _emit(found, st, pending, state.pending_start, bursts)
        next_frame += n_frames
    if final and st["in_burst"]:
        end = state.pending_start + len(pending)
        _emit([(st["burst_start"], st["core_start"], end, end, st["piece"], True)], st, pending, state.pending_start, bursts)
        st["in_burst"] = False
    # keep what a burst may still need: its start, or the pre-margin before the next frame
    keep = st["burst_start"] if st["in_burst"] else max(0, (next_frame - PRE_FRAMES) * fl)
    keep = max(keep, state.pending_start)
    pending = pending[keep - state.pending_start :].copy()
    return bursts, dataclasses.replace(state, pending=pending, pending_start=keep, next_frame=next_frame, **st)


def detect(y: np.ndarray, plan: DetectorPlan, state: DetectorState) -> tuple[list[RawBurst], DetectorState]:
    """Feed decimated samples; return the bursts completed so far and the new state.

    Parameters
    ----------
    y : numpy.ndarray
        complex64 decimated samples following those already fed.
    plan : DetectorPlan
    state : DetectorState

    Returns
    -------
    bursts : list of RawBurst
    state : DetectorState

    Examples
    --------
    Noise with a 4000-sample tone burst at sample 20 000, fed in two blocks
    with the state carried between them:

    >>> import numpy as np
    >>> plan = plan_detector(16000, baud=1000, band_hz=1000, max_symbols=4096, overlap_symbols=64)
    >>> rng = np.random.default_rng(3)
    >>> y = ((rng.standard_normal(40000) + 1j * rng.standard_normal(40000)) * 0.05).astype(np.complex64)
    >>> y[20000:24000] += np.exp(2j * np.pi * 500 * np.arange(4000) / 16000).astype(np.complex64)
    >>> found, state = detect(y[:22000], plan, DetectorState())
    >>> found
    []
    >>> found, state = detect(y[22000:], plan, state)
    >>> [(b.index, b.start, len(b.samples), b.core) for b in found]
    [(0, 19456, 5120, (512, 4608))]

    The burst's samples start two frames (512 samples) before the frame in
    which the detector first saw it; one call on the whole input finds the same.
    """
    return _advance(state, y, plan, final=False)


def flush(plan: DetectorPlan, state: DetectorState) -> tuple[list[RawBurst], DetectorState]:
    """End of stream: process the last partial block and hand out an open burst.

    Examples
    --------
    A burst still on when the stream ends is handed out by ``flush``:

    >>> import numpy as np
    >>> plan = plan_detector(16000, baud=1000, band_hz=1000, max_symbols=4096, overlap_symbols=64)
    >>> rng = np.random.default_rng(3)
    >>> y = ((rng.standard_normal(30000) + 1j * rng.standard_normal(30000)) * 0.05).astype(np.complex64)
    >>> y[26000:] += np.exp(2j * np.pi * 500 * np.arange(4000) / 16000).astype(np.complex64)
    >>> found, state = detect(y, plan, DetectorState())
    >>> found
    []
    >>> found, state = flush(plan, state)
    >>> [(b.index, b.start, b.core[0]) for b in found], state.n_bursts
    ([(0, 25344, 512)], 1)
    """
    return _advance(state, np.zeros(0, np.complex64), plan, final=True)
