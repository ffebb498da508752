"""Batch: link health of whole archives of captures, on every core or on a Dask cluster.

A batch collects the captures under some paths, assesses each one
(:func:`iqdemod.health.assess`) in a pool of worker processes (or on a running
Dask ``distributed`` scheduler), and writes one CSV row per capture and,
optionally, every frame to one JSON Lines file. With several links (a mapping
of them by name, or a folder profile of several ``[[signal]]`` entries) each
capture is still read once, by one worker (:func:`iqdemod.health.assess_links`),
and has a row per link (``link_name``); rows are known by (path, link name).

Along the data's path, one module each:

- :mod:`~iqdemod.batch.collect`: finding the captures (by the reader's own suffix
  registry, :func:`iqdemod.capture.capture_format`) and the link of each;
- :mod:`~iqdemod.batch.worker`: one capture in, a row per link and their frames out;
- :mod:`~iqdemod.batch.executors`: this process, a process pool or a Dask cluster,
  each job on one thread;
- :mod:`~iqdemod.batch.journal`: the ``.partial`` journal, resuming, the locks;
- :mod:`~iqdemod.batch.transmitters`: a transmitter label per row (per link);
- :mod:`~iqdemod.batch.report`: the CSV schema, reading it back, the summary;
- :mod:`~iqdemod.batch.run`: :func:`run_batch`, which ties them together;
- :mod:`~iqdemod.batch.trend`: the trend figure.

Workers
-------
``jobs`` worker processes (default: one per core; ``jobs=1`` works in the
calling process). On Linux, while the calling process has no other thread,
the workers are forked, so they start at once with everything imported;
otherwise they are fresh interpreters (spawned), which import iqdemod first
— a script that calls :func:`run_batch` then needs the usual
``if __name__ == "__main__":`` guard. Each job decodes with one thread (one
FFT thread, no read-ahead thread, one BLAS thread), since the jobs already
fill the cores. A worker whose parent was killed outright leaves within half a
second. With a Dask scheduler (``cluster``) the captures go to its workers
instead, one task each; they must see the archive at the same (absolute) paths.

Nothing finished is ever lost
-----------------------------
Rows are appended to ``REPORT.partial`` (``report.csv.partial`` beside
``report.csv``) as each capture finishes, flushed and fsync'd, with Ctrl-C
and SIGTERM held off while a row is written so that none is torn; frames go
to ``FRAMES.partial`` the same way, *before* the row that vouches for them.
When every capture is done the frames file (each frame given its row's
transmitter label) and then the report are written atomically (temporary
files in the same folder, then renamed, together or not at all) and the
journals removed. A killed run therefore loses at most the captures in flight;
a report from an earlier run stays untouched until the new one is complete.

``resume=True`` reads the old report and the journal (a torn last line, from a
kill in mid-write, is dropped) and skips every capture whose earlier row
(with several links: every one of its rows; else the capture is redone for all
its links)

- has status ``ok`` (rows with status ``error`` are tried again: the cause
  may have been transient, e.g. a file still being copied, and a retry is
  cheap next to re-running the archive),
- has the same ``size_bytes`` and ``mtime_ns`` (for a SigMF pair: both files,
  summed and latest), and the same ``settings_digest`` (a digest of the link,
  the target BER and the report's columns, so a changed profile re-runs the
  captures it applies to),
- and, when frames are written, whose frames are all present.

The new report holds exactly one row per capture collected in this run and
link, in collection order, then link order; rows of captures (or links) that are
no longer collected are dropped.

Link profile per folder
-----------------------
A folder holding a ``link.toml`` gives its own link to every capture below it
(the nearest such folder wins, looking up to the folder named on the command
line); its captures are labelled by that folder as their transmitter (after
the link's name when the profile has several ``[[signal]]`` entries).
Otherwise transmitters are told apart by their measured carrier error, each
link's apart (see :func:`label_transmitters`).
"""

from __future__ import annotations

from ..capture import CAPTURE_SUFFIXES, RAW_SUFFIXES
from .collect import FOLDER_LINK, collect_captures
from .journal import partial_path
from .report import COLUMN_HELP, COLUMNS, N_WEAKEST, BatchResult, CaptureRow, read_report
from .run import run_batch
from .transmitters import TX_TOLERANCE_HZ, label_transmitters
from .trend import plot_trend, zero_error_bound
from .worker import CaptureOutcome, CaptureTask, process_capture

__all__ = [
    "CAPTURE_SUFFIXES",
    "RAW_SUFFIXES",
    "FOLDER_LINK",
    "COLUMNS",
    "COLUMN_HELP",
    "N_WEAKEST",
    "TX_TOLERANCE_HZ",
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
    "zero_error_bound",
    "partial_path",
]
