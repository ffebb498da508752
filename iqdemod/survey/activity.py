"""Pass 2 of the survey: when each candidate band is on, and which bands are one signal.

Each candidate band is tuned to 0 Hz and decimated by the receiver's own front
end (:mod:`iqdemod.channel`, with its DC removal and IQ-image correction), and
watched by the receiver's own burst detector (:mod:`iqdemod.bursts`: the band's
power against a tracked noise floor, with hysteresis); the bursts' times are
kept, and the first few bursts as short excerpts. Bands that are on at the same times (pieces of
one spectrum, or the two tone lobes of a wide-shift signal, which start
together on the alternating preamble) are one signal; such a signal is tuned
again as a whole (one more pass, only when it happens).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np

from ..bursts import FRAME_SYMBOLS, DetectorPlan, DetectorState, detect, flush, plan_detector
from ..capture import Capture, progress_bar
from ..channel import ChannelPlan, ChannelState, channelize, flush_channel, plan_channel
from ..errors import IqdemodError
from ..link import SignalSpec
from .spectrum import Spectrum

__all__ = ["ActivityPlan", "ActivityState", "ActivityBurst", "plan_activity", "activity_update", "Watch",
           "plan_watch", "Activity", "watch_bands", "group_bands", "progress_bar", "MAX_EXCERPTS"]

MAX_EXCERPTS = 12  # bursts kept per signal
MAX_EXCERPT_SAMPLES = 1 << 15  # decimated samples kept per burst
DETECTOR_BINS = 24  # FFT bins in the band per detector frame (sets the frame length) ...
# ... or down to this many for a strong signal. (Down to 8, the noise statistic spreads so far that
# its peaks, with the receiver's two frames of hang, pass for bursts of three frames: one in the suite's
# 19 200 Bd capture.)
MIN_DETECTOR_BINS = 16
ON_SIGMAS, OFF_SIGMAS = 6.0, 3.0  # the hysteresis, in standard deviations of the noise statistic over the floor
MIN_BURST_FRAMES = 3  # shorter bursts are the noise's own peaks
GROUPING_BURSTS = 256  # bursts compared when deciding whether two bands are one signal
KEPT_BAND = 2.0  # the front end's flat pass band, in half-widths of the band watched


def band_channel(sample_rate_hz: float, centre_hz: float, half_width_hz: float) -> ChannelPlan:
    """The receiver's front end (:func:`iqdemod.channel.plan_channel`) set up for a band of ±`half_width_hz`
    around `centre_hz`, decimated to about 5× that half-width.

    The front end sizes its channel from a signal's shift, baud and carrier
    pull-in (pass band shift/2 + baud + pull-in, stop band half a baud further
    out, at least 8 samples a baud). A band is not a signal yet, so it is
    described as one that asks for that rate and pass band: a "baud" of 5/8
    of the half-width (8 samples a baud give 5 × the half-width) and a shift
    that fills the pass band, with no pull-in. The pass band is ``KEPT_BAND``
    times the half-width, flat: the modulation and pulse estimates look past
    the band the spectrum showed (only its strongest part may have stood out),
    out to where the decimated rate ends.

    Examples
    --------
    >>> plan = band_channel(1_024_000, -213_000.0, 4000.0)
    >>> plan.passband_hz, plan.decimation, plan.offset_hz
    (8000.0, 50, -213000.0)
    """
    half = min(float(half_width_hz), 0.45 * float(sample_rate_hz))
    baud = 0.625 * half
    kept = min(KEPT_BAND * half, 0.45 * float(sample_rate_hz))
    band = SignalSpec(baud=baud, shift_hz=2.0 * (kept - baud), max_freq_error_hz=0.0)
    return plan_channel(sample_rate_hz, band, float(centre_hz))


@dataclass(frozen=True, eq=False)
class ActivityPlan:
    """The receiver's burst detector (:mod:`iqdemod.bursts`) set up for one band, at the band's decimated rate.

    The detector's statistic is the power in the band's FFT bins per frame
    (:func:`iqdemod.numeric.band_power`), its floor minimum statistics refined
    on the quiet frames, its thresholds a hysteresis (see
    :mod:`iqdemod.bursts`). Where the survey differs, through the detector's
    parameters: its frames hold ``MIN_DETECTOR_BINS`` to ``DETECTOR_BINS``
    bins of the band (shorter for a strong signal, so that short gaps between
    bursts are seen even in a narrow band), so its thresholds sit
    ``ON_SIGMAS`` and ``OFF_SIGMAS`` standard deviations of the noise
    statistic (1/√bins of the floor) above the floor rather than at the
    receiver's fixed ratios (the floor is measured on the frames below the
    off-threshold); a burst of fewer than ``MIN_BURST_FRAMES`` frames is
    dropped as noise. What the survey adds: a long burst, handed out in pieces of at most
    ``MAX_EXCERPT_SAMPLES``, joined again here; samples kept only for the
    first `max_excerpts` bursts; and the noise floor the survey measures
    signals against, from the averaged spectrum.

    Attributes
    ----------
    rate_hz : float
    detector : iqdemod.bursts.DetectorPlan
    noise_floor : float
        The band's noise power per sample from the averaged spectrum's
        baseline, which a busy channel does not lift: the survey's Eb/N0 and
        level are measured against it. (The detector's own floor, kept for its
        thresholds, is measured on the frames below a threshold and so takes in
        the edges of bursts: it reads 0.8 dB high on a channel busy 80 % of the
        time.)
    max_excerpts : int
        Bursts whose samples are handed out (the first ones); later bursts are only timed.
    """

    rate_hz: float
    detector: DetectorPlan
    noise_floor: float
    max_excerpts: int = MAX_EXCERPTS

    def __post_init__(self) -> None:
        if not self.noise_floor > 0:
            raise IqdemodError(f"noise floor {self.noise_floor!r}: must be > 0")
        if self.max_excerpts < 0:
            raise IqdemodError(f"max_excerpts {self.max_excerpts}: must be >= 0")

    @property
    def frame_len(self) -> int:
        """Samples per detector frame."""
        return self.detector.frame_len

    @property
    def band_bins(self) -> np.ndarray:
        """Boolean mask of the frame's FFT bins inside the band."""
        return self.detector.band_bins

    @property
    def band_hz(self) -> float:
        """Width of the band the statistic covers, Hz."""
        return int(self.band_bins.sum()) * self.rate_hz / self.frame_len

    def initial_state(self) -> "ActivityState":
        return ActivityState(detector=self.detector.initial_state())


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
        The burst with the detector's margins (its first piece, for a burst
        longer than ``MAX_EXCERPT_SAMPLES``); None after the first
        ``max_excerpts`` bursts.
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


