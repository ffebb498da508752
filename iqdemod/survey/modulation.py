"""Modulation of one signal, from its burst excerpts: the two tones and the symbol rate.

The instantaneous frequency (the phase-difference discriminator, cf. Kay, "A
fast and accurate single frequency estimator", IEEE Trans. ASSP-37, 1989),
cleaned of clicks by a 3-point running median (Tukey, *Exploratory Data
Analysis*, 1977), has two levels split by Otsu's threshold (Otsu, "A threshold
selection method from gray-level histograms", IEEE Trans. SMC-9, 1979). Its
crossings between the levels (with hysteresis) form a point process whose
spectrum has a line at the symbol rate — the cyclostationarity of a keyed
signal (Gardner, "Exploitation of spectral redundancy in cyclostationary
signals", IEEE Signal Processing Mag. 8(2), 1991); the line gives the rate,
and the periodogram of the crossing instants (Bartlett, "The spectral analysis
of point processes", J. R. Stat. Soc. B 25, 1963) refines it. The tones are
then the median frequencies of steady symbols (both neighbours equal), which
reach the full deviation even with a Gaussian pulse; the eye opening of the
symbols rejects what is not a keyed signal. Manchester chips put the strongest
line of the transition train at the bit rate (a change in the middle of every
bit), so a line whose changes fall on two phases half a period apart is taken
for half the symbol period. The rough Eb/N0 and level of the bursts come from
the band power over the detector's noise floor.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import signal as _sig
from scipy.ndimage import median_filter, uniform_filter1d

from ..numeric import band_power, parabolic_offset, power_db
from .activity import ActivityBurst, Watch

__all__ = ["Modulation", "estimate_modulation", "signal_span", "ebn0_and_level", "MIN_EYE"]

MAX_TRANSITIONS = 2048  # tone transitions per burst used to refine the rate
MIN_H, MAX_H = 0.3, 12.0
MIN_EYE = 0.6  # eye opening of a real signal: above 0.75 down to Eb/N0 10 dB; noise gives about 0.4
_TWO_PI = 2.0 * np.pi


def _lag_products(x: np.ndarray) -> np.ndarray:
    """x[n+1]·conj(x[n]): its angle is the phase step between samples."""
    return x[1:] * np.conj(x[:-1])


def _inst_freq(lag: np.ndarray, rate_hz: float) -> np.ndarray:
    """Phase-difference discriminator: frequency between consecutive samples, Hz (Kay 1989)."""
    return np.angle(lag) * (rate_hz / _TWO_PI)


def _band_limit(x: np.ndarray, rate_hz: float, half_band_hz: float) -> np.ndarray:
    """Zero-phase low-pass to ±`half_band_hz`: noise outside the signal's band would swamp the discriminator."""
    cutoff = min(half_band_hz, 0.45 * rate_hz)
    if cutoff >= 0.45 * rate_hz:
        return x
    n_taps = int(min(len(x) // 2, 8 * rate_hz / cutoff)) | 1
    if n_taps < 5:
        return x
    taps = _sig.firwin(n_taps, cutoff, fs=rate_hz, window="hamming")
    return _sig.fftconvolve(x, taps, mode="same")


def _otsu(values: np.ndarray, lo: float, hi: float, bins: int = 256) -> tuple[float, float]:
    """Otsu's threshold (Otsu 1979) of `values` within [lo, hi]; returns (threshold, separability η)."""
    hist, edges = np.histogram(values, bins=bins, range=(lo, hi))
    p = hist.astype(float)
    if p.sum() == 0:
        return (lo + hi) / 2, 0.0
    p /= p.sum()
    mid = (edges[:-1] + edges[1:]) / 2
    w0 = np.cumsum(p)
    m = np.cumsum(p * mid)
    mt = m[-1]
    w1 = 1.0 - w0
    with np.errstate(divide="ignore", invalid="ignore"):
        between = (mt * w0 - m) ** 2 / (w0 * w1)
    between[~np.isfinite(between)] = 0.0
    k = int(np.argmax(between))
    total = float(np.sum(p * (mid - mt) ** 2))
    return float(edges[k + 1]), float(between[k] / total) if total > 0 else 0.0


def signal_span(x: np.ndarray, core: tuple[int, int], smooth: int) -> tuple[int, int]:
    """The samples of an excerpt that carry the burst: its core, trimmed to where the envelope is up.

    Examples
    --------
    An excerpt whose envelope is up from sample 50 to 149, inside a core the
    detector drew wider:

    >>> x = np.zeros(200, complex)
    >>> x[50:150] = 1.0
    >>> signal_span(x, (20, 180), 4)
    (51, 150)
    """
    c0, c1 = core
    if c1 - c0 < 4:
        return c0, c1
    env = uniform_filter1d(np.abs(x.astype(np.complex128)) ** 2, max(1, smooth))
    level = np.median(env[c0:c1])
    up = np.flatnonzero(env[c0:c1] > 0.5 * level)
    if up.size < 4:
        return c0, c1
    return c0 + int(up[0]), c0 + int(up[-1]) + 1


def _transition_times(f: np.ndarray, centre: float, hysteresis: float) -> np.ndarray:
    """Instants where `f` crosses `centre`, counting only swings beyond ±hysteresis.

    The hysteresis is a Schmitt trigger's (Schmitt, "A thermionic trigger",
    J. Sci. Instrum. 15, 1938): noise about the centre does not make extra
    transitions. Each swing counts once, at its first crossing of `centre`, interpolated
    between samples.
    """
    state = np.zeros(len(f), dtype=np.int8)
    state[f > centre + hysteresis] = 1
    state[f < centre - hysteresis] = -1
    idx = np.flatnonzero(state)
    if idx.size < 2:
        return np.zeros(0)
    flips = np.flatnonzero(state[idx[1:]] != state[idx[:-1]])
    if flips.size == 0:
        return np.zeros(0)
    d = f - centre
    crossings = np.flatnonzero(np.signbit(d[1:]) != np.signbit(d[:-1]))
    # the first crossing after the last sample on the old side (there is one before the new side)
    c = crossings[np.minimum(np.searchsorted(crossings, idx[flips]), len(crossings) - 1)]
    y0, y1 = d[c], d[c + 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.where(y0 != y1, y0 / (y0 - y1), 0.5)
    return c + np.clip(frac, 0.0, 1.0)


def _impulses(times: np.ndarray, n: int) -> np.ndarray:
    """An impulse train with a unit impulse at each (fractional) time, shared between its two samples."""
    s = np.zeros(n + 2)
    i = np.floor(times).astype(int)
    frac = times - i
    np.add.at(s, i, 1.0 - frac)
    np.add.at(s, i + 1, frac)
    return s


def _line_rate(trains: list[np.ndarray], rate_hz: float, lo_hz: float, hi_hz: float) -> float | None:
    """The symbol rate: the strongest spectral line of the transition trains (summed over bursts) in [lo, hi] Hz.

    Tone changes can only happen on the symbol grid, so the train of change
    instants is cyclostationary with the symbol period and its spectrum has a
    line at the rate (Gardner 1991).
    A line at a sub-multiple (1/2, 1/3) that is also well above the continuum
    wins: the fundamental, not a harmonic. None when no line stands 4× above
    the continuum.
    """
    n_max = max(len(e) for e in trains)
    nfft = int(2 ** math.ceil(math.log2(max(64, 4 * n_max))))
    total = np.zeros(nfft // 2 + 1)
    for e in trains:
        total += np.abs(np.fft.rfft(e - e.mean(), nfft)) ** 2
    freqs = np.fft.rfftfreq(nfft, 1.0 / rate_hz)
    ok = (freqs >= lo_hz) & (freqs <= hi_hz)
    if ok.sum() < 3:
        return None
    continuum = median_filter(total, size=max(9, (nfft // max(1, n_max)) * 16 + 1), mode="nearest")
    ratio = total / np.maximum(continuum, 1e-300)
    score = np.where(ok, ratio, 0.0)
    k = int(np.argmax(score))
    if score[k] < 4.0:
        return None
    best = k
    for div in (2, 3):
        f = freqs[k] / div
        if f < lo_hz:
            break
        near = np.flatnonzero(np.abs(freqs - f) <= max(2 * (freqs[1] - freqs[0]), 0.01 * f))
        if near.size:
            j = int(near[np.argmax(ratio[near])])
            if ratio[j] >= max(4.0, 0.25 * ratio[k]):
                best = j
    # parabolic refinement on the log spectrum
    if 0 < best < len(total) - 1:
        a, b, c = np.log(total[best - 1 : best + 2] + 1e-300)
        return float((best + parabolic_offset(a, b, c)) * (freqs[1] - freqs[0]))
    return float(freqs[best])


def _two_phases(times: list[np.ndarray], period: float) -> bool:
    """True when the tone changes fall on two phases half a `period` apart, not one.

    The transition line of Manchester chips is strongest at half the chip
    rate (a change in the middle of every bit, at bit boundaries only
    between equal bits), so :func:`_line_rate` takes the bit rate for the
    fundamental. Folded on the bit period, the changes then sit at two
    phases, a third of them opposite the rest: the first circular moment
    |E exp(j2πt/T)| is about ⅓ while the second, |E exp(j4πt/T)|, stays near
    1. On a true symbol grid both moments are alike. Each burst has its own
    symbol phase, so the moments are taken burst by burst and their
    magnitudes pooled (weighted by the changes in each): pooled over bursts
    first, the phases would cancel at random.
    """
    bursts = [np.asarray(x, float) for x in times if len(x)]
    n = sum(len(t) for t in bursts)
    if n < 16:
        return False
    first = sum(abs(np.sum(np.exp(1j * _TWO_PI * t / period))) for t in bursts) / n
    second = sum(abs(np.sum(np.exp(2j * _TWO_PI * t / period))) for t in bursts) / n
    return bool(first < 0.6 * second)


def _refine_period(times: list[np.ndarray], period: float, *, points: int = 121) -> float:
    """Symbol period maximising the summed point-process periodogram Σ_b |Σ_k exp(j2π t_k / T)|² (Bartlett 1963).

    The search spans ±3 main-lobe widths of the longest burst's periodogram
    around `period` (a lobe is 1/N of the period wide for N symbols), which
    the spectral line's estimate is well within; at most MAX_TRANSITIONS
    instants per burst are used.
    """
    times = [t[:MAX_TRANSITIONS] - t[0] for t in times if len(t) >= 4]
    if not times:
        return period
    n_symbols = max(float(t[-1]) / period for t in times)
    span = float(np.clip(3.0 / max(n_symbols, 1.0), 1e-4, 0.03))
    grid = period * (1.0 + np.linspace(-span, span, points))
    score = np.zeros(points)
    for t in times:
        ph = np.exp(1j * _TWO_PI * np.outer(1.0 / grid, t))
        score += np.abs(ph.sum(axis=1)) ** 2
    k = int(np.argmax(score))
    if 0 < k < points - 1:
        a, b, c = score[k - 1 : k + 2]
        return float(grid[k] + parabolic_offset(a, b, c) * (grid[1] - grid[0]))
    return float(grid[k])


@dataclass(frozen=True)
class Modulation:
    """Tones relative to the excerpts' centre, and the symbol rate.

    Attributes
    ----------
    tone_low_hz, tone_high_hz : float
        The tones, Hz from the frequency the excerpts are centred on.
    baud : float
        Symbols per second.
    eye : float
        Eye opening of the symbols: 1 when each sits on a tone, about 0.4–0.5 for noise.
    """

    tone_low_hz: float
    tone_high_hz: float
    baud: float
    eye: float = 1.0  # see _eye


def _eye(values: np.ndarray, lo: float, hi: float) -> float:
    """Eye opening of the per-symbol frequencies: 1 when every symbol sits on a tone, about 0.5 for noise.

    1 − median distance of a symbol's frequency from the nearer tone, in units
    of half the shift.
    """
    if values.size == 0 or not hi > lo:
        return 0.0
    half = (hi - lo) / 2
    return float(1.0 - np.median(np.abs(np.abs(values - (lo + hi) / 2) - half)) / half)


def _symbol_values(f: np.ndarray, times: np.ndarray, period: float) -> np.ndarray:
    """Mean discriminator output over the middle half of each symbol, on the grid the transitions give, Hz.

    (The angle of the summed lag products would be less troubled by noise
    clicks, but band-limited noise is correlated from one sample to the next
    and pulls that angle towards the band centre.)
    """
    if len(times) == 0:
        return np.zeros(0)
    phase = np.angle(np.sum(np.exp(1j * _TWO_PI * times / period)))
    first = (phase / _TWO_PI * period) % period
    starts = first + period * np.arange(int((len(f) - first) // period))
    csum = np.concatenate([[0.0], np.cumsum(f)])
    grid = np.arange(len(csum), dtype=float)
    a, b = starts + period / 4, starts + 3 * period / 4
    ok = b <= len(f)
    a, b = a[ok], b[ok]
    return (np.interp(b, grid, csum) - np.interp(a, grid, csum)) / (b - a)


def estimate_modulation(excerpts: list[ActivityBurst], rate_hz: float, half_band_hz: float,
                        detector_frame: int) -> Modulation | None:
    """Tones and symbol rate of one signal from its burst excerpts (see the module notes).

    `half_band_hz` is the half-width of the band the signal was seen in. A
    first estimate filters the bursts to that band, which may cut the signal's
    spectrum short (only its strongest part stood out) or let in extra noise.
    The estimate is then made again through a filter centred on the signal,
    shift + 1.5·baud wide: between Carson's rule for rectangular keying (shift
    + 2·baud; Carson, "Notes on the theory of modulation", Proc. IRE 10, 1922)
    and the narrower spectrum of a Gaussian pulse. Measured on generated
    bursts (h 0.7–2.8, rectangular and BT 0.5, Eb/N0 16 dB) that width left
    the smallest bias in the shift.

    Examples
    --------
    Four synthetic buoy bursts (1200 baud, tones at 5400 and 6600 Hz, 16 dB)
    seen in their band; the tones are measured from the band's tuner centre:

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
    >>> from iqdemod.survey.activity import plan_watch, watch_bands
    >>> watch = plan_watch(48000, band.low_hz, band.high_hz, spec, band.excess_db)
    >>> act, = watch_bands(capture, [watch], block_samples=16384, progress=False, desc="survey: bursts")
    >>> mod = estimate_modulation(act.excerpts, watch.rate_hz, (watch.high_hz - watch.low_hz) / 2,
    ...                           watch.detector.frame_len)
    >>> centre = watch.tuner.offset_hz
    >>> round(mod.baud), round(centre + mod.tone_low_hz, -2), round(centre + mod.tone_high_hz, -2), mod.eye > 0.8
    (1200, 5400.0, 6600.0, True)
    >>> capture.close()
    >>> tmp.cleanup()
    """
    first = _modulation_once(excerpts, rate_hz, 0.0, half_band_hz, detector_frame)
    if first is None:
        return None
    centre = (first.tone_low_hz + first.tone_high_hz) / 2
    half = (first.tone_high_hz - first.tone_low_hz) / 2 + 0.75 * first.baud
    second = _modulation_once(excerpts, rate_hz, centre, min(half, 0.45 * rate_hz - abs(centre)), detector_frame)
    return second if second is not None else first


def _discriminated(excerpts: list[ActivityBurst], rate_hz: float, centre_hz: float, half_band_hz: float,
                   detector_frame: int) -> tuple[list[np.ndarray], list[np.ndarray]] | None:
    """The discriminator output over each burst, raw and click-free, the bursts filtered to ±`half_band_hz`
    around `centre_hz`; None when no burst is long enough."""
    lags = []
    for raw in excerpts:
        x = raw.samples.astype(np.complex128)
        if centre_hz:
            x = x * np.exp(-2j * np.pi * (centre_hz / rate_hz) * np.arange(len(x)))
        x = _band_limit(x, rate_hz, 1.1 * half_band_hz)
        a, b = signal_span(x, raw.local_core, detector_frame // 8)
        if b - a > 16:
            lags.append(_lag_products(x[a:b]))
    if not lags:
        return None
    # a 3-sample median removes the discriminator's clicks and keeps the keying's edges (Tukey's running median)
    raw_if = [_inst_freq(lag, rate_hz) for lag in lags]
    return raw_if, [median_filter(f, size=3, mode="nearest") for f in raw_if]


def _two_levels(inside: np.ndarray, lim: float) -> tuple[float, float] | None:
    """(low, high) tone from Otsu's split of the frequencies within ±`lim`; None when they are not two levels."""
    thr, eta = _otsu(inside, -lim, lim)
    if eta < 0.5:  # not two levels
        return None
    low = inside[(inside < thr) & (inside > -lim)]
    high = inside[(inside >= thr) & (inside < lim)]
    if low.size < 16 or high.size < 16:
        return None
    lo, hi = float(np.median(low)), float(np.median(high))
    return (lo, hi) if hi - lo > 0 else None


def _symbol_period(spans: list[np.ndarray], rate_hz: float, lo: float, hi: float,
                   half_band_hz: float) -> float | None:
    """The symbol period (samples) from the spectral line of the tone-transition impulse train, or None."""
    shift, centre = hi - lo, (lo + hi) / 2
    times = [_transition_times(f, centre, shift / 4) for f in spans]
    n_longest = max(len(f) for f in spans)
    lo_rate = max(shift / MAX_H, 16 * rate_hz / n_longest, 1.0)
    hi_rate = min(rate_hz / 3, shift / MIN_H, 2 * half_band_hz)
    line = _line_rate([_impulses(t, len(f)) for t, f in zip(times, spans)], rate_hz, lo_rate, hi_rate)
    if line is None:
        return None
    period = rate_hz / line
    if rate_hz / (period / 2) <= hi_rate and _two_phases(times, period):
        period /= 2  # Manchester chips: the line at the bit rate is not the symbol rate
    return period


def _steady_tones(values: list[np.ndarray], centre: float) -> tuple[np.ndarray, np.ndarray]:
    """Symbol frequencies below and above `centre` of the symbols whose neighbours are on the same tone.

    Manchester chips never run to three: when too few symbols are steady,
    those with one equal neighbour stand in.
    """
    lows, highs, pairs = [], [], []
    for v in values:
        if len(v) < 3:
            continue
        d = v > centre
        steady = np.zeros(len(v), dtype=bool)
        steady[1:-1] = (d[1:-1] == d[:-2]) & (d[1:-1] == d[2:])
        lows.append(v[steady & ~d])
        highs.append(v[steady & d])
        half = np.zeros(len(v), dtype=bool)
        half[1:-1] = (d[1:-1] == d[:-2]) | (d[1:-1] == d[2:])
        pairs.append((v[half & ~d], v[half & d]))
    lows_a = np.concatenate(lows) if lows else np.zeros(0)
    highs_a = np.concatenate(highs) if highs else np.zeros(0)
    if (lows_a.size < 8 or highs_a.size < 8) and pairs:
        lows_a = np.concatenate([a for a, _ in pairs])
        highs_a = np.concatenate([b for _, b in pairs])
    return lows_a, highs_a


def _refined(raw_if: list[np.ndarray], spans: list[np.ndarray], period: float, lo: float, hi: float
             ) -> tuple[float, float, float, list[np.ndarray]]:
    """One round of refinement: the period on the transition instants, then the tones on steady symbols.

    Returns (period, low tone, high tone, each burst's symbol frequencies).
    """
    shift, centre = hi - lo, (lo + hi) / 2
    smooth = max(1, int(round(period / 4)))
    times = [_transition_times(uniform_filter1d(f, smooth) if smooth > 1 else f, centre, shift / 4)
             for f in spans]
    period = _refine_period(times, period)
    every = [_symbol_values(f, t, period) for f, t in zip(raw_if, times)]
    lows, highs = _steady_tones(every, centre)
    if lows.size >= 8 and highs.size >= 8:
        lo, hi = float(np.median(lows)), float(np.median(highs))
    return period, lo, hi, every


def _modulation_once(excerpts: list[ActivityBurst], rate_hz: float, centre_hz: float, half_band_hz: float,
                     detector_frame: int) -> Modulation | None:
    """One estimate of tones and rate, the bursts filtered to ±`half_band_hz` around `centre_hz`."""
    found = _discriminated(excerpts, rate_hz, centre_hz, half_band_hz, detector_frame)
    if found is None:
        return None
    raw_if, spans = found
    levels = _two_levels(np.concatenate(spans), min(rate_hz / 2, 1.25 * half_band_hz))
    if levels is None:
        return None
    lo, hi = levels
    period = _symbol_period(spans, rate_hz, lo, hi, half_band_hz)
    if period is None:
        return None
    for _ in range(2):
        period, lo, hi, every = _refined(raw_if, spans, period, lo, hi)
    if not hi - lo > 0:
        return None
    eye = _eye(np.concatenate(every) if every else np.zeros(0), lo, hi)
    return Modulation(centre_hz + lo, centre_hz + hi, rate_hz / period, eye)


def ebn0_and_level(excerpts: list[ActivityBurst], watch: Watch, baud: float,
                   measured: float | None = None) -> tuple[float, float]:
    """Rough Eb/N0 (dB) and level while on (dBFS) from the band power of the bursts over the band's noise floor.

    With S/N the in-band power ratio over the detector's band B (its FFT bins),
    Eb/N0 = (S/N)·B / baud. The statistic is the band's mean periodogram bin
    over the frame length N: white noise of variance σ² gives σ² (the floor),
    a signal of power S wholly inside the n_bins of the band S·N/n_bins
    (Parseval), so S = (S/N)·floor·n_bins/N.
    The floor is the lower of the averaged spectrum's
    (:attr:`~iqdemod.survey.activity.ActivityPlan.noise_floor`) and the
    detector's own, `measured`: a wide signal lifts the first, a busy channel
    (edges of bursts among the quiet frames) the second.

    Examples
    --------
    Four synthetic buoy bursts made at Eb/N0 16 dB with noise σ = 0.05: by
    REFERENCE §8 their power while on is A² = 10^1.6·σ²·Rb/fs, −26.0 dBFS:

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
    >>> from iqdemod.survey.activity import plan_watch, watch_bands
    >>> watch = plan_watch(48000, band.low_hz, band.high_hz, spec, band.excess_db)
    >>> act, = watch_bands(capture, [watch], block_samples=16384, progress=False, desc="survey: bursts")
    >>> ebn0_db, level_dbfs = ebn0_and_level(act.excerpts, watch, 1200.0, act.floor)
    >>> round(ebn0_db), round(level_dbfs)
    (16, -26)
    >>> capture.close()
    >>> tmp.cleanup()
    """
    det = watch.detector
    fl = det.frame_len
    floor = det.noise_floor if measured is None else min(det.noise_floor, measured)
    ratios = []
    for raw in excerpts:
        c0, c1 = raw.local_core
        x = raw.samples[c0 + fl : c1 - fl]  # the core's first and last frames may be partly empty
        n = len(x) // fl
        if n < 1:
            continue
        power = band_power(x[: n * fl].reshape(n, fl), det.band_bins)
        ratios.append(np.median(power) / floor)
    if not ratios:
        return math.nan, math.nan
    snr = max(float(np.median(ratios)) - 1.0, 1e-6)
    n_bins = int(det.band_bins.sum())
    band_hz = n_bins * watch.rate_hz / fl
    return power_db(snr * band_hz / baud), power_db(snr * floor * n_bins / fl)
