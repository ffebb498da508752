"""The survey's picture: the capture's spectrum with the signals marked, and a waterfall of one burst."""

from __future__ import annotations

import math
import os

import numpy as np
from scipy import signal as _sig

from ..numeric import power_db
from .results import SignalFound, SurveyResult

__all__ = ["plot_survey", "require_plotting"]


def require_plotting() -> None:
    """Check that matplotlib is there (see :func:`iqdemod.plots.require_matplotlib`).

    Examples
    --------
    Nothing happens when matplotlib (the ``plot`` extra) is installed:

    >>> require_plotting()
    """
    from ..plots import require_matplotlib

    require_matplotlib()


def plot_survey(result: SurveyResult, path: str | os.PathLike) -> None:
    """Write a PNG: the averaged spectrum with the signals marked, and a waterfall of one burst.

    Colours come from the project's palette (:data:`iqdemod.plots.PALETTE`):
    signal n is drawn in ``series_colour(n)``, the averaged spectrum in the
    first series colour; the waterfall uses the perceptual "cividis" map. The
    file is written atomically (a temporary name in the same folder, then
    renamed). Needs matplotlib (the ``plot`` extra).

    Raises
    ------
    IqdemodError
        When matplotlib is not installed.

    Examples
    --------
    The picture of a survey of four synthetic buoy bursts; the drawing is not
    checked here, the file is, by its PNG file signature (W3C PNG
    specification §5.2, cited from memory):

    >>> import os, tempfile
    >>> from iqdemod.capture import open_capture
    >>> from iqdemod.profile import load_link
    >>> from iqdemod.survey import survey
    >>> from iqdemod.synth import SynthConfig, synthesize
    >>> link = load_link(None, rate=48000, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> tmp = tempfile.TemporaryDirectory()
    >>> _ = synthesize(os.path.join(tmp.name, "buoys"), SynthConfig(link=link, ebn0_db=(16.0,), n_frames=4, seed=5))
    >>> with open_capture(os.path.join(tmp.name, "buoys.sigmf-meta")) as capture:
    ...     result = survey(capture, block_samples=16384, framing=False)
    >>> path = os.path.join(tmp.name, "survey.png")
    >>> plot_survey(result, path)
    >>> with open(path, "rb") as fh:
    ...     fh.read(8).hex()
    '89504e470d0a1a0a'
    >>> tmp.cleanup()
    """
    from ..plots import new_figure, save_figure

    fig = new_figure(figsize=(10, 7.5), layout="constrained")
    top, bottom = fig.subplots(2, 1, height_ratios=(1, 1.2))
    _spectrum_panel(top, result)
    example = next((s for s in result.signals if s.example is not None), None)
    if example is None:
        bottom.text(0.5, 0.5, "no burst found", ha="center", va="center", transform=bottom.transAxes)
        bottom.set_axis_off()
    else:
        _waterfall_panel(fig, bottom, result, example)
    save_figure(fig, path)


def _spectrum_panel(ax, result: SurveyResult) -> None:
    """The capture's averaged and peak-hold spectra, each signal's band and tones marked in its colour."""
    from ..plots import PALETTE, series_colour

    khz = result.spectrum_hz / 1e3
    if len(khz):
        ax.plot(khz, result.peak_db, color=PALETTE["slate"], alpha=0.45, lw=0.7, label="peak hold (short averages)")
        ax.plot(khz, result.spectrum_db, color=series_colour(0), lw=0.8, label="averaged (Welch)")
    for i, s in enumerate(result.signals, 1):
        colour = series_colour(i)
        ax.axvspan(s.band_low_hz / 1e3, s.band_high_hz / 1e3, color=colour, alpha=0.15)
        for tone in (s.tone_low_hz, s.tone_high_hz):
            ax.axvline(tone / 1e3, color=colour, lw=0.8, ls="--")
        ax.annotate(f"#{i} {s.baud:.0f} Bd, h = {s.h:.2f}", (s.offset_hz / 1e3, 1.0),
                    xycoords=("data", "axes fraction"), ha="center", va="bottom", fontsize=8, color=colour)
    ax.set_xlabel("frequency relative to the capture centre (kHz)")
    ax.set_ylabel("PSD (dBFS/Hz)")
    ax.set_title(f"{result.capture}: {result.sample_rate_hz / 1e3:g} kS/s, {result.duration_s:.3g} s, "
                 f"{len(result.signals)} signal(s)", fontsize=10, pad=14)
    lo, hi = ax.get_ylim()
    ax.set_ylim(lo, hi + 0.35 * (hi - lo))  # headroom over the tallest peak: the legend covers no spectrum
    ax.legend(loc="upper left", fontsize=8, framealpha=0.9)
    ax.grid(alpha=0.3)


def _waterfall_panel(fig, ax, result: SurveyResult, example: SignalFound) -> None:
    """A spectrogram of the first burst kept of `example`, its tones marked."""
    from ..plots import PALETTE

    ex = example.example
    x = ex.samples.astype(np.complex128)
    # about four symbols per segment: both tones resolved, and the keying still visible in time
    nper = int(min(2048, max(16, 2 ** round(math.log2(max(16.0, 4 * ex.rate_hz / example.baud))))))
    nper = min(nper, max(16, len(x) // 4))
    f, t, sxx = _sig.spectrogram(x, fs=ex.rate_hz, window="hann", nperseg=nper, noverlap=nper * 7 // 8,
                                 nfft=4 * nper, return_onesided=False, mode="psd")
    f = np.fft.fftshift(f)
    img = power_db(np.fft.fftshift(sxx, axes=0), floor=1e-30)
    vmax = float(np.max(img))
    # the colour scale starts a little above the noise's median (a periodogram of noise spreads tens of
    # dB below it): the noise reads dark and the burst stands out (common practice for a waterfall)
    vmin = min(float(np.median(img)) + 3.0, vmax - 10.0)
    mesh = ax.pcolormesh((ex.centre_hz + f) / 1e3, (ex.t_s + t) * 1e3, img.T, shading="auto",
                         vmin=vmin, vmax=vmax, cmap="cividis")
    for tone in (example.tone_low_hz, example.tone_high_hz):
        ax.axvline(tone / 1e3, color=PALETTE["buoy orange"], lw=0.7, ls="--")
    span = example.band_high_hz - example.band_low_hz
    fs2 = result.sample_rate_hz / 2
    ax.set_xlim(max(ex.centre_hz - ex.rate_hz / 2, example.band_low_hz - span / 2, -fs2) / 1e3,
                min(ex.centre_hz + ex.rate_hz / 2, example.band_high_hz + span / 2, fs2) / 1e3)
    fig.colorbar(mesh, ax=ax, label="PSD (dBFS/Hz)")
    ax.set_xlabel("frequency relative to the capture centre (kHz)")
    ax.set_ylabel("time (ms)")
    sync = f", sync word {example.sync_text}" if example.sync_word else ""
    ax.set_title(f"one burst of signal #{result.signals.index(example) + 1}: offset "
                 f"{example.offset_hz / 1e3:.3f} kHz, {example.baud:.0f} Bd, "
                 f"shift {example.shift_hz:.0f} Hz{sync}", fontsize=10)
