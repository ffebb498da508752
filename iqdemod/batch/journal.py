"""Nothing finished is ever lost: the ``.partial`` journal, resuming from it, and the batch's locks.

Rows are appended to ``REPORT.partial`` as each capture finishes, flushed and fsync'd, with
Ctrl-C and SIGTERM held off while a row is written so that none is torn; frames go to
``FRAMES.partial`` the same way, *before* the row that vouches for them.
"""

from __future__ import annotations

import contextlib
import csv
import dataclasses
import json
import os
import signal
import threading
from pathlib import Path
from typing import Iterator

from ..cores import stop_signals
from ..files import atomic_writer
from ..errors import IqdemodError
from .report import COLUMNS, CaptureRow, complete_lines, read_report, write_rows
from .worker import CaptureOutcome, CaptureTask

__all__ = ["partial_path"]

#: Every lock this process holds, for forked workers to close.
LOCK_FDS: list[int] = []


def partial_path(path: str | os.PathLike) -> Path:
    """The journal beside a report or frames file: ``NAME.partial``.

    Examples
    --------
    >>> partial_path("runs/fleet.csv").as_posix()
    'runs/fleet.csv.partial'
    """
    p = Path(path)
    return p.with_name(p.name + ".partial")


def lock_path(report: Path) -> Path:
    """The hidden lock file beside a report or frames file."""
    return report.with_name(f".{report.name}.lock")


@contextlib.contextmanager
def signals_deferred() -> Iterator[None]:
    """Hold Ctrl-C, SIGTERM, SIGHUP and SIGQUIT while a journal entry is written, so that none is ever torn.

    Python runs signal handlers in the main thread whichever thread the signal reached, so
    blocking the signal in this thread would not be enough: the handlers are swapped for
    ones that only take note, and the signals noted are raised again afterwards.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    pending: list[int] = []

    def note(signum, frame) -> None:
        pending.append(signum)

    saved = {}
    for sig in stop_signals():  # Ctrl-C and the signals that ask a run to stop
        old = signal.getsignal(sig)
        if old is not None:  # None: a handler set outside Python, which we could not restore
            saved[sig] = signal.signal(sig, note)
    try:
        yield
    finally:
        for sig, old in saved.items():
            signal.signal(sig, old)
        for sig in dict.fromkeys(pending):
            signal.raise_signal(sig)


class Journal:
    """Append-only, fsync'd CSV rows and JSON Lines frames of one run."""

    def __init__(self, report: Path, frames: Path | None):
        self.report_part = partial_path(report)
        self.frames_part = None if frames is None else partial_path(frames)
        self._rows = open(self.report_part, "a", encoding="utf-8", newline="")
        self._writer = csv.writer(self._rows, lineterminator="\n")
        if self._rows.tell() == 0:
            self._writer.writerow(COLUMNS)
            self._sync(self._rows)
        self._frames = None if self.frames_part is None else open(self.frames_part, "a", encoding="utf-8")

    @staticmethod
    def _sync(fh) -> None:
        fh.flush()
        os.fsync(fh.fileno())

    def add(self, outcome: CaptureOutcome) -> None:
        with signals_deferred():
            if self._frames is not None and outcome.frame_lines:
                self._frames.write("".join(line + "\n" for line in outcome.frame_lines))
                self._sync(self._frames)  # the frames first: a row vouches for frames already on disk
            for row in outcome.rows:  # a capture's rows (one per link) together, after its frames
                self._writer.writerow(row.to_csv())
            self._sync(self._rows)

    def close(self) -> None:
        for fh in (self._frames, self._rows):
            if fh is not None:
                fh.close()


def _unlink_quietly(path: Path) -> None:
    with contextlib.suppress(OSError):
        os.unlink(path)


@contextlib.contextmanager
def exclusive(*outputs: Path) -> Iterator[int | None]:
    """One batch at a time per report and per frames file (advisory locks on hidden files beside them).

    Yields the first lock's fd (a forked worker closes its copies of all of them).
    """
    try:
        import fcntl
    except ImportError:  # not POSIX: no lock
        yield None
        return
    with contextlib.ExitStack() as stack:
        fds = []
        for out in outputs:
            lock = lock_path(Path(os.path.realpath(out)))  # one lock whatever name (or link) reaches the file
            fh = stack.enter_context(open(lock, "a"))
            try:
                fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError:
                raise IqdemodError(f"{out}: another batch is writing this file") from None
            stack.callback(_unlink_quietly, lock)
            fds.append(fh.fileno())
        LOCK_FDS[:] = fds
        try:
            yield fds[0]
        finally:
            LOCK_FDS[:] = []


def clear(report: Path, frames: Path | None) -> None:
    """A fresh run: the journals of an earlier one go."""
    for part in filter(None, (partial_path(report), frames and partial_path(frames))):
        with contextlib.suppress(FileNotFoundError):
            os.unlink(part)


