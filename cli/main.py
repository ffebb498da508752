"""The command line: parse options, call one library function per command, write results.

No signal processing lives here. Errors the library raises on purpose
(:class:`iqdemod.IqdemodError`) become a one-line ``Error: …`` on stderr and
exit status 1; usage errors are click's, status 2. ``--debug`` shows the
traceback instead.
"""

from __future__ import annotations

import contextlib
import json
import os
import re
import signal
import sys
import warnings
from pathlib import Path
from typing import Any, Iterator

import click

import iqdemod
from iqdemod import synth as SY
from iqdemod.errors import IqdemodError, IqdemodWarning, OutputError, quote
from iqdemod.link import MAX_FREQUENCY_HZ

from ._common import (EXIT_FAILED, finite, guard_outputs, link_from_options, link_options, open_output, say,
                      warn)

__all__ = ["main"]

# Signals that end a run like SIGTERM does: the temporary files are removed, the exit status is 128 + signal.
STOP_SIGNALS = tuple(getattr(signal, name) for name in ("SIGTERM", "SIGHUP", "SIGQUIT") if hasattr(signal, name))


class _Terminated(BaseException):
    """SIGTERM, SIGHUP or SIGQUIT, raised in the main thread so that every open output is cleaned up."""

    def __init__(self, signum: int = signal.SIGTERM):
        super().__init__(signum)
        self.signum = signum


def _on_stop_signal(signum, frame):
    raise _Terminated(signum)


def _stop_signals_raise() -> dict:
    """Install the handlers; return the ones they replaced (empty outside the main thread)."""
    previous = {}
    for sig in STOP_SIGNALS:
        try:
            previous[sig] = signal.signal(sig, _on_stop_signal)
        except ValueError:  # not the main thread (e.g. inside a test runner's worker): leave them
            break
    return previous


class _ClosedStdout:
    """Stands in for a standard output that was closed before we started (``>&-``)."""

    def write(self, text) -> int:
        raise OutputError("standard output is closed: nowhere to write the results (give an output file)")

    def flush(self) -> None:
        pass

    def isatty(self) -> bool:
        return False

    def fileno(self) -> int:
        raise OSError("standard output is closed")


def _stdout_is_closed() -> bool:
    if sys.stdout is None:
        return True
    try:
        fd = sys.stdout.fileno()
    except (OSError, ValueError, AttributeError):
        return False  # a test runner's buffer: not a real descriptor, and open
    try:
        os.fstat(fd)
    except OSError:
        return True
    return False


def _short_usage(message: str) -> str:
    """A usage error's message with every quoted value cut to 80 characters."""
    return re.sub(r"'([^']{80,})'", lambda m: quote(m.group(1)), message)


class _Group(click.Group):
    """Turns the library's errors into one line and an exit status."""

    def invoke(self, ctx: click.Context) -> Any:
        debug = bool(ctx.params.get("debug"))
        previous = _stop_signals_raise()
        saved_stdout = sys.stdout
        if _stdout_is_closed():
            sys.stdout = _ClosedStdout()
        try:
            with _warnings_to_stderr():
                return super().invoke(ctx)
        except click.UsageError as exc:
            exc.message = _short_usage(exc.message)
            raise
        except BrokenPipeError:
            # the reader of our output (e.g. `| head`) has had enough: not an error of ours
            devnull = os.open(os.devnull, os.O_WRONLY)
            os.dup2(devnull, sys.stdout.fileno())
            ctx.exit(0)
        except IqdemodError as exc:
            if debug:
                raise
            click.echo(f"Error: {exc}", err=True)
            ctx.exit(EXIT_FAILED)
        except OSError as exc:
            if debug:
                raise
            where = f"{exc.filename}: " if getattr(exc, "filename", None) else ""
            click.echo(f"Error: {where}{exc.strerror or exc}", err=True)
            ctx.exit(EXIT_FAILED)
        except MemoryError:
            if debug:
                raise
            click.echo("Error: out of memory; try a smaller --block, or a capture at a lower rate", err=True)
            ctx.exit(EXIT_FAILED)
        except KeyboardInterrupt:
            if debug:
                raise
            click.echo("Error: interrupted; finished outputs are complete, unfinished ones were not written", err=True)
            ctx.exit(130)
        except (click.exceptions.Exit, click.exceptions.Abort, click.ClickException):
            raise
        except Exception as exc:  # noqa: BLE001 - the last resort: a bug, but never a traceback for the user
            if debug:
                raise
            text = " ".join(str(exc).split())[:200]
            click.echo(f"Error: internal error ({type(exc).__name__}: {text}); this is a bug: please report it "
                       "with the output of iqdemod --debug …", err=True)
            ctx.exit(EXIT_FAILED)
        except _Terminated as exc:
            name = signal.Signals(exc.signum).name
            click.echo(f"Error: terminated ({name}); finished outputs are complete, unfinished ones were not written",
                       err=True)
            ctx.exit(128 + exc.signum)
        finally:
            sys.stdout = saved_stdout
            for sig, old in previous.items():  # a library caller's own handlers come back
                signal.signal(sig, old)


