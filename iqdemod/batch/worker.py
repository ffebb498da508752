"""One capture in (one read), a report row per link (and their frames) out: the unit of work of every executor."""

from __future__ import annotations

import json
import math
import statistics
import time
import warnings
from dataclasses import dataclass
from typing import Any, Mapping, Sequence

from ..errors import IqdemodError, LinkError
from ..link import Link
from .report import CaptureRow, named_label, settings_digest

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
    link : Link, mapping of str to Link, or None
        One link (its row's ``link_name`` is empty), or several by name (a row
        each, all from one read of the capture); None when no link applies:
        `link_error` says why.
    link_path : str or mapping of str to str
        The profile the link came from, for the ``link`` column; by link name
        when several links came from different profiles.
    transmitter : str
        The folder's label (a folder ``link.toml``), else empty; see :meth:`label`.
    """

    capture: str
    path: str
    link: Link | Mapping[str, Link] | None
    target_ber: float = 1e-5
    want_frames: bool = False
    link_path: str | Mapping[str, str] = ""
    link_error: str = ""
    transmitter: str = ""
    size_bytes: int | None = None
    mtime_ns: int | None = None
    mtime_time: str | None = None

    @property
    def link_names(self) -> tuple[str, ...]:
        """The ``link_name`` of each of the capture's rows, in link order (``("",)`` for one link, or none)."""
        return tuple(str(name) for name in self.link) if isinstance(self.link, Mapping) else ("",)

    def keys(self) -> list[tuple[str, str]]:
        """The keys (path, link name) of the capture's rows (:attr:`CaptureRow.key`)."""
        return [(self.path, name) for name in self.link_names]

    def link_of(self, name: str) -> Link | None:
        """The link of row `name`."""
        return self.link[name] if isinstance(self.link, Mapping) else self.link

    def profile(self, name: str) -> str:
        """The ``link`` column of row `name`: the profile its link came from."""
        return self.link_path.get(name, "") if isinstance(self.link_path, Mapping) else self.link_path

    def digest(self, name: str) -> str:
        """The ``settings_digest`` of row `name`: :func:`iqdemod.batch.report.settings_digest` of its link."""
        return settings_digest(self.link_of(name), self.target_ber)

    def label(self, name: str) -> str:
        """The folder's transmitter label of row `name`: with several links, the link's name first."""
        return named_label(name, self.transmitter)


@dataclass(frozen=True)
class CaptureOutcome:
    """What a worker hands back: a row per link of the capture, and its frames as JSON Lines (no newline)."""

    rows: tuple[CaptureRow, ...]
    frame_lines: tuple[str, ...] = ()

    @property
    def row(self) -> CaptureRow:
        """The row of a capture of one link.

        Raises
        ------
        IqdemodError
            When the capture had several links (read :attr:`rows`).
        """
        if len(self.rows) != 1:
            raise IqdemodError(f"{len(self.rows)} rows (one per link): read rows, not row")
        return self.rows[0]


def _error_text(exc: BaseException) -> str:
    return f"{type(exc).__name__}: {exc}"


def failed(task: CaptureTask, exc: BaseException, warned: Sequence[str] = (), elapsed_s: float | None = None,
           cpu_s: float | None = None) -> CaptureOutcome:
    """The rows of a capture that raised `exc`: one per link, each saying why."""
    return CaptureOutcome(tuple(CaptureRow(
        capture=task.capture, path=task.path, status="error", error=_error_text(exc), warnings=tuple(warned),
        transmitter=task.label(name), link=task.profile(name), link_name=name, start_time=task.mtime_time,
        size_bytes=task.size_bytes, mtime_ns=task.mtime_ns, frame_records=0 if task.want_frames else None,
        settings_digest=task.digest(name), elapsed_s=elapsed_s, cpu_s=cpu_s,
    ) for name in task.link_names))


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


