"""The command line's root: the ``iqdemod`` group, which finds its commands lazily.

Each command lives in its own module, ``iqdemod_cli.commands.<name>``, and is
imported only when it is run (or its own ``--help`` is asked for). The root
help lists the commands from the small table in
:mod:`iqdemod_cli.commands` without importing any of them, so ``iqdemod
--help`` and ``--version`` load neither numpy nor scipy. Command modules never
import this module: there is no import circle, and ``python -m iqdemod_cli``
and ``python -m iqdemod_cli.main`` both work.

No signal processing lives here. Errors the library raises on purpose
(:class:`iqdemod.IqdemodError`) become a one-line ``Error: …`` on stderr and
exit status 1; usage errors are click's, status 2. ``--debug`` shows the
traceback instead.
"""

from __future__ import annotations

import contextlib
import importlib
import os
import re
import signal
import sys
import warnings
from typing import Any, Iterator

import click

import iqdemod
from iqdemod.errors import FlagError, IqdemodError, IqdemodWarning, OutputError, quote

from ._signals import Terminated, restore_signals, stop_signals_raise
from .commands import COMMANDS

__all__ = ["main", "LazyGroup"]

EXIT_FAILED, EXIT_USAGE = 1, 2  # as in _common, which this module does not import (it loads the library)


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


class LazyGroup(click.Group):
    """A group whose commands are imported by name when first needed.

    The pattern of click's documentation on lazily loading subcommands:
    :meth:`list_commands` names them from a table, :meth:`get_command`
    imports ``<package>.commands.<name>`` and takes its ``command``. The
    listing in the group's own help comes from the same table's one-line
    summaries, so it imports nothing (``tests/test_cli_layout.py`` checks that
    each summary is its command's own).
    """

    def __init__(self, *args, lazy_commands: dict[str, str], **kwargs):
        super().__init__(*args, **kwargs)
        self.lazy_commands = dict(lazy_commands)

    def list_commands(self, ctx: click.Context) -> list[str]:
        return sorted(set(super().list_commands(ctx)) | set(self.lazy_commands))

    def get_command(self, ctx: click.Context, cmd_name: str) -> click.Command | None:
        if cmd_name in self.commands:
            return self.commands[cmd_name]
        if cmd_name not in self.lazy_commands:
            return None
        module = importlib.import_module(f"{__package__}.commands.{cmd_name}")
        command = module.command
        self.commands[cmd_name] = command
        return command

    def format_commands(self, ctx: click.Context, formatter: click.HelpFormatter) -> None:
        names = self.list_commands(ctx)
        if not names:
            return
        limit = formatter.width - 6 - max(len(n) for n in names)
        rows = []
        for name in names:
            if name in self.commands:  # already loaded (or added by hand): its own words
                cmd = self.commands[name]
                if cmd.hidden:
                    continue
                rows.append((name, cmd.get_short_help_str(limit)))
            else:
                # a stand-in with the command's first sentence, shortened by click's own rule
                stand_in = click.Command(name, help=self.lazy_commands[name])
                rows.append((name, stand_in.get_short_help_str(limit)))
        with formatter.section("Commands"):
            formatter.write_dl(rows)

    def invoke(self, ctx: click.Context) -> Any:
        """Run a command; the library's errors, signals and a closed stdout become one line and a status."""
        debug = bool(ctx.params.get("debug"))
        previous = stop_signals_raise()
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
        except FlagError as exc:  # a flag's value wrong on its own: a usage error, as click's range checks are
            _fail(ctx, debug, str(exc), EXIT_USAGE)
        except IqdemodError as exc:
            _fail(ctx, debug, str(exc), EXIT_FAILED)
        except OSError as exc:
            where = f"{exc.filename}: " if getattr(exc, "filename", None) else ""
            _fail(ctx, debug, f"{where}{exc.strerror or exc}", EXIT_FAILED)
        except MemoryError:
            _fail(ctx, debug, "out of memory; try a smaller --block, or a capture at a lower rate", EXIT_FAILED)
        except Terminated as exc:  # before KeyboardInterrupt, of which it is one
            name = signal.Signals(exc.signum).name
            _fail(ctx, debug, f"terminated ({name}); finished outputs are complete, unfinished ones were not written",
                  128 + exc.signum)
        except KeyboardInterrupt:
            _fail(ctx, debug, "interrupted; finished outputs are complete, unfinished ones were not written", 130)
        except (click.exceptions.Exit, click.exceptions.Abort, click.ClickException):
            raise
        except Exception as exc:  # noqa: BLE001 - the last resort: a bug, but never a traceback for the user
            text = " ".join(str(exc).split())[:200]
            _fail(ctx, debug, f"internal error ({type(exc).__name__}: {text}); this is a bug: please report it "
                         "with the output of iqdemod --debug …", EXIT_FAILED)
        finally:
            sys.stdout = saved_stdout
            restore_signals(previous)
            _clear_interrupt_mark()


def _clear_interrupt_mark() -> None:
    """Let the exit status the command chose stand after a stop it handled.

    CPython (3.11 at least) marks the process to end by SIGINT, rather than with its exit status,
    when a KeyboardInterrupt passes through code that exec() runs from a string, even once the
    interrupt is caught: dataclasses define their methods so, so a Ctrl-C that lands while a module
    is being imported turned `decode`'s status 130 into death by SIGINT. Every such exec() clears
    the mark before it runs, so running one that does nothing clears it.
    """
    exec("None")  # noqa: S102 - a constant: see above


def _fail(ctx: click.Context, debug: bool, message: str, status: int) -> None:
    """One ``Error: …`` line and the exit status; with --debug the exception itself (a traceback)."""
    if debug:
        raise  # noqa: PLE0704 - re-raises the exception being handled by the caller
    click.echo(f"Error: {message}", err=True)
    ctx.exit(status)


@contextlib.contextmanager
def _warnings_to_stderr() -> Iterator[None]:
    from iqdemod.capture import CaptureWarning  # here, not at the top: --help must not load numpy

    old = warnings.showwarning

    def show(message, category, filename, lineno, file=None, line=None):
        if issubclass(category, (CaptureWarning, IqdemodWarning)):
            click.echo(f"warning: {message}", err=True)  # a capture defect: one plain line for the user
        else:
            old(message, category, filename, lineno, file, line)

    with warnings.catch_warnings():
        warnings.simplefilter("always", CaptureWarning)
        warnings.simplefilter("always", IqdemodWarning)
        warnings.showwarning = show
        try:
            yield
        finally:
            warnings.showwarning = old


@click.group(cls=LazyGroup, lazy_commands=COMMANDS,
             context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(iqdemod.__version__, prog_name="iqdemod")
@click.option("--debug", is_flag=True, help="Show the full traceback when something fails.")
def main(debug: bool) -> None:
    """Find, demodulate and check binary-FSK telemetry bursts in IQ recordings.

    No radio framework needed. Reads raw IQ (named by SigMF datatype), SigMF
    recordings and two-channel WAV/FLAC, in bounded memory. Exit status: 0
    success, 1 the input could not be processed, 2 a usage error, 128 + N
    after signal N (130 Ctrl-C, 129 SIGHUP, 131 SIGQUIT, 143 SIGTERM).
    """


if __name__ == "__main__":  # pragma: no cover - python -m iqdemod_cli.main
    main(prog_name="iqdemod")
