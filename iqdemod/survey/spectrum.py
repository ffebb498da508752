"""Pass 1 of the survey: the capture's spectrum, and the bands that stand out from its noise.

An averaged periodogram over the whole capture with a fixed FFT size (Welch,
"The use of fast Fourier transform for the estimation of power spectra", IEEE
Trans. Audio Electroacoust. AU-15, 1967), plus *peak-hold* spectra of short
averages at a few time–frequency resolutions, so that a bursty signal stands
out by its level while it is on rather than by its long-term mean. Bins well
above a noise baseline (low percentiles, robust to signals filling much of
the band) form candidate bands.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view
from scipy import fft as _fft
from scipy import signal as _sig
from scipy.ndimage import binary_closing, median_filter, uniform_filter1d

from ..errors import CaptureError, IqdemodError
from ..numeric import power_db

__all__ = ["SpectrumPlan", "SpectrumState", "Spectrum", "Band", "plan_spectrum", "spectrum_update",
           "finish_spectrum", "find_bands", "baseline_db"]

SPECTRUM_BIN_HZ = 150.0  # the FFT size is the power of two nearest to fs / this
MIN_FFT, MAX_FFT = 256, 1 << 16
# Peak-hold resolutions: (periodograms averaged, FFT bins smoothed): 16 degrees of averaging, and 64 for
# wide weak signals.
PEAK_RESOLUTIONS = ((16, 1), (4, 4), (1, 16), (1, 64))
FINE_RESOLUTIONS = 3  # the first ones; the last, coarse one only adds bands none of these sees
BASELINE_CHUNKS = 64
DETECT_DB = 3.0  # a bin is active this far above the baseline ...
DETECT_SPREAD = 8.0  # ... and this many robust standard deviations


@dataclass(frozen=True, eq=False)
class SpectrumPlan:
    """Fixed settings of the spectrum pass.

    Attributes
    ----------
    sample_rate_hz : float
    nfft : int
        FFT size; segments overlap by half (Welch 1967) with a periodic Hann window.
    window : numpy.ndarray
    """

    sample_rate_hz: float
    nfft: int
    window: np.ndarray = field(repr=False)

    @property
    def hop(self) -> int:
        return self.nfft // 2

    @property
    def scale(self) -> float:
        """Periodogram to power density (full scale² per Hz)."""
        return 1.0 / (self.sample_rate_hz * float(np.sum(self.window**2)))

    def initial_state(self) -> "SpectrumState":
        n = self.nfft
        return SpectrumState(
            tail=np.zeros(0, np.complex64),
            n_segments=0,
            total=np.zeros(n),
            group_sum=tuple(np.zeros(n) for _ in PEAK_RESOLUTIONS),
            group_count=tuple(0 for _ in PEAK_RESOLUTIONS),
            peak=tuple(np.zeros(n) for _ in PEAK_RESOLUTIONS),
            groups=tuple(0 for _ in PEAK_RESOLUTIONS),
        )


@dataclass(frozen=True, eq=False)
class SpectrumState:
    """What the spectrum pass carries between blocks (FFT order, not shifted).

    Attributes
    ----------
    tail : numpy.ndarray
        Input samples from the start of the next segment on.
    n_segments : int
        Periodograms taken so far.
    total : numpy.ndarray
        Their sum (density units).
    group_sum, group_count : tuple
        Per peak-hold resolution: the open group's sum and count.
    peak : tuple of numpy.ndarray
        Per resolution: the running maximum of the smoothed group means.
    groups : tuple of int
        Per resolution: complete groups seen.
    """

    tail: np.ndarray
    n_segments: int
    total: np.ndarray
    group_sum: tuple[np.ndarray, ...]
    group_count: tuple[int, ...]
    peak: tuple[np.ndarray, ...]
    groups: tuple[int, ...]


def plan_spectrum(sample_rate_hz: float, *, nfft: int | None = None) -> SpectrumPlan:
    """Spectrum settings for a capture: an FFT of about 150 Hz bins, 256–65536 points.

    Examples
    --------
    >>> plan_spectrum(1_024_000).nfft
    8192
    >>> plan_spectrum(250_000, nfft=1024).hop
    512
    """
    fs = float(sample_rate_hz)
    if not fs > 0:
        raise CaptureError(f"sample rate {sample_rate_hz!r} Hz: must be > 0")
    if nfft is None:
        nfft = int(2 ** round(math.log2(max(1.0, fs / SPECTRUM_BIN_HZ))))
        nfft = min(MAX_FFT, max(MIN_FFT, nfft))
    if nfft < 16 or nfft & (nfft - 1):
        raise IqdemodError(f"FFT size {nfft}: must be a power of two >= 16")
    return SpectrumPlan(fs, int(nfft), _sig.get_window("hann", int(nfft), fftbins=True))


def _smooth(p: np.ndarray, bins: int) -> np.ndarray:
    """Moving average over `bins` FFT bins (the last axis, circular)."""
    return p if bins <= 1 else uniform_filter1d(p, bins, axis=-1, mode="wrap")


def spectrum_update(x: np.ndarray, plan: SpectrumPlan, state: SpectrumState) -> SpectrumState:
    """Add a block of samples to the spectrum pass.

    Segments sit on a fixed grid of the global sample index (every ``nfft/2``
    samples), so the result does not depend on how the input is cut.

    Parameters
    ----------
    x : numpy.ndarray
        complex64 samples following those already fed.
    plan : SpectrumPlan
    state : SpectrumState
        From :meth:`SpectrumPlan.initial_state` or the previous call; not changed.

    Returns
    -------
    SpectrumState

    Examples
    --------
    >>> plan = plan_spectrum(250_000, nfft=1024)
    >>> state = spectrum_update(np.zeros(3000, np.complex64), plan, plan.initial_state())
    >>> state.n_segments, len(state.tail)  # segments start every 512 samples
    (4, 952)
    """
    buf = np.concatenate([state.tail, np.asarray(x, np.complex64)]) if state.tail.size else np.asarray(x, np.complex64)
    n, hop = plan.nfft, plan.hop
    count = 0 if len(buf) < n else (len(buf) - n) // hop + 1
    if count == 0:
        return dataclasses.replace(state, tail=buf.copy())
    segs = sliding_window_view(buf, n)[::hop][:count]
    spec = _fft.fft(segs * plan.window.astype(np.float32), axis=1)  # complex64 in, complex64 out
    with np.errstate(over="ignore"):  # samples near float32's limit (a wrong --datatype) give inf, not a warning
        p = (spec.real**2 + spec.imag**2) * np.float32(plan.scale)
    held = [_peak_hold(p, state, j) for j in range(len(PEAK_RESOLUTIONS))]
    return SpectrumState(
        tail=buf[count * hop :].copy(),
        n_segments=state.n_segments + count,
        total=state.total + p.sum(axis=0, dtype=np.float64),
        group_sum=tuple(h[0] for h in held),
        group_count=tuple(h[1] for h in held),
        peak=tuple(h[2] for h in held),
        groups=tuple(h[3] for h in held),
    )


def _peak_hold(p: np.ndarray, state: SpectrumState, j: int) -> tuple[np.ndarray, int, np.ndarray, int]:
    """One peak-hold resolution after new periodograms `p`: (open group's sum, its count, peak, groups done)."""
    g, bins = PEAK_RESOLUTIONS[j]
    count, n = p.shape
    acc, cnt, top, done = state.group_sum[j].copy(), state.group_count[j], state.peak[j], state.groups[j]
    i = min(g - cnt, count)
    acc += p[:i].sum(axis=0, dtype=np.float64)
    cnt += i
    if cnt == g:
        m = (count - i) // g
        full = p[i : i + m * g].reshape(m, g, n).mean(axis=1, dtype=np.float64)
        means = np.concatenate([(acc / g)[None, :], full])
        rest = p[i + m * g :]
        acc, cnt = rest.sum(axis=0, dtype=np.float64), len(rest)
        top = np.maximum(top, _smooth(means, bins).max(axis=0))
        done += len(means)
    return acc, cnt, top, done


@dataclass(frozen=True, eq=False)
class Spectrum:
    """The finished spectrum pass, bins in ascending frequency.

    Attributes
    ----------
    freqs_hz : numpy.ndarray
        Bin frequencies relative to the capture centre.
    mean : numpy.ndarray
        Averaged power density, full scale² per Hz.
    peaks : tuple of numpy.ndarray
        Peak-hold spectra, one per resolution of ``PEAK_RESOLUTIONS``.
    n_segments : int
    baseline_db : numpy.ndarray
        Noise baseline under `mean`, dB.
    """

    freqs_hz: np.ndarray
    mean: np.ndarray
    peaks: tuple[np.ndarray, ...]
    n_segments: int
    baseline_db: np.ndarray

    @property
    def bin_hz(self) -> float:
        return float(self.freqs_hz[1] - self.freqs_hz[0])

    def floor_density(self, f_hz: float) -> float:
        """The noise power density at `f_hz` (relative to the capture centre), full scale² per Hz."""
        return float(10 ** (np.interp(f_hz, self.freqs_hz, self.baseline_db) / 10))


def finish_spectrum(plan: SpectrumPlan, state: SpectrumState) -> Spectrum:
    """The spectrum of everything fed, in ascending frequency, with its noise baseline.

    Raises
    ------
    CaptureError
        When not one FFT segment was fed.

    Examples
    --------
    White noise (σ = 0.05) at 48 kHz with a tone at +6 kHz: 256 bins of
    187.5 Hz from −24 kHz, the tone's bin standing out from the baseline:

    >>> rng = np.random.default_rng(7)
    >>> n = 48000
    >>> x = 0.05 / np.sqrt(2) * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
    >>> x = (x + 0.1 * np.exp(2j * np.pi * 6000 * np.arange(n) / 48000)).astype(np.complex64)
    >>> plan = plan_spectrum(48000)
    >>> spec = finish_spectrum(plan, spectrum_update(x, plan, plan.initial_state()))
    >>> len(spec.freqs_hz), float(spec.freqs_hz[0]), float(spec.freqs_hz[1] - spec.freqs_hz[0]), spec.n_segments
    (256, -24000.0, 187.5, 374)
    >>> float(spec.freqs_hz[np.argmax(spec.mean)])
    6000.0
    >>> finish_spectrum(plan, plan.initial_state())
    Traceback (most recent call last):
    ...
    iqdemod.errors.CaptureError: ...
    """
    if state.n_segments == 0:
        raise CaptureError(f"capture of {len(state.tail)} samples: too short to survey (need at least {plan.nfft})")
    peaks = []
    for j, (_, bins) in enumerate(PEAK_RESOLUTIONS):
        top = state.peak[j]
        if state.groups[j] == 0:  # a capture shorter than one group: its open group is all there is
            top = _smooth(state.group_sum[j] / max(1, state.group_count[j]), bins)
        peaks.append(np.fft.fftshift(top))
    freqs = np.fft.fftshift(np.fft.fftfreq(plan.nfft, 1.0 / plan.sample_rate_hz))
    mean = np.fft.fftshift(state.total / state.n_segments)
    return Spectrum(freqs, mean, tuple(peaks), state.n_segments, baseline_db(power_db(mean), percentile=50))


def baseline_db(level_db: np.ndarray, *, percentile: float = 30) -> np.ndarray:
    """A noise baseline under a spectrum (dB): low percentiles of chunks, median-filtered, interpolated.

    The median filter spans a third of the band, so a signal narrower than
    half that does not lift the baseline under it; a wider one is capped by
    the low quartile of the whole band (a flat noise floor).

    Examples
    --------
    A flat floor at −60 dB with a 20 dB signal over a twentieth of it:

    >>> level = np.full(1024, -60.0)
    >>> level[500:550] = -40.0
    >>> float(baseline_db(level).max())
    -60.0
    """
    n = len(level_db)
    chunks = np.array_split(level_db, BASELINE_CHUNKS)
    values = np.array([np.percentile(c, percentile) for c in chunks])
    centres = np.array([np.mean(idx) for idx in np.array_split(np.arange(n), BASELINE_CHUNKS)])
    local = median_filter(values, size=BASELINE_CHUNKS // 3 | 1, mode="wrap")
    # A signal wider than half the filter lifts the local baseline; the band's low quartile (+1 dB) caps it.
    local = np.minimum(local, np.percentile(values, 25) + 1.0)
    return np.interp(np.arange(n), centres, local)


@dataclass(frozen=True)
class Band:
    """A candidate band from the spectrum: frequencies relative to the capture centre, and how far it stands out."""

    low_hz: float
    high_hz: float
    excess_db: float


def _active(peak: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(active mask, excess dB) of one peak-hold spectrum over its baseline."""
    level = power_db(peak)
    excess = level - baseline_db(level)
    # The noise's centre and spread from the low tail (10th and 25th percentiles, as for a normal
    # distribution), which stays noise even when signals fill most of the band.
    p10, p25 = np.percentile(excess, [10, 25])
    spread = max((p25 - p10) / 0.6068, 1e-3)
    excess -= p25 + 0.6745 * spread
    return excess > max(DETECT_DB, DETECT_SPREAD * spread), excess


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """(start, end) of the runs of True in `mask`, gaps of a bin or two closed."""
    closed = binary_closing(mask, structure=np.ones(3, dtype=bool)) | mask
    edges = np.flatnonzero(np.diff(np.concatenate([[0], closed.astype(np.int8), [0]])))
    return [(int(a), int(b)) for a, b in zip(edges[::2], edges[1::2])]


def find_bands(spec: Spectrum) -> list[Band]:
    """Runs of bins that stand out from the baseline in a peak-hold spectrum, strongest first.

    The fine resolutions give the bands; the coarse one adds only bands that
    none of the fine ones sees (a wide, weak signal).

    Examples
    --------
    The tone of the :func:`finish_spectrum` example is the one band found:

    >>> rng = np.random.default_rng(7)
    >>> n = 48000
    >>> x = 0.05 / np.sqrt(2) * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
    >>> x = (x + 0.1 * np.exp(2j * np.pi * 6000 * np.arange(n) / 48000)).astype(np.complex64)
    >>> plan = plan_spectrum(48000)
    >>> spec = finish_spectrum(plan, spectrum_update(x, plan, plan.initial_state()))
    >>> bands = find_bands(spec)
    >>> len(bands), bands[0].low_hz <= 6000.0 <= bands[0].high_hz
    (1, True)
    """
    n = len(spec.freqs_hz)
    fine = np.zeros(n, dtype=bool)
    excess = np.full(n, -np.inf)
    for peak in spec.peaks[:FINE_RESOLUTIONS]:
        act, exc = _active(peak)
        fine |= act
        excess = np.maximum(excess, exc)
    runs = _runs(fine)
    for peak in spec.peaks[FINE_RESOLUTIONS:]:
        act, exc = _active(peak)
        for a, b in _runs(act):
            if not fine[a:b].any():
                runs.append((a, b))
                excess[a:b] = np.maximum(excess[a:b], exc[a:b])
    half_bin = spec.bin_hz / 2
    bands = [
        Band(float(spec.freqs_hz[a] - half_bin), float(spec.freqs_hz[b - 1] + half_bin), float(excess[a:b].max()))
        for a, b in runs
        if b - a >= 3
    ]
    return sorted(bands, key=lambda band: -band.excess_db)