@dataclass(frozen=True, eq=False)
class ActivityState:
    """What a band's detector carries between blocks (see :func:`activity_update`).

    Attributes
    ----------
    detector : iqdemod.bursts.DetectorState
    open : ActivityBurst or None
        A long burst whose first pieces the detector handed out and whose end is still to come.
    handed : int
        Bursts handed out so far.
    """

    detector: DetectorState
    open: ActivityBurst | None = None
    handed: int = 0


def plan_activity(rate_hz: float, half_band_hz: float, floor_density: float, *, snr: float = 0.0,
                  frame_len: int | None = None, settle_samples: int = 0) -> ActivityPlan:
    """Detector settings for a band of ±`half_band_hz` at `rate_hz`.

    Parameters
    ----------
    rate_hz : float
        The band's decimated rate, Hz.
    half_band_hz : float
        Half-width of the band the statistic sums over, Hz.
    floor_density : float
        Noise power density, full scale² per Hz (from the averaged spectrum).
    snr : float
        The band's signal-to-noise ratio while on, if known (linear). A strong
        signal needs fewer FFT bins per frame, hence shorter frames: the
        frame is as short as keeps the on-threshold below half the signal's
        level, with ``MIN_DETECTOR_BINS`` to ``DETECTOR_BINS`` bins in the band.
    frame_len : int, optional
        Overrides that choice.
    settle_samples : int
        Samples at the start spoilt by the front end's start-up.

    Examples
    --------
    >>> plan = plan_activity(100_000, 10_000, floor_density=0.05**2 / 100_000)
    >>> plan.frame_len, int(plan.band_bins.sum()), round(plan.noise_floor, 6)
    (128, 25, 0.0025)
    >>> round(plan.detector.on_ratio, 2), round(plan.detector.off_ratio, 2)
    (2.2, 1.6)
    """
    if frame_len is None:
        bins = DETECTOR_BINS if snr <= 0 else min(DETECTOR_BINS, max(MIN_DETECTOR_BINS, (12.0 / snr) ** 2))
        wanted = bins * rate_hz / (2 * half_band_hz)
        frame_len = int(2 ** max(5, round(math.log2(max(1.0, wanted)))))
    n_bins = int(np.count_nonzero(np.abs(np.fft.fftfreq(frame_len, 1.0 / rate_hz)) <= half_band_hz))
    spread = 1.0 / math.sqrt(max(n_bins, 2))  # of the noise statistic (a mean of n_bins exponential bins)
    # The detector sizes its frame as FRAME_SYMBOLS symbols: a "baud" that makes that `frame_len`.
    detector = plan_detector(rate_hz, baud=rate_hz * FRAME_SYMBOLS / frame_len, band_hz=half_band_hz,
                             max_symbols=FRAME_SYMBOLS * (MAX_EXCERPT_SAMPLES // frame_len), overlap_symbols=0,
                             settle_samples=settle_samples, on_ratio=1.0 + ON_SIGMAS * spread,
                             off_ratio=1.0 + OFF_SIGMAS * spread, quiet_ratio=1.0 + OFF_SIGMAS * spread)
    return ActivityPlan(float(rate_hz), detector, float(max(floor_density * rate_hz, 1e-30)))


def activity_update(y: np.ndarray, plan: ActivityPlan, state: ActivityState, *,
                    final: bool = False) -> tuple[list[ActivityBurst], ActivityState]:
    """Feed decimated samples to a band's burst detector.

    The receiver's detector (:func:`iqdemod.bursts.detect`, and
    :func:`~iqdemod.bursts.flush` at the end) does the work; its frames and
    floor sit on a fixed grid of the global sample index, so the bursts found
    do not depend on how the input was cut. The pieces of a long burst are
    joined into one burst here.

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

    Examples
    --------
    Noise (σ = 0.05) at 100 kHz with a 6000-sample tone burst from sample
    30 000, fed in two pieces; the second call is the end of the stream:

    >>> plan = plan_activity(100_000, 10_000, floor_density=0.05**2 / 100_000)
    >>> rng = np.random.default_rng(6)
    >>> y = (0.05 / np.sqrt(2) * (rng.standard_normal(60000) + 1j * rng.standard_normal(60000))).astype(np.complex64)
    >>> y[30000:36000] += 0.5 * np.exp(2j * np.pi * 3000 * np.arange(6000) / 100_000).astype(np.complex64)
    >>> found, state = activity_update(y[:33000], plan, plan.initial_state())
    >>> found
    []
    >>> found, state = activity_update(y[33000:], plan, state, final=True)
    >>> [(b.index, b.core) for b in found]
    [(0, (29952, 36096))]
    """
    found, det = detect(np.asarray(y, np.complex64), plan.detector, state.detector)
    if final:
        more, det = flush(plan.detector, det)
        found += more
    out: list[ActivityBurst] = []
    current, handed = state.open, state.handed
    for i, raw in enumerate(found):
        core = (raw.start + raw.core[0], raw.start + raw.core[1])
        if raw.piece == 0 or current is None:
            current = ActivityBurst(handed, core, raw.start, raw.samples)
        else:  # a later piece of a long burst: it carries the burst's end
            current = dataclasses.replace(current, core=(current.core[0], core[1]))
        # a piece is its burst's last when the next one is another burst, or the detector has closed it
        last = found[i + 1].index != raw.index if i + 1 < len(found) else raw.index < det.n_bursts
        if not last:
            continue
        # The detector drops a burst of one loud frame; the survey's frames are shorter, so the noise's
        # own peaks last longer in frames: fewer than MIN_BURST_FRAMES of them are not a burst.
        if current.core[1] - current.core[0] >= MIN_BURST_FRAMES * plan.frame_len:
            keep = current.samples if handed < plan.max_excerpts else None
            out.append(dataclasses.replace(current, index=handed, samples=keep))
            handed += 1
        current = None
    return out, ActivityState(det, current, handed)


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
    """Front end and detector for the band `low_hz`–`high_hz`, with a quarter of its width (two bins at least)
    of margin.

    Examples
    --------
    The band found in the spectrum of four synthetic buoy bursts (1200 baud,
    tones at 5400 and 6600 Hz, 48 kHz): the watch's tuner keeps it at 24 kHz:

    >>> import os, tempfile
    >>> from iqdemod.capture import open_capture
    >>> from iqdemod.profile import load_link
    >>> from iqdemod.survey.spectrum import find_bands, finish_spectrum, plan_spectrum, spectrum_update
    >>> from iqdemod.synth import SynthConfig, synthesize
    >>> link = load_link(None, rate=48000, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> tmp = tempfile.TemporaryDirectory()
    >>> _ = synthesize(os.path.join(tmp.name, "buoys"), SynthConfig(link=link, ebn0_db=(16.0,), n_frames=4, seed=5))
    >>> capture = open_capture(os.path.join(tmp.name, "buoys.sigmf-meta"))
    >>> plan = plan_spectrum(48000)
    >>> state = plan.initial_state()
    >>> for block in capture.blocks(16384):
    ...     state = spectrum_update(block, plan, state)
    >>> spec = finish_spectrum(plan, state)
    >>> band = find_bands(spec)[0]
    >>> watch = plan_watch(48000, band.low_hz, band.high_hz, spec, band.excess_db)
    >>> watch.low_hz, watch.high_hz, watch.rate_hz, watch.tuner.decimation
    (3843.75, 8343.75, 24000.0, 2)
    >>> capture.close()
    >>> tmp.cleanup()
    """
    width = high_hz - low_hz
    margin = max(width / 4, 2 * spec.bin_hz)
    tuner = band_channel(sample_rate_hz, (low_hz + high_hz) / 2, width / 2 + margin)
    detector = plan_activity(tuner.output_rate_hz, width / 2 + margin / 2, spec.floor_density((low_hz + high_hz) / 2),
                             snr=10 ** (excess_db / 10), settle_samples=-(-len(tuner.taps) // tuner.decimation))
    return Watch(low_hz, high_hz, tuner, detector)


@dataclass
class Activity:
    """What one band's watch saw: burst intervals (input samples) and excerpts."""

    watch: Watch
    intervals: list[tuple[float, float]] = field(default_factory=list)
    excerpts: list[ActivityBurst] = field(default_factory=list)
    floor: float | None = None


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
    """One pass: tune every band with the receiver's front end, detect its bursts, keep the first few as excerpts.

    Examples
    --------
    One pass over four synthetic buoy bursts, watching the band the spectrum
    found: every burst is seen, and the first ones kept as excerpts:

    >>> import os, tempfile
    >>> from iqdemod.capture import open_capture
    >>> from iqdemod.profile import load_link
    >>> from iqdemod.survey.spectrum import find_bands, finish_spectrum, plan_spectrum, spectrum_update
    >>> from iqdemod.synth import SynthConfig, synthesize
    >>> link = load_link(None, rate=48000, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> tmp = tempfile.TemporaryDirectory()
    >>> _ = synthesize(os.path.join(tmp.name, "buoys"), SynthConfig(link=link, ebn0_db=(16.0,), n_frames=4, seed=5))
    >>> capture = open_capture(os.path.join(tmp.name, "buoys.sigmf-meta"))
    >>> plan = plan_spectrum(48000)
    >>> state = plan.initial_state()
    >>> for block in capture.blocks(16384):
    ...     state = spectrum_update(block, plan, state)
    >>> spec = finish_spectrum(plan, state)
    >>> band = find_bands(spec)[0]
    >>> watch = plan_watch(48000, band.low_hz, band.high_hz, spec, band.excess_db)
    >>> act, = watch_bands(capture, [watch], block_samples=16384, progress=False, desc="survey: bursts")
    >>> len(act.intervals), len(act.excerpts)
    (4, 4)
    >>> capture.close()
    >>> tmp.cleanup()
    """
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
            acts[i].floor = dstates[i].detector.floor
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

    Examples
    --------
    Four synthetic buoy bursts in one band are one transmitter; a band that
    saw no burst is in no group:

    >>> import os, tempfile
    >>> from iqdemod.capture import open_capture
    >>> from iqdemod.profile import load_link
    >>> from iqdemod.survey.spectrum import find_bands, finish_spectrum, plan_spectrum, spectrum_update
    >>> from iqdemod.synth import SynthConfig, synthesize
    >>> link = load_link(None, rate=48000, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> tmp = tempfile.TemporaryDirectory()
    >>> _ = synthesize(os.path.join(tmp.name, "buoys"), SynthConfig(link=link, ebn0_db=(16.0,), n_frames=4, seed=5))
    >>> capture = open_capture(os.path.join(tmp.name, "buoys.sigmf-meta"))
    >>> plan = plan_spectrum(48000)
    >>> state = plan.initial_state()
    >>> for block in capture.blocks(16384):
    ...     state = spectrum_update(block, plan, state)
    >>> spec = finish_spectrum(plan, state)
    >>> band = find_bands(spec)[0]
    >>> busy = plan_watch(48000, band.low_hz, band.high_hz, spec, band.excess_db)
    >>> quiet = plan_watch(48000, -15000.0, -12000.0, spec)
    >>> acts = watch_bands(capture, [busy, quiet], block_samples=16384, progress=False, desc="survey: bursts")
    >>> [len(a.intervals) for a in acts], group_bands(acts)
    ([4, 0], [[0]])
    >>> capture.close()
    >>> tmp.cleanup()
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
