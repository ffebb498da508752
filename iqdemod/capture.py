"""Reading captures in bounded memory: raw IQ, SigMF recordings, two-channel WAV/FLAC.

Every reader hands out the samples as a generator of complex64 blocks (I + jQ,
scaled to ±1 full scale), in the manner of soundfile's ``blocks``: a fixed
block length, an explicit `overlap`, a short last block. A :class:`Capture` is
a context manager that owns the file it opened.

Defects are measured on the way, never fatal when they can be tolerated:

- a cut final sample (a file size that is not a whole number of samples) is
  dropped, with a warning;
- NaN and Inf samples (float formats) are set to zero and counted;
- samples at full scale (either component) are counted as clipped; a float
  format has no full scale, so there only a pile-up of samples at one extreme
  value counts (:func:`pile_up`).

Which file opens as what, the datatypes and the SigMF metadata rules are in
:mod:`iqdemod.formats` (the names are offered here too, where callers have
always found them).
"""

from __future__ import annotations

import math
import os
import re
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator

import numpy as np

from .convert import Converter, pile_up, sample_converter
from .errors import CaptureError, quote
from .formats import (CAPTURE_FORMATS, CAPTURE_SUFFIXES, MAX_META_BYTES, RAW_SUFFIXES, SIGMF_COMPLEX_DATATYPES,
                      SIGMF_DATA, SIGMF_META, Datatype, capture_files, capture_format, datatype_of_name, parse_datatype,
                      parse_sigmf_meta, read_sigmf_meta, sigmf_pair)

__all__ = [
    "Datatype",
    "parse_datatype",
    "CaptureInfo",
    "CaptureStats",
    "Capture",
    "open_capture",
    "progress_bar",
    "CaptureWarning",
    "DEFAULT_BLOCK_SAMPLES",
    "CAPTURE_FORMATS",
    "CAPTURE_SUFFIXES",
    "RAW_SUFFIXES",
    "SIGMF_COMPLEX_DATATYPES",
    "capture_format",
    "capture_files",
    "sigmf_pair",
    "read_sigmf_meta",
    "parse_sigmf_meta",
    "MAX_META_BYTES",
    "pile_up",
    "sample_converter",
]

DEFAULT_BLOCK_SAMPLES = 1 << 20


# The highest sample rate accepted, Hz (100 GS/s: far above any receiver we know of, common practice
# bound; it keeps sample counts and filter designs within floating-point range).
MAX_SAMPLE_RATE_HZ = 1e11


class CaptureWarning(UserWarning):
    """A tolerated defect in a capture (cut sample, NaN/Inf, clipping)."""


@dataclass(frozen=True)
class CaptureInfo:
    """What is known about a capture before reading its samples.

    Attributes
    ----------
    path : str
        The name the user gave.
    data_path : str
        The file that holds the samples.
    kind : str
        ``"raw"``, ``"sigmf"`` or ``"audio"``.
    datatype : str
        SigMF datatype (for audio: the soundfile subtype, e.g. ``PCM_16``).
    sample_rate_hz : float
    n_samples : int
        Complex samples that will be read (a cut final sample excluded).
    centre_hz : float or None
        Capture centre frequency (SigMF ``core:frequency``).
    start_time : str or None
        SigMF ``core:datetime`` of the first capture segment.
    meta_path : str or None
    """

    path: str
    data_path: str
    kind: str
    datatype: str
    sample_rate_hz: float
    n_samples: int
    centre_hz: float | None = None
    start_time: str | None = None
    meta_path: str | None = None
    header_bytes: int = 0
    cut_bytes: int = 0

    @property
    def duration_s(self) -> float:
        return self.n_samples / self.sample_rate_hz


@dataclass(frozen=True)
class CaptureStats:
    """Defects counted while reading (complete once all blocks were read)."""

    samples_read: int = 0
    nonfinite: int = 0
    clipped: int = 0
    cut_bytes: int = 0

    @property
    def clipped_fraction(self) -> float:
        return self.clipped / self.samples_read if self.samples_read else 0.0

    def warnings(self) -> list[str]:
        """One plain sentence per defect."""
        out = []
        if self.cut_bytes:
            out.append(f"cut final sample: {self.cut_bytes} trailing byte(s) dropped")
        if self.nonfinite:
            out.append(f"{self.nonfinite} NaN/Inf sample(s) set to zero")
        if self.clipped:
            out.append(f"{self.clipped_fraction:.2%} of samples clipped at full scale")
        return out


