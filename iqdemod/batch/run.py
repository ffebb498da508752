"""Running a batch: collect, resume, process on an executor, journal, label, commit the report."""

from __future__ import annotations

import contextlib
import dataclasses
import os
import sys
import time
from pathlib import Path
from typing import Any, Iterable, Mapping

from ..files import atomic_files, check_distinct, classify_output
from ..errors import IqdemodError, LinkError, OutputError, quote
from ..link import Link
from . import executors, journal
from .collect import FolderLink, Found, discover, fingerprint, folder_links, mtime_time
from .journal import Journal, lock_path, partial_path
from .report import BatchResult, CaptureRow, labelled_frames, write_rows
from .transmitters import label_transmitters
from .worker import CaptureTask

__all__ = ["run_batch"]


def _check_arguments(target_ber: float, jobs: int | None, report: Path, frames: Path | None, plot,
                     cluster: str | None) -> None:
    """Refuse before any work: a bad number, an output that cannot take a journal, a missing extra."""
    if not 0 < target_ber < 0.5:
        raise IqdemodError(f"target BER {target_ber:g}: must be within (0, 0.5)")
    if jobs is not None and jobs < 1:
        raise IqdemodError(f"jobs {jobs}: must be >= 1")
    for role, target in (("report", report), ("frames file", frames)):
        if target is not None and classify_output(target).kind != "file":
            raise OutputError(f"{role} {quote(str(target))}: must be a regular file (its journal "
                              f"{partial_path(target).name} is kept beside it), not a FIFO, device or -")
    if plot is not None:
        classify_output(plot)
        from ..plots import require_matplotlib

        require_matplotlib()
    if cluster is not None:
        executors.check_cluster_address(cluster)


def _check_outputs(report: Path, frames: Path | None, plot, found: list[Found], links: list[FolderLink],
                   inputs: Iterable[tuple[str, Any]]) -> None:
    """Refuse before any work: an output (journals and locks included) that is an input or another output."""
    from ..capture import capture_files

    outputs = [("report", report), ("report journal", partial_path(report)), ("report lock", lock_path(report))]
    if frames is not None:
        outputs += [("frames file", frames), ("frames journal", partial_path(frames)),
                    ("frames lock", lock_path(frames))]
    outputs.append(("plot", plot))
    ins = list(inputs)
    for f in found:
        ins += [("capture", c) for c in capture_files(f.path)]
    ins += [("folder link profile", p) for p in dict.fromkeys(lk.path for lk in links if lk.path)]
    check_distinct(outputs, ins)


def _link_source(link_source, inputs: list[tuple[str, Any]]) -> str | dict[str, str]:
    """The ``link`` column of the batch's own link(s): given (one profile, or one per link name), or else
    the profile(s) among `inputs` (several joined by "; ")."""
    if isinstance(link_source, Mapping):
        return {str(name): os.fspath(p) for name, p in link_source.items()}
    if link_source is None:  # the command line names its --link profile(s) among the inputs
        return "; ".join(os.fspath(p) for role, p in inputs if p is not None and "link" in role)
    return os.fspath(link_source)


def _tasks(found: list[Found], links: list[FolderLink], *, target_ber: float, want_frames: bool,
           link_source: str | dict[str, str]) -> list[CaptureTask]:
    tasks = []
    for f, lk in zip(found, links):
        size, mtime = fingerprint(f.path)
        tasks.append(CaptureTask(
            capture=str(f.path), path=os.path.abspath(f.path), link=lk.link, target_ber=target_ber,
            want_frames=want_frames, link_path=lk.path or (link_source if lk.link is not None else ""),
            link_error=lk.error, transmitter=lk.label, size_bytes=size, mtime_ns=mtime,
            mtime_time=mtime_time(f.path),
        ))
    return tasks


