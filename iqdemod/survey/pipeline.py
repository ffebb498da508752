"""The survey's driver: the passes over the capture, in data order, and what each signal turns into."""

from __future__ import annotations

import math
from pathlib import Path

from ..capture import Capture, DEFAULT_BLOCK_SAMPLES
from ..errors import IqdemodError
from ..link import Link, SignalSpec
from ..numeric import power_db
from .activity import Activity, plan_watch, group_bands, progress_bar, watch_bands
from .layout import Layout, demodulated_bits, frame_layout
from .modulation import MIN_EYE, ebn0_and_level, estimate_modulation
from .pulse import PulseShape, pulse_shape
from .results import BurstLengths, Excerpt, SignalFound, SurveyResult, pulse_options
from .spectrum import Band, Spectrum, find_bands, finish_spectrum, plan_spectrum, spectrum_update

__all__ = ["survey"]


def survey(
    capture: Capture,
    *,
    max_signals: int = 4,
    block_samples: int = DEFAULT_BLOCK_SAMPLES,
    nfft: int | None = None,
    framing: bool = True,
    progress: bool = False,
) -> SurveyResult:
    """Find and characterise the bursty binary-FSK signals of a capture.

    Parameters
    ----------
    capture : Capture
        From :func:`iqdemod.open_capture`; read several times, in blocks.
    max_signals : int
        Most signals reported (the strongest).
    block_samples : int
        Samples read per block (the results do not depend on it).
    nfft : int, optional
        FFT size of the spectrum; default the power of two nearest fs / 150 Hz.
    framing : bool
        Also demodulate a few bursts of each signal and look for the sync
        word, the length and the CRC.
    progress : bool
        Show tqdm bars (stderr) over each pass.

    Returns
    -------
    SurveyResult

    Raises
    ------
    CaptureError
        When the capture is shorter than one FFT.
    IqdemodError
        For a bad `max_signals`.

    Examples
    --------
    Four synthetic buoy bursts (1200 baud, 1200 Hz shift, 6 kHz above the
    centre, 16 dB, sync word 0x2DD4, 12 bytes, CRC-16/IBM-3740): one signal,
    its tones, rate and frame layout found with nothing said about them. The
    last preamble bits, the same in every burst, are read as part of the sync
    word:

    >>> import os, tempfile
    >>> from iqdemod.capture import open_capture
    >>> from iqdemod.profile import load_link
    >>> from iqdemod.synth import SynthConfig, synthesize
    >>> link = load_link(None, rate=48000, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> tmp = tempfile.TemporaryDirectory()
    >>> _ = synthesize(os.path.join(tmp.name, "buoys"), SynthConfig(link=link, ebn0_db=(16.0,), n_frames=4, seed=5))
    >>> with open_capture(os.path.join(tmp.name, "buoys.sigmf-meta")) as capture:
    ...     result = survey(capture, block_samples=16384)
    >>> s, = result.signals
    >>> round(s.tone_low_hz, -2), round(s.tone_high_hz, -2), round(s.baud), s.bursts, round(s.ebn0_db)
    (5400.0, 6600.0, 1200, 4, 16)
    >>> s.sync_word, s.length, s.crc, s.frames_crc_ok > 0, s.pulse
    ('0xaaaa2dd4', 12, 'CRC-16/IBM-3740', True, 'rect')
    >>> tmp.cleanup()
    """
    if isinstance(max_signals, bool) or not isinstance(max_signals, int) or max_signals < 1:
        raise IqdemodError(f"max_signals {max_signals!r}: must be a whole number >= 1")
    info = capture.info
    fs = info.sample_rate_hz
    plan = plan_spectrum(fs, nfft=nfft)
    state = plan.initial_state()
    bar = progress_bar(capture, progress, "survey: spectrum")
    try:
        for block in capture.blocks(block_samples):
            state = spectrum_update(block, plan, state)
            if bar is not None:
                bar.update(len(block))
    finally:
        if bar is not None:
            bar.close()
    spec = finish_spectrum(plan, state)
    bands = find_bands(spec)[: max(12, 3 * max_signals)]  # pieces of one spectrum count separately
    signals = _signals(capture, spec, bands, block_samples=block_samples, framing=framing, progress=progress)
    signals = _distinct(signals)
    signals.sort(key=lambda s: -(s.level_dbfs if math.isfinite(s.level_dbfs) else -math.inf))
    return SurveyResult(
        capture=Path(info.path).name,
        sample_rate_hz=fs,
        duration_s=info.duration_s,
        centre_hz=info.centre_hz,
        signals=tuple(signals[:max_signals]),
        fft_size=plan.nfft,
        spectrum_hz=spec.freqs_hz,
        spectrum_db=power_db(spec.mean),
        peak_db=power_db(spec.peaks[0]),
    )