@contextlib.contextmanager
def _warnings_to_stderr() -> Iterator[None]:
    old = warnings.showwarning

    def show(message, category, filename, lineno, file=None, line=None):
        if issubclass(category, (iqdemod.capture.CaptureWarning, IqdemodWarning)):
            warn(str(message))  # a capture defect: one plain line for the user
        else:
            old(message, category, filename, lineno, file, line)

    with warnings.catch_warnings():
        warnings.simplefilter("always", iqdemod.capture.CaptureWarning)
        warnings.simplefilter("always", IqdemodWarning)
        warnings.showwarning = show
        try:
            yield
        finally:
            warnings.showwarning = old


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(iqdemod.__version__, prog_name="iqdemod")
@click.option("--debug", is_flag=True, help="Show the full traceback when something fails.")
def main(debug: bool) -> None:
    """Find, demodulate and check binary-FSK telemetry bursts in IQ recordings.

    No radio framework needed. Reads raw IQ (named by SigMF datatype), SigMF
    recordings and two-channel WAV/FLAC, in bounded memory. Exit status: 0
    success, 1 the input could not be processed, 2 a usage error.
    """


@main.command()
@click.argument("captures", nargs=-1, required=True, type=click.Path(path_type=Path))
@link_options
@click.option("-o", "--output", type=click.Path(dir_okay=False, path_type=Path),
              help="Write the JSON Lines here (atomically) instead of stdout.")
@click.option("--only-good", is_flag=True, help="Write only frames whose CRC is good.")
@click.option("--block", "block_samples", type=click.IntRange(1024, 1 << 24), default=iqdemod.capture.DEFAULT_BLOCK_SAMPLES,
              show_default=True, help="Samples read per block (results do not depend on it).")
@click.option("--follow", is_flag=True,
              help="Keep reading a capture that is still being written; stop when it has not grown for --idle "
                   "seconds (or on Ctrl-C).")
@click.option("--idle", "idle_s", type=click.FloatRange(0.1, 86_400), default=2.0, show_default=True,
              metavar="SECONDS", help="With --follow: seconds without new samples that end the capture (0.1–86400).")
@click.option("--start-time", default=None, metavar="TIME",
              help="When the capture began (RFC 3339, UTC, e.g. 2026-11-30T22:15:07Z), for raw files and "
                   "standard input; frames then carry time_utc.")
