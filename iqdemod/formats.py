"""Capture formats: which file opens as what, the SigMF datatypes and the SigMF metadata rules.

The one table of file suffixes (:data:`CAPTURE_FORMATS`) that every opener
reads: :func:`iqdemod.capture.open_capture` and the archive walker of
:mod:`iqdemod.batch` both look a name up here, so a file one collects is one
the other opens the same way. Datatype names and the metadata layout follow
the SigMF specification v1.2 (``NAME.sigmf-meta``, JSON with ``global``,
``captures`` and ``annotations``, beside ``NAME.sigmf-data``).
"""

from __future__ import annotations

import json
import os
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .errors import CaptureError, quote
from .files import read_small_text

__all__ = [
    "CAPTURE_FORMATS",
    "CAPTURE_SUFFIXES",
    "RAW_SUFFIXES",
    "SIGMF_COMPLEX_DATATYPES",
    "SIGMF_META",
    "SIGMF_DATA",
    "MAX_META_BYTES",
    "Datatype",
    "parse_datatype",
    "capture_format",
    "datatype_of_name",
    "capture_files",
    "sigmf_pair",
    "read_sigmf_meta",
    "parse_sigmf_meta",
]

SIGMF_META = ".sigmf-meta"
SIGMF_DATA = ".sigmf-data"


# --------------------------------------------------------------------------- suffix registry
# The one table of which file name opens as which format. open_capture and batch's discovery
# both read it, so a file batch collects is one the reader opens the same way, and back.
#: The complex datatypes of the SigMF core specification ([c][f32|f64|i32|i16|u32|u16|i8|u8], the
#: multi-byte ones with _le or _be): each is also the suffix of a raw file of that datatype.
SIGMF_COMPLEX_DATATYPES = (
    "cf64_le", "cf64_be", "cf32_le", "cf32_be", "ci32_le", "ci32_be", "ci16_le", "ci16_be", "ci8",
    "cu32_le", "cu32_be", "cu16_le", "cu16_be", "cu8",
)


#: Raw interleaved IQ (datatype and rate from the link or the flags): the SigMF datatype names,
#: plus the neutral .raw, .iq and .bin.
RAW_SUFFIXES = tuple("." + name for name in SIGMF_COMPLEX_DATATYPES) + (".raw", ".iq", ".bin")


#: Suffix (lower case) -> format: "sigmf" (either file of a pair), "sigmf-archive" (a .sigmf tar),
#: "audio" (two-channel WAV or FLAC), "raw".
CAPTURE_FORMATS = {
    SIGMF_META: "sigmf", SIGMF_DATA: "sigmf", ".sigmf": "sigmf-archive",
    ".wav": "audio", ".wave": "audio", ".flac": "audio",
    **{suffix: "raw" for suffix in RAW_SUFFIXES},
}


CAPTURE_SUFFIXES = tuple(CAPTURE_FORMATS)


def datatype_of_name(path: str | os.PathLike) -> str | None:
    """The SigMF datatype a raw file's name gives by its suffix, else None.

    Examples
    --------
    >>> datatype_of_name("night.cu8"), datatype_of_name("gauge.CI16_LE"), datatype_of_name("night.raw")
    ('cu8', 'ci16_le', None)
    """
    suffix = Path(path).suffix.lower()[1:]
    return suffix if suffix in SIGMF_COMPLEX_DATATYPES else None


def capture_format(path: str | os.PathLike) -> str | None:
    """The format a file name opens as (see :data:`CAPTURE_FORMATS`), or None for any other name.

    Suffixes match in any case, except a SigMF pair's, whose partner is found by the name as the
    SigMF specification writes it (``.sigmf-meta``/``.sigmf-data``).

    Examples
    --------
    >>> capture_format("buoy.sigmf-meta"), capture_format("night.CI16_LE"), capture_format("a.wave")
    ('sigmf', 'raw', 'audio')
    >>> capture_format("notes.txt") is None
    True
    """
    suffix = Path(path).suffix
    fmt = CAPTURE_FORMATS.get(suffix.lower())
    if fmt == "sigmf" and suffix not in CAPTURE_FORMATS:
        return None
    return fmt


# SigMF metadata beyond this size is refused unread: real files are kilobytes, and a cap keeps
# an endless file (a link to /dev/zero) from filling the memory.
MAX_META_BYTES = 4 << 20