def _process(todo: list[CaptureTask], rows: dict[tuple[str, str], CaptureRow], report: Path, frames: Path | None,
             *, jobs: int | None, cluster: str | None, lock_fd: int | None, progress: bool) -> Journal:
    """Every capture of `todo` through an executor into the journal (and `rows`, by key); the journal, closed."""
    # the workers first: a forked worker must find no other thread and no open journal
    source = executors.start(todo, jobs=jobs, cluster=cluster, lock_fd=lock_fd)
    interrupted = True
    book = bar = None
    try:
        book = Journal(report, frames)
        if progress:
            from tqdm import tqdm

            bar = tqdm(total=len(todo), unit="capture", desc="batch", file=sys.stderr, dynamic_ncols=True, delay=1.0,
                       disable=None)  # none on a log file or pipe, as every bar of the tool
        n_failed = 0
        for task, outcome in source:
            book.add(outcome)
            rows.update((row.key, row) for row in outcome.rows)
            if bar is not None:
                n_failed += not all(row.ok for row in outcome.rows)
                bar.set_postfix(failed=n_failed, refresh=False)
                bar.update(1)
        interrupted = False
    finally:
        source.close(interrupted=interrupted)
        if bar is not None:
            bar.close()
        if book is not None:
            book.close()
    return book


def _commit(ordered: list[CaptureRow], book: Journal, report: Path, frames: Path | None) -> None:
    """The frames (labelled) and the report that vouches for them last, together or not at all."""
    with atomic_files() as files:
        if frames is not None:
            labelled_frames(book.frames_part, files.open(frames, "w"),
                            {(r.capture, r.link_name): r.transmitter for r in ordered}, [r.capture for r in ordered])
        write_rows(files.open(report, "w"), ordered)
    for part in filter(None, (book.frames_part, book.report_part)):  # kept for --resume until now
        with contextlib.suppress(FileNotFoundError):
            os.unlink(part)