class Capture:
    """An open capture: its :class:`CaptureInfo` and a generator of sample blocks.

    Use :func:`open_capture` to make one. Closing it closes the file it opened.
    """

    def __init__(self, info: CaptureInfo, *, _datatype: Datatype | None = None):
        self.info = info
        self._dt = _datatype
        self._stats = CaptureStats(cut_bytes=info.cut_bytes)
        self._fh = None
        self._sf = None
        self._warned_cut = False

    # -- context management ------------------------------------------------
    def __enter__(self) -> "Capture":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        for handle in (self._fh, self._sf):
            if handle is not None:
                handle.close()
        self._fh = self._sf = None

    @property
    def stats(self) -> CaptureStats:
        """Defects counted so far; complete after the last block."""
        return self._stats

    def blocks(self, block_samples: int = DEFAULT_BLOCK_SAMPLES, *, overlap: int = 0) -> Iterator[np.ndarray]:
        """Read the capture from its start in blocks of complex64 samples.

        Parameters
        ----------
        block_samples : int
            Samples per block (the last block may be shorter).
        overlap : int
            Samples each block repeats from the end of the one before.

        Yields
        ------
        numpy.ndarray
            complex64 blocks, ±1 full scale, NaN/Inf already zeroed. A block
            may be read-only (a cf32 file is handed out without a copy): it is
            then a view of a memory map of its part of the file, which holds a
            file descriptor of its own while the block lives. Copy blocks that
            are kept by the hundred (``MAP_READS = False`` reads them instead).
        """
        block_samples = int(block_samples)
        overlap = int(overlap)
        if block_samples < 1 or not 0 <= overlap < block_samples:
            raise ValueError(f"block_samples {block_samples}, overlap {overlap}: need block > overlap >= 0")
        self._stats = CaptureStats(cut_bytes=self.info.cut_bytes)
        if self.info.cut_bytes and not self._warned_cut:
            warnings.warn(
                f"{self.info.path}: cut final sample, {self.info.cut_bytes} trailing byte(s) dropped",
                CaptureWarning,
                stacklevel=2,
            )
            self._warned_cut = True
        source = self._audio_blocks if self.info.kind == "audio" else self._raw_blocks
        step = block_samples - overlap
        tail = np.zeros(0, np.complex64)
        for fresh in source(step):
            block = np.concatenate([tail, fresh]) if overlap and tail.size else fresh
            yield block
            if overlap:
                tail = block[-overlap:].copy()
        if self._stats.nonfinite:
            warnings.warn(
                f"{self.info.path}: {self._stats.nonfinite} NaN/Inf sample(s) set to zero",
                CaptureWarning,
                stacklevel=2,
            )
        if self._stats.clipped:
            warnings.warn(
                f"{self.info.path}: {self._stats.clipped_fraction:.3%} of samples clipped at full scale",
                CaptureWarning,
                stacklevel=2,
            )

    def _count(self, n: int, bad: int, clipped: int) -> None:
        s = self._stats
        self._stats = CaptureStats(s.samples_read + n, s.nonfinite + bad, s.clipped + clipped, s.cut_bytes)

    def _raw_blocks(self, step: int) -> Iterator[np.ndarray]:
        dt = self._dt
        convert = Converter(dt)
        remaining = self.info.n_samples
        if self._fh is None:
            try:
                self._fh = open(self.info.data_path, "rb")
            except OSError as exc:
                raise CaptureError(f"{self.info.data_path}: cannot open ({exc.strerror})") from None
        pos = self.info.header_bytes
        mapped = MAP_READS
        while remaining > 0:
            n = min(step, remaining)
            size = n * dt.sample_bytes
            data = _mapped(self._fh, pos, size) if mapped else None
            if data is None:  # not a regular file, a file system that cannot map, or mapping off
                mapped = False
                self._fh.seek(pos)
                data = self._fh.read(size)
            if len(data) != size:
                raise CaptureError(
                    f"{self.info.data_path}: file shrank while reading (got {len(data)} of "
                    f"{size} bytes)"
                )
            samples, bad, clipped = convert(np.frombuffer(data, dtype=dt.numpy))
            self._count(n, bad, clipped)
            remaining -= n
            pos += size
            yield samples

    def _audio_blocks(self, step: int) -> Iterator[np.ndarray]:
        import soundfile as sf

        if self._sf is None:
            try:
                self._sf = sf.SoundFile(self.info.data_path)
            except Exception as exc:  # soundfile raises its own LibsndfileError / RuntimeError
                raise CaptureError(f"{self.info.data_path}: cannot read audio ({exc})") from None
        self._sf.seek(0)
        bits = _audio_bits(self.info.datatype)
        top = np.float32(1.0 - 2.0 ** -(bits - 1)) if bits else np.float32(1.0)
        while True:
            data = self._sf.read(step, dtype="float32", always_2d=True)
            if data.shape[0] == 0:
                break
            comp = np.ascontiguousarray(data)
            finite = np.isfinite(comp).all(axis=1)
            bad = int((~finite).sum())
            if bad:
                comp[~finite] = 0.0
            if bits:
                clipped = int((np.abs(comp) >= top).any(axis=1).sum())
            else:  # a float subtype has no full scale either
                flat = comp.reshape(-1)
                clipped = pile_up(flat, flat.min(), flat.max()) if flat.size else 0
            self._count(comp.shape[0], bad, clipped)
            yield comp.view(np.complex64).reshape(-1)


