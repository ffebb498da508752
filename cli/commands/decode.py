"""The ``decode`` command: every frame of one or more captures, as JSON Lines."""

from __future__ import annotations

import dataclasses
import json
import signal
import warnings
from pathlib import Path
from typing import Any, TextIO

import click

import iqdemod
from iqdemod.errors import IqdemodError, OutputError, quote
from iqdemod.files import classify_output

from .._common import guard_outputs, link_options, links_from_options, open_output, say
from .._signals import StopGate, signal_of, stops_gated
from ..render import decode_summary

__all__ = ["command"]

# With --follow these end the live capture as its --idle time does (exit status 0): Ctrl-C, the documented
# way to stop following, and SIGTERM, what a service manager or `kill` sends to stop a long-running reader.
# SIGHUP and SIGQUIT stay interruptions (128 + signal), with the frames found kept all the same.
FOLLOW_END_SIGNALS = (signal.SIGINT, signal.SIGTERM)


@dataclasses.dataclass
class _Progress:
    """How far a decode command got: frames written, captures begun, the one being read, the stop."""

    kept: int = 0
    begun: int = 0
    handled: Any = None  # the last frame written (or left out by --only-good)
    current: tuple | None = None  # (path, Decoding, the capture object or path it reads)
    stop: KeyboardInterrupt | None = None
    error: IqdemodError | None = None  # a capture that failed after frames were written: they are kept


@click.command("decode")
@click.argument("captures", nargs=-1, required=True, type=click.Path(path_type=Path))
@link_options(several=True)
@click.option("-o", "--output", type=click.Path(dir_okay=False, path_type=Path),
              help="Write the JSON Lines here (atomically) instead of stdout; a stopped run keeps the frames "
                   "found before the stop.")
@click.option("--only-good", is_flag=True, help="Write only frames whose CRC is good.")
@click.option("--block", "block_samples", type=click.IntRange(1024, 1 << 24),
              default=iqdemod.capture.DEFAULT_BLOCK_SAMPLES, show_default=True,
              help="Samples read per block (results do not depend on it).")
@click.option("--follow", is_flag=True,
              help="Keep reading a capture that is still being written; stop when it has not grown for --idle "
                   "seconds, or on Ctrl-C or SIGTERM (exit status 0).")
@click.option("--idle", "idle_s", type=click.FloatRange(0.1, 86_400), default=2.0, show_default=True,
              metavar="SECONDS", help="With --follow: seconds without new samples that end the capture (0.1–86400).")
@click.option("--start-time", default=None, metavar="TIME",
              help="When the capture began (RFC 3339, UTC, e.g. 2026-11-30T22:15:07Z), for raw files and "
                   "standard input; frames then carry time_utc.")
