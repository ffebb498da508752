"""Batch: link health of whole archives of captures, on every core or on a Dask cluster.

A batch collects the captures under some paths, assesses each one
(:func:`iqdemod.health.assess`) in a pool of worker processes (or on a running
Dask ``distributed`` scheduler), and writes one CSV row per capture and,
optionally, every frame to one JSON Lines file.

Workers
-------
``jobs`` worker processes (default: one per core; ``jobs=1`` works in the
calling process). On Linux, while the calling process has no other thread,
the workers are forked, so they start at once with everything imported;
otherwise they are fresh interpreters (spawned), which import iqdemod first
— a script that calls :func:`run_batch` then needs the usual
``if __name__ == "__main__":`` guard. Each worker keeps numpy's BLAS to one
thread, since the pool already fills the cores. A worker whose parent was
killed outright leaves within half a second. With a Dask scheduler
(``cluster``) the captures go to its workers instead, one task each; they
must see the archive at the same (absolute) paths.

Nothing finished is ever lost
-----------------------------
Rows are appended to ``REPORT.partial`` (``report.csv.partial`` beside
``report.csv``) as each capture finishes, flushed and fsync'd, with Ctrl-C
and SIGTERM held off while a row is written so that none is torn; frames go
to ``FRAMES.partial`` the same way,
*before* the row that vouches for them. When every capture is done the final
report is written atomically (temporary file in the same folder, then
renamed), the frames journal is renamed into place and the journal removed. A
killed run therefore loses at most the captures in flight; a report from an
earlier run stays untouched until the new one is complete.

``resume=True`` reads the old report and the journal (a torn last line, from a
kill in mid-write, is dropped) and skips every capture whose earlier row

- has status ``ok`` (rows with status ``error`` are tried again: the cause
  may have been transient, e.g. a file still being copied, and a retry is
  cheap next to re-running the archive),
- has the same ``size_bytes`` and ``mtime_ns`` (for a SigMF pair: both files,
  summed and latest), and the same ``settings`` (a digest of the link and the
  target BER, so a changed profile re-runs the captures it applies to),
- and, when frames are written, whose frames are all present.

The new report holds exactly one row per capture collected in this run, in
collection order; rows of captures that are no longer collected are dropped.

Link profile per folder
-----------------------
A folder holding a ``link.toml`` gives its own link to every capture below it
(the nearest such folder wins, looking up to the folder named on the command
line); its captures are labelled by that folder as their transmitter.
Otherwise transmitters are told apart by their measured carrier error (see
:func:`label_transmitters`).
"""

from __future__ import annotations

import contextlib
import csv
import dataclasses
import hashlib
import json
import math
import os
import signal
import stat
import sys
import threading
import time
import warnings
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Iterable, Iterator, Mapping, Sequence

from .errors import IqdemodError, IqdemodWarning, LinkError, OutputError, quote
from .link import Link, load_link
from ._io import atomic_files, atomic_writer, check_distinct, classify_output

__all__ = [
    "CAPTURE_SUFFIXES",
    "FOLDER_LINK",
    "CaptureTask",
    "CaptureRow",
    "CaptureOutcome",
    "BatchResult",
    "collect_captures",
    "process_capture",
    "run_batch",
    "read_report",
    "label_transmitters",
    "plot_trend",
    "partial_path",
]

RAW_SUFFIXES = (".cu8", ".ci8", ".cs8", ".ci16", ".cs16", ".cf32", ".cfile", ".raw", ".iq", ".bin")
AUDIO_SUFFIXES = (".wav", ".flac")
SIGMF_SUFFIXES = (".sigmf-meta", ".sigmf-data")
ARCHIVE_SUFFIXES = (".sigmf",)  # a SigMF archive: one recording in a tar
CAPTURE_SUFFIXES = SIGMF_SUFFIXES + ARCHIVE_SUFFIXES + AUDIO_SUFFIXES + RAW_SUFFIXES
FOLDER_LINK = "link.toml"
N_WEAKEST = 5
# Carrier errors of captures from one transmitter lie within this of each other (see label_transmitters).
TX_TOLERANCE_HZ = 200.0
_THREAD_VARS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "VECLIB_MAXIMUM_THREADS",
                "NUMEXPR_NUM_THREADS")


# --------------------------------------------------------------------------- collection
@dataclass(frozen=True)
class _Found:
    path: Path  # as the user will read it (relative when the PATH was)
    root: Path  # the folder a link.toml is looked for up to


def _has_magic(text: str) -> bool:
    return any(c in text for c in "*?[")


def _is_capture_name(name: str) -> bool:
    low = name.lower()
    return not name.startswith(".") and low.endswith(CAPTURE_SUFFIXES)


def _canonical(path: Path) -> Path:
    """A SigMF pair is named by its metadata file when it exists, else by the file found."""
    name = path.name
    if name.lower().endswith(".sigmf-data"):
        meta = path.with_name(name[: -len(".sigmf-data")] + ".sigmf-meta")
        if meta.exists():
            return meta
    return path


def _is_regular(path: Path) -> bool:
    """True for a regular file (a link to one counts); a FIFO or device is skipped with a warning.

    Reading a FIFO would stall the whole batch until something writes to it, and a device has
    no end, so only regular files are captures.
    """
    try:
        mode = os.stat(path).st_mode
    except OSError:
        return True  # missing (a dangling link, or half of a pair): its row will say why
    if stat.S_ISREG(mode):
        return True
    if not stat.S_ISDIR(mode):
        warnings.warn(f"{path}: not a regular file (a FIFO, device or socket): skipped", IqdemodWarning,
                      stacklevel=3)
    return False


def _walk(folder: Path) -> Iterator[Path]:
    for top, dirs, files in os.walk(folder):
        dirs[:] = sorted(d for d in dirs if not d.startswith("."))
        for name in sorted(files):
            if _is_capture_name(name) and _is_regular(Path(top) / name):
                yield Path(top) / name


