"""The trend figure of a batch: Eb/N0 and frame error rate against capture time, per transmitter."""

from __future__ import annotations

import dataclasses
import math
import os
from datetime import datetime, timezone
from typing import Sequence

from .report import CaptureRow, named_label, read_report
from .transmitters import label_transmitters

__all__ = ["plot_trend", "zero_error_bound"]

#: The confidence of the bound drawn for a capture without frame errors.
ZERO_ERROR_CONFIDENCE = 0.95


def zero_error_bound(n_frames: int, confidence: float = ZERO_ERROR_CONFIDENCE) -> float:
    """One-sided upper confidence bound of a frame error rate when none of `n_frames` failed.

    With no failure in n trials the exact (Clopper–Pearson, 1934) one-sided upper bound p
    solves (1 − p)^n = 1 − confidence, so p = 1 − (1 − confidence)^(1/n), about 3/n at 95 %
    (the "rule of three").

    Examples
    --------
    >>> round(zero_error_bound(100), 5)
    0.02951
    """
    if n_frames < 1:
        raise ValueError(f"n_frames {n_frames}: must be >= 1")
    return 1.0 - (1.0 - confidence) ** (1.0 / n_frames)


def _parse_time(text: str | None) -> datetime | None:
    if not text:
        return None
    text = text.replace("(mtime)", "").strip()
    try:
        t = datetime.fromisoformat(text.replace("Z", "+00:00"))
    except ValueError:
        return None
    return t if t.tzinfo else t.replace(tzinfo=timezone.utc)


def _series(rows: Sequence[CaptureRow]) -> dict[str, list[tuple[datetime, CaptureRow]]]:
    """Rows drawn, by transmitter and in time order: ok, with a time and a measurement."""
    series: dict[str, list[tuple[datetime, CaptureRow]]] = {}
    for r in rows:
        t = _parse_time(r.start_time)
        if r.ok and t is not None and (r.ebn0_db is not None or r.fer_observed is not None):
            series.setdefault(r.transmitter or named_label(r.link_name, "unknown"), []).append((t, r))
    for pts in series.values():
        pts.sort(key=lambda p: p[0])
    return dict(sorted(series.items()))


def _zero_bound(r: CaptureRow) -> float | None:
    return zero_error_bound(r.frames) if r.fer_observed == 0 and r.frames else None


#: The lowest frame error rate the panel reaches down to: a rate no archive could ever observe.
MIN_RATE_DRAWN = 1e-12


def _floor(series: dict[str, list[tuple[datetime, CaptureRow]]]) -> float:
    """The bottom of the logarithmic panel: the decade below a third of the smallest value drawn."""
    values = [v for pts in series.values() for _, r in pts
              for v in (r.fer_observed, r.fer_predicted, _zero_bound(r)) if v]
    if not values:
        return 1e-3
    return min(10 ** math.floor(math.log10(max(min(values), MIN_RATE_DRAWN) / 3)), 1e-3)


def _draw_fer(ax, pts: list[tuple[datetime, CaptureRow]], colour: str, floor: float) -> None:
    """Observed rate (line), predicted rate (dashed, a mark per capture) and zero-error bounds."""
    seen = [(t, r.fer_observed) for t, r in pts if r.fer_observed]
    ax.plot([t for t, _ in seen], [v for _, v in seen], "o-", color=colour, ms=4, lw=1.2)
    bounds = [(t, _zero_bound(r)) for t, r in pts if _zero_bound(r) is not None]
    if bounds:
        ys = [b for _, b in bounds]
        # an upper limit: a bar at the bound with an arrow down from it
        ax.errorbar([t for t, _ in bounds], ys, yerr=[[0.5 * y for y in ys], [0.0] * len(ys)], uplims=True,
                    fmt="none", color=colour, ecolor=colour, elinewidth=1.2, capsize=4)
    # (a prediction below MIN_RATE_DRAWN sits on the panel's floor)
    pred = [(t, max(r.fer_predicted, floor)) for t, r in pts if r.fer_predicted]
    if pred:  # a mark on every capture, so that a transmitter with one capture still shows it
        ax.plot([t for t, _ in pred], [v for _, v in pred], "--", marker="_", ms=10, mew=1.5, color=colour,
                lw=0.9, alpha=0.85)


def _legends(ax1, ax2) -> None:
    from matplotlib.lines import Line2D

    ax1.legend(title="transmitter: captures", fontsize="small", loc="best")
    ink = "#333333"
    bound = f"no frame errors: {100 * ZERO_ERROR_CONFIDENCE:.0f} % upper bound, 1 − 0.05^(1/frames)"
    ax2.legend(handles=[Line2D([], [], color=ink, marker="o", ms=4, lw=1.2, label="observed"),
                        Line2D([], [], color=ink, ls="--", marker="_", ms=10, mew=1.5, lw=0.9, label="predicted"),
                        Line2D([], [], color=ink, marker="$\\downarrow$", ms=10, ls="none", label=bound)],
               fontsize="small", loc="best")


