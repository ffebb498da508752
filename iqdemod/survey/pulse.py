"""The frequency pulse of one signal, from how fast its bursts' spectrum falls beyond Carson's bandwidth.

The bursts' own averaged spectrum (Welch 1967) is compared with the spectra of
CPFSK with a rectangular pulse and with Gaussian pulses of BT 0.3–1 at the
measured h and baud, computed from random-bit waveforms of the receiver's own
phase model (:func:`pulse_shape`).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view
from scipy import fft as _fft
from scipy import signal as _sig

from ..numeric import power_db
from ..sequence import phase_trajectory, plan_sequence
from ..channel import ChannelPlan
from .activity import ActivityBurst, Watch
from .modulation import Modulation, signal_span

__all__ = ["PulseShape", "pulse_shape", "cpfsk_spectrum", "PULSE_BTS"]

PULSE_BTS = (0.3, 0.35, 0.5, 0.7, 1.0)  # Gaussian BT values the survey tells apart
_SPECTRUM_SEGMENT_SYMBOLS = 8  # Welch segment of the burst spectrum and of the theoretical one, symbols
# The simulated waveforms: samples per symbol and random bits (511 half-overlapping segments: about ±4 % a
# bin). Sampling in step with the symbols adds the cyclic spectra of the aliases to the tails (the
# signal is cyclostationary): at 16 samples per symbol that is +1 dB three baud out, at 32 under 1 dB to 4 baud
# (against the closed-form MSK spectrum; tests/test_survey_pulse.py).
_THEORY_SPS = 32
_THEORY_SYMBOLS = 2048
_MIN_SEGMENTS = 24  # burst segments needed for a spectrum worth fitting
# A Gaussian pulse is called only when it fits clearly better than the rectangle: its log residual at most
# this share of the rectangle's. Where the fall beyond Carson's bandwidth is under the noise every candidate
# fits alike (residuals within a few per cent: 1 200 Bd at h 0.7, 16 dB), and the plainer pulse is kept;
# a Gaussian pulse that shows fits 4–50 times better (BT 0.3–1, h 0.5–3, 16 dB).
_GAUSSIAN_MARGIN = 0.8
# Only bins the front end passes at this power gain or more are fitted: its channel filter falls by 70 dB
# within half a baud, and there the Hann window's leakage from the pass band, not the filter's response,
# sets what the periodogram shows (beyond it, the rounding noise of complex64 samples).
KEPT_GAIN = 0.5


@dataclass(frozen=True)
class PulseShape:
    """What the burst spectrum says about the frequency pulse (see :func:`pulse_shape`).

    Attributes
    ----------
    pulse : {"rect", "gaussian"}
    bt : float or None
        With a Gaussian pulse, the nearest of ``PULSE_BTS``.
    beyond_carson_db : float or None
        The signal's power beyond Carson's bandwidth, relative to all of it, dB.
    """

    pulse: str
    bt: float | None
    beyond_carson_db: float | None


def _welch(x: np.ndarray, nper: int) -> tuple[np.ndarray, int]:
    """Sum of the Hann-windowed periodograms of half-overlapping segments (Welch 1967), FFT order, and their count.

    Scaled as a density per unit of the sample rate: divide by the count and the rate.
    """
    hop = nper - nper // 2
    n_seg = 1 + (len(x) - nper) // hop
    if n_seg < 1:
        return np.zeros(nper), 0
    win = _sig.get_window("hann", nper)
    seg = sliding_window_view(x, nper)[::hop][:n_seg] * win
    spec = _fft.fft(seg, axis=1)
    return np.sum(spec.real**2 + spec.imag**2, axis=0) / np.sum(win**2), n_seg


@lru_cache(maxsize=64)
def cpfsk_spectrum(h: float, pulse: str, bt: float) -> tuple[np.ndarray, np.ndarray]:
    """Power spectrum of binary CPFSK with random bits: (frequency in baud, PSD per baud), unit power.

    Averaged periodograms (Welch 1967) of a simulated waveform made with the
    receiver's own phase model (:func:`iqdemod.sequence.phase_trajectory`),
    with the same Hann segments, in symbols, as the burst spectrum it is
    compared with, so that both are smoothed alike (the spectral lines of
    whole h included). The bits come from a fixed seed: the result is a
    function of (h, pulse, bt) only, and cached.

    Examples
    --------
    >>> f, p = cpfsk_spectrum(1.0, "rect", 0.5)
    >>> round(float(np.sum(p) * (f[1] - f[0])), 6)  # unit power
    1.0
    >>> bool(np.all(np.diff(f) > 0)), float(f[np.argmax(p)]) in (-0.5, 0.5)  # peaks at the tones, ±h/2 baud
    (True, True)
    """
    plan = plan_sequence(h=h, pulse=pulse, bt=bt, n_symbols=1)
    bits = np.random.default_rng(0x5EED).integers(0, 2, _THEORY_SYMBOLS)
    t = np.arange(_THEORY_SYMBOLS * _THEORY_SPS) / _THEORY_SPS
    x = np.exp(1j * phase_trajectory(bits, t, plan))
    nper = _SPECTRUM_SEGMENT_SYMBOLS * _THEORY_SPS
    total, _ = _welch(x, nper)
    f = np.fft.fftshift(np.fft.fftfreq(nper, 1.0 / _THEORY_SPS))
    p = np.fft.fftshift(total)
    p = p / (np.sum(p) * (f[1] - f[0]))
    f.setflags(write=False)
    p.setflags(write=False)
    return f, p


def _burst_spectrum(excerpts: list[ActivityBurst], rate_hz: float, baud: float,
                    detector_frame: int) -> tuple[np.ndarray, np.ndarray] | None:
    """Averaged periodogram of the bursts' own samples (frequency relative to the channel's centre, PSD), or None."""
    nper = int(round(_SPECTRUM_SEGMENT_SYMBOLS * rate_hz / baud))
    if nper < 16:
        return None
    total, count = np.zeros(nper), 0
    for raw in excerpts:
        x = raw.samples.astype(np.complex128)
        a, b = signal_span(x, raw.local_core, detector_frame // 8)
        if b - a >= 2 * nper:
            p, n_seg = _welch(x[a:b], nper)
            total += p
            count += n_seg
    if count < _MIN_SEGMENTS:
        return None
    freqs = np.fft.fftshift(np.fft.fftfreq(nper, 1.0 / rate_hz))
    return freqs, np.fft.fftshift(total / (count * rate_hz))


def _channel_gain(channel: ChannelPlan, freqs_hz: np.ndarray) -> np.ndarray:
    """|H(f)|² of the front end's channel filter at each output frequency (relative to the channel centre).

    The front end decimates by keeping the FFT bins of its channel (see
    :mod:`iqdemod.channel`), so nothing from outside them folds in: each output
    frequency holds the input at that frequency times the filter's response.
    """
    _, resp = _sig.freqz(np.asarray(channel.taps, np.float64), worN=np.asarray(freqs_hz, np.float64),
                         fs=channel.sample_rate_hz)
    return np.abs(resp) ** 2


def _fit_shape(p_meas: np.ndarray, shape: np.ndarray, noise: np.ndarray) -> tuple[float, float, float]:
    """Fit p ≈ a·shape + n·noise (a, n >= 0) with relative errors; return (a, n, mean squared log residual)."""
    w = 1.0 / p_meas
    cols = np.stack([shape * w, noise * w], axis=1)
    coef, *_ = np.linalg.lstsq(cols, np.ones_like(p_meas), rcond=None)
    if coef[0] <= 0 or coef[1] <= 0:  # one term alone
        only = [float(np.sum(c) / np.sum(c * c)) for c in (cols[:, 0], cols[:, 1])]
        err = [np.sum((1 - o * c) ** 2) for o, c in zip(only, (cols[:, 0], cols[:, 1]))]
        coef = np.array([only[0], 0.0]) if err[0] <= err[1] else np.array([0.0, only[1]])
    model = np.maximum(coef[0] * shape + coef[1] * noise, 1e-300)
    return float(coef[0]), float(coef[1]), float(np.mean(np.log(p_meas / model) ** 2))


def pulse_shape(excerpts: list[ActivityBurst], watch: Watch, mod: Modulation) -> PulseShape | None:
    """Rectangular or Gaussian pulse (and its BT), from how fast the bursts' spectrum falls.

    Beyond Carson's bandwidth (shift + 2·baud; Carson, Proc. IRE 10, 1922)
    the spectrum of CPFSK with a rectangular pulse falls slowly (as f⁻⁴, the
    phase has corners), a Gaussian pulse's far faster and the sooner the
    smaller its BT. The averaged periodogram of the burst excerpts is fitted,
    bin by bin with relative errors, by ``a·S(f) + n·N(f)`` for each
    candidate spectrum S (:func:`cpfsk_spectrum` at the measured h and baud:
    rect, and Gaussian with each of ``PULSE_BTS``), N the white noise floor;
    both pass through the front end's channel filter, and the bins it passes
    with at least ``KEPT_GAIN`` are fitted. The Gaussian candidate with the
    smallest mean squared log residual is called when that residual is below
    ``_GAUSSIAN_MARGIN`` times the rectangle's, otherwise the rectangle (the
    plainer pulse, on a near tie). Also measured: the share of the signal's
    power beyond Carson's bandwidth within those bins, noise removed, dB.
    None when the bursts are too short or too few for a spectrum.

    Examples
    --------
    Four synthetic buoy bursts with a rectangular pulse: called rect, and
    little of their power lies beyond Carson's bandwidth:

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
    >>> from iqdemod.survey.modulation import estimate_modulation
    >>> mod = estimate_modulation(act.excerpts, watch.rate_hz, (watch.high_hz - watch.low_hz) / 2,
    ...                           watch.detector.frame_len)
    >>> shape = pulse_shape(act.excerpts, watch, mod)
    >>> shape.pulse, shape.bt, shape.beyond_carson_db < -15
    ('rect', None, True)
    >>> capture.close()
    >>> tmp.cleanup()
    """
    rate, baud = watch.rate_hz, mod.baud
    h = (mod.tone_high_hz - mod.tone_low_hz) / baud
    if not (0.1 < h < 20 and rate > 3 * baud):
        return None
    got = _burst_spectrum(excerpts, rate, baud, watch.detector.frame_len)
    if got is None:
        return None
    freqs, p_meas = got
    centre = (mod.tone_low_hz + mod.tone_high_hz) / 2
    gain = _channel_gain(watch.tuner, freqs)
    use = (np.abs(freqs) <= 0.48 * rate) & (p_meas > 0) & (gain >= KEPT_GAIN)
    freqs, p_meas, gain = freqs[use], p_meas[use], gain[use]
    h_key = round(h, 3)
    candidates = [("rect", None)] + [("gaussian", bt) for bt in PULSE_BTS]
    fits = []
    for pulse, bt in candidates:
        f_theory, s_theory = cpfsk_spectrum(h_key, pulse, 0.5 if bt is None else bt)
        shape = gain * np.interp((freqs - centre) / baud, f_theory, s_theory, left=0.0, right=0.0)
        fits.append(_fit_shape(p_meas, shape, gain))
    best = 1 + int(np.argmin([f[2] for f in fits[1:]]))
    if not fits[best][2] <= _GAUSSIAN_MARGIN * fits[0][2]:
        best = 0
    pulse, bt = candidates[best]
    # the share beyond Carson's bandwidth, in the band the filter passes (noise removed, its response undone)
    sig = (p_meas - fits[best][1] * gain) / gain
    off = np.abs(freqs - centre)
    total, beyond = float(np.sum(sig)), float(np.sum(sig[off > (h / 2 + 1) * baud]))
    share = power_db(beyond / total) if total > 0 and beyond > 0 else None
    return PulseShape(pulse, bt, share)