def progress_bar(capture: "Capture | None", enabled: bool, desc: str | None = None):
    """A tqdm bar over a capture's samples on stderr (named after its file unless `desc` says), or
    None when not `enabled`. It shows only on a terminal and once the work has taken a second; a
    capture of unknown length (a stream) counts samples without a total.

    Examples
    --------
    No bar unless asked for (a library function prints nothing by default):

    >>> progress_bar(None, False, "survey: spectrum") is None
    True
    """
    if not enabled:
        return None
    from tqdm import tqdm

    return tqdm(total=capture.info.n_samples or None, unit="S", unit_scale=True,
                desc=Path(capture.info.path).name if desc is None else desc, leave=False, delay=1.0, disable=None)


def _audio_bits(subtype: str) -> int:
    m = re.search(r"(\d+)", subtype or "")
    return int(m.group(1)) if m and subtype.upper().startswith(("PCM", "DPCM")) else 0


MAP_READS = True  # raw blocks are read through a memory map of the file (see _mapped); False: read() copies


def _mapped(fh, pos: int, size: int) -> memoryview | bytes | None:
    """Bytes `pos` … `pos` + `size` of open file `fh`, mapped read-only rather than copied; None where
    the file cannot be mapped (a pipe, a device, a file system without mmap).

    Each block gets a mapping of its own, which lives as long as the arrays made from it
    (numpy keeps the buffer alive): blocks never alias, and the pages of a block that is done
    with are let go. A file shorter than the block asks (it shrank since it was opened) gives
    the bytes that are there, so the caller reports it. Reading a block's bytes from the
    page cache by copying them costs about as much as a pass over the samples; the mapping
    costs a few page-table entries. A file cut short by another program *while* a block of it
    is mapped cannot be caught this way (the operating system ends the process on access to
    the vanished pages); it is read from whole, as recorders leave files, and a file still being
    written is read with ``--follow`` (:mod:`iqdemod.live`), which never maps.
    """
    import mmap

    try:
        available = os.fstat(fh.fileno()).st_size - pos
        if available < size:
            fh.seek(pos)
            return fh.read(max(0, available))
        start = pos - pos % mmap.ALLOCATIONGRANULARITY
        view = mmap.mmap(fh.fileno(), size + pos - start, access=mmap.ACCESS_READ, offset=start)
    except (OSError, ValueError, OverflowError):
        return None
    return memoryview(view)[pos - start:]


def _file_size(path: Path) -> int:
    try:
        return path.stat().st_size
    except OSError as exc:
        raise CaptureError(f"{path}: cannot read ({exc.strerror})") from None