def plot_trend(source: str | os.PathLike | Sequence[CaptureRow], png: str | os.PathLike) -> None:
    """Write a PNG of Eb/N0 and frame error rate against capture time, one colour per transmitter.

    Parameters
    ----------
    source : path of a batch report, or a sequence of CaptureRow
    png : str or PathLike
        Written atomically (temporary file beside it, then renamed).

    Notes
    -----
    The lower panel is logarithmic. A capture without frame errors is drawn as an
    upper limit: a bar at the one-sided 95 % upper bound of its frame error rate,
    1 − 0.05^(1/n) for n frames (:func:`zero_error_bound`), with an arrow down. The
    predicted frame error rate is the dashed line of the same colour, with a mark
    on each capture (one below 1e-12 sits on the panel's floor). Captures that failed, or have no time or no measurement,
    are left out (the title says how many). With several links a capture has a point per link, on the
    line of that link's transmitter (labels are told apart by link, :func:`label_transmitters`). Colours: :func:`iqdemod.plots.series_colour`.

    Raises
    ------
    IqdemodError
        When matplotlib is missing (``pip install 'iqdemod[plot]'``).

    Examples
    --------
    The trend of a two-capture batch (see :func:`iqdemod.batch.run.run_batch`);
    the drawing is not checked here, the file is, by its PNG file signature
    (W3C PNG specification §5.2, cited from memory):

    >>> import os, tempfile
    >>> from iqdemod.batch.run import run_batch
    >>> from iqdemod.profile import load_link
    >>> from iqdemod.synth import SynthConfig, synthesize
    >>> link = load_link(None, rate=48000, baud=1200, shift=1200, offset=6000, sync="0x2DD4", sync_bits=16, length=12)
    >>> tmp = tempfile.TemporaryDirectory()
    >>> for i, start_time in enumerate(("2026-11-30T22:00:00Z", "2026-11-30T23:00:00Z")):
    ...     _ = synthesize(os.path.join(tmp.name, f"night{i}"),
    ...                    SynthConfig(link=link, ebn0_db=(14.0,), n_frames=4, seed=5 + i, start_time=start_time))
    >>> report = os.path.join(tmp.name, "report.csv")
    >>> _ = run_batch([tmp.name], link, report=report, jobs=1)
    >>> plot_trend(report, os.path.join(tmp.name, "trend.png"))
    >>> with open(os.path.join(tmp.name, "trend.png"), "rb") as fh:
    ...     fh.read(8).hex()
    '89504e470d0a1a0a'
    >>> tmp.cleanup()
    """
    from ..plots import new_figure, save_figure, series_colour

    fig = new_figure(figsize=(10, 6.5), layout="constrained")
    import matplotlib.dates as mdates

    rows = read_report(source) if isinstance(source, (str, os.PathLike)) else list(source)
    if any(not r.transmitter for r in rows if r.ok):
        rows = [dataclasses.replace(r, transmitter=lab) for r, lab in zip(rows, label_transmitters(rows))]
    series = _series(rows)
    shown = sum(len(pts) for pts in series.values())
    floor = _floor(series)
    ax1, ax2 = fig.subplots(2, 1, sharex=True)
    for i, (name, pts) in enumerate(series.items()):
        colour = series_colour(i)
        e = [math.nan if r.ebn0_db is None else r.ebn0_db for _, r in pts]
        ax1.plot([t for t, _ in pts], e, "o-", color=colour, ms=4, lw=1.2, label=f"{name}: {len(pts)}")
        _draw_fer(ax2, pts, colour, floor)
    ax1.set_ylabel("Eb/N0 (dB)")
    ax1.grid(True, alpha=0.3)
    ax2.set_yscale("log")
    ax2.set_ylim(floor, 1.5)
    ax2.set_ylabel("frame error rate")
    ax2.grid(True, which="major", alpha=0.3)
    ax2.set_xlabel("capture start time (UTC)")
    if series:
        _legends(ax1, ax2)
        locator = mdates.AutoDateLocator()
        ax2.xaxis.set_major_locator(locator)
        ax2.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator))
    else:
        ax1.text(0.5, 0.5, "no capture with a time and a measurement", ha="center", va="center",
                 transform=ax1.transAxes)
    left = len(rows) - shown
    # with several links a capture has a row (and a point) per link
    n_captures = len({r.path for pts in series.values() for _, r in pts})
    per_link = f" ({shown} rows: one per link)" if shown > n_captures else ""
    fig.suptitle(f"Link trend: {n_captures} capture(s){per_link}, {len(series)} transmitter(s)"
                 + (f"; {left}{' row(s)' if per_link else ''} left out (failed or unmeasured)" if left else ""))
    save_figure(fig, png)