def _discover(paths: Iterable[str | os.PathLike]) -> list[_Found]:
    import glob

    found: dict[str, _Found] = {}

    def add(p: Path, root: Path) -> None:
        p = _canonical(p)
        key = os.path.abspath(p)
        if key not in found:
            found[key] = _Found(p, root)

    for item in paths:
        text = os.fspath(item)
        p = Path(text)
        if p.is_dir():
            for f in _walk(p):
                add(f, p)
        elif p.exists() or p.is_symlink():
            if _is_capture_name(p.name) and _is_regular(p):
                add(p, p.parent)
        elif _has_magic(text):
            parts = Path(text).parts
            lead = [q for q in parts[: next(i for i, q in enumerate(parts) if _has_magic(q))]]
            root = Path(*lead) if lead else Path(".")
            matches = sorted(glob.glob(text, recursive=True))
            if not matches:
                raise IqdemodError(f"{quote(text)}: no file matches this pattern")
            for m in matches:
                mp = Path(m)
                if mp.is_dir():
                    for f in _walk(mp):
                        add(f, root)
                elif _is_capture_name(mp.name) and _is_regular(mp):
                    add(mp, root)
        else:
            raise IqdemodError(f"{quote(text)}: no such file or folder")
    return sorted(found.values(), key=lambda f: str(f.path))


def collect_captures(paths: Iterable[str | os.PathLike]) -> list[Path]:
    """The capture files under `paths`, each once, in sorted order.

    Parameters
    ----------
    paths : iterable of str or PathLike
        Files, folders (searched recursively) or glob patterns (``**`` allowed).

    Returns
    -------
    list of Path
        One entry per capture: a SigMF pair once (named by its ``.sigmf-meta``
        when it exists, so a lone ``.sigmf-data`` still counts, and then fails
        with its reason), ``.sigmf`` archives, ``.wav``/``.flac``, and raw files with the suffixes of
        :data:`RAW_SUFFIXES`. Everything else (``*.truth.json``, reports, hidden
        files and folders) is skipped. Sorted by path; the same file reached
        twice counts once.

    Raises
    ------
    IqdemodError
        For a path that does not exist or a pattern that matches nothing.

    Examples
    --------
    >>> collect_captures(["archive/"])  # doctest: +SKIP
    [PosixPath('archive/a/one.sigmf-meta'), PosixPath('archive/b/two.cu8')]
    """
    return [f.path for f in _discover(paths)]


def _fingerprint(path: Path) -> tuple[int | None, int | None]:
    """(size in bytes, latest mtime in ns) of a capture; a SigMF pair's two files together."""
    from .capture import sigmf_pair

    pair = sigmf_pair(path)
    files = list(pair) if pair is not None else [path]
    size = mtime = None
    for f in files:
        try:
            st = f.stat()
        except OSError:
            continue
        size = (size or 0) + st.st_size
        mtime = max(mtime or 0, st.st_mtime_ns)
    return size, mtime


def _mtime_time(path: Path) -> str | None:
    from .capture import sigmf_pair

    pair = sigmf_pair(path)
    for f in ([pair[1], pair[0]] if pair is not None else [path]):
        with contextlib.suppress(OSError):
            t = datetime.fromtimestamp(f.stat().st_mtime, timezone.utc)
            return t.strftime("%Y-%m-%dT%H:%M:%SZ") + " (mtime)"
    return None


# --------------------------------------------------------------------------- rows
def _settings_digest(link: Link | None, target_ber: float) -> str:
    doc = {"link": None if link is None else link.as_dict(), "target_ber": float(target_ber)}
    return hashlib.sha256(json.dumps(doc, sort_keys=True).encode()).hexdigest()[:12]


@dataclass(frozen=True)
class CaptureTask:
    """Everything a worker needs for one capture (plain, picklable values).

    Attributes
    ----------
    capture : str
        The capture as the report names it.
    path : str
        Its absolute path (what the worker opens; workers of a cluster must
        see the archive at the same path).
    link : Link or None
        None when no link applies; `link_error` says why.
    """

    capture: str
    path: str
    link: Link | None
    target_ber: float = 1e-5
    want_frames: bool = False
    link_path: str = ""
    link_error: str = ""
    transmitter: str = ""
    size_bytes: int | None = None
    mtime_ns: int | None = None
    mtime_time: str | None = None
    settings: str = ""


@dataclass(frozen=True)
class CaptureRow:
    """One capture's row of the batch report (CSV columns in field order).

    Rates are probabilities, ``*_db`` decibels; None where nothing could be
    measured (and for every figure of a capture that failed).

    Attributes
    ----------
    capture : str
        The capture as collected (the ``.sigmf-meta`` of a pair).
    path : str
        Absolute path; the key of ``--resume``.
    status : str
        ``"ok"`` or ``"error"``.
    error : str
        ``"Type: message"`` when the capture failed.
    warnings : tuple of str
        Tolerated defects (cut final sample, NaN/Inf, clipping).
    transmitter : str
        The folder of its ``link.toml``, or a label by carrier error.
    link : str
        The folder profile that applied ("" for the batch's link).
    start_time : str or None
        SigMF ``core:datetime``, or the data file's mtime marked ``(mtime)``.
    size_bytes, mtime_ns : int or None
        For ``--resume``: a SigMF pair's two files summed and latest.
    frame_records : int or None
        Frames written to the frames file for this capture (None: none asked for).
    settings : str
        Digest of the link and target BER the row was made with.
    elapsed_s : float or None
        Wall time the capture took to process, s.
    cpu_s : float or None
        CPU time it took (of the thread that processed it), s.
    """

    capture: str
    path: str
    status: str
    error: str = ""
    warnings: tuple[str, ...] = ()
    transmitter: str = ""
    link: str = ""
    start_time: str | None = None
    duration_s: float | None = None
    bursts: int | None = None
    frames: int | None = None
    frames_crc_ok: int | None = None
    ebn0_db: float | None = None
    ber_predicted: float | None = None
    per_predicted: float | None = None
    per_observed: float | None = None
    verdict: str = ""
    freq_error_hz: float | None = None
    freq_spread_hz: float | None = None
    clock_error_ppm: float | None = None
    margin_db: float | None = None
    size_bytes: int | None = None
    mtime_ns: int | None = None
    frame_records: int | None = None
    settings: str = ""
    elapsed_s: float | None = None
    cpu_s: float | None = None

    def __post_init__(self) -> None:
        if self.status not in ("ok", "error"):
            raise IqdemodError(f"status {self.status!r}: must be 'ok' or 'error'")
        object.__setattr__(self, "warnings", tuple(self.warnings))

    @property
    def ok(self) -> bool:
        return self.status == "ok"

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready dict (warnings as a list)."""
        d = dataclasses.asdict(self)
        d["warnings"] = list(self.warnings)
        return d

    def to_csv(self) -> list[str]:
        """The CSV fields, in :data:`COLUMNS` order (no newlines in any field)."""
        out = []
        for name in COLUMNS:
            value = getattr(self, name)
            if value is None:
                text = ""
            elif name == "warnings":
                text = "; ".join(value)
            elif isinstance(value, float):
                text = format(value, ".7g") if math.isfinite(value) else ""
            else:
                text = str(value)
            out.append(" ".join(text.splitlines()))
        return out

    @classmethod
    def from_csv(cls, record: Mapping[str, str]) -> "CaptureRow":
        """Parse a CSV record (a dict by column; unknown columns ignored, missing ones empty)."""
        kw: dict[str, Any] = {}
        for f in dataclasses.fields(cls):
            text = record.get(f.name)
            if text is None:
                continue
            kind = _COLUMN_KIND[f.name]
            if kind == "tuple":
                kw[f.name] = tuple(w for w in text.split("; ") if w)
            elif text == "":
                kw[f.name] = None if kind in ("int", "float", "optstr") else ""
            elif kind == "int":
                kw[f.name] = int(text)
            elif kind == "float":
                kw[f.name] = float(text)
            else:
                kw[f.name] = text
        if "capture" not in kw or "status" not in kw or "path" not in kw:
            raise ValueError("capture, path and status are required")
        return cls(**kw)


COLUMNS = tuple(f.name for f in dataclasses.fields(CaptureRow))
_COLUMN_KIND = {
    f.name: ("tuple" if f.name == "warnings" else
             "int" if "int" in str(f.type) else
             "float" if "float" in str(f.type) else
             "optstr" if "None" in str(f.type) else "str")
    for f in dataclasses.fields(CaptureRow)
}


@dataclass(frozen=True)
class CaptureOutcome:
    """What a worker hands back: the row and the capture's frames as JSON Lines (no newline)."""

    row: CaptureRow
    frame_lines: tuple[str, ...] = ()


