"""Decoding while the recording is made: standard input, or a file that is still being written.

An operator who records around the clock should not wait for a file to close. A
:class:`LiveCapture` reads raw samples as they arrive, from a pipe (``-``, standard input) or from
a file that keeps growing (``follow``), and hands them out as blocks exactly like
:class:`iqdemod.capture.Capture`, so the receiver runs on it unchanged and its results do not depend
on how the bytes happened to arrive. Following a file stops when it has not grown for ``idle_s``
seconds (or on Ctrl-C, which the caller handles).

A growing SigMF recording is followed through its metadata: datatype, rate, centre and start time
come from the ``.sigmf-meta`` file, the samples from the ``.sigmf-data`` file as it grows.
"""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path
from typing import BinaryIO, Iterator

import numpy as np

from .capture import Capture, CaptureError, CaptureInfo, CaptureStats, DEFAULT_BLOCK_SAMPLES, open_capture
from .convert import sample_converter
from .formats import parse_datatype, sigmf_pair

__all__ = ["LiveCapture", "open_live"]

POLL_S = 0.05  # how often a followed file is looked at for new bytes


class LiveCapture(Capture):
    """Samples read as they arrive; use :func:`open_live` to make one.

    ``info.n_samples`` is 0: the length is not known before the end.
    """

    def __init__(self, info: CaptureInfo, source: BinaryIO, *, follow: bool, idle_s: float, owns: bool):
        super().__init__(info)
        self._source = source
        self._follow = follow
        self._idle_s = float(idle_s)
        self._owns = owns

    def close(self) -> None:
        if self._owns and self._source is not None:
            self._source.close()
        self._source = None
        super().close()

    def blocks(self, block_samples: int = DEFAULT_BLOCK_SAMPLES, *, overlap: int = 0) -> Iterator[np.ndarray]:
        """Read the samples as they come, in blocks of at most `block_samples` complex64 samples.

        Yields
        ------
        numpy.ndarray
            complex64 blocks as soon as whole samples have arrived (a block
            may be shorter than `block_samples`); with `follow`, until the file
            has not grown for ``idle_s`` seconds.
        """
        if overlap:
            raise ValueError("a live capture is read without overlap")
        if self._source is None:
            raise CaptureError(f"{self.info.path}: closed")
        dt = parse_datatype(self.info.datatype)
        convert = sample_converter(self.info.datatype)
        width = dt.sample_bytes
        want = int(block_samples) * width
        carry = b""
        quiet_since = time.monotonic()
        self._stats = CaptureStats()
        while True:
            data = self._read(want - len(carry))
            if data:
                quiet_since = time.monotonic()
                carry += data
                whole = len(carry) // width * width
                if whole:
                    chunk, carry = carry[:whole], carry[whole:]
                    samples, bad, clipped = convert(np.frombuffer(chunk, dtype=dt.numpy))
                    self._count(whole // width, bad, clipped)
                    yield samples
                continue
            if not self._follow or time.monotonic() - quiet_since >= self._idle_s:
                break
            time.sleep(POLL_S)
        if carry:
            self._stats = CaptureStats(self._stats.samples_read, self._stats.nonfinite, self._stats.clipped,
                                       len(carry))

    def _read(self, n: int) -> bytes:
        """What has arrived, at most `n` bytes; b"" when nothing has (yet)."""
        read1 = getattr(self._source, "read1", None)
        return read1(n) if read1 is not None else self._source.read(n)


class _FdReader:
    """Reads a file descriptor with os.read, under no lock of Python's buffered files.

    The reading runs in a thread ahead of the receiver; stopped while it waits on a pipe, that
    thread is left blocked at exit. Blocked in ``sys.stdin.buffer``, it would hold the buffer's
    lock, and the interpreter's shutdown, which takes that lock, would abort the process.
    """

    def __init__(self, fd: int):
        self._fd = fd

    def read1(self, n: int) -> bytes:
        return os.read(self._fd, n)


def _stdin_source():
    """Standard input for reading samples: its descriptor when it has one (a pipe, a file), else the
    buffered stream (a test harness's stand-in)."""
    try:
        return _FdReader(sys.stdin.fileno())
    except (AttributeError, OSError, ValueError):  # io.UnsupportedOperation is an OSError and a ValueError
        return sys.stdin.buffer


def open_live(path: str | os.PathLike, *, datatype: str | None = None, sample_rate: float | None = None,
              follow: bool = False, idle_s: float = 2.0) -> LiveCapture:
    """Open standard input (``"-"``) or a file that may still grow, for reading as it arrives.

    Parameters
    ----------
    path : str or path
        ``"-"`` for standard input (raw samples), a raw capture file, or a SigMF
        recording (its metadata must be complete; the data file may grow).
    datatype, sample_rate
        For raw samples: the SigMF datatype and the rate (as :func:`iqdemod.open_capture`).
    follow : bool
        Keep reading a file that grows; stop once it has not grown for `idle_s` seconds.
    idle_s : float
        Seconds without new bytes that end a followed file (> 0).

    Returns
    -------
    LiveCapture

    Raises
    ------
    CaptureError
        As :func:`iqdemod.open_capture`; for standard input, a missing datatype or rate.

    Examples
    --------
    A raw file read as it stands (``follow=False``); its length is not known
    in advance, so ``info.n_samples`` is 0, and blocks come as samples arrive:

    >>> import os, tempfile
    >>> import numpy as np
    >>> tmp = tempfile.TemporaryDirectory()
    >>> path = os.path.join(tmp.name, "harbour.cf32")
    >>> np.exp(2j * np.pi * np.arange(1000) / 8).astype("<c8").tofile(path)
    >>> with open_live(path, datatype="cf32_le", sample_rate=48000) as live:
    ...     sizes = [len(b) for b in live.blocks(400)]
    >>> live.info.kind, live.info.n_samples, sizes
    ('live', 0, [400, 400, 200])

    Standard input (``"-"``) holds raw samples, so their datatype and rate
    must be given:

    >>> open_live("-")
    Traceback (most recent call last):
    ...
    iqdemod.errors.CaptureError: standard input holds raw samples: give their datatype and rate (--datatype, --rate)
    >>> tmp.cleanup()
    """
    if not idle_s > 0 or not np.isfinite(idle_s):
        raise CaptureError(f"idle time {idle_s!r} s: must be a finite number of seconds > 0")
    text = os.fspath(path)
    if text == "-":
        if datatype is None or sample_rate is None:
            raise CaptureError("standard input holds raw samples: give their datatype and rate (--datatype, --rate)")
        dt = parse_datatype(datatype)
        rate = float(sample_rate)
        if not rate > 0 or not np.isfinite(rate):
            raise CaptureError(f"sample rate {sample_rate!r} Hz: must be > 0")
        info = CaptureInfo(path="-", data_path="-", kind="live", datatype=dt.name, sample_rate_hz=rate, n_samples=0)
        return LiveCapture(info, _stdin_source(), follow=False, idle_s=idle_s, owns=False)
    info = _file_info(Path(text), datatype, sample_rate)
    try:
        fh = open(info.data_path, "rb")
    except OSError as exc:
        raise CaptureError(f"{info.data_path}: cannot open ({exc.strerror})") from None
    fh.seek(info.header_bytes)
    live = CaptureInfo(path=info.path, data_path=info.data_path, kind="live", datatype=info.datatype,
                       sample_rate_hz=info.sample_rate_hz, n_samples=0, centre_hz=info.centre_hz,
                       start_time=info.start_time, meta_path=info.meta_path, header_bytes=info.header_bytes)
    return LiveCapture(live, fh, follow=follow, idle_s=idle_s, owns=True)


def _file_info(path: Path, datatype: str | None, sample_rate: float | None) -> CaptureInfo:
    """The capture's description; a raw or SigMF data file that is still empty is accepted."""
    try:
        with open_capture(path, datatype=datatype, sample_rate=sample_rate) as cap:
            if cap.info.kind == "audio":
                raise CaptureError(f"{path}: WAV/FLAC cannot be followed while written (raw or SigMF only)")
            return cap.info
    except CaptureError as exc:
        if "empty capture" not in str(exc) or sigmf_pair(path) is not None:
            raise
    if datatype is None or sample_rate is None:
        raise CaptureError(f"{path}: raw capture without metadata: give its datatype and rate (--datatype, --rate)")
    dt = parse_datatype(datatype)
    return CaptureInfo(path=str(path), data_path=str(path), kind="raw", datatype=dt.name,
                       sample_rate_hz=float(sample_rate), n_samples=0)
