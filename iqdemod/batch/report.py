"""The batch report: one CSV row per capture and link (the schema), reading it back, and the final rewrite.

The columns are the fields of :class:`CaptureRow`, in order; :data:`COLUMN_HELP` says what
each one holds. Rates are fractions in the CSV (0.188), and the text summary shows them as
percentages ("18.8 %").
"""

from __future__ import annotations

import contextlib
import csv
import dataclasses
import hashlib
import json
import math
import os
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable, Iterator, Mapping, Sequence

from ..errors import IqdemodError, IqdemodWarning
from ..link import Link

__all__ = ["CaptureRow", "COLUMNS", "COLUMN_HELP", "BatchResult", "read_report"]

#: Captures named in the closing summary, weakest margin first.
N_WEAKEST = 5


@dataclass(frozen=True)
class CaptureRow:
    """One capture's row of the batch report, for one of its links (CSV columns in field order; see
    :data:`COLUMN_HELP`).

    Rates are fractions, ``*_db`` decibels; None where nothing could be measured (and for
    every figure of a capture that failed). A row is known by its :attr:`key`, (path, link name).
    """

    capture: str
    path: str
    status: str
    error: str = ""
    warnings: tuple[str, ...] = ()
    transmitter: str = ""
    link: str = ""
    link_name: str = ""
    start_time: str | None = None
    duration_s: float | None = None
    bursts: int | None = None
    frames: int | None = None
    frames_crc_ok: int | None = None
    ebn0_db: float | None = None
    ebn0_db_low: float | None = None
    ebn0_db_high: float | None = None
    ber_predicted: float | None = None
    fer_predicted: float | None = None
    fer_observed: float | None = None
    verdict: str = ""
    level_dbfs: float | None = None
    frequency_hz: float | None = None
    freq_error_hz: float | None = None
    freq_spread_hz: float | None = None
    clock_error_ppm: float | None = None
    clock_error_ppm_low: float | None = None
    clock_error_ppm_high: float | None = None
    clipped_fraction: float | None = None
    dc_dbfs: float | None = None
    margin_db: float | None = None
    size_bytes: int | None = None
    mtime_ns: int | None = None
    frame_records: int | None = None
    settings_digest: str = ""
    elapsed_s: float | None = None
    cpu_s: float | None = None

    def __post_init__(self) -> None:
        if self.status not in ("ok", "error"):
            raise IqdemodError(f"status {self.status!r}: must be 'ok' or 'error'")
        object.__setattr__(self, "warnings", tuple(self.warnings))

    @property
    def ok(self) -> bool:
        return self.status == "ok"

    @property
    def key(self) -> tuple[str, str]:
        """(path, link_name): what tells rows apart in a report, its journal and ``--resume``."""
        return self.path, self.link_name

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
                text = format(value, _FLOAT_FORMAT.get(name, ".7g")) if math.isfinite(value) else ""
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


def named_label(link_name: str, label: str) -> str:
    """A transmitter label with its link's name first when a capture has several links (rows of
    different links never share a label); as it is for one link, or no label.

    Examples
    --------
    >>> named_label("gauges", "tx1 (+420 Hz)"), named_label("", "tx1 (+420 Hz)"), named_label("gauges", "")
    ('gauges: tx1 (+420 Hz)', 'tx1 (+420 Hz)', '')
    """
    return f"{link_name}: {label}" if link_name and label else label


COLUMNS = tuple(f.name for f in dataclasses.fields(CaptureRow))
# 7 significant figures, except where a figure needs more: an absolute frequency to 0.1 Hz
_FLOAT_FORMAT = {"frequency_hz": ".1f"}
_COLUMN_KIND = {
    f.name: ("tuple" if f.name == "warnings" else
             "int" if "int" in str(f.type) else
             "float" if "float" in str(f.type) else
             "optstr" if "None" in str(f.type) else "str")
    for f in dataclasses.fields(CaptureRow)
}

