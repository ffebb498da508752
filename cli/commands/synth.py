"""The ``synth`` command: a synthetic capture of FSK bursts for demos and tests."""

from __future__ import annotations

from pathlib import Path

import click

from iqdemod import synth as SY
from iqdemod.errors import quote
from iqdemod.link import MAX_FREQUENCY_HZ

from .._common import finite, link_from_options, link_options, say
from ..render import wrote

__all__ = ["command"]

DEFAULT_RATE = 1_024_000


@click.command("synth")
@click.argument("output", type=click.Path(dir_okay=False, path_type=Path))
# what only a receiver uses (the carrier search, the detector, the sync tolerance) is not offered
@link_options(omit=("max_freq_error", "detector", "detector_symbols", "sync_tolerance"),
              helps={"datatype": "SigMF datatype of the capture written: cu8, ci8, ci16_le, ci16_be, cf32_le, "
                                 "cf64_le, … [default: cf32_le].",
                     "rate": f"Sample rate of the capture written, Hz [default: {DEFAULT_RATE}]."})
@click.option("--ebn0", "ebn0", multiple=True, required=True, metavar="DB",
              help="Eb/N0 of the bursts, dB (each within -50–100); repeat or give a comma list for bursts of "
                   "different strength, used in turn.")
@click.option("--frames", "n_frames", type=click.IntRange(1, SY.MAX_FRAMES), required=True,
              help="Number of frames (one burst each).")
@click.option("--freq-error", type=finite(-MAX_FREQUENCY_HZ, MAX_FREQUENCY_HZ), default=0.0, show_default=True,
              help="Transmitter carrier error, Hz (the tones must stay inside the captured band).")
@click.option("--clock-ppm", type=finite(-SY.MAX_CLOCK_PPM, SY.MAX_CLOCK_PPM), default=0.0, show_default=True,
              help="Transmitter symbol-clock error, ppm.")
@click.option("--gap", type=(finite(0, SY.MAX_GAP_S), finite(0, SY.MAX_GAP_S)), default=(0.01, 0.03),
              show_default=True, metavar="LOW HIGH",
              help="Quiet time between bursts, seconds (uniform between LOW and HIGH, each 0–3600).")
@click.option("--noise-rms", type=finite(*SY.NOISE_RMS_RANGE), default=0.05, show_default=True,
              help="Total rms of the complex noise per sample, full scale = 1.")
@click.option("--centre", "centre_hz", type=finite(0, MAX_FREQUENCY_HZ, min_open=True), default=SY.DEFAULT_CENTRE_HZ,
              show_default=True, help="Capture centre frequency written to the metadata, Hz.")
@click.option("--seed", type=click.IntRange(0, SY.MAX_SEED), default=1, show_default=True,
              help="Random seed (the same seed gives the same file).")
@click.option("--start-time", default=None, metavar="TIME", help="SigMF core:datetime to record (RFC 3339, UTC); default now.")
@click.option("--overwrite", is_flag=True,
              help="Replace OUTPUT's files when they exist already (without it, synth refuses before any work).")
@click.option("-q", "--quiet", is_flag=True, help="No progress bar and no summary line.")
def command(output, ebn0, n_frames, freq_error, clock_ppm, gap, noise_rms, centre_hz, seed, start_time,
            overwrite, quiet, **link_kw) -> None:
    """Write a synthetic capture of FSK bursts in white noise (SigMF pair + truth JSON).

    OUTPUT is a base name: OUTPUT.sigmf-meta, OUTPUT.sigmf-data and
    OUTPUT.truth.json are written. Eb/N0 = A²·(fs/Rb)/σ², with σ² the total
    complex noise variance per sample. Defaults: cf32_le at 1.024 MS/s. When
    any of the three files exists already, synth refuses (exit status 1)
    unless --overwrite is given: a recording is never replaced by accident.
    """
    link_path = link_kw.get("link")
    if link_kw.get("rate") is None and not link_kw.get("link"):
        link_kw["rate"] = DEFAULT_RATE
    link = link_from_options(link_kw)
    if link.capture.sample_rate is None:
        link = link.replace(rate=DEFAULT_RATE)
    values = _ebn0_values(ebn0)
    cfg = SY.SynthConfig(
        link=link, ebn0_db=values, n_frames=n_frames, freq_error_hz=freq_error, clock_ppm=clock_ppm,
        gaussian_bt=link.signal.bt if link.signal.pulse == "gaussian" else None, gap_s=gap, noise_rms=noise_rms,
        centre_hz=centre_hz, seed=seed, start_time=start_time,
    )
    truth = SY.synthesize(output, cfg, progress=not quiet, inputs=[("--link profile", link_path)], overwrite=overwrite)
    if not quiet:
        say(f"{len(truth['frames'])} frame(s), {truth['n_samples'] / cfg.sample_rate_hz:.2f} s of samples")
        for path in SY.sigmf_paths(output):
            say(wrote(path))


def _ebn0_values(ebn0: tuple[str, ...]) -> tuple[float, ...]:
    """The --ebn0 values (repeated or comma lists), each within the generator's range."""
    try:
        values = tuple(float(v) for item in ebn0 for v in str(item).split(",") if v.strip())
    except ValueError:
        raise click.BadParameter(f"{quote(','.join(ebn0))}: expected numbers in dB", param_hint="--ebn0") from None
    lo_db, hi_db = SY.EBN0_RANGE_DB
    bad = [v for v in values if not lo_db <= v <= hi_db]  # NaN fails both comparisons, so it is caught too
    if bad or not values:
        raise click.BadParameter(f"{quote(','.join(ebn0))}: each value must be a number within {lo_db:g}–{hi_db:g} dB",
                                 param_hint="--ebn0")
    return values