def _signals(capture: Capture, spec: Spectrum, bands: list[Band], *, block_samples: int, framing: bool,
             progress: bool) -> list[SignalFound]:
    """The activity pass over the candidate bands, bands on together joined, and each group characterised."""
    if not bands:
        return []
    fs = capture.info.sample_rate_hz
    watches = [plan_watch(fs, b.low_hz, b.high_hz, spec, b.excess_db) for b in bands]
    acts = watch_bands(capture, watches, block_samples=block_samples, progress=progress, desc="survey: bursts")
    groups = group_bands(acts)
    strength = {id(g): max(bands[i].excess_db for i in g) for g in groups}
    groups.sort(key=lambda g: -strength[id(g)])
    merged = [g for g in groups if len(g) > 1]
    whole: dict[int, Activity] = {}
    if merged:
        wide = [plan_watch(fs, min(acts[i].watch.low_hz for i in g), max(acts[i].watch.high_hz for i in g), spec)
                for g in merged]
        again = watch_bands(capture, wide, block_samples=block_samples, progress=progress,
                            desc="survey: bursts (joined bands)")
        whole = {id(g): a for g, a in zip(merged, again)}
    signals: list[SignalFound] = []
    for g in groups:
        act = whole.get(id(g), acts[g[0]])
        w = act.watch
        # a weaker band inside a signal already found is a piece of its spectrum
        if any(s.band_low_hz - s.baud <= (w.low_hz + w.high_hz) / 2 <= s.band_high_hz + s.baud for s in signals):
            continue
        found = _characterise(capture, act, block_samples=block_samples, framing=framing, progress=progress)
        if found is not None:
            signals.append(found)
    return signals


def _distinct(signals: list[SignalFound]) -> list[SignalFound]:
    """Drop a signal found twice (two bands of one transmitter not joined): keep the one seen with more bursts."""
    out: list[SignalFound] = []
    for s in sorted(signals, key=lambda s: (-s.bursts, -s.level_dbfs)):
        if any(abs(s.offset_hz - o.offset_hz) < 0.5 * o.shift_hz and abs(s.baud / o.baud - 1) < 0.05 for o in out):
            continue
        out.append(s)
    return out


def _framing(capture: Capture, sig: SignalSpec, *, block_samples: int, progress: bool) -> tuple[Layout, int]:
    """The frame layout from a few bursts the receiver demodulates, and how many it demodulated.

    Nothing when the signal as measured does not fit the capture (the receiver would refuse it).
    """
    try:
        Link(signal=sig).check_rate(capture.info.sample_rate_hz)
    except IqdemodError:
        return Layout(), 0
    bits = demodulated_bits(capture, sig, block_samples=block_samples, progress=progress)
    return frame_layout(bits), len(bits)


def _characterise(capture: Capture, act: Activity, *, block_samples: int, framing: bool,
                  progress: bool) -> SignalFound | None:
    """One signal from what its band's watch saw; None when it is not two tones keyed at one rate."""
    w = act.watch
    if not act.excerpts:
        return None
    fs = capture.info.sample_rate_hz
    mod = estimate_modulation(act.excerpts, w.rate_hz, (w.high_hz - w.low_hz) / 2, w.detector.frame_len)
    if mod is None or mod.eye < MIN_EYE:  # not two tones keyed at that rate: a piece of something else
        return None
    centre = w.tuner.offset_hz
    lo, hi = centre + mod.tone_low_hz, centre + mod.tone_high_hz
    ebn0, level = ebn0_and_level(act.excerpts, w, mod.baud, act.floor)
    shape = pulse_shape(act.excerpts, w, mod)
    first = act.excerpts[0]
    layout, checked = Layout(), 0
    if framing:
        try:
            sig = SignalSpec(baud=mod.baud, shift_hz=hi - lo, offset_hz=(lo + hi) / 2,
                             **(pulse_options(shape.pulse, shape.bt) if shape else {}))
        except IqdemodError:
            sig = None
        if sig is not None:
            layout, checked = _framing(capture, sig, block_samples=block_samples, progress=progress)
    return SignalFound(
        offset_hz=float((lo + hi) / 2), tone_low_hz=float(lo), tone_high_hz=float(hi), baud=float(mod.baud),
        bursts=len(act.intervals), burst_lengths_s=BurstLengths.of([(b - a) / fs for a, b in act.intervals]),
        ebn0_db=float(ebn0), level_dbfs=float(level), band_low_hz=float(w.low_hz), band_high_hz=float(w.high_hz),
        example=Excerpt(first.samples.copy(), w.rate_hz, centre, max(0.0, w.input_sample(first.start)) / fs),
        bursts_checked=checked, **_layout_fields(layout), **_shape_fields(shape),
    )


def _layout_fields(layout: Layout) -> dict:
    """SignalFound's fields from a frame layout: the sync word as hex of its whole nibbles."""
    word = None if layout.sync_word is None else f"{layout.sync_word:#0{2 + (layout.sync_bits + 3) // 4}x}"
    return dict(sync_word=word, sync_bits=layout.sync_bits, preamble_bits=layout.preamble_bits, length=layout.length,
                crc=layout.crc, frames_crc_ok=layout.frames_crc_ok, coding=layout.coding,
                whitening=layout.whitening, length_counts=layout.length_counts, bit_order=layout.bit_order,
                crc_order=layout.crc_order)


def _shape_fields(shape: PulseShape | None) -> dict:
    """SignalFound's pulse fields (all None when the pulse was not measured)."""
    if shape is None:
        return dict(pulse=None, bt=None, beyond_carson_db=None)
    return dict(pulse=shape.pulse, bt=shape.bt, beyond_carson_db=shape.beyond_carson_db)