#: What each column holds (the README's column list says the same).
COLUMN_HELP = {
    "capture": "the capture as collected (a SigMF pair by its .sigmf-meta)",
    "path": "its absolute path; with link_name, the key of --resume",
    "status": "ok, or error when the capture could not be assessed",
    "error": "Type: message, when the capture failed",
    "warnings": "tolerated defects (cut final sample, NaN/Inf, clipping), separated by '; '",
    "transmitter": "the folder of its link.toml, or a label by carrier error such as 'tx1 (+420 Hz)'; with several "
                   "links the link's name first, as in 'gauges: tx1 (+420 Hz)'",
    "link": "the link profile that applied: a folder link.toml, or the --link profile; empty for flags alone",
    "link_name": "the link's name when a capture is assessed for several links (a row per link); empty for one",
    "start_time": "SigMF core:datetime, or the data file's modification time marked (mtime)",
    "duration_s": "length of the capture, s",
    "bursts": "bursts found",
    "frames": "frames whose sync word was found",
    "frames_crc_ok": "of those, frames with a good CRC",
    "ebn0_db": "Eb/N0 pooled over the capture, dB",
    "ebn0_db_low": "lower end of its 90 % interval, dB",
    "ebn0_db_high": "upper end of its 90 % interval, dB",
    "ber_predicted": "bit error rate detection theory predicts: the mean over the bursts, each at its own Eb/N0 "
                     "(fraction)",
    "fer_predicted": "frame error rate predicted (fraction)",
    "fer_observed": "frame error rate seen: frames with a bad CRC / frames (fraction)",
    "verdict": "observed against predicted frame errors, by the exact binomial test",
    "level_dbfs": "median signal power of its frames, dB re full scale (re 1.0 for float captures)",
    "frequency_hz": "median carrier of its frames as received, Hz (needs the capture's centre frequency)",
    "freq_error_hz": "carrier error against the link's frequency, Hz",
    "freq_spread_hz": "standard deviation of the carrier error between bursts, Hz",
    "clock_error_ppm": "transmitter symbol clock error, ppm (the symbol-weighted mean over bursts)",
    "clock_error_ppm_low": "lower end of its 90 % interval, ppm (a few short bursts measure the clock loosely)",
    "clock_error_ppm_high": "upper end of its 90 % interval, ppm",
    "clipped_fraction": "fraction of samples at full scale",
    "dc_dbfs": "the recording receiver's DC level, dB re full scale",
    "margin_db": "Eb/N0 minus what the target BER needs, dB",
    "size_bytes": "capture size (a SigMF pair's two files summed); for --resume",
    "mtime_ns": "latest modification time, ns since 1970; for --resume",
    "frame_records": "frames written to the frames file for this capture and link (empty: no frames file)",
    "settings_digest": "SHA-256 digest (first 12 hex digits) of the decoding settings: the link and the target "
                       "BER. Equal digests, same settings; --resume redoes a capture whose digest changed",
    "elapsed_s": "wall time the capture took, s (all its links: they share one pass)",
    "cpu_s": "CPU time it took (of the thread that processed it; all its links), s",
}


def settings_digest(link: Link | None, target_ber: float) -> str:
    """The ``settings_digest`` column: a digest of everything a row's figures depend on.

    The columns are part of it, so a row from a report of another layout is never carried over
    by ``--resume`` with columns it does not have.
    """
    doc = {"link": None if link is None else link.as_dict(), "target_ber": float(target_ber),
           "columns": list(COLUMNS)}
    return hashlib.sha256(json.dumps(doc, sort_keys=True).encode()).hexdigest()[:12]


