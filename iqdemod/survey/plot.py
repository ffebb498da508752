"""The survey's picture: the capture's spectrum with the signals marked, and a waterfall of one burst."""

from __future__ import annotations

import math
import os

import numpy as np
from scipy import signal as _sig

from .results import SurveyResult

__all__ = ["plot_survey", "require_plotting"]


def require_plotting() -> None:
    """Check that matplotlib is there (see :func:`iqdemod.plots.require_matplotlib`)."""
    from ..plots import require_matplotlib

    require_matplotlib()


def plot_survey(result: SurveyResult, path: str | os.PathLike) -> None:
    """Write a PNG: the averaged spectrum with the signals marked, and a waterfall of one burst.

    The file is written atomically (a temporary name in the same folder, then
    renamed). Needs matplotlib (the ``plot`` extra).

    Raises
    ------
    IqdemodError
        When matplotlib is not installed.
    """
    from ..plots import new_figure, save_figure

    fig = new_figure(figsize=(10, 7.5), layout="constrained")
    top, bottom = fig.subplots(2, 1, height_ratios=(1, 1.2))
    khz = result.spectrum_hz / 1e3
    if len(khz):
        top.plot(khz, result.peak_db, color="0.75", lw=0.7, label="peak hold (short averages)")
        top.plot(khz, result.spectrum_db, color="C0", lw=0.8, label="averaged (Welch)")
    for i, s in enumerate(result.signals):
        top.axvspan(s.band_low_hz / 1e3, s.band_high_hz / 1e3, color=f"C{i + 1}", alpha=0.15)
        for tone in (s.tone_low_hz, s.tone_high_hz):
            top.axvline(tone / 1e3, color=f"C{i + 1}", lw=0.8, ls="--")
        top.annotate(f"#{i + 1} {s.baud:.0f} Bd, h={s.h:.2f}", (s.offset_hz / 1e3, 1.0),
                     xycoords=("data", "axes fraction"), ha="center", va="bottom", fontsize=8, color=f"C{i + 1}")
    top.set_xlabel("frequency relative to the capture centre (kHz)")
    top.set_ylabel("PSD (dBFS/Hz)")
    top.set_title(f"{result.capture}: {result.sample_rate_hz / 1e3:g} kS/s, {result.duration_s:.3g} s, "
                  f"{len(result.signals)} signal(s)", fontsize=10, pad=14)
    top.legend(loc="upper left", fontsize=8, framealpha=0.9)
    top.grid(alpha=0.3)
    example = next((s for s in result.signals if s.example is not None), None)
    if example is None:
        bottom.text(0.5, 0.5, "no burst found", ha="center", va="center", transform=bottom.transAxes)
        bottom.set_axis_off()
    else:
        ex = example.example
        x = ex.samples.astype(np.complex128)
        # about four symbols per segment: both tones resolved, and the keying still visible in time
        nper = int(min(2048, max(16, 2 ** round(math.log2(max(16.0, 4 * ex.rate_hz / example.baud))))))
        nper = min(nper, max(16, len(x) // 4))
        f, t, sxx = _sig.spectrogram(x, fs=ex.rate_hz, window="hann", nperseg=nper, noverlap=nper * 7 // 8,
                                     nfft=4 * nper, return_onesided=False, mode="psd")
        f = np.fft.fftshift(f)
        sxx = np.fft.fftshift(sxx, axes=0)
        img = 10 * np.log10(np.maximum(sxx, 1e-30))
        vmax = float(np.max(img))
        mesh = bottom.pcolormesh((ex.centre_hz + f) / 1e3, (ex.t_s + t) * 1e3, img.T, shading="auto",
                                 vmin=vmax - 50, vmax=vmax, cmap="viridis")
        for tone in (example.tone_low_hz, example.tone_high_hz):
            bottom.axvline(tone / 1e3, color="w", lw=0.6, ls="--")
        span = example.band_high_hz - example.band_low_hz
        fs2 = result.sample_rate_hz / 2
        bottom.set_xlim(max(ex.centre_hz - ex.rate_hz / 2, example.band_low_hz - span / 2, -fs2) / 1e3,
                        min(ex.centre_hz + ex.rate_hz / 2, example.band_high_hz + span / 2, fs2) / 1e3)
        fig.colorbar(mesh, ax=bottom, label="dB/Hz")
        bottom.set_xlabel("frequency relative to the capture centre (kHz)")
        bottom.set_ylabel("time (ms)")
        sync = f", sync {example.sync_word}" if example.sync_word else ""
        bottom.set_title(f"one burst of signal #{result.signals.index(example) + 1}: offset "
                         f"{example.offset_hz / 1e3:.3f} kHz, {example.baud:.0f} Bd, "
                         f"shift {example.shift_hz:.0f} Hz{sync}", fontsize=10)
    save_figure(fig, path)