# --------------------------------------------------------------------------- resume
Key = tuple[str, str]  # a row's (path, link name): CaptureRow.key


def _whole(done: dict[Key, tuple[CaptureRow, int]], tasks: list[CaptureTask]) -> None:
    """Drop from `done` every capture that is not finished for all its links (it is redone whole)."""
    for t in tasks:
        keys = t.keys()
        if not all(k in done for k in keys):
            for k in keys:
                done.pop(k, None)


def _finished(tasks: list[CaptureTask], sources: list[tuple[Path, Path | None]]) -> dict[Key, tuple[CaptureRow, int]]:
    """Rows of earlier runs (report, then journal) that still hold: ok, same size, mtime and settings, for
    every link of their capture."""
    previous: dict[Key, tuple[CaptureRow, int]] = {}
    for i, (rp, _) in enumerate(sources):
        if rp.exists():
            for row in read_report(rp):
                previous[row.key] = (row, i)
    done = {}
    for t in tasks:
        for key in t.keys():
            row, i = previous.get(key, (None, 0))
            if row is not None and row.ok and (row.size_bytes, row.mtime_ns, row.settings_digest) == (
                    t.size_bytes, t.mtime_ns, t.digest(key[1])):
                done[key] = (row, i)
    _whole(done, tasks)
    return done


def _frame_sources(done: dict[Key, tuple[CaptureRow, int]], sources: list[tuple[Path, Path | None]],
                   tasks: list[CaptureTask]) -> dict[tuple[int, str, str], Key]:
    """(source, capture name there, link name) -> key of each finished row whose frames are all in one file.

    A row whose size, mtime and settings match gives the same frames in any run, so its
    frames may come from either file; but all of them from one, or its capture is redone
    (all its rows dropped from `done`).
    """
    counts: dict[tuple[int, str, str], int] = {}
    for i, (_, fp) in enumerate(sources):
        if fp is not None and fp.exists():
            for line in complete_lines(fp, strict=False):
                with contextlib.suppress(ValueError, AttributeError, TypeError, KeyError):
                    rec = json.loads(line)
                    key = (i, rec["capture"], rec.get("link", ""))
                    counts[key] = counts.get(key, 0) + 1
    keep: dict[tuple[int, str, str], Key] = {}
    for key, (row, i) in list(done.items()):
        want = row.frame_records
        src = next((j for j in (i, 1 - i)
                    if want is not None and counts.get((j, row.capture, row.link_name), 0) == want), None)
        if src is None:
            del done[key]
        else:
            keep[(src, row.capture, row.link_name)] = key
    _whole(done, tasks)
    return {k: v for k, v in keep.items() if v in done}


def _copy_frames(out, sources: list[tuple[Path, Path | None]], keep: dict[tuple[int, str, str], Key],
                 rows: dict[Key, CaptureRow]) -> None:
    """The kept rows' frames into the new frames journal, under their capture's name of this run."""
    for i, (_, fp) in enumerate(sources):
        if fp is None or not fp.exists() or not any(k[0] == i for k in keep):
            continue
        for line in complete_lines(fp, strict=False, note=False):  # noted when counted
            try:
                rec = json.loads(line)
                key = keep.get((i, rec["capture"], rec.get("link", "")))
            except (ValueError, KeyError, TypeError, AttributeError):
                continue
            if key is None:
                continue
            if rec["capture"] != rows[key].capture:
                rec["capture"] = rows[key].capture
                line = json.dumps(rec) + "\n"
            out.write(line)


def carry_over(tasks: list[CaptureTask], report: Path, frames: Path | None) -> dict[Key, CaptureRow]:
    """Resume: rewrite the journals to hold the finished captures; return their rows by key (path, link name).

    A capture is finished only when every one of its links has a row that still holds (and,
    with a frames file, all that row's frames); otherwise all its links are redone.
    """
    sources = [(report, frames), (partial_path(report), None if frames is None else partial_path(frames))]
    done = _finished(tasks, sources)
    keep = _frame_sources(done, sources, tasks) if frames is not None else {}
    current = {key: t for t in tasks for key in t.keys()}
    rows = {}
    for key, (row, _) in done.items():
        t = current[key]
        rows[key] = dataclasses.replace(row, capture=t.capture, transmitter=t.label(key[1]), link=t.profile(key[1]),
                                        frame_records=row.frame_records if frames is not None else None)
    # the frames journal first: a row must never point at frames that are not there
    if frames is not None:
        with atomic_writer(sources[1][1], "w") as out:
            _copy_frames(out, sources, keep, rows)
    with atomic_writer(sources[1][0], "w") as out:
        write_rows(out, rows.values())
    return rows
