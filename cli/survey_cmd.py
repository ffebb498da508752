"""The survey command: find the unknown FSK signals of a capture and describe them."""

from __future__ import annotations

import json
import math
from pathlib import Path

import click

import iqdemod
from iqdemod._io import atomic_writer
from iqdemod.errors import IqdemodError
from iqdemod.link import CaptureFormat, link_to_toml
from iqdemod.survey import SurveyResult, plot_survey, require_plotting, survey as survey_capture

from iqdemod.capture import MAX_SAMPLE_RATE_HZ

from ._common import finite, guard_outputs, say
from .main import main

__all__ = ["survey"]


def _table(result: SurveyResult) -> str:
    """The signals as a compact aligned table, strongest first."""
    head = ("#", "offset_hz", "shift_hz", "baud", "h", "bursts", "burst_ms", "ebn0_db", "dbfs", "pulse/bt", "sync",
            "frame")
    rows = [head]
    for i, s in enumerate(result.signals, 1):
        sync = f"{s.sync_guess}/{s.sync_bits}" if s.sync_guess else "-"
        if s.length is None:
            frame = "raw"
        else:
            frame = ("prefix8" if s.length == "prefix8" else f"{s.length} B") + (f", {s.crc}" if s.crc else ", no CRC")
        ebn0 = f"{s.ebn0_db:.1f}" if math.isfinite(s.ebn0_db) else "-"
        power = f"{s.power_db:.1f}" if math.isfinite(s.power_db) else "-"
        rows.append((str(i), f"{s.offset_hz:.1f}", f"{s.shift_hz:.1f}", f"{s.baud:.2f}", f"{s.h:.3f}", str(s.bursts),
                     f"{1e3 * s.burst_lengths_s.median:.1f}", ebn0, power, _pulse(s), sync, frame))
    widths = [max(len(r[k]) for r in rows) for k in range(len(head))]
    lines = []
    for r in rows:
        cells = [c.rjust(w) for c, w in zip(r[:-2], widths[:-2])] + [r[-2].ljust(widths[-2]), r[-1]]
        lines.append("  ".join(cells).rstrip())
    return "\n".join(lines) + "\n"


def _pulse(s) -> str:
    """The pulse found, for the table: "rect", "gaussian/0.5" (with its BT), or "-" when it was not measured."""
    if s.pulse is None:
        return "-"
    return "rect" if s.pulse == "rect" else f"gaussian/{s.bt:g}"


def _json_ready(value):
    """NaN and infinities become null: the JSON output stays strict."""
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _json_ready(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_json_ready(v) for v in value]
    return value


@main.command()
@click.argument("capture", type=click.Path(path_type=Path))
@click.option("--datatype", help="SigMF datatype of a raw capture: cu8, ci8, ci16_le, ci16_be, cf32_le, cf64_le, …")
@click.option("--rate", type=finite(0, MAX_SAMPLE_RATE_HZ, min_open=True), help="Sample rate of a raw capture, Hz.")
@click.option("--max-signals", type=click.IntRange(1, 64), default=4, show_default=True,
              help="Report at most this many signals (the strongest).")
@click.option("--json", "as_json", is_flag=True, help="Print the result as JSON instead of a table.")
@click.option("--write-link", type=click.Path(dir_okay=False, path_type=Path),
              help="Write the strongest signal's link profile (TOML) here, for decode --link.")
@click.option("--plot", type=click.Path(dir_okay=False, path_type=Path),
              help="Write a PNG of the spectrum with the signals marked and a waterfall of one burst (needs matplotlib).")
@click.option("-q", "--quiet", is_flag=True, help="No progress bars and no summary line.")
def survey(capture, datatype, rate, max_signals, as_json, write_link, plot, quiet) -> None:
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
    if plot is not None:
        require_plotting()  # fail before the work, not after
    with iqdemod.open_capture(capture, datatype=datatype, sample_rate=rate) as cap:
        result = survey_capture(cap, max_signals=max_signals, progress=not quiet)
    if not quiet:
        say(f"{result.capture}: {result.sample_rate_hz / 1e3:g} kS/s, {result.duration_s:.3g} s, "
            f"{len(result.signals)} signal(s) found")
    if as_json:
        click.echo(json.dumps(_json_ready(result.as_dict()), indent=1))
    elif result.signals:
        click.echo(_table(result), nl=False)
    if write_link is not None:
        if not result.signals:
            raise IqdemodError(f"{result.capture}: no FSK signal found, so no link profile to write to {write_link}")
        best = result.signals[0]
        fmt = CaptureFormat(datatype=datatype, sample_rate=rate) if datatype or rate else None
        link = best.to_link(capture=fmt)
        note = (f"iqdemod survey of {result.capture}: signal 1, {best.bursts} burst(s), "
                f"Eb/N0 ~{best.ebn0_db:.0f} dB")
        if best.pulse is not None:
            note += f"\npulse from the bursts' spectrum: {best.pulse}" + (f", BT {best.bt:g}" if best.bt else "")
        if best.sync_guess is None:
            note += "\nno sync word found: raw mode (one record of bits per burst)"
        elif best.crc is None:
            note += "\nno catalogue CRC checked: crc = \"none\", length guessed from the burst lengths"
        with atomic_writer(write_link, "w") as fh:
            fh.write(link_to_toml(link, comment=note))
        if not quiet:
            say(f"wrote {write_link}")
    if plot is not None:
        plot_survey(result, plot)
        if not quiet:
            say(f"wrote {plot}")