@dataclass(frozen=True)
class Datatype:
    """A complex SigMF datatype such as ``cu8`` or ``ci16_le``.

    Attributes
    ----------
    name : str
        The SigMF ``core:datatype`` string.
    numpy : str
        The numpy dtype of one component.
    scale : float
        Multiplier that brings a component to ±1 full scale.
    offset : float
        Subtracted before scaling (127.5 for ``u8``).
    full_scale : tuple of float
        The lowest and highest raw component values (clipping) or None (float).
    """

    name: str
    numpy: str
    scale: float
    offset: float
    full_scale: tuple[float, float] | None

    @property
    def sample_bytes(self) -> int:
        return 2 * np.dtype(self.numpy).itemsize

    @property
    def is_float(self) -> bool:
        return self.full_scale is None


_DATATYPE = re.compile(r"^(?P<kind>[cr])(?P<fmt>[fiu])(?P<bits>8|16|32|64)(?:_(?P<end>le|be))?$")


def parse_datatype(name: str) -> Datatype:
    """Parse a SigMF ``core:datatype`` string for complex samples.

    Raises
    ------
    CaptureError
        For a malformed string, real (``r…``) samples, or an unsupported width.

    Examples
    --------
    >>> parse_datatype("cu8").offset
    127.5
    >>> parse_datatype("ci16_le").numpy
    '<i2'
    """
    text = str(name).strip().lower()
    m = _DATATYPE.match(text)
    expected = "expected a SigMF complex datatype such as cu8, ci8, ci16_le, ci16_be, cf32_le, cf64_le"
    if not m:
        raise CaptureError(f"datatype {quote(name)}: unknown ({expected})")
    kind, fmt, bits, end = m["kind"], m["fmt"], int(m["bits"]), m["end"]
    if kind == "r":
        raise CaptureError(f"datatype {quote(name)}: real samples; iqdemod needs complex IQ ({expected})")
    if fmt == "f" and bits not in (32, 64) or fmt != "f" and bits == 64:
        raise CaptureError(f"datatype {quote(name)}: unsupported width ({expected})")
    if bits == 8 and end is not None:
        raise CaptureError(f"datatype {quote(name)}: 8-bit types take no _le/_be suffix ({expected})")
    if bits > 8 and end is None:
        raise CaptureError(f"datatype {quote(name)}: needs _le or _be ({expected})")
    order = "|" if bits == 8 else ("<" if end == "le" else ">")
    np_name = f"{order}{fmt}{bits // 8}"
    if fmt == "f":
        return Datatype(text, np_name, 1.0, 0.0, None)
    if fmt == "i":
        top = float(2 ** (bits - 1))
        return Datatype(text, np_name, 1.0 / top, 0.0, (-top, top - 1))
    half = (2.0**bits - 1) / 2
    return Datatype(text, np_name, 1.0 / half, half, (0.0, 2.0**bits - 1))


def capture_files(path: str | os.PathLike) -> list[Path]:
    """The files a capture is read from: both files of a SigMF pair, else the file itself.

    Used to keep outputs off the inputs; names that do not exist are included too.

    Examples
    --------
    >>> [p.name for p in capture_files("captures/night.sigmf-data")]
    ['night.sigmf-meta', 'night.sigmf-data']
    >>> [p.name for p in capture_files("captures/night.cu8")]
    ['night.cu8']
    """
    p = Path(path)
    pair = sigmf_pair(p)
    return list(pair) if pair is not None else [p]


def sigmf_pair(path: Path) -> tuple[Path, Path] | None:
    """(meta, data) paths when `path` names either file of a SigMF pair, else None.

    Examples
    --------
    A SigMF recording is ``NAME.sigmf-meta`` with ``NAME.sigmf-data`` (SigMF
    spec, REFERENCE §6); either name gives both:

    >>> from pathlib import Path
    >>> [p.name for p in sigmf_pair(Path("buoy7.sigmf-meta"))]
    ['buoy7.sigmf-meta', 'buoy7.sigmf-data']
    >>> sigmf_pair(Path("buoy7.sigmf")) is None  # an archive, not a pair
    True
    """
    name = path.name
    for suffix in (SIGMF_META, SIGMF_DATA):
        if name.endswith(suffix):
            base = path.with_name(name[: -len(suffix)])
            return base.with_name(base.name + SIGMF_META), base.with_name(base.name + SIGMF_DATA)
    return None