def _error_text(exc: BaseException) -> str:
    return f"{type(exc).__name__}: {exc}"


def _failed(task: CaptureTask, exc: BaseException, warned: Sequence[str] = (), elapsed_s: float | None = None,
            cpu_s: float | None = None) -> CaptureOutcome:
    return CaptureOutcome(CaptureRow(
        capture=task.capture, path=task.path, status="error", error=_error_text(exc), warnings=tuple(warned),
        transmitter=task.transmitter, link=task.link_path, start_time=task.mtime_time,
        size_bytes=task.size_bytes, mtime_ns=task.mtime_ns, frame_records=0 if task.want_frames else None,
        settings=task.settings, elapsed_s=elapsed_s, cpu_s=cpu_s,
    ))


def process_capture(task: CaptureTask) -> CaptureOutcome:
    """Assess one capture; never raises for a bad capture (the row says why).

    This is the unit of work that runs in a pool process or on a Dask worker.

    Parameters
    ----------
    task : CaptureTask

    Returns
    -------
    CaptureOutcome
        Status ``ok`` with the health figures, or ``error`` with
        ``"Type: message"`` for any exception the capture raised.
    """
    from .capture import CaptureWarning
    from .health import assess

    t0, c0 = time.perf_counter(), time.thread_time()
    frames: list | None = [] if task.want_frames else None
    # Warnings are per capture state here; catch_warnings is process-global, so on a threaded
    # Dask worker a stray non-capture warning could land on a neighbour's row. The capture
    # defects themselves come from the report, not from this net.
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            if task.link is None:
                raise LinkError(task.link_error or "no link description")
            report = assess(task.path, task.link, target_ber=task.target_ber, frames_out=frames)
        except Exception as exc:  # noqa: BLE001 - any failure of one capture is recorded, not raised
            return _failed(task, exc, [str(w.message) for w in caught], time.perf_counter() - t0,
                           time.thread_time() - c0)
    warned = list(report.warnings)
    for w in caught:
        if not issubclass(w.category, CaptureWarning):
            text = f"{w.category.__name__}: {w.message}"
            if text not in warned:
                warned.append(text)
    d = report.as_dict()
    lines: tuple[str, ...] = ()
    if frames is not None:
        recs = []
        for f in frames:
            rec = f.as_record()
            rec["capture"] = task.capture
            recs.append(json.dumps(rec))
        lines = tuple(recs)
    row = CaptureRow(
        capture=task.capture, path=task.path, status="ok", warnings=tuple(warned), transmitter=task.transmitter,
        link=task.link_path, start_time=d.get("start_time") or task.mtime_time,
        duration_s=d["duration_s"], bursts=d["bursts"], frames=d["frames"], frames_crc_ok=d["frames_crc_ok"],
        ebn0_db=d["ebn0_db"], ber_predicted=d["ber_predicted"], per_predicted=d["per_predicted"],
        per_observed=d["per_observed"], verdict=d.get("verdict") or "", freq_error_hz=d["freq_error_hz"],
        freq_spread_hz=d.get("freq_spread_hz"), clock_error_ppm=d["clock_error_ppm"], margin_db=d["margin_db"],
        size_bytes=task.size_bytes, mtime_ns=task.mtime_ns,
        frame_records=len(lines) if task.want_frames else None, settings=task.settings,
        elapsed_s=time.perf_counter() - t0, cpu_s=time.thread_time() - c0,
    )
    return CaptureOutcome(row, lines)


