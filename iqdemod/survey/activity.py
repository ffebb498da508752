"""Pass 2 of the survey: when each candidate band is on, and which bands are one signal.

Each candidate band is tuned to 0 Hz and decimated by the receiver's own front
end (:mod:`iqdemod.channel`, with its DC removal and IQ-image correction), and
watched by an energy detector with hysteresis (a squelch on the band's power, its noise floor
seeded from the averaged spectrum); the bursts' times are kept, and the first
few bursts as short excerpts. Bands that are on at the same times (pieces of
one spectrum, or the two tone lobes of a wide-shift signal, which start
together on the alternating preamble) are one signal; such a signal is tuned
again as a whole (one more pass, only when it happens).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from functools import cached_property
from typing import Sequence

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from ..capture import Capture
from ..channel import ChannelPlan, ChannelState, channelize, flush_channel, plan_channel
from ..errors import IqdemodError
from ..link import SignalSpec
from ..numeric import band_power
from .spectrum import Spectrum

__all__ = ["ActivityPlan", "ActivityState", "ActivityBurst", "plan_activity", "activity_update", "Watch",
           "plan_watch", "Activity", "watch_bands", "group_bands", "progress_bar", "MAX_EXCERPTS"]

MAX_EXCERPTS = 12  # bursts kept per signal
MAX_EXCERPT_SAMPLES = 1 << 15  # decimated samples kept per burst
DETECTOR_BINS = 24  # FFT bins in the band per detector frame (sets the frame length) ...
MIN_DETECTOR_BINS = 8  # ... or down to this many for a strong signal
MIN_BURST_FRAMES = 3
GROUPING_BURSTS = 256
KEPT_BAND = 2.0  # bursts compared when deciding whether two bands are one signal


def band_channel(sample_rate_hz: float, centre_hz: float, half_width_hz: float) -> ChannelPlan:
    """The receiver's front end (:func:`iqdemod.channel.plan_channel`) set to keep ±`half_width_hz` around
    `centre_hz`, decimated to about 5× that half-width.

    The front end sizes its channel from a signal's shift, baud and carrier
    pull-in (pass band shift/2 + baud + pull-in, stop band half a baud further
    out, at least 8 samples a baud). A band is not a signal yet, so it is
    described as one that asks for that pass band: a "baud" of 5/8 of the
    half-width (so 8 samples a baud give 5 × the half-width, the survey's
    rate) and a shift that fills the rest, with no pull-in.

    Examples
    --------
    >>> plan = band_channel(1_024_000, -213_000.0, 4000.0)
    >>> plan.passband_hz, plan.decimation, plan.offset_hz
    (4000.0, 51, -213000.0)
    """
    half = min(float(half_width_hz), 0.45 * float(sample_rate_hz))
    baud = 0.625 * half
    kept = min(KEPT_BAND * half, 0.45 * float(sample_rate_hz))
    band = SignalSpec(baud=baud, shift_hz=2.0 * (kept - baud), max_freq_error_hz=0.0)
    return plan_channel(sample_rate_hz, band, float(centre_hz))


@dataclass(frozen=True, eq=False)
class ActivityPlan:
    """Fixed settings of the burst detector of one band (decimated samples).

    The statistic of a *frame* of ``frame_len`` samples is its power in the
    band's FFT bins, per sample; frames start every ``hop`` samples (a quarter
    frame), so bursts are timed to a quarter frame while the statistic keeps a
    whole frame's averaging. A burst starts above ``on_ratio`` × the noise
    floor and ends after ``HANG`` frames in a row (a frame's length) below ``off_ratio`` × the
    floor (a squelch's hysteresis); bursts shorter than ``MIN_BURST_FRAMES``
    frames are dropped as noise. The thresholds sit 6 and 3 standard
    deviations of the noise statistic above the floor. The floor starts at the
    level the averaged spectrum gives and follows the quiet frames, updated on
    a fixed grid of ``FLOOR_FRAMES`` frames.

    Attributes
    ----------
    rate_hz : float
    frame_len, hop : int
    band_bins : numpy.ndarray
        Boolean mask of the FFT bins (FFT order) inside the band.
    floor0 : float
        Initial noise floor, band power per sample.
    max_excerpts : int
        Bursts whose samples are handed out (the first ones); later bursts are only timed.
    max_excerpt_samples : int
        Longest excerpt, samples.
    """

    rate_hz: float
    frame_len: int
    hop: int
    band_bins: np.ndarray = field(repr=False)
    floor0: float
    max_excerpts: int = MAX_EXCERPTS
    max_excerpt_samples: int = MAX_EXCERPT_SAMPLES

    HANG = 4  # hops: a burst ends after a frame's length of quiet frames
    FLOOR_FRAMES = 64

    def __post_init__(self) -> None:
        if self.frame_len < 8 or not 1 <= self.hop <= self.frame_len:
            raise IqdemodError(f"frame {self.frame_len}, hop {self.hop}: need frame >= 8 and 1 <= hop <= frame")
        if not self.floor0 > 0:
            raise IqdemodError(f"initial noise floor {self.floor0!r}: must be > 0")

    @cached_property
    def n_bins(self) -> int:
        return int(self.band_bins.sum())

    @cached_property
    def on_ratio(self) -> float:
        return 1.0 + 6.0 / math.sqrt(self.n_bins)

    @cached_property
    def off_ratio(self) -> float:
        return 1.0 + 3.0 / math.sqrt(self.n_bins)

    @property
    def margin(self) -> int:
        """Samples kept on each side of a burst's core in its excerpt."""
        return self.frame_len

    @property
    def band_hz(self) -> float:
        """Width of the band the statistic covers, Hz."""
        return self.n_bins * self.rate_hz / self.frame_len

    def initial_state(self) -> "ActivityState":
        return ActivityState(pending=np.zeros(0, np.complex64), pending_start=0, next_frame=0, floor=self.floor0)


@dataclass(frozen=True, eq=False)
class ActivityState:
    """What a band's burst detector carries between blocks (see :func:`activity_update`)."""

    pending: np.ndarray
    pending_start: int  # decimated index of pending[0]
    next_frame: int
    floor: float
    quiet_sum: float = 0.0
    quiet_n: int = 0
    in_burst: bool = False
    first: int = 0  # first frame above the on-threshold
    last: int = 0  # last frame above the off-threshold
    quiet: int = 0
    n_bursts: int = 0
    held: np.ndarray | None = None  # the excerpt of a burst that outgrew max_excerpt_samples
    held_start: int = 0


@dataclass(frozen=True, eq=False)
class ActivityBurst:
    """A burst seen by a band's detector.

    Attributes
    ----------
    index : int
    core : tuple of int
        (start, end) decimated sample indices where the detector saw the signal.
    start : int
        Decimated index of ``samples[0]``.
    samples : numpy.ndarray or None
        The burst with a frame of margin on each side (cut at the excerpt
        limit); None after the first ``max_excerpts`` bursts.
    """

    index: int
    core: tuple[int, int]
    start: int = 0
    samples: np.ndarray | None = field(default=None, repr=False)

    @property
    def local_core(self) -> tuple[int, int]:
        """The core as positions in `samples`."""
        n = 0 if self.samples is None else len(self.samples)
        return (max(0, self.core[0] - self.start), min(n, self.core[1] - self.start))


def plan_activity(rate_hz: float, half_band_hz: float, floor_density: float, *, snr: float = 0.0,
                  frame_len: int | None = None) -> ActivityPlan:
    """Detector settings for a band of ±`half_band_hz` at `rate_hz`.

    Parameters
    ----------
    floor_density : float
        Noise power density, full scale² per Hz (from the averaged spectrum).
    snr : float
        The band's signal-to-noise ratio while on, if known (linear). A strong
        signal needs fewer FFT bins per frame, hence shorter frames: the
        frame is as short as keeps the on-threshold (6 standard deviations of
        the noise statistic) below half the signal's level, with
        ``MIN_DETECTOR_BINS`` to ``DETECTOR_BINS`` bins in the band, so that short gaps between bursts
        are seen even in a narrow band.
    frame_len : int, optional
        Overrides that choice.
    """
    if frame_len is None:
        bins = DETECTOR_BINS if snr <= 0 else min(DETECTOR_BINS, max(MIN_DETECTOR_BINS, (12.0 / snr) ** 2))
        wanted = bins * rate_hz / (2 * half_band_hz)
        frame_len = int(2 ** max(4, round(math.log2(max(1.0, wanted)))))
    freqs = np.fft.fftfreq(frame_len, 1.0 / rate_hz)
    band = np.abs(freqs) <= half_band_hz
    if band.sum() < 4:
        band = np.abs(freqs) <= 2 * rate_hz / frame_len
    return ActivityPlan(float(rate_hz), int(frame_len), max(1, frame_len // 4), band,
                        float(max(floor_density * rate_hz, 1e-30)))


def activity_update(y: np.ndarray, plan: ActivityPlan, state: ActivityState, *,
                    final: bool = False) -> tuple[list[ActivityBurst], ActivityState]:
    """Feed decimated samples to a band's burst detector.

    Frames sit on a fixed grid of the global sample index and the floor is
    updated on a fixed grid of frames, so the bursts found do not depend on
    how the input was cut.

    Parameters
    ----------
    y : numpy.ndarray
        complex64 samples following those already fed.
    plan : ActivityPlan
    state : ActivityState
        From :meth:`ActivityPlan.initial_state` or the previous call; not changed.
    final : bool
        The end of the stream: a burst still open is handed out.

    Returns
    -------
    bursts : list of ActivityBurst
        Bursts completed by this call.
    state : ActivityState
    """
    y = np.asarray(y, np.complex64)
    pending = np.concatenate([state.pending, y]) if state.pending.size else y
    p0 = state.pending_start
    F, H = plan.frame_len, plan.hop
    k0 = state.next_frame
    n_frames = max(0, (p0 + len(pending) - F) // H - k0 + 1) if p0 + len(pending) >= F else 0
    st = {f.name: getattr(state, f.name) for f in dataclasses.fields(state)}  # arrays are replaced, never changed
    st["pending"] = pending
    out: list[ActivityBurst] = []
    if n_frames:
        a = k0 * H - p0
        frames = sliding_window_view(pending[a : a + (n_frames - 1) * H + F], F)[::H][:n_frames]
        power = band_power(frames, plan.band_bins)
        for i, pw in enumerate(power):
            _step(k0 + i, float(pw), plan, st, out)
    st["next_frame"] = k0 + n_frames
    if final and st["in_burst"]:
        _end_burst(plan, st, out)
    # keep what an excerpt may still need
    keep = st["next_frame"] * H - plan.margin
    if st["in_burst"] and st["held"] is None and st["n_bursts"] < plan.max_excerpts:
        keep = min(keep, st["first"] * H - plan.margin)
    keep = max(keep, p0)
    st["pending"] = pending[keep - p0 :].copy()
    st["pending_start"] = keep
    return out, ActivityState(**st)


def _step(k: int, power: float, plan: ActivityPlan, st: dict, out: list) -> None:
    """One frame of the hysteresis."""
    floor = st["floor"]
    H = plan.hop
    if not st["in_burst"]:
        if power > plan.on_ratio * floor:
            st.update(in_burst=True, first=k, last=k, quiet=0, held=None)
        elif power < plan.off_ratio * floor:
            st["quiet_sum"] += power
            st["quiet_n"] += 1
    else:
        if power < plan.off_ratio * floor:
            st["quiet"] += 1
            if st["quiet"] >= plan.HANG:
                _end_burst(plan, st, out)
        else:
            st["quiet"] = 0
            st["last"] = k
            if (st["held"] is None and st["n_bursts"] < plan.max_excerpts
                    and (k - st["first"]) * H + plan.frame_len + 2 * plan.margin >= plan.max_excerpt_samples):
                start = st["first"] * H - plan.margin
                a = max(0, start - st["pending_start"])
                st["held"] = st["pending"][a : a + plan.max_excerpt_samples].copy()
                st["held_start"] = max(start, st["pending_start"])
    if (k + 1) % plan.FLOOR_FRAMES == 0:
        if st["quiet_n"] >= plan.FLOOR_FRAMES // 8:
            st["floor"] = 0.7 * floor + 0.3 * st["quiet_sum"] / st["quiet_n"]
        st["quiet_sum"], st["quiet_n"] = 0.0, 0


def _end_burst(plan: ActivityPlan, st: dict, out: list) -> None:
    """Hand out the open burst, unless it is too short to be one (a noise blip)."""
    H, F = plan.hop, plan.frame_len
    core = (st["first"] * H, st["last"] * H + F)
    if core[1] - core[0] < MIN_BURST_FRAMES * F:
        st.update(in_burst=False, quiet=0, held=None)
        return
    index = st["n_bursts"]
    if st["held"] is not None:
        burst = ActivityBurst(index, core, st["held_start"], st["held"])
    elif index < plan.max_excerpts:
        start = max(core[0] - plan.margin, st["pending_start"])
        a, b = start - st["pending_start"], core[1] + plan.margin - st["pending_start"]
        burst = ActivityBurst(index, core, start, st["pending"][a:b].copy())
    else:
        burst = ActivityBurst(index, core)
    out.append(burst)
    st.update(in_burst=False, quiet=0, n_bursts=index + 1, held=None)



@dataclass(frozen=True, eq=False)
class Watch:
    """The front end and the detector for one band (frequencies relative to the capture centre)."""

    low_hz: float
    high_hz: float
    tuner: ChannelPlan
    detector: ActivityPlan

    @property
    def rate_hz(self) -> float:
        return self.tuner.output_rate_hz

    def input_sample(self, decimated: float) -> float:
        """The input-sample index a decimated index stands for."""
        return decimated * self.tuner.decimation - self.tuner.delay_samples


def plan_watch(sample_rate_hz: float, low_hz: float, high_hz: float, spec: Spectrum, excess_db: float = 0.0) -> Watch:
    """Tuner and detector for the band `low_hz`–`high_hz`, with a quarter of its width (two bins at least) of margin."""
    width = high_hz - low_hz
    margin = max(width / 4, 2 * spec.bin_hz)
    tuner = band_channel(sample_rate_hz, (low_hz + high_hz) / 2, width / 2 + margin)
    detector = plan_activity(tuner.output_rate_hz, width / 2 + margin / 2, spec.floor_density((low_hz + high_hz) / 2),
                             snr=10 ** (excess_db / 10))
    return Watch(low_hz, high_hz, tuner, detector)


@dataclass
class Activity:
    """What one band's watch saw: burst intervals (input samples), excerpts, noise floor."""

    watch: Watch
    intervals: list[tuple[float, float]] = field(default_factory=list)
    excerpts: list[ActivityBurst] = field(default_factory=list)
    floor: float | None = None


def progress_bar(capture: Capture, enabled: bool, desc: str):
    """A tqdm bar over the capture's samples (stderr), or None when not `enabled`."""
    if not enabled:
        return None
    from tqdm import tqdm

    return tqdm(total=capture.info.n_samples, unit="S", unit_scale=True, desc=desc, leave=False, delay=1.0)


def _take(act: Activity, found: list[ActivityBurst]) -> None:
    """Keep the bursts a band's detector handed out: every interval, the first few excerpts."""
    w = act.watch
    for burst in found:
        c0, c1 = burst.core
        act.intervals.append((w.input_sample(c0), w.input_sample(c1)))
        if burst.samples is not None and len(act.excerpts) < MAX_EXCERPTS:
            act.excerpts.append(burst)


def watch_bands(capture: Capture, watches: Sequence[Watch], *, block_samples: int, progress: bool,
                desc: str) -> list[Activity]:
    """One pass: tune every band with the receiver's front end, detect its bursts, keep the first few as excerpts."""
    acts = [Activity(w) for w in watches]
    tstates: list[ChannelState] = [w.tuner.initial_state() for w in watches]
    dstates = [w.detector.initial_state() for w in watches]
    bar = progress_bar(capture, progress, desc)
    try:
        for block in capture.blocks(block_samples):
            for i, w in enumerate(watches):
                y, tstates[i] = channelize(block, w.tuner, tstates[i])
                found, dstates[i] = activity_update(y, w.detector, dstates[i])
                _take(acts[i], found)
            if bar is not None:
                bar.update(len(block))
        for i, w in enumerate(watches):
            y, tstates[i] = flush_channel(w.tuner, tstates[i])
            found, dstates[i] = activity_update(y, w.detector, dstates[i], final=True)
            _take(acts[i], found)
            acts[i].floor = dstates[i].floor
    finally:
        if bar is not None:
            bar.close()
    return acts


def _compared(a: list[tuple[float, float]], b: list[tuple[float, float]]) -> tuple[np.ndarray, np.ndarray]:
    """The first GROUPING_BURSTS bursts of `a`, and the bursts of `b` during them, as (n, 2) arrays."""
    x = np.asarray(a[:GROUPING_BURSTS], dtype=float).reshape(-1, 2)
    y = np.asarray(b, dtype=float).reshape(-1, 2)
    if len(x) and len(y):
        y = y[(y[:, 1] > x[0, 0]) & (y[:, 0] < x[-1, 1])][: 4 * GROUPING_BURSTS]
    return x, y


def _starts_match(a: list[tuple[float, float]], b: list[tuple[float, float]], tolerance: float) -> float:
    """Fraction of the bursts of `a` for which a burst of `b` starts within `tolerance` samples."""
    x, y = _compared(a, b)
    if not len(x) or not len(y):
        return 0.0
    return float((np.abs(x[:, :1] - y[None, :, 0]) <= tolerance).any(axis=1).mean())


def _covered(a: list[tuple[float, float]], b: list[tuple[float, float]]) -> float:
    """Fraction of the burst time of `a` during which `b` is also on."""
    x, y = _compared(a, b)
    total = float(np.sum(x[:, 1] - x[:, 0])) if len(x) else 0.0
    if total <= 0 or not len(y):
        return 0.0
    both = np.clip(np.minimum(x[:, 1:], y[None, :, 1]) - np.maximum(x[:, :1], y[None, :, 0]), 0.0, None)
    return float(both.sum() / total)


def group_bands(acts: list[Activity]) -> list[list[int]]:
    """Bands that are one signal: each group is one transmitter.

    Two bands join when they touch or nearly (a gap no wider than the wider
    band) and are on at the same times (each covers 70 % of the other's burst
    time); or, further apart, when their bursts start together and overlap
    (the two tone lobes of a wide-shift signal: both are on during the
    alternating preamble, though a band holding one tone may go quiet inside
    a burst during a long run of the other). Two transmitters keyed by one
    clock in bands far apart would be taken for one signal.
    """
    n = len(acts)
    tols = [2 * a.watch.detector.frame_len * a.watch.tuner.decimation for a in acts]
    parent = list(range(n))

    def root(i: int) -> int:
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    for i in range(n):
        for j in range(i + 1, n):
            wi, wj = acts[i].watch, acts[j].watch
            a, b = acts[i].intervals, acts[j].intervals
            if not a or not b:
                continue
            gap = max(wi.low_hz, wj.low_hz) - min(wi.high_hz, wj.high_hz)
            wider = max(wi.high_hz - wi.low_hz, wj.high_hz - wj.low_hz)
            ca, cb = _covered(a, b), _covered(b, a)
            if gap <= wider and ca >= 0.7 and cb >= 0.7:
                parent[root(i)] = root(j)
                continue
            fewer, more = (a, b) if len(a) <= len(b) else (b, a)
            if len(fewer) < 2 or len(more) > 3 * len(fewer):
                continue
            if _starts_match(fewer, more, max(tols[i], tols[j])) >= 0.8 and min(ca, cb) >= 0.5:
                parent[root(i)] = root(j)
    groups: dict[int, list[int]] = {}
    for i in range(n):
        if acts[i].intervals:
            groups.setdefault(root(i), []).append(i)
    return list(groups.values())