@click.option("-q", "--quiet", is_flag=True, help="No progress bar and no summary line.")
def decode(captures, output, only_good, block_samples, follow, idle_s, start_time, quiet, **link_kw) -> None:
    """Decode the frames in one or more captures and write them as JSON Lines.

    One object per frame whose sync word was found, good CRC or bad: capture,
    t_s, sample, burst, length, payload_hex, crc_ok, sync_errors,
    freq_error_hz, ebn0_db, level_dbfs, noise_dbfs, frequency_hz, clock_ppm,
    time_utc (when the start time is known), and on a failed CRC
    crc_received_hex and crc_computed_hex. Without a sync word (raw mode): one
    object per burst with bits_hex and n_bits instead. A CAPTURE of - reads
    raw samples from standard input (give --datatype and --rate, or a
    profile's [capture] table). Each frame is written and flushed as it is
    found.
    """
    link_path = link_kw.get("link")
    link = link_from_options(link_kw)
    if start_time is not None and len(start_time) > 64:
        raise click.BadParameter(f"{quote(start_time)}: at most 64 characters", param_hint="--start-time")
    guard_outputs([("--output", output)], captures=[c for c in captures if str(c) != "-"], link=link_path)
    with open_output(output) as out:
        for path in captures:
            summary = iqdemod.receiver.DecodeSummary()
            source = path
            if str(path) == "-" or follow:
                from iqdemod.live import open_live

                source = open_live(path, datatype=link.capture.datatype, sample_rate=link.capture.sample_rate,
                                   follow=follow, idle_s=idle_s)
            for frame in iqdemod.decode(source, link, block_samples=block_samples, progress=not quiet,
                                        summary=summary, start_time=start_time):
                if only_good and not frame.crc_ok and not frame.raw:
                    continue
                out.write(json.dumps(frame.as_record()) + "\n")
                out.flush()
            if not quiet:
                say(summary.line(Path(path).name))


@main.command()
@click.argument("output", type=click.Path(dir_okay=False, path_type=Path))
@link_options
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
@click.option("--centre", "centre_hz", type=finite(0, MAX_FREQUENCY_HZ, min_open=True), default=869_525_000.0,
              show_default=True, help="Capture centre frequency written to the metadata, Hz.")
@click.option("--seed", type=click.IntRange(0, SY.MAX_SEED), default=1, show_default=True,
              help="Random seed (the same seed gives the same file).")
@click.option("--start-time", default=None, help="SigMF core:datetime to record (RFC 3339, UTC); default now.")
@click.option("-q", "--quiet", is_flag=True, help="No progress bar and no summary line.")
def synth(output, ebn0, n_frames, freq_error, clock_ppm, gap, noise_rms, centre_hz, seed, start_time,
          quiet, **link_kw) -> None:
    """Write a synthetic capture of FSK bursts in white noise (SigMF pair + truth JSON).

    OUTPUT is a base name: OUTPUT.sigmf-meta, OUTPUT.sigmf-data and
    OUTPUT.truth.json are written. Eb/N0 = A²·(fs/Rb)/σ², with σ² the total
    complex noise variance per sample. Defaults: cf32_le at 1.024 MS/s.
    """
    from iqdemod.synth import SynthConfig, synthesize

    link_path = link_kw.get("link")
    if link_kw.get("rate") is None and not link_kw.get("link"):
        link_kw["rate"] = 1_024_000
    link = link_from_options(link_kw)
    if link.capture.sample_rate is None:
        link = link.replace(rate=1_024_000)
    try:
        values = tuple(float(v) for item in ebn0 for v in str(item).split(",") if v.strip())
    except ValueError:
        raise click.BadParameter(f"{quote(','.join(ebn0))}: expected numbers in dB", param_hint="--ebn0") from None
    lo_db, hi_db = SY.EBN0_RANGE_DB
    bad = [v for v in values if not lo_db <= v <= hi_db]  # NaN fails both comparisons, so it is caught too
    if bad or not values:
        raise click.BadParameter(f"{quote(','.join(ebn0))}: each value must be a number within {lo_db:g}–{hi_db:g} dB",
                                 param_hint="--ebn0")
    cfg = SynthConfig(
        link=link, ebn0_db=values, n_frames=n_frames, freq_error_hz=freq_error, clock_ppm=clock_ppm,
        gaussian_bt=link.signal.bt if link.signal.pulse == "gaussian" else None, gap_s=gap, noise_rms=noise_rms, centre_hz=centre_hz, seed=seed,
        start_time=start_time,
    )
    truth = synthesize(output, cfg, progress=not quiet, inputs=[("--link profile", link_path)])
    if not quiet:
        meta, data, truth_path = iqdemod.synth.sigmf_paths(output)
        say(f"wrote {meta}, {data} ({truth['n_samples'] / cfg.sample_rate_hz:.2f} s, {len(truth['frames'])} frames) "
            f"and {truth_path}")


from . import batch_cmd, more_commands, survey_cmd  # noqa: E402,F401  (register the other commands)

if __name__ == "__main__":  # pragma: no cover
    main()