# --------------------------------------------------------------------------- transmitters
def label_transmitters(rows: Sequence[CaptureRow], *, tolerance_hz: float = TX_TOLERANCE_HZ) -> list[str]:
    """A transmitter label per row.

    A row whose capture lies below a folder ``link.toml`` keeps that folder
    as its label. The others that were measured are grouped by carrier error:
    sorted by ``freq_error_hz`` and split wherever the gap between neighbours
    exceeds ``max(tolerance_hz, 3 × the median burst-to-burst spread)`` of the
    captures (``freq_spread_hz``); each group is labelled ``tx1 (+420 Hz)``,
    ``tx2 …`` in ascending carrier error. Rows without a carrier error (failed,
    no bursts) get ``""``.

    Parameters
    ----------
    rows : sequence of CaptureRow
    tolerance_hz : float
        The smallest gap, Hz, that separates two transmitters.

    Returns
    -------
    list of str
    """
    labels = [r.transmitter if r.link else "" for r in rows]
    idx = [i for i, r in enumerate(rows) if not r.link and r.ok and r.freq_error_hz is not None
           and math.isfinite(r.freq_error_hz)]
    if not idx:
        return labels
    idx.sort(key=lambda i: rows[i].freq_error_hz)
    spreads = sorted(rows[i].freq_spread_hz for i in idx if rows[i].freq_spread_hz is not None)
    spread = spreads[len(spreads) // 2] if spreads else 0.0
    tol = max(tolerance_hz, 3.0 * spread)
    groups: list[list[int]] = [[idx[0]]]
    for a, b in zip(idx, idx[1:]):
        if rows[b].freq_error_hz - rows[a].freq_error_hz > tol:
            groups.append([])
        groups[-1].append(b)
    for n, g in enumerate(groups, 1):
        freqs = sorted(rows[i].freq_error_hz for i in g)
        centre = freqs[len(freqs) // 2]
        for i in g:
            labels[i] = f"tx{n} ({centre:+.0f} Hz)"
    return labels


# --------------------------------------------------------------------------- report files
def partial_path(path: str | os.PathLike) -> Path:
    """The journal beside a report or frames file: ``NAME.partial``."""
    p = Path(path)
    return p.with_name(p.name + ".partial")


def _lock_path(report: Path) -> Path:
    return report.with_name(f".{report.name}.lock")


def _complete_lines(path: Path, *, strict: bool = True, note: bool = True) -> Iterator[str]:
    """The lines of a journal that were written whole.

    A last line without its newline (a kill in mid-write, cut anywhere, even inside a
    multi-byte character) is dropped with a warning. A whole line that is not UTF-8 raises
    UnicodeDecodeError when `strict`, else it is dropped with a warning (frames journal).
    """
    with open(path, "rb") as fh:
        for raw in fh:
            if not raw.endswith(b"\n"):
                if note:
                    warnings.warn(f"{path}: its last line was cut off (a run stopped while writing it): dropped",
                                  IqdemodWarning, stacklevel=2)
                return
            try:
                yield raw.decode("utf-8")
            except UnicodeDecodeError:
                if strict:
                    raise
                if note:
                    warnings.warn(f"{path}: a line that is not UTF-8 text: dropped", IqdemodWarning, stacklevel=2)


def read_report(path: str | os.PathLike) -> list[CaptureRow]:
    """Read a batch report (or its journal) back into rows.

    Raises
    ------
    IqdemodError
        When the file is not a batch report (no capture, path and status columns).
    """
    p = Path(path)
    try:
        lines = list(_complete_lines(p))
    except FileNotFoundError:
        raise IqdemodError(f"{p}: no such report") from None
    except UnicodeDecodeError:
        raise IqdemodError(f"{p}: not a batch report (not UTF-8 text)") from None
    if not lines:
        return []
    reader = csv.DictReader(lines)
    if not {"capture", "path", "status"} <= set(reader.fieldnames or ()):
        raise IqdemodError(f"{p}: not a batch report (expected the columns capture, path, status)")
    rows = []
    for rec in reader:
        with contextlib.suppress(ValueError, TypeError, IqdemodError):
            rows.append(CaptureRow.from_csv(rec))
    return rows


# Ctrl-C and the signals that ask a run to stop (a closed terminal, a quit key, a polite kill)
_STOP_SIGNALS = tuple(getattr(signal, n) for n in ("SIGINT", "SIGTERM", "SIGHUP", "SIGQUIT") if hasattr(signal, n))


@contextlib.contextmanager
def _signals_deferred() -> Iterator[None]:
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
    for sig in _STOP_SIGNALS:
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


class _Journal:
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
        with _signals_deferred():
            if self._frames is not None and outcome.frame_lines:
                self._frames.write("".join(line + "\n" for line in outcome.frame_lines))
                self._sync(self._frames)  # the frames first: a row vouches for frames already on disk
            self._writer.writerow(outcome.row.to_csv())
            self._sync(self._rows)

    def close(self) -> None:
        for fh in (self._frames, self._rows):
            if fh is not None:
                fh.close()


@contextlib.contextmanager
def _exclusive(*outputs: Path) -> Iterator[int | None]:
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
            lock = _lock_path(Path(os.path.realpath(out)))  # one lock whatever name (or link) reaches the file
            fh = stack.enter_context(open(lock, "a"))
            try:
                fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError:
                raise IqdemodError(f"{out}: another batch is writing this file") from None
            stack.callback(_unlink_quietly, lock)
            fds.append(fh.fileno())
        _LOCK_FDS[:] = fds
        try:
            yield fds[0]
        finally:
            _LOCK_FDS[:] = []


_LOCK_FDS: list[int] = []  # every lock this process holds, for forked workers to close


def _unlink_quietly(path: Path) -> None:
    with contextlib.suppress(OSError):
        os.unlink(path)


def _carry_over(tasks: list[CaptureTask], report: Path, frames: Path | None) -> dict[str, CaptureRow]:
    """Resume: rewrite the journals to hold the finished captures; return their rows by path."""
    sources = [(report, frames), (partial_path(report), None if frames is None else partial_path(frames))]
    previous: dict[str, tuple[CaptureRow, int]] = {}
    for i, (rp, _) in enumerate(sources):
        if rp.exists():
            for row in read_report(rp):
                previous[row.path] = (row, i)
    current = {t.path: t for t in tasks}
    done: dict[str, tuple[CaptureRow, int | None]] = {}
    for path, (row, i) in previous.items():
        t = current.get(path)
        if t is None or not row.ok or (row.size_bytes, row.mtime_ns, row.settings) != (
                t.size_bytes, t.mtime_ns, t.settings):
            continue
        done[path] = (row, i)
    keep: dict[tuple[int, str], str] = {}  # (source, capture name there) -> path
    if frames is not None:
        counts: dict[tuple[int, str], int] = {}
        for i, (_, fp) in enumerate(sources):
            if fp is not None and fp.exists():
                for line in _complete_lines(fp, strict=False):
                    with contextlib.suppress(ValueError, AttributeError, TypeError):
                        key = (i, json.loads(line)["capture"])
                        counts[key] = counts.get(key, 0) + 1
        for path, (row, i) in list(done.items()):
            # A capture whose size, mtime and settings match gives the same frames in any run, so
            # its frames may come from either file; but all of them from one, or it is redone.
            want = row.frame_records
            src = next((j for j in (i, 1 - i) if want is not None and counts.get((j, row.capture), 0) == want),
                       None)
            if src is None:
                del done[path]
            else:
                done[path] = (row, src)
                keep[(src, row.capture)] = path
    rows = {}
    for path, (row, _) in done.items():
        t = current[path]
        rows[path] = dataclasses.replace(row, capture=t.capture, transmitter=t.transmitter, link=t.link_path,
                                         frame_records=row.frame_records if frames is not None else None)
    # the frames journal first: a row must never point at frames that are not there
    if frames is not None:
        with atomic_writer(sources[1][1], "w") as out:
            for i, (_, fp) in enumerate(sources):
                if fp is None or not fp.exists() or not any(k[0] == i for k in keep):
                    continue
                for line in _complete_lines(fp, strict=False, note=False):  # noted when counted above
                    try:
                        rec = json.loads(line)
                        path = keep.get((i, rec["capture"]))
                    except (ValueError, KeyError, TypeError):
                        continue
                    if path is None:
                        continue
                    if rec["capture"] != rows[path].capture:
                        rec["capture"] = rows[path].capture
                        line = json.dumps(rec) + "\n"
                    out.write(line)
    with atomic_writer(sources[1][0], "w") as out:
        writer = csv.writer(out, lineterminator="\n")
        writer.writerow(COLUMNS)
        for row in rows.values():
            writer.writerow(row.to_csv())
    return rows


# --------------------------------------------------------------------------- running
def _worker_init(parent_pid: int, lock_fd: int | None) -> None:
    # Ctrl-C reaches the whole process group; only the parent decides what happens then. A
    # forked worker would also have inherited the command line's SIGTERM handler; the parent
    # stops a worker with SIGTERM, which must simply end it.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    for name in ("SIGHUP", "SIGQUIT"):  # these reach the whole group as well (a closed terminal, a quit key)
        if hasattr(signal, name):
            signal.signal(getattr(signal, name), signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    if lock_fd is not None:  # a forked worker's copies of the locks must not outlive the parent
        for fd in {lock_fd, *_LOCK_FDS}:
            with contextlib.suppress(OSError):
                os.close(fd)
    _one_math_thread()  # the pool already uses every core

    # A pool worker holds both ends of its task queue, so it never sees the parent die: when
    # the parent is killed outright (SIGKILL), nobody would ever collect its work. Leave then.
    def watch() -> None:
        while True:
            time.sleep(0.5)
            if os.getppid() != parent_pid:
                os._exit(1)

    threading.Thread(target=watch, name="iqdemod-parent-watch", daemon=True).start()


_THREAD_SETTERS = ("openblas_set_num_threads", "openblas_set_num_threads64_", "scipy_openblas_set_num_threads",
                   "scipy_openblas_set_num_threads64_", "MKL_Set_Num_Threads", "bli_thread_set_num_threads",
                   "omp_set_num_threads")


def _one_math_thread() -> int:
    """Limit the math libraries already loaded in this process to one thread each (Linux).

    A forked worker inherits numpy's BLAS with the parent's thread count, which the thread
    variables can no longer change; with one worker per core those threads only fight over
    the cores (on 2 cores they doubled the time per capture). Best effort: returns how many
    libraries were set.
    """
    import ctypes

    from . import channel, receiver

    channel.FFT_WORKERS = 1  # the front end's FFT threads, likewise
    receiver.PIPELINE = False  # and its read-ahead thread
    try:
        with open("/proc/self/maps", encoding="utf-8") as fh:
            paths = {line.split(None, 5)[5].strip() for line in fh if line.count(" ") >= 5 and "/" in line}
    except OSError:
        return 0
    done = 0
    for path in sorted(paths):
        name = os.path.basename(path).lower()
        if not any(key in name for key in ("openblas", "mkl", "blis", "gomp", "libomp", "iomp")):
            continue
        try:
            lib = ctypes.CDLL(path)
        except OSError:
            continue
        for sym in _THREAD_SETTERS:
            fn = getattr(lib, sym, None)
            if fn is not None:
                with contextlib.suppress(Exception):
                    fn(ctypes.c_int(1))
                    done += 1
    return done


@contextlib.contextmanager
def _single_threaded_children() -> Iterator[None]:
    """Spawned workers start with one math-library thread each (the pool already uses every core).

    The variables are read when numpy loads its BLAS, so they must be in the environment the
    children start with; the parent's own settings come back afterwards.
    """
    saved = {k: os.environ.get(k) for k in _THREAD_VARS}
    for k in _THREAD_VARS:
        if saved[k] is None:
            os.environ[k] = "1"
    try:
        yield
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)


def _pool_context():
    """fork on Linux while this process has no other thread; else fresh interpreters (spawn).

    A forked worker starts at once with numpy, scipy and iqdemod already imported, where a
    spawned one spends a second or more importing them; but a fork copies any other thread's
    locks in whatever state they are in, so it is used only when there is no other thread
    (the pool is started before the progress bar's monitor thread exists).
    """
    import multiprocessing

    if (sys.platform.startswith("linux") and threading.active_count() == 1
            and "fork" in multiprocessing.get_all_start_methods()):
        return multiprocessing.get_context("fork")
    return multiprocessing.get_context("spawn")


class _Inline:
    """Captures processed one after the other in this process (jobs=1)."""

    def __init__(self, tasks: list[CaptureTask]):
        self.tasks = tasks

    def __iter__(self) -> Iterator[tuple[CaptureTask, CaptureOutcome]]:
        for t in self.tasks:
            yield t, process_capture(t)

    def close(self, *, interrupted: bool) -> None:
        pass


class _Pool:
    """A process pool; every capture is submitted (and every worker started) at construction."""

    def __init__(self, tasks: list[CaptureTask], jobs: int, lock_fd: int | None):
        ctx = _pool_context()
        forked = ctx.get_start_method() == "fork"  # only a forked worker holds a copy of the lock's fd
        self.pool = ProcessPoolExecutor(max_workers=jobs, mp_context=ctx, initializer=_worker_init,
                                        initargs=(os.getpid(), lock_fd if forked else None))
        try:
            with _single_threaded_children():  # spawned workers start in submit(); forked ones in the first
                self.futures = {self.pool.submit(process_capture, t): t for t in tasks}
        except BaseException:
            self.close(interrupted=True)
            raise

    def __iter__(self) -> Iterator[tuple[CaptureTask, CaptureOutcome]]:
        for fut in as_completed(self.futures):
            t = self.futures[fut]
            try:
                outcome = fut.result()
            except Exception as exc:  # noqa: BLE001 - e.g. BrokenProcessPool: the row says so
                outcome = _failed(t, exc)
            yield t, outcome

    def close(self, *, interrupted: bool) -> None:
        if not interrupted:
            self.pool.shutdown(wait=True)
            return
        # Interrupted: drop the queue and stop the captures in flight now, not when they end.
        procs = list((getattr(self.pool, "_processes", None) or {}).values())  # shutdown() forgets them
        self.pool.shutdown(wait=False, cancel_futures=True)
        for p in procs:
            with contextlib.suppress(Exception):
                p.terminate()
        for p in procs:
            with contextlib.suppress(Exception):
                p.join(5)


def _require_distributed():
    try:
        import distributed
    except ImportError:
        raise IqdemodError("--cluster needs dask.distributed: pip install 'iqdemod[cluster]'") from None
    return distributed


class _Cluster:
    """A running Dask scheduler: one task per capture, results as they complete."""

    def __init__(self, tasks: list[CaptureTask], address: str):
        self.distributed = _require_distributed()
        try:
            self.client = self.distributed.Client(address, timeout="20s", set_as_default=False)
        except (OSError, TimeoutError, ValueError) as exc:
            raise IqdemodError(f"cluster {quote(address)}: cannot connect ({exc})") from None
        self.by_key: dict = {}
        self.futures: list = []
        try:
            for t in tasks:
                fut = self.client.submit(process_capture, t, pure=False)
                self.by_key[fut.key] = t
                self.futures.append(fut)
        except BaseException:
            self.close(interrupted=True)
            raise

    def __iter__(self) -> Iterator[tuple[CaptureTask, CaptureOutcome]]:
        for fut in self.distributed.as_completed(self.futures, loop=self.client.loop):
            t = self.by_key[fut.key]
            try:
                outcome = fut.result()
            except Exception as exc:  # noqa: BLE001 - e.g. KilledWorker: the row says so
                outcome = _failed(t, exc)
            fut.release()
            yield t, outcome

    def close(self, *, interrupted: bool) -> None:
        if interrupted:
            with contextlib.suppress(Exception):
                self.client.cancel(self.futures)
        self.client.close()


def _longest_first(tasks: list[CaptureTask]) -> list[CaptureTask]:
    """Biggest captures first, so that the workers' last captures end close together."""
    return sorted(tasks, key=lambda t: -(t.size_bytes or 0))


def _default_jobs() -> int:
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


@dataclass(frozen=True)
class BatchResult:
    """The outcome of a batch.

    Attributes
    ----------
    rows : tuple of CaptureRow
        One per capture collected, in collection order (as in the report).
    n_ok, n_failed : int
    n_skipped : int
        Captures taken over from an earlier run (``resume``).
    n_frames, n_frames_crc_ok : int
        Frames found (and with a good CRC) over all captures.
    weakest : tuple of CaptureRow
        The five captures with the least margin to the target BER.
    report : str
    frames : str or None
    elapsed_s : float
    """

    rows: tuple[CaptureRow, ...]
    n_ok: int
    n_failed: int
    n_frames: int
    weakest: tuple[CaptureRow, ...]
    n_skipped: int = 0
    n_frames_crc_ok: int = 0
    report: str = ""
    frames: str | None = None
    elapsed_s: float = 0.0

    def summary(self) -> list[str]:
        """Closing lines for people: counts, the weakest links, the first failures."""
        skipped = f" ({self.n_skipped} done before)" if self.n_skipped else ""
        lines = [
            f"{len(self.rows)} capture(s){skipped}: {self.n_ok} ok, {self.n_failed} failed; "
            f"{self.n_frames} frame(s), {self.n_frames_crc_ok} with good CRC; {self.elapsed_s:.1f} s -> {self.report}"
        ]
        if self.weakest:
            lines.append(f"weakest {len(self.weakest)} by margin:")
            width = max(len(r.capture) for r in self.weakest)
            for r in self.weakest:
                tx = f"  [{r.transmitter}]" if r.transmitter else ""
                ebn0 = "" if r.ebn0_db is None else f"  Eb/N0 {r.ebn0_db:5.1f} dB"
                per = "" if r.per_observed is None else f"  PER {r.per_observed:.3f}"
                lines.append(f"  {r.capture:<{width}}  margin {r.margin_db:+6.1f} dB{ebn0}{per}{tx}")
        failed = [r for r in self.rows if not r.ok]
        for r in failed[:N_WEAKEST]:
            lines.append(f"failed: {r.capture}: {r.error}")
        if len(failed) > N_WEAKEST:
            lines.append(f"failed: … and {len(failed) - N_WEAKEST} more (see the report)")
        return lines


def _folder_links(found: list[_Found], link: Link | None, overrides: Mapping[str, Any]) -> list[tuple]:
    """(link, link_path, link_error, label) per capture, from the nearest folder link.toml."""
    cache: dict[Path, tuple] = {}
    out = []
    for f in found:
        root = Path(os.path.abspath(f.root))
        folder = Path(os.path.abspath(f.path)).parent
        hit = None
        while True:
            if (folder / FOLDER_LINK).is_file():
                hit = folder
                break
            if folder == root or folder.parent == folder or root not in folder.parents:
                break
            folder = folder.parent
        if hit is None:
            err = "" if link is not None else (
                "no link: give --link FILE (or --baud and --shift), or put a link.toml in the capture's folder")
            out.append((link, "", err, ""))
            continue
        if hit not in cache:
            profile = hit / FOLDER_LINK
            label = Path(os.path.relpath(hit, root)).as_posix() if hit != root else hit.name
            try:
                cache[hit] = (load_link(profile, **dict(overrides)), str(profile), "", label)
            except LinkError as exc:
                cache[hit] = (None, str(profile), str(exc), label)
        out.append(cache[hit])
    return out


def _check_outputs(report: Path, frames: Path | None, plot, found: list[_Found], links: list[tuple],
                   inputs: Iterable[tuple[str, Any]]) -> None:
    """Refuse before any work: an output (journals and locks included) that is an input or another output."""
    from .capture import capture_files

    outputs = [("report", report), ("report journal", partial_path(report)), ("report lock", _lock_path(report))]
    if frames is not None:
        outputs += [("frames file", frames), ("frames journal", partial_path(frames)),
                    ("frames lock", _lock_path(frames))]
    outputs.append(("plot", plot))
    ins = list(inputs)
    for f in found:
        ins += [("capture", c) for c in capture_files(f.path)]
    ins += [("folder link profile", lpath) for lpath in dict.fromkeys(lp for _, lp, _, _ in links if lp)]
    check_distinct(outputs, ins)


def _check_cluster_address(address: str) -> None:
    """Fail fast, once: a malformed address, or a scheduler that does not answer within 5 s."""
    import socket

    _require_distributed()
    from distributed.comm import parse_address, parse_host_port

    try:
        scheme, location = parse_address(address)
        host, port = parse_host_port(location)
    except (ValueError, TypeError) as exc:
        raise IqdemodError(f"cluster {quote(address)}: not a scheduler address such as tcp://10.0.0.5:8786 "
                           f"({str(exc)[:80]})") from None
    if scheme not in ("tcp", "tls"):
        return  # other transports: the client says what it thinks
    try:
        with socket.create_connection((host, port), timeout=5):
            pass
    except OSError as exc:
        raise IqdemodError(f"cluster {quote(address)}: cannot connect ({exc.strerror or exc})") from None


def run_batch(
    paths: Iterable[str | os.PathLike],
    link: Link | None,
    *,
    report: str | os.PathLike,
    frames: str | os.PathLike | None = None,
    jobs: int | None = None,
    resume: bool = False,
    cluster: str | None = None,
    target_ber: float = 1e-5,
    link_overrides: Mapping[str, Any] | None = None,
    plot: str | os.PathLike | None = None,
    progress: bool = False,
    inputs: Iterable[tuple[str, str | os.PathLike | None]] = (),
) -> BatchResult:
    """Assess every capture under `paths` and write the report (and frames).

    Parameters
    ----------
    paths : iterable of str or PathLike
        Files, folders or glob patterns (see :func:`collect_captures`).
    link : Link or None
        The link of every capture not below a folder ``link.toml``; None when
        every capture has a folder profile.
    report : str or PathLike
        The CSV report, one row per capture (columns: :data:`COLUMNS`).
    frames : str or PathLike, optional
        Write every frame of every capture here as JSON Lines (``capture`` is
        the report's name of the capture). Each capture's frames are together
        and in time order; the captures in the order they finished.
    jobs : int, optional
        Worker processes; default one per core. 1 runs in this process.
    resume : bool
        Keep the captures an earlier run finished (see the module notes).
    cluster : str, optional
        Address of a running Dask scheduler (``tcp://host:8786``); the captures
        are then processed by its workers, `jobs` is ignored.
    target_ber : float
        The BER the margin is measured against.
    link_overrides : mapping, optional
        Flag-style values (:func:`iqdemod.load_link`) applied on top of every
        folder profile, as they were on top of `link`.
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
    """
    t_start = time.perf_counter()
    if not 0 < target_ber < 0.5:
        raise IqdemodError(f"target BER {target_ber:g}: must be within (0, 0.5)")
    if jobs is not None and jobs < 1:
        raise IqdemodError(f"jobs {jobs}: must be >= 1")
    report = Path(report)
    frames_path = None if frames is None else Path(frames)
    for role, target in (("report", report), ("frames file", frames_path)):
        if target is not None and classify_output(target).kind != "file":
            raise OutputError(f"{role} {quote(str(target))}: must be a regular file (its journal "
                              f"{partial_path(target).name} is kept beside it), not a FIFO, device or -")
    if plot is not None:
        classify_output(plot)
        from .plots import require_matplotlib

        require_matplotlib()
    if cluster is not None:
        _check_cluster_address(cluster)
    found = _discover(paths)
    if not found:
        raise IqdemodError("no captures found (looked for SigMF, WAV/FLAC and raw IQ files)")
    links = _folder_links(found, link, link_overrides or {})
    _check_outputs(report, frames_path, plot, found, links, inputs)
    if link is None and all(lk is None and "no link" in err for lk, _, err, _ in links):
        raise LinkError("no link: give --link FILE (or --baud and --shift), or put a link.toml in the capture folders")
    tasks = []
    for f, (lk, lpath, lerr, label) in zip(found, links):
        size, mtime = _fingerprint(f.path)
        tasks.append(CaptureTask(
            capture=str(f.path), path=os.path.abspath(f.path), link=lk, target_ber=target_ber,
            want_frames=frames_path is not None, link_path=lpath, link_error=lerr, transmitter=label,
            size_bytes=size, mtime_ns=mtime, mtime_time=_mtime_time(f.path), settings=_settings_digest(lk, target_ber),
        ))
    with _exclusive(*filter(None, (report, frames_path))) as lock_fd:
        if resume:
            rows = _carry_over(tasks, report, frames_path)
        else:
            rows = {}
            for part in filter(None, (partial_path(report), frames_path and partial_path(frames_path))):
                with contextlib.suppress(FileNotFoundError):
                    os.unlink(part)
        todo = [t for t in tasks if t.path not in rows]
        n_skipped = len(tasks) - len(todo)
        n_jobs = _default_jobs() if jobs is None else jobs
        # the workers first: a forked worker must find no other thread and no open journal
        if cluster is not None:
            source = _Cluster(_longest_first(todo), cluster)
        elif n_jobs == 1 or len(todo) <= 1:
            source = _Inline(todo)
        else:
            source = _Pool(_longest_first(todo), min(n_jobs, len(todo)), lock_fd)
        interrupted = True
        journal = bar = None
        try:
            journal = _Journal(report, frames_path)
            if progress:
                from tqdm import tqdm

                bar = tqdm(total=len(todo), unit="capture", desc="batch", file=sys.stderr, dynamic_ncols=True)
            failed = 0
            for task, outcome in source:
                journal.add(outcome)
                rows[task.path] = outcome.row
                if bar is not None:
                    failed += not outcome.row.ok
                    bar.set_postfix(failed=failed, refresh=False)
                    bar.update(1)
            interrupted = False
        finally:
            source.close(interrupted=interrupted)
            if bar is not None:
                bar.close()
            if journal is not None:
                journal.close()
        ordered = [rows[t.path] for t in tasks]
        labels = label_transmitters(ordered)
        ordered = [dataclasses.replace(r, transmitter=lab) for r, lab in zip(ordered, labels)]
        # the frames first and the report that vouches for them last, together or not at all
        with atomic_files() as files:
            if frames_path is not None:
                files.adopt(journal.frames_part, frames_path)
            out = files.open(report, "w")
            writer = csv.writer(out, lineterminator="\n")
            writer.writerow(COLUMNS)
            for r in ordered:
                writer.writerow(r.to_csv())
        with contextlib.suppress(FileNotFoundError):
            os.unlink(journal.report_part)
    ok = [r for r in ordered if r.ok]
    measured = sorted((r for r in ok if r.margin_db is not None), key=lambda r: r.margin_db)
    if plot is not None:
        plot_trend(ordered, plot)
    return BatchResult(
        rows=tuple(ordered), n_ok=len(ok), n_failed=len(ordered) - len(ok),
        n_frames=sum(r.frames or 0 for r in ok), n_frames_crc_ok=sum(r.frames_crc_ok or 0 for r in ok),
        weakest=tuple(measured[:N_WEAKEST]), n_skipped=n_skipped, report=str(report),
        frames=None if frames_path is None else str(frames_path), elapsed_s=time.perf_counter() - t_start,
    )


# --------------------------------------------------------------------------- trend figure
def _parse_time(text: str | None) -> datetime | None:
    if not text:
        return None
    text = text.replace("(mtime)", "").strip()
    try:
        t = datetime.fromisoformat(text.replace("Z", "+00:00"))
    except ValueError:
        return None
    return t if t.tzinfo else t.replace(tzinfo=timezone.utc)


def plot_trend(source: str | os.PathLike | Sequence[CaptureRow], png: str | os.PathLike) -> None:
    """Write a PNG of Eb/N0 and frame error rate against capture time, one line per transmitter.

    Parameters
    ----------
    source : path of a batch report, or a sequence of CaptureRow
    png : str or PathLike
        Written atomically (temporary file beside it, then renamed).

    Notes
    -----
    The lower panel is logarithmic; a capture without frame errors is drawn
    as an open triangle on the panel's floor. The predicted frame error rate
    is the dashed line of the same colour. Captures that failed, or have no
    time or no measurement, are left out (the title says how many).

    Raises
    ------
    IqdemodError
        When matplotlib is missing (``pip install 'iqdemod[plot]'``).
    """
    from .plots import new_figure, save_figure

    fig = new_figure(figsize=(10, 6.5), layout="constrained")
    import matplotlib.dates as mdates

    rows = read_report(source) if isinstance(source, (str, os.PathLike)) else list(source)
    if any(not r.transmitter for r in rows if r.ok):
        rows = [dataclasses.replace(r, transmitter=lab) for r, lab in zip(rows, label_transmitters(rows))]
    series: dict[str, list[tuple[datetime, CaptureRow]]] = {}
    shown = 0
    for r in rows:
        t = _parse_time(r.start_time)
        if not r.ok or t is None or (r.ebn0_db is None and r.per_observed is None):
            continue
        series.setdefault(r.transmitter or "unknown", []).append((t, r))
        shown += 1
    ax1, ax2 = fig.subplots(2, 1, sharex=True)
    pers = [r.per_observed for pts in series.values() for _, r in pts if r.per_observed]
    pers += [r.per_predicted for pts in series.values() for _, r in pts if r.per_predicted]
    floor = 10 ** math.floor(math.log10(max(min(pers), 1e-6))) / 3 if pers else 1e-3
    colors = [f"C{i % 10}" for i in range(len(series))]
    for (name, pts), color in zip(sorted(series.items()), colors):
        pts.sort(key=lambda p: p[0])
        ts = [t for t, _ in pts]
        e = [math.nan if r.ebn0_db is None else r.ebn0_db for _, r in pts]
        ax1.plot(ts, e, "o-", color=color, ms=4, lw=1.2, label=f"{name}: {len(pts)}")
        obs = [(t, r.per_observed) for t, r in pts if r.per_observed is not None]
        ax2.plot([t for t, v in obs if v > 0], [v for t, v in obs if v > 0], "o-", color=color, ms=4, lw=1.2,
                 label=name)
        zeros = [t for t, v in obs if v == 0]
        if zeros:
            ax2.plot(zeros, [floor * 1.15] * len(zeros), "v", mfc="none", color=color, ms=6)
        pred = [(t, r.per_predicted) for t, r in pts if r.per_predicted]
        if pred:
            ax2.plot([t for t, _ in pred], [v for _, v in pred], "--", color=color, lw=0.9, alpha=0.8)
    ax1.set_ylabel("Eb/N0 (dB)")
    ax1.grid(True, alpha=0.3)
    ax2.set_yscale("log")
    ax2.set_ylim(floor, 1.5)
    ax2.set_ylabel("frame error rate")
    ax2.grid(True, which="major", alpha=0.3)
    ax2.set_xlabel("capture start time (UTC)")
    if series:
        ax1.legend(title="transmitter: captures", fontsize="small", loc="best")
        from matplotlib.lines import Line2D

        ax2.legend(handles=[Line2D([], [], color="k", marker="o", ms=4, lw=1.2, label="observed"),
                            Line2D([], [], color="k", ls="--", lw=0.9, label="predicted"),
                            Line2D([], [], color="k", marker="v", mfc="none", ls="none", label="no frame errors")],
                   fontsize="small", loc="best")
        locator = mdates.AutoDateLocator()
        ax2.xaxis.set_major_locator(locator)
        ax2.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator))
    else:
        ax1.text(0.5, 0.5, "no capture with a time and a measurement", ha="center", va="center",
                 transform=ax1.transAxes)
    left = len(rows) - shown
    fig.suptitle(f"Link trend: {shown} capture(s), {len(series)} transmitter(s)"
                 + (f"; {left} left out (failed or unmeasured)" if left else ""))
    save_figure(fig, png)
