"""The ``decode`` command: every frame of one or more captures, as JSON Lines."""

from __future__ import annotations

import json
from pathlib import Path

import click

import iqdemod
from iqdemod.errors import quote

from .._common import guard_outputs, link_options, links_from_options, open_output, say
from ..render import decode_summary

__all__ = ["command"]


@click.command("decode")
@click.argument("captures", nargs=-1, required=True, type=click.Path(path_type=Path))
@link_options(several=True)
@click.option("-o", "--output", type=click.Path(dir_okay=False, path_type=Path),
              help="Write the JSON Lines here (atomically) instead of stdout.")
@click.option("--only-good", is_flag=True, help="Write only frames whose CRC is good.")
@click.option("--block", "block_samples", type=click.IntRange(1024, 1 << 24),
              default=iqdemod.capture.DEFAULT_BLOCK_SAMPLES, show_default=True,
              help="Samples read per block (results do not depend on it).")
@click.option("--follow", is_flag=True,
              help="Keep reading a capture that is still being written; stop when it has not grown for --idle "
                   "seconds (or on Ctrl-C).")
@click.option("--idle", "idle_s", type=click.FloatRange(0.1, 86_400), default=2.0, show_default=True,
              metavar="SECONDS", help="With --follow: seconds without new samples that end the capture (0.1–86400).")
@click.option("--start-time", default=None, metavar="TIME",
              help="When the capture began (RFC 3339, UTC, e.g. 2026-11-30T22:15:07Z), for raw files and "
                   "standard input; frames then carry time_utc.")
@click.option("-q", "--quiet", is_flag=True, help="No progress bar and no summary line.")
def command(captures, output, only_good, block_samples, follow, idle_s, start_time, quiet, **link_kw) -> None:
    """Decode the frames in one or more captures and write them as JSON Lines.

    One object per frame whose sync word was found, good CRC or bad: capture,
    t_s, sample, burst, length, payload_hex, crc_ok, sync_errors,
    freq_error_hz, ebn0_db, level_dbfs, noise_dbfs, frequency_hz, clock_ppm,
    time_utc (when the start time is known), and on a failed CRC
    crc_received_hex and crc_computed_hex. Without a sync word (raw mode): one
    object per burst with bits_hex and n_bits instead, and no CRC is checked.
    A CAPTURE of - reads raw samples from standard input (give --datatype and
    --rate, or a profile's [capture] table). Each frame is written and flushed
    as it is found. With several links (--link given again, or a profile with
    several [[signal]] entries) every link is decoded in the same pass over
    the capture, and each frame carries its link's name as link.
    """
    link, link_paths = links_from_options(link_kw)
    first = link if isinstance(link, iqdemod.Link) else next(iter(link.values()))
    if start_time is not None and len(start_time) > 64:
        raise click.BadParameter(f"{quote(start_time)}: at most 64 characters", param_hint="--start-time")
    guard_outputs([("--output", output)], captures=[c for c in captures if str(c) != "-"], link=link_paths)
    with open_output(output) as out:
        for path in captures:
            source = path
            if str(path) == "-" or follow:
                from iqdemod.live import open_live

                source = open_live(path, datatype=first.capture.datatype, sample_rate=first.capture.sample_rate,
                                   follow=follow, idle_s=idle_s)
            decoding = iqdemod.decode(source, link, block_samples=block_samples, progress=not quiet,
                                      start_time=start_time)
            for frame in decoding:
                if only_good and not frame.crc_ok and not frame.raw:
                    continue
                out.write(json.dumps(frame.as_record()) + "\n")
                out.flush()
            if not quiet:
                say(decode_summary(decoding.summary, Path(path).name, raw=first.frame.raw))