@click.option("-q", "--quiet", is_flag=True, help="No progress bar and no summary line.")
@click.pass_context
def command(ctx, captures, output, only_good, block_samples, follow, idle_s, start_time, quiet, **link_kw) -> None:
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

    Stopping: with --follow, Ctrl-C or SIGTERM ends the capture being read as
    its --idle time would (the captures after it are not read): every frame
    found is written, the summary line follows, exit status 0. Otherwise a stop
    signal (Ctrl-C, SIGTERM, SIGHUP, SIGQUIT; with --follow SIGHUP and
    SIGQUIT) is an interruption: the frames found before it are kept (the
    output file holds them, whole lines only), one line says how many, the
    captures after it are not started, and the exit status is 128 + the
    signal (130 for Ctrl-C). Stopped before any frame was found, the output
    file is not written and an existing one is left as it was.

    Every capture file is opened (its metadata read) before any is decoded
    (not standard input, nor with --follow), so a missing or broken one is
    refused before any work. A capture that fails
    while it is read (the file shrank, say) ends the run with its error (exit
    status 1), and the frames found before it are kept all the same.
    """
    link, link_paths = links_from_options(link_kw)
    first = link if isinstance(link, iqdemod.Link) else next(iter(link.values()))
    if start_time is not None and len(start_time) > 64:
        raise click.BadParameter(f"{quote(start_time)}: at most 64 characters", param_hint="--start-time")
    guard_outputs([("--output", output)], captures=[c for c in captures if str(c) != "-"], link=link_paths)
    target = classify_output("-" if output is None else output)
    _open_each(captures, first, follow)
    settings = dict(link=link, first=first, only_good=only_good, block_samples=block_samples, follow=follow,
                    idle_s=idle_s, start_time=start_time, quiet=quiet)
    with stops_gated() as gate:
        progress = _decode_all(captures, output, gate, settings)
    if progress.error is not None:
        later = captures[progress.begun:]
        kept = f"{progress.kept} frame(s) found before the error kept in {target.given}" if target.kind == "file" else ""
        if kept or later:
            say("; ".join(filter(None, [kept, _not_begun(later, "started") if later else ""])))
        raise progress.error
    if progress.stop is None:
        return
    signum = signal_of(progress.stop)
    later = captures[progress.begun:]
    if follow and signum in FOLLOW_END_SIGNALS:
        if later:
            say(f"stopped ({signal.Signals(signum).name}): {_not_begun(later, 'read')}")
        return
    say(_interrupted(signum, progress.kept, target, later))
    ctx.exit(128 + signum)


def _decode_all(captures, output: Path | None, gate: StopGate, settings: dict[str, Any]) -> _Progress:
    """Decode the captures in turn into the output; a stop signal ends the loop and the frames found are kept.

    The output is committed (atomically, whole lines only) after a stop too, unless nothing was
    found before an interruption: then it is discarded and an existing file stays as it was.
    """
    progress = _Progress()
    try:
        with open_output(output) as out:
            try:
                for path in captures:
                    _decode_one(path, out, gate, progress, settings)
            except OutputError:
                raise
            except IqdemodError as exc:  # a capture failed: the frames written so far are kept, then it is reported
                if progress.kept == 0:
                    raise
                progress.error = exc
            except KeyboardInterrupt as exc:
                gate.hold()  # what remains is wrap-up: one more signal waits for it, a second ends it at once
                progress.stop = exc
                if settings["follow"] and signal_of(exc) in FOLLOW_END_SIGNALS:
                    _say_summary(progress, settings)
                elif progress.kept == 0:
                    raise  # nothing to keep: the output is discarded
    except KeyboardInterrupt as exc:
        if exc is not progress.stop:
            raise
    finally:
        gate.release(deliver=False)
    return progress


def _open_each(captures, first, follow: bool) -> None:
    """Open every capture file (not standard input, nor one still being written) and close it again:
    a missing or unreadable one, or broken metadata, is refused before any work. Warnings wait for
    the real opening."""
    if follow:
        return
    for path in captures:
        if str(path) == "-":
            continue
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            iqdemod.open_capture(path, datatype=first.capture.datatype, sample_rate=first.capture.sample_rate).close()


def _decode_one(path: Path, out: TextIO, gate: StopGate, progress: _Progress, settings: dict[str, Any]) -> None:
    """One capture's frames, each line written whole and counted before a stop signal may cut in.

    On a stop signal, the frames already found are written before it is passed on: the one in
    hand, and the rest of its burst (demodulated already; handing them out reads nothing more).
    """
    progress.begun += 1
    progress.current = None
    first, follow = settings["first"], settings["follow"]
    source: Any = path
    frames = frame = progress.handled = None
    try:
        if str(path) == "-" or follow:
            from iqdemod.live import open_live

            source = open_live(path, datatype=first.capture.datatype, sample_rate=first.capture.sample_rate,
                               follow=follow, idle_s=settings["idle_s"])
        decoding = iqdemod.decode(source, settings["link"], block_samples=settings["block_samples"],
                                  progress=not settings["quiet"], start_time=settings["start_time"])
        progress.current = (path, decoding, source)
        frames = iter(decoding)
        for frame in frames:
            _write(frame, out, gate, progress, settings)
    except KeyboardInterrupt:
        gate.hold()  # released by _decode_all once the output is committed
        if frame is not None and frame is not progress.handled:
            _write(frame, out, gate, progress, settings)
        for frame in _rest_of_burst(progress):
            _write(frame, out, gate, progress, settings)
        raise
    finally:
        if frames is not None:
            frames.close()  # after a stop: the reader's threads end here
        if source is not path:
            source.close()
    _say_summary(progress, settings)
    progress.current = None


def _write(frame, out: TextIO, gate: StopGate, progress: _Progress, settings: dict[str, Any]) -> None:
    """One frame's JSON line, written and flushed whole and counted, or (a bad CRC with --only-good) none."""
    if settings["only_good"] and not frame.crc_ok and not frame.raw:
        progress.handled = frame
        return
    line = json.dumps(frame.as_record()) + "\n"
    with gate.held():  # the line, its count and its mark, or none of them
        out.write(line)
        out.flush()
        progress.kept += 1
        progress.handled = frame


def _rest_of_burst(progress: _Progress) -> tuple:
    """The frames of the burst being handed out when a stop came, which the decoder has counted already
    and the loop has not written (demodulated already: writing them reads nothing more)."""
    if progress.current is None:
        return ()
    rest = progress.current[1].in_hand
    for k, frame in enumerate(rest):  # the one in hand when the stop came may be written already
        if frame is progress.handled:
            return rest[k + 1 :]
    return rest


def _say_summary(progress: _Progress, settings: dict[str, Any]) -> None:
    """The summary line of the capture being read (counts so far, with the reader's own after a stop)."""
    if settings["quiet"] or progress.current is None:
        return
    path, decoding, source = progress.current
    summary = decoding.summary
    if summary.stats is None and isinstance(source, iqdemod.Capture):
        summary = dataclasses.replace(summary, stats=source.stats)
    say(decode_summary(summary, Path(path).name, raw=settings["first"].frame.raw))


def _not_begun(later, verb: str) -> str:
    names = ", ".join(Path(p).name for p in later[:3]) + (", …" if len(later) > 3 else "")
    return f"{len(later)} later capture(s) not {verb} ({names})"


def _interrupted(signum: int, kept: int, target, later) -> str:
    """The one line after an interrupted decode: what was kept, and where."""
    how = "interrupted" if signum == signal.SIGINT else "terminated"
    head = f"{how} ({signal.Signals(signum).name})"
    if target.kind == "file" and kept == 0:
        text = f"{head} before any frame was found: {target.given} not written"
        text += " (the old file is left as it was)" if target.exists else ""
    else:
        where = "standard output" if target.kind == "stdout" else target.given
        verb = "kept in" if target.kind == "file" else "written to"
        text = f"{head}: {kept} frame(s) found before the stop {verb} {where}"
    return text + (f"; {_not_begun(later, 'started')}" if later else "")