def run_batch(
    paths: Iterable[str | os.PathLike],
    link: Link | Mapping[str, Link] | None,
    *,
    report: str | os.PathLike,
    frames: str | os.PathLike | None = None,
    jobs: int | None = None,
    resume: bool = False,
    cluster: str | None = None,
    target_ber: float = 1e-5,
    link_overrides: Mapping[str, Any] | None = None,
    link_source: str | os.PathLike | Mapping[str, str | os.PathLike] | None = None,
    plot: str | os.PathLike | None = None,
    progress: bool = False,
    inputs: Iterable[tuple[str, str | os.PathLike | None]] = (),
) -> BatchResult:
    """Assess every capture under `paths` and write the report (and frames): a row per capture and link.

    Parameters
    ----------
    paths : iterable of str or PathLike
        Files, folders or glob patterns (see :func:`collect_captures`).
    link : Link, mapping of str to Link, or None
        The link of every capture not below a folder ``link.toml``, or several
        by name (:func:`iqdemod.load_links`): each capture is then read once for
        all of them and has a row per link (``link_name``); None when every
        capture has a folder profile. A folder profile with several
        ``[[signal]]`` entries gives its captures several links the same way.
    report : str or PathLike
        The CSV report, one row per capture and link, in collection order, then
        link order (columns: :data:`COLUMNS`, described in :data:`COLUMN_HELP`).
    frames : str or PathLike, optional
        Write every frame of every capture here as JSON Lines (``capture`` is the
        report's name of the capture, ``link`` the link's name when it has one,
        ``transmitter`` its row's label). Each capture's frames are together, each
        link's in time order; the captures in the order they finished.
    jobs : int, optional
        Worker processes, each decoding with one thread; default one per core. 1
        runs in this process, with one thread.
    resume : bool
        Keep the captures an earlier run finished (see the package notes); a
        capture of several links counts as finished only when all of its rows do.
    cluster : str, optional
        Address of a running Dask scheduler (``tcp://host:8786``); the captures
        are then processed by its workers, `jobs` is ignored.
    target_ber : float
        The BER the margin is measured against.
    link_overrides : mapping, optional
        Flag-style values (:func:`iqdemod.load_link`) applied on top of every
        folder profile, as they were on top of `link`.
    link_source : str, PathLike or mapping of str to one, optional
        What the ``link`` column names for `link` (its profile), or for each of
        several links by name; by default the inputs whose role names a link
        profile in `inputs` (several joined by "; "), else nothing.
    plot : str or PathLike, optional
        Also write the trend figure (:func:`plot_trend`) here.
    progress : bool
        A tqdm bar over the captures, with ETA, on stderr.
    inputs : iterable of (role, path)
        Other files this run reads (the ``--link`` profile); with the captures
        and the folder profiles, none may be an output.

    Returns
    -------
    BatchResult

    Raises
    ------
    IqdemodError
        When nothing is collected, a path does not exist, no link applies,
        the report or frames file is locked by another batch, or the cluster is
        unreachable. :class:`~iqdemod.errors.OutputError` when an output (the
        report, the frames file, their journals, the plot) is an input or
        another output, or is not a regular file.
        A capture that fails is *not* raised: its row says why.
    KeyboardInterrupt
        After Ctrl-C (or SIGTERM turned into it); every finished capture is
        in the journal (:func:`partial_path` of `report`) for ``resume``.

    Examples
    --------
    Two synthetic captures of four buoy frames each (14 dB, an hour apart)
    in one folder, assessed in this process; the report has a row per capture:

    >>> import csv, os, tempfile
    >>> from iqdemod.profile import load_link
    >>> from iqdemod.synth import SynthConfig, synthesize
    >>> link = load_link(None, rate=48000, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> tmp = tempfile.TemporaryDirectory()
    >>> for i, start_time in enumerate(("2026-11-30T22:00:00Z", "2026-11-30T23:00:00Z")):
    ...     _ = synthesize(os.path.join(tmp.name, f"night{i}"),
    ...                    SynthConfig(link=link, ebn0_db=(14.0,), n_frames=4, seed=5 + i, start_time=start_time))
    >>> report = os.path.join(tmp.name, "report.csv")
    >>> result = run_batch([tmp.name], link, report=report, jobs=1)
    >>> result.n_ok, result.n_failed, result.n_frames_crc_ok
    (2, 0, 8)
    >>> with open(report, newline="", encoding="utf-8") as fh:
    ...     rows = list(csv.DictReader(fh))
    >>> [(os.path.basename(r["capture"]), r["status"], r["frames_crc_ok"], r["start_time"]) for r in rows]
    [('night0.sigmf-meta', 'ok', '4', '2026-11-30T22:00:00Z'), ('night1.sigmf-meta', 'ok', '4', '2026-11-30T23:00:00Z')]
    >>> tmp.cleanup()
    """
    t_start = time.perf_counter()
    report = Path(report)
    frames_path = None if frames is None else Path(frames)
    _check_arguments(target_ber, jobs, report, frames_path, plot, cluster)
    found = discover(paths)
    if not found:
        raise IqdemodError("no captures found (looked for SigMF, WAV/FLAC and raw IQ files)")
    links = folder_links(found, link, link_overrides or {})
    inputs = list(inputs)
    _check_outputs(report, frames_path, plot, found, links, inputs)
    if link is None and all(lk.link is None and "no link" in lk.error for lk in links):
        raise LinkError("no link: give --link FILE (or --baud and --shift), or put a link.toml in the capture folders")
    tasks = _tasks(found, links, target_ber=target_ber, want_frames=frames_path is not None,
                   link_source=_link_source(link_source, inputs))
    with journal.exclusive(*filter(None, (report, frames_path))) as lock_fd:
        if resume:
            rows = journal.carry_over(tasks, report, frames_path)
        else:
            rows = {}
            journal.clear(report, frames_path)
        todo = [t for t in tasks if any(key not in rows for key in t.keys())]
        book = _process(todo, rows, report, frames_path, jobs=jobs, cluster=cluster, lock_fd=lock_fd,
                        progress=progress)
        ordered = [rows[key] for t in tasks for key in t.keys()]
        ordered = [dataclasses.replace(r, transmitter=lab) for r, lab in zip(ordered, label_transmitters(ordered))]
        _commit(ordered, book, report, frames_path)
    if plot is not None:
        from .trend import plot_trend

        plot_trend(ordered, plot)
    return BatchResult.of(ordered, n_skipped=len(tasks) - len(todo), report=str(report),
                          frames=None if frames_path is None else str(frames_path),
                          elapsed_s=time.perf_counter() - t_start)