def _row(task: CaptureTask, name: str, report: Any, records: list[dict], warned: Sequence[str], t0: float,
         c0: float) -> CaptureRow:
    low, high = _interval(report.ebn0_db_ci90)
    clock_low, clock_high = _interval(report.clock_error_ppm_ci90)
    return CaptureRow(
        capture=task.capture, path=task.path, status="ok", warnings=tuple(warned), transmitter=task.label(name),
        link=task.profile(name), link_name=name, start_time=report.start_time or task.mtime_time,
        duration_s=report.duration_s, bursts=report.bursts, frames=report.frames,
        frames_crc_ok=report.frames_crc_ok, ebn0_db=report.ebn0_db,
        ebn0_db_low=low, ebn0_db_high=high, ber_predicted=report.ber_predicted,
        fer_predicted=report.fer_predicted, fer_observed=report.fer_observed,
        verdict=report.verdict or "", **_frame_figures(records), freq_error_hz=report.freq_error_hz,
        freq_spread_hz=report.freq_spread_hz, clock_error_ppm=report.clock_error_ppm,
        clock_error_ppm_low=clock_low, clock_error_ppm_high=clock_high,
        clipped_fraction=report.clipped_fraction, dc_dbfs=report.dc_dbfs, margin_db=report.margin_db,
        size_bytes=task.size_bytes, mtime_ns=task.mtime_ns,
        frame_records=len(records) if task.want_frames else None, settings_digest=task.digest(name),
        elapsed_s=time.perf_counter() - t0, cpu_s=time.thread_time() - c0,
    )


def _assess(task: CaptureTask) -> dict[str, tuple[Any, tuple]]:
    """(report, frames) by row name: one read of the capture for all its links."""
    from .. import health

    if task.link is None:
        raise LinkError(task.link_error or "no link description")
    if isinstance(task.link, Link):
        return {"": health.assess_with_frames(task.path, task.link, target_ber=task.target_ber)}
    return health.assess_links(task.path, task.link, target_ber=task.target_ber)


def process_capture(task: CaptureTask) -> CaptureOutcome:
    """Assess one capture; never raises for a bad capture (the row says why).

    This is the unit of work that runs in a pool process or on a Dask worker. The
    capture is read once, whatever the number of its links.

    Parameters
    ----------
    task : CaptureTask

    Returns
    -------
    CaptureOutcome
        A row per link, in link order: status ``ok`` with the health figures, or
        (every link) ``error`` with ``"Type: message"`` for any exception the
        capture raised.

    Examples
    --------
    >>> from iqdemod.profile import load_link
    >>> out = process_capture(CaptureTask("gone.cu8", "/nonexistent/gone.cu8", load_link(None, baud=9600, shift=9600)))
    >>> out.row.status, out.row.error.split(":")[0]
    ('error', 'CaptureError')

    Several links: a row each (here both say why the capture failed):

    >>> links = {"buoys": load_link(None, baud=9600, shift=9600), "gauges": load_link(None, baud=2400, shift=4800)}
    >>> out = process_capture(CaptureTask("gone.cu8", "/nonexistent/gone.cu8", links))
    >>> [(r.link_name, r.status) for r in out.rows]
    [('buoys', 'error'), ('gauges', 'error')]
    """
    from ..capture import CaptureWarning

    t0, c0 = time.perf_counter(), time.thread_time()
    # Warnings are per capture state here; catch_warnings is process-global, so on a threaded
    # Dask worker a stray non-capture warning could land on a neighbour's row. The capture
    # defects themselves come from the report, not from this net.
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            results = _assess(task)
        except Exception as exc:  # noqa: BLE001 - any failure of one capture is recorded, not raised
            return failed(task, exc, [str(w.message) for w in caught], time.perf_counter() - t0,
                          time.thread_time() - c0)
    rows, lines = [], []
    for name in task.link_names:
        report, frames = results[name]
        warned = list(report.warnings)
        for w in caught:
            if not issubclass(w.category, CaptureWarning):
                text = f"{w.category.__name__}: {w.message}"
                if text not in warned:
                    warned.append(text)
        records = [dict(f.as_record(), capture=task.capture) for f in frames]
        if task.want_frames:
            lines += [json.dumps(rec) for rec in records]
        rows.append(_row(task, name, report, records, warned, t0, c0))
    return CaptureOutcome(tuple(rows), tuple(lines))