def _raw_info(path: Path, data_path: Path, dt: Datatype, rate: float, *, kind: str, header: int = 0,
              start: int = 0, size: int | None = None, **extra) -> CaptureInfo:
    """Info of samples at byte `start` + `header` of `data_path`, `size` bytes long (default: to the end)."""
    size = (_file_size(data_path) - start if size is None else size) - header
    if size < 0:
        raise CaptureError(f"{data_path}: shorter than its header_bytes ({header})")
    n = size // dt.sample_bytes
    if n == 0:
        raise CaptureError(f"{data_path}: empty capture (no complete {dt.name} sample)")
    return CaptureInfo(
        path=str(path),
        data_path=str(data_path),
        kind=kind,
        datatype=dt.name,
        sample_rate_hz=rate,
        n_samples=n,
        header_bytes=start + header,
        cut_bytes=size - n * dt.sample_bytes,
        **extra,
    )


def _check_rate(rate, where: str) -> float:
    if isinstance(rate, bool) or not isinstance(rate, (int, float)) or not math.isfinite(rate):
        raise CaptureError(f"{where}: sample rate {quote(rate)}: must be a finite number")
    if rate <= 0:
        raise CaptureError(f"{where}: sample rate {rate:g} Hz: must be > 0")
    if rate > MAX_SAMPLE_RATE_HZ:
        raise CaptureError(f"{where}: sample rate {float(rate):g} Hz: must be at most {MAX_SAMPLE_RATE_HZ:g} Hz")
    return float(rate)


def _open_sigmf(path: Path, meta_path: Path, data_path: Path, sample_rate: float | None) -> Capture:
    meta = read_sigmf_meta(meta_path)
    if not data_path.exists():
        raise CaptureError(f"{data_path}: SigMF data file missing (metadata {meta_path.name} has no data beside it)")
    if data_path.is_dir():
        raise CaptureError(f"{data_path}: is a folder, expected a SigMF data file")
    return _sigmf_capture(path, meta, str(meta_path), data_path, sample_rate)


def _sigmf_capture(path: Path, meta: dict, where: str, data_path: Path, sample_rate: float | None, *,
                   start: int = 0, size: int | None = None) -> Capture:
    """A capture from checked SigMF metadata and where its samples lie (a file, or a span of one)."""
    glob = meta["global"]
    try:
        dt = parse_datatype(glob["core:datatype"])
    except CaptureError as exc:
        raise CaptureError(f"{where}: {exc}") from None
    rate = glob.get("core:sample_rate", sample_rate)
    if rate is None:
        raise CaptureError(f"{where}: core:sample_rate missing: give the rate (--rate)")
    rate = _check_rate(rate, where)
    if sample_rate is not None and "core:sample_rate" in glob and not math.isclose(float(sample_rate), rate):
        warnings.warn(f"{where}: its core:sample_rate {rate:g} Hz is used, not the rate given ({float(sample_rate):g} Hz)",
                      CaptureWarning, stacklevel=3)
    first = meta["captures"][0] if meta["captures"] else {}
    centre = first.get("core:frequency")
    if centre is not None and (isinstance(centre, bool) or not isinstance(centre, (int, float))
                               or not math.isfinite(centre)):
        raise CaptureError(f"{where}: core:frequency {quote(centre)}: must be a finite number")
    start_time = first.get("core:datetime")
    header = first.get("core:header_bytes", 0)
    if isinstance(header, bool) or not isinstance(header, int) or header < 0:
        raise CaptureError(f"{where}: core:header_bytes {quote(header)}: must be a whole number >= 0")
    info = _raw_info(
        path,
        data_path,
        dt,
        rate,
        kind="sigmf",
        header=header,
        start=start,
        size=size,
        centre_hz=None if centre is None else float(centre),
        start_time=start_time if isinstance(start_time, str) else None,
        meta_path=where,
    )
    _check_extent(meta, info, where)
    return Capture(info, _datatype=dt)


def _check_extent(meta: dict, info: CaptureInfo, where: str) -> None:
    """Warn when the metadata's captures or annotations reach past the samples the data holds: a
    data file cut short (a copy or download that stopped) would otherwise pass for a whole one."""
    ends = []
    for item in list(meta.get("captures") or []) + list(meta.get("annotations") or []):
        if not isinstance(item, dict):
            continue
        start, count = item.get("core:sample_start"), item.get("core:sample_count", 0)
        if all(isinstance(v, int) and not isinstance(v, bool) and v >= 0 for v in (start, count)):
            ends.append(start + count)
    reach = max(ends, default=0)
    if reach > info.n_samples:
        warnings.warn(f"{where}: its metadata reaches sample {reach}, but the data holds {info.n_samples}: "
                      "the data file may be cut short", CaptureWarning, stacklevel=4)