def read_sigmf_meta(meta_path: Path) -> dict:
    """Load and check a ``.sigmf-meta`` file against the SigMF core rules we use.

    At most :data:`MAX_META_BYTES` are read, so a huge or endless file (a link
    to ``/dev/zero``) is refused before it can fill the memory.

    Raises
    ------
    CaptureError
        For a file that is not a regular file or is too large, unreadable
        JSON, missing required objects or keys, or bad values.

    Examples
    --------
    >>> import json, os, tempfile
    >>> from pathlib import Path
    >>> meta = {"global": {"core:datatype": "ci16_le", "core:version": "1.2.0", "core:sample_rate": 250000},
    ...         "captures": [{"core:sample_start": 0, "core:frequency": 868837500}], "annotations": []}
    >>> with tempfile.TemporaryDirectory() as tmp:
    ...     path = Path(tmp) / "buoy7.sigmf-meta"
    ...     _ = path.write_text(json.dumps(meta), encoding="utf-8")
    ...     read_sigmf_meta(path)["global"]["core:sample_rate"]
    250000
    """
    where = str(meta_path)
    text = read_small_text(meta_path, MAX_META_BYTES, CaptureError, where, "SigMF metadata file", regular_only=True)
    return parse_sigmf_meta(text, where)


def _no_constant(name: str):
    # JSON has no NaN or Infinity (RFC 8259 §6); Python's reader would accept them
    raise ValueError(f"{name} is not a JSON number")


def parse_sigmf_meta(text: str, where: str) -> dict:
    """Check SigMF metadata text (see :func:`read_sigmf_meta`); `where` names it in errors.

    Examples
    --------
    The SigMF spec (REFERENCE §6) requires the top-level objects ``global``,
    ``captures`` and ``annotations``, and ``core:datatype`` in ``global``:

    >>> text = ('{"global": {"core:datatype": "cf32_le", "core:version": "1.2.0"},'
    ...         ' "captures": [{"core:sample_start": 0}], "annotations": []}')
    >>> parse_sigmf_meta(text, "buoy7.sigmf-meta")["global"]["core:datatype"]
    'cf32_le'
    >>> parse_sigmf_meta('{"global": {"core:datatype": "cf32_le"}, "captures": []}', "buoy7.sigmf-meta")
    Traceback (most recent call last):
    ...
    iqdemod.errors.CaptureError: buoy7.sigmf-meta: broken SigMF metadata: required object 'annotations' missing
    """
    if len(text) > MAX_META_BYTES:
        raise CaptureError(f"{where}: SigMF metadata larger than {MAX_META_BYTES // (1 << 20)} MB: refused")
    try:
        meta = json.loads(text, parse_constant=_no_constant)
    except json.JSONDecodeError as exc:
        raise CaptureError(f"{where}: broken SigMF metadata: {exc.msg} at line {exc.lineno}") from None
    except RecursionError:
        raise CaptureError(f"{where}: broken SigMF metadata: nested too deep") from None
    except ValueError as exc:  # an integer beyond sys.get_int_max_str_digits, NaN or Infinity
        raise CaptureError(f"{where}: broken SigMF metadata: {str(exc).splitlines()[0][:120]}") from None
    if not isinstance(meta, dict):
        raise CaptureError(f"{where}: broken SigMF metadata: top level must be an object")
    for key in ("global", "captures", "annotations"):
        if key not in meta:
            raise CaptureError(f"{where}: broken SigMF metadata: required object {key!r} missing")
    glob, caps = meta["global"], meta["captures"]
    if not isinstance(glob, dict):
        raise CaptureError(f"{where}: broken SigMF metadata: 'global' must be an object")
    if not isinstance(caps, list) or not all(isinstance(c, dict) for c in caps):
        raise CaptureError(f"{where}: broken SigMF metadata: 'captures' must be a list of objects")
    if not isinstance(meta["annotations"], list):
        raise CaptureError(f"{where}: broken SigMF metadata: 'annotations' must be a list")
    if "core:datatype" not in glob:
        raise CaptureError(f"{where}: broken SigMF metadata: global core:datatype missing")
    if not isinstance(glob["core:datatype"], str):
        raise CaptureError(f"{where}: core:datatype {glob['core:datatype']!r}: must be a string")
    channels = glob.get("core:num_channels", 1)
    if channels != 1:
        raise CaptureError(f"{where}: core:num_channels {quote(channels)}: only single-channel recordings are supported")
    return meta
