"""The ``survey`` command: find the unknown FSK signals of a capture and describe them."""

from __future__ import annotations

import os
from pathlib import Path

import click

import iqdemod
from iqdemod.errors import IqdemodError, OutputError, quote
from iqdemod.link import CaptureFormat
from iqdemod.profile import check_overrides, link_to_toml
from iqdemod.survey import plot_survey, require_plotting, survey as survey_capture

from .._common import DATATYPE_OPTION, RATE_OPTION, guard_outputs, open_output, say
from ..render import survey_table, to_json, wrote

__all__ = ["command"]


@click.command("survey")
@click.argument("capture", type=click.Path(path_type=Path))
@DATATYPE_OPTION
@RATE_OPTION
@click.option("--max-signals", type=click.IntRange(1, 64), default=4, show_default=True,
              help="Report at most this many signals (the strongest).")
@click.option("--json", "as_json", is_flag=True, help="Print the result as JSON instead of a table.")
@click.option("--write-link", type=click.Path(dir_okay=False, path_type=Path),
              help="Write the strongest signal's link profile (TOML) here, for decode --link.")
@click.option("--overwrite", is_flag=True,
              help="Replace --write-link's file when it exists already (without it, survey refuses before any work: "
                   "a profile may be one written by hand).")
@click.option("--plot", type=click.Path(dir_okay=False, path_type=Path),
              help="Write a PNG of the spectrum with the signals marked and a waterfall of one burst (needs matplotlib).")
@click.option("-q", "--quiet", is_flag=True, help="No progress bars and no summary line.")
def command(capture, datatype, rate, max_signals, as_json, write_link, overwrite, plot, quiet) -> None:
    """Find the bursty FSK signals in a capture and measure them.

    For each signal, strongest first: offset from the capture centre, tone
    shift, symbol rate, modulation index h, the frequency pulse (rectangular
    or Gaussian with its BT, from how fast the bursts' spectrum falls beyond
    Carson's bandwidth), number and length of bursts, a
    rough Eb/N0, and, from a few demodulated bursts, the sync word, frame
    length and catalogue CRC when they can be found. The table (or --json)
    goes to stdout; --write-link writes a profile that `iqdemod decode
    CAPTURE --link FILE` accepts.
    """
    guard_outputs([("--write-link", write_link), ("--plot", plot)], captures=[capture])
    if write_link is not None and not overwrite and os.path.lexists(write_link):
        raise OutputError(f"--write-link {quote(str(write_link))} exists already; refusing to replace it "
                          "(give --overwrite, or another name)")
    check_overrides({"rate": rate, "datatype": datatype})  # a bad value named by its flag, as decode names it
    if plot is not None:
        require_plotting()  # fail before the work, not after
    with iqdemod.open_capture(capture, datatype=datatype, sample_rate=rate) as cap:
        result = survey_capture(cap, max_signals=max_signals, progress=not quiet)
    if not quiet:
        say(f"{result.capture}: {result.sample_rate_hz / 1e3:g} kS/s, {result.duration_s:.3g} s, "
            f"{len(result.signals)} signal(s) found")
    if as_json:
        click.echo(to_json(result.as_dict(), indent=1))
    elif result.signals:
        click.echo(survey_table(result), nl=False)
    if write_link is not None:
        _write_link(write_link, result, datatype=datatype, rate=rate)
        if not quiet:
            say(wrote(write_link))
    if plot is not None:
        plot_survey(result, plot)
        if not quiet:
            say(wrote(plot))


def _write_link(path: Path, result, *, datatype: str | None, rate: float | None) -> None:
    """The strongest signal's link profile, with a comment on how it was found."""
    if not result.signals:
        raise IqdemodError(f"{result.capture}: no FSK signal found, so no link profile to write to {path}")
    best = result.signals[0]
    fmt = CaptureFormat(datatype=datatype, sample_rate=rate) if datatype or rate else None
    link = best.to_link(capture=fmt)
    note = (f"iqdemod survey of {result.capture}: signal 1, {best.bursts} burst(s), "
            f"Eb/N0 ~{best.ebn0_db:.0f} dB")
    if best.pulse is not None:
        note += f"\npulse from the bursts' spectrum: {best.pulse}" + (f", BT {best.bt:g}" if best.bt else "")
    if best.sync_word is None:
        note += "\nno sync word found: raw mode (one record of bits per burst)"
    elif best.crc is None:
        note += "\nno catalogue CRC checked: crc = \"none\", length guessed from the burst lengths"
    with open_output(path) as fh:
        fh.write(link_to_toml(link, comment=note))