def _open_sigmf_archive(path: Path, sample_rate: float | None) -> Capture:
    """A ``.sigmf`` archive (SigMF: a tar of one recording's meta and data files), read in place.

    The data member of an uncompressed tar is one contiguous span of the file,
    so it streams like a raw file with a header; nothing is extracted.
    """
    import tarfile

    try:
        with tarfile.open(path, mode="r:") as tar:
            members = [m for m in tar.getmembers() if m.isfile()]
            metas = [m for m in members if m.name.endswith(SIGMF_META)]
            if len(metas) != 1:
                raise CaptureError(f"{path}: SigMF archive holds {len(metas)} recordings: expected exactly 1")
            base = metas[0].name[: -len(SIGMF_META)]
            datas = [m for m in members if m.name == base + SIGMF_DATA]
            if not datas:
                raise CaptureError(f"{path}: SigMF archive has {metas[0].name} but no {base + SIGMF_DATA}")
            if metas[0].size > MAX_META_BYTES:
                raise CaptureError(f"{path}: SigMF archive metadata larger than {MAX_META_BYTES // (1 << 20)} MB: "
                                   "refused")
            text = tar.extractfile(metas[0]).read(MAX_META_BYTES + 1).decode("utf-8")
            data = datas[0]
    except (tarfile.ReadError, EOFError) as exc:
        raise CaptureError(f"{path}: not an uncompressed SigMF archive (tar): {exc}") from None
    except OSError as exc:
        raise CaptureError(f"{path}: cannot read the SigMF archive ({exc.strerror or exc.__class__.__name__})") from None
    except UnicodeDecodeError:
        raise CaptureError(f"{path}: SigMF archive metadata is not UTF-8 text") from None
    where = f"{path}:{metas[0].name}"
    meta = parse_sigmf_meta(text, where)
    return _sigmf_capture(path, meta, where, path, sample_rate, start=data.offset_data, size=data.size)


def _open_audio(path: Path) -> Capture:
    import soundfile as sf

    try:
        meta = sf.info(str(path))
    except Exception as exc:  # soundfile's own error types differ between versions
        raise CaptureError(f"{path}: not a readable WAV/FLAC file ({str(exc).splitlines()[0]})") from None
    if meta.channels != 2:
        raise CaptureError(f"{path}: {meta.channels} channel(s): expected 2 (I left, Q right)")
    if meta.frames <= 0:
        raise CaptureError(f"{path}: empty capture (no samples)")
    info = CaptureInfo(
        path=str(path),
        data_path=str(path),
        kind="audio",
        datatype=meta.subtype,
        sample_rate_hz=float(meta.samplerate),
        n_samples=int(meta.frames),
    )
    return Capture(info)


def _datatype_unused(capture: Capture, datatype: str | None) -> Capture:
    """A SigMF recording names its own datatype: one given that differs is not used, and a warning says so
    (as for a differing rate)."""
    if datatype is not None:
        try:
            given = parse_datatype(datatype).name
        except CaptureError:
            given = str(datatype)
        if given != capture.info.datatype:
            warnings.warn(f"{capture.info.path}: its core:datatype {capture.info.datatype} is used, not the datatype "
                          f"given ({datatype})", CaptureWarning, stacklevel=3)
    return capture


