"""One capture in, one report row (and its frames) out: the unit of work of every executor."""

from __future__ import annotations

import json
import math
import statistics
import time
import warnings
from dataclasses import dataclass
from typing import Any, Sequence

from ..errors import LinkError
from ..link import Link
from .report import CaptureRow

__all__ = ["CaptureTask", "CaptureOutcome", "process_capture"]


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
    link_path : str
        The profile the link came from, for the ``link`` column.
    settings_digest : str
        :func:`iqdemod.batch.report.settings_digest` of the link and target BER.
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
    settings_digest: str = ""


@dataclass(frozen=True)
class CaptureOutcome:
    """What a worker hands back: the row and the capture's frames as JSON Lines (no newline)."""

    row: CaptureRow
    frame_lines: tuple[str, ...] = ()


def _error_text(exc: BaseException) -> str:
    return f"{type(exc).__name__}: {exc}"


def failed(task: CaptureTask, exc: BaseException, warned: Sequence[str] = (), elapsed_s: float | None = None,
           cpu_s: float | None = None) -> CaptureOutcome:
    """The row of a capture that raised `exc`."""
    return CaptureOutcome(CaptureRow(
        capture=task.capture, path=task.path, status="error", error=_error_text(exc), warnings=tuple(warned),
        transmitter=task.transmitter, link=task.link_path, start_time=task.mtime_time,
        size_bytes=task.size_bytes, mtime_ns=task.mtime_ns, frame_records=0 if task.want_frames else None,
        settings_digest=task.settings_digest, elapsed_s=elapsed_s, cpu_s=cpu_s,
    ))


def _median(values: list[float]) -> float | None:
    values = [v for v in values if v is not None and math.isfinite(v)]
    return float(statistics.median(values)) if values else None


def _frame_figures(records: list[dict]) -> dict[str, float | None]:
    """Level and received frequency of a capture: the medians over its frames (good CRC first)."""
    good = [r for r in records if r.get("crc_ok", True)] or records
    return {"level_dbfs": _median([r.get("level_dbfs") for r in good]),
            "frequency_hz": _median([r.get("frequency_hz") for r in good])}


def _interval(ci: Sequence[float] | None) -> tuple[float | None, float | None]:
    if ci is None:
        return None, None
    return tuple(float(v) if math.isfinite(v) else None for v in ci)  # type: ignore[return-value]


def _row(task: CaptureTask, report: Any, records: list[dict], warned: Sequence[str], t0: float,
         c0: float) -> CaptureRow:
    low, high = _interval(report.ebn0_db_ci90)
    return CaptureRow(
        capture=task.capture, path=task.path, status="ok", warnings=tuple(warned), transmitter=task.transmitter,
        link=task.link_path, start_time=report.start_time or task.mtime_time, duration_s=report.duration_s,
        bursts=report.bursts, frames=report.frames, frames_crc_ok=report.frames_crc_ok, ebn0_db=report.ebn0_db,
        ebn0_db_low=low, ebn0_db_high=high, ber_predicted=report.ber_predicted,
        fer_predicted=report.fer_predicted, fer_observed=report.fer_observed,
        verdict=report.verdict or "", **_frame_figures(records), freq_error_hz=report.freq_error_hz,
        freq_spread_hz=report.freq_spread_hz, clock_error_ppm=report.clock_error_ppm,
        clipped_fraction=report.clipped_fraction, dc_dbfs=report.dc_dbfs, margin_db=report.margin_db,
        size_bytes=task.size_bytes, mtime_ns=task.mtime_ns,
        frame_records=len(records) if task.want_frames else None, settings_digest=task.settings_digest,
        elapsed_s=time.perf_counter() - t0, cpu_s=time.thread_time() - c0,
    )


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

    Examples
    --------
    >>> from iqdemod.profile import load_link
    >>> out = process_capture(CaptureTask("gone.cu8", "/nonexistent/gone.cu8", load_link(None, baud=9600, shift=9600)))
    >>> out.row.status, out.row.error.split(":")[0]
    ('error', 'CaptureError')
    """
    from ..capture import CaptureWarning
    from .. import health

    t0, c0 = time.perf_counter(), time.thread_time()
    # Warnings are per capture state here; catch_warnings is process-global, so on a threaded
    # Dask worker a stray non-capture warning could land on a neighbour's row. The capture
    # defects themselves come from the report, not from this net.
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            if task.link is None:
                raise LinkError(task.link_error or "no link description")
            report, frames = health.assess_with_frames(task.path, task.link, target_ber=task.target_ber)
        except Exception as exc:  # noqa: BLE001 - any failure of one capture is recorded, not raised
            return failed(task, exc, [str(w.message) for w in caught], time.perf_counter() - t0,
                          time.thread_time() - c0)
    warned = list(report.warnings)
    for w in caught:
        if not issubclass(w.category, CaptureWarning):
            text = f"{w.category.__name__}: {w.message}"
            if text not in warned:
                warned.append(text)
    records = []
    for f in frames:
        rec = f.as_record()
        rec["capture"] = task.capture
        records.append(rec)
    lines = tuple(json.dumps(rec) for rec in records) if task.want_frames else ()
    return CaptureOutcome(_row(task, report, records, warned, t0, c0), lines)