def complete_lines(path: Path, *, strict: bool = True, note: bool = True) -> Iterator[str]:
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

    Examples
    --------
    >>> import pathlib, tempfile
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "r.csv"
    >>> _ = p.write_text("capture,path,status,frames\\nbuoy.sigmf-meta,/a/buoy.sigmf-meta,ok,4\\n")
    >>> [(r.capture, r.frames) for r in read_report(p)]
    [('buoy.sigmf-meta', 4)]
    """
    p = Path(path)
    try:
        lines = list(complete_lines(p))
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


def write_rows(out, rows: Iterable[CaptureRow]) -> None:
    """The header and `rows` as CSV to an open text file."""
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(COLUMNS)
    for row in rows:
        writer.writerow(row.to_csv())


def labelled_frames(journal: Path, out, labels: Mapping[tuple[str, str], str], order: Sequence[str] = ()) -> None:
    """Copy the frames journal to `out`, capture by capture in `order`, each frame given the
    ``transmitter`` label of its row.

    `labels` is by (capture, link name), the link name "" for a capture's one unnamed link
    (whose frames carry no ``link``). The labels by carrier error exist only once every
    capture is done, so the frames written while the batch ran get theirs here, in the final
    rewrite. The journal holds the captures in the order they finished, which depends on
    the workers' timing; the file written holds them in `order` (the report's, collection
    order), each capture's frames in the order it found them, so the same archive always
    gives the same file. Captures not named in `order` follow, as the journal has them.
    Memory stays bounded: the first pass keeps only where each capture's lines are.
    """
    spans = _capture_spans(journal)
    named = set(order)
    with open(journal, "rb") as fh:
        for capture in [*dict.fromkeys(c for c in order if c in spans), *(c for c in spans if c not in named)]:
            for start, end in spans[capture]:
                fh.seek(start)
                while fh.tell() < end:
                    rec = json.loads(fh.readline())
                    rec["transmitter"] = labels.get((rec["capture"], rec.get("link", "")), "")
                    out.write(json.dumps(rec) + "\n")


def _capture_spans(journal: Path) -> dict[str, list[tuple[int, int]]]:
    """Where each capture's frames are in a frames journal: byte ranges of whole lines, by capture.

    A line that was never a frame of ours (not JSON, not UTF-8, no capture; dropped when
    resuming too) and a last line cut off are left out.
    """
    spans: dict[str, list[tuple[int, int]]] = {}
    with open(journal, "rb") as fh:
        start = 0
        for raw in fh:
            end = start + len(raw)
            try:
                capture = json.loads(raw)["capture"] if raw.endswith(b"\n") else None
            except (ValueError, KeyError, TypeError):
                capture = None
            if isinstance(capture, str):
                runs = spans.setdefault(capture, [])
                if runs and runs[-1][1] == start:
                    runs[-1] = (runs[-1][0], end)
                else:
                    runs.append((start, end))
            start = end
    return spans


@dataclass(frozen=True)
class BatchResult:
    """The outcome of a batch.

    Attributes
    ----------
    rows : tuple of CaptureRow
        One per capture collected and link, in collection order, then link order (as in the report).
    n_ok, n_failed : int
        Rows (a capture of several links counts once per link).
    n_frames, n_frames_crc_ok : int
        Frames found (and with a good CRC) over all captures.
    weakest : tuple of CaptureRow
        The five captures with the least margin to the target BER.
    n_skipped : int
        Captures taken over from an earlier run (``resume``), with all their rows.
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

    @property
    def n_captures(self) -> int:
        """Captures the rows are of (fewer than the rows when captures have several links)."""
        return len({r.path for r in self.rows})

    @classmethod
    def of(cls, rows: Sequence[CaptureRow], **kw: Any) -> "BatchResult":
        """The counts and the weakest captures of `rows`."""
        ok = [r for r in rows if r.ok]
        measured = sorted((r for r in ok if r.margin_db is not None), key=lambda r: r.margin_db)
        return cls(rows=tuple(rows), n_ok=len(ok), n_failed=len(rows) - len(ok),
                   n_frames=sum(r.frames or 0 for r in ok), n_frames_crc_ok=sum(r.frames_crc_ok or 0 for r in ok),
                   weakest=tuple(measured[:N_WEAKEST]), **kw)