def open_capture(path: str | os.PathLike, *, datatype: str | None = None, sample_rate: float | None = None) -> Capture:
    """Open a capture for block reading.

    Parameters
    ----------
    path : str or PathLike
        A SigMF ``.sigmf-meta`` or ``.sigmf-data`` file (either names the pair),
        a ``.sigmf`` archive (uncompressed tar of one pair), a ``.wav``/``.wave``/``.flac``
        file with I in the left channel and Q in the right, or a raw file of
        interleaved IQ (by :func:`capture_format`: a name of :data:`RAW_SUFFIXES`, or any
        other name given with its datatype).
    datatype : str, optional
        SigMF datatype of a raw file; when not given, a raw file named by a
        SigMF datatype (``night.cu8``, ``gauge.ci16_le``) is read as that one.
    sample_rate : float, optional
        Samples per second of a raw file (required for raw files).

    Returns
    -------
    Capture

    Raises
    ------
    CaptureError
        For a missing file, a folder, an empty file, an unknown datatype, broken
        SigMF metadata or a missing half of a pair, or audio without 2 channels.

    Examples
    --------
    A SigMF recording (SigMF v1.2 spec, REFERENCE §6): ``cf32_le`` samples are
    numpy ``<c8``, interleaved I first; the metadata's ``global``, ``captures``
    and ``annotations`` objects are all required. Either file names the pair,
    and blocks are read as complex64, the last one short:

    >>> import json, os, tempfile
    >>> import numpy as np
    >>> tmp = tempfile.TemporaryDirectory()
    >>> base = os.path.join(tmp.name, "buoy7")
    >>> np.array([1 + 2j, 3 - 4j, 0.5j], "<c8").tofile(base + ".sigmf-data")
    >>> meta = {"global": {"core:datatype": "cf32_le", "core:version": "1.2.0", "core:sample_rate": 48000},
    ...         "captures": [{"core:sample_start": 0, "core:frequency": 868837500.0}], "annotations": []}
    >>> with open(base + ".sigmf-meta", "w", encoding="utf-8") as fh:
    ...     json.dump(meta, fh)
    >>> with open_capture(base + ".sigmf-data") as capture:
    ...     info = capture.info
    ...     blocks = [b.tolist() for b in capture.blocks(2)]
    >>> info.kind, info.datatype, info.sample_rate_hz, info.n_samples, info.centre_hz
    ('sigmf', 'cf32_le', 48000.0, 3, 868837500.0)
    >>> blocks
    [[(1+2j), (3-4j)], [0.5j]]

    A raw file needs its datatype and rate (a name that is a SigMF datatype,
    ``night.cu8``, gives the datatype); unsigned 8-bit samples are centred on
    127.5 (common practice), so the bytes 191, 64 are about 0.5 − 0.5j:

    >>> raw = os.path.join(tmp.name, "night.raw")
    >>> with open(raw, "wb") as fh:
    ...     _ = fh.write(bytes([191, 64, 128, 128]))
    >>> with open_capture(raw, datatype="cu8", sample_rate=250000) as capture:
    ...     samples = np.concatenate(list(capture.blocks()))
    >>> capture.info.kind, np.round(samples, 2).tolist()
    ('raw', [(0.5-0.5j), 0j])
    >>> open_capture(raw, sample_rate=250000)
    Traceback (most recent call last):
    ...
    iqdemod.errors.CaptureError: ...night.raw: raw capture without metadata: give its datatype (--datatype, e.g. cu8)
    >>> tmp.cleanup()
    """
    p = Path(path)
    pair = sigmf_pair(p)
    if pair is not None:
        meta_path, data_path = pair
        if not meta_path.exists() and not data_path.exists():
            raise CaptureError(f"{p}: no such file")
        if not meta_path.exists():
            raise CaptureError(f"{meta_path}: SigMF metadata file missing (data {data_path.name} has no metadata)")
        if meta_path.is_dir():
            raise CaptureError(f"{meta_path}: is a folder, expected a SigMF metadata file")
        return _datatype_unused(_open_sigmf(p, meta_path, data_path, sample_rate), datatype)
    if not p.exists():
        raise CaptureError(f"{p}: no such file")
    if p.is_dir():
        raise CaptureError(f"{p}: is a folder, expected a capture file")
    fmt = capture_format(p)  # any other name opens as raw, as the datatype given says
    if fmt == "audio":
        return _open_audio(p)
    if fmt == "sigmf-archive":
        return _datatype_unused(_open_sigmf_archive(p, sample_rate), datatype)
    if datatype is None:
        datatype = datatype_of_name(p)
    if datatype is None:
        raise CaptureError(f"{p}: raw capture without metadata: give its datatype (--datatype, e.g. cu8)")
    if sample_rate is None:
        raise CaptureError(f"{p}: raw capture without metadata: give its sample rate (--rate)")
    dt = parse_datatype(datatype)
    rate = _check_rate(sample_rate, str(p))
    return Capture(_raw_info(p, p, dt, rate, kind="raw"), _datatype=dt)


