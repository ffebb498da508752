"""Finding the captures of an archive, and the link profile that applies to each.

Which names count as captures is not decided here: :func:`iqdemod.capture.capture_format`
(the reader's own suffix registry) says it, so a file collected is always one the reader
opens as the same format.
"""

from __future__ import annotations

import contextlib
import glob
import os
import stat
import warnings
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Iterable, Iterator, Mapping

from ..capture import capture_format, sigmf_pair
from ..errors import IqdemodError, IqdemodWarning, LinkError, quote
from ..link import Link
from ..profile import load_links

__all__ = ["FOLDER_LINK", "collect_captures"]

#: A folder holding this file gives its link profile to every capture below it.
FOLDER_LINK = "link.toml"
_NO_LINK = "no link: give --link FILE (or --baud and --shift), or put a link.toml in the capture's folder"


@dataclass(frozen=True)
class Found:
    """A capture found, as the user will read its path, and the folder named that reached it."""

    path: Path  # as the user will read it (relative when the PATH was)
    root: Path  # the folder a link.toml is looked for up to


@dataclass(frozen=True)
class FolderLink:
    """The link(s) that apply to one capture: from a folder ``link.toml``, or the batch's own.

    A profile with several ``[[signal]]`` entries gives several links, by name (a report row each).
    """

    link: Link | Mapping[str, Link] | None
    path: str = ""  # the folder profile ("" for the batch's link)
    error: str = ""  # why `link` is None
    label: str = ""  # the transmitter the folder names ("" without a folder profile)


def _has_magic(text: str) -> bool:
    return any(c in text for c in "*?[")


def is_capture_name(name: str) -> bool:
    """True for a visible file whose name the reader opens (:func:`iqdemod.capture.capture_format`)."""
    return not name.startswith(".") and capture_format(name) is not None


def _canonical(path: Path) -> Path:
    """A SigMF pair is named by its metadata file when it exists, else by the file found."""
    pair = sigmf_pair(path)
    if pair is not None and path == pair[1] and pair[0].exists():
        return pair[0]
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
                      stacklevel=4)
    return False


def _walk(folder: Path) -> Iterator[Path]:
    for top, dirs, files in os.walk(folder):
        dirs[:] = sorted(d for d in dirs if not d.startswith("."))
        for name in sorted(files):
            if is_capture_name(name) and _is_regular(Path(top) / name):
                yield Path(top) / name


def _glob(text: str) -> Iterator[tuple[Path, Path]]:
    """(capture, root) for every capture a glob pattern reaches."""
    parts = Path(text).parts
    lead = parts[: next(i for i, q in enumerate(parts) if _has_magic(q))]
    root = Path(*lead) if lead else Path(".")
    matches = sorted(glob.glob(text, recursive=True))
    if not matches:
        raise IqdemodError(f"{quote(text)}: no file matches this pattern")
    for m in matches:
        mp = Path(m)
        if mp.is_dir():
            yield from ((f, root) for f in _walk(mp))
        elif is_capture_name(mp.name) and _is_regular(mp):
            yield mp, root


def _reached(item: str | os.PathLike) -> Iterator[tuple[Path, Path]]:
    """(capture, root) for every capture one PATH argument reaches."""
    text = os.fspath(item)
    p = Path(text)
    if p.is_dir():
        yield from ((f, p) for f in _walk(p))
    elif p.exists() or p.is_symlink():
        if is_capture_name(p.name) and _is_regular(p):
            yield p, p.parent
    elif _has_magic(text):
        yield from _glob(text)
    else:
        raise IqdemodError(f"{quote(text)}: no such file or folder")


def discover(paths: Iterable[str | os.PathLike]) -> list[Found]:
    """Every capture under `paths` once (by absolute path), sorted by path."""
    found: dict[str, Found] = {}
    for item in paths:
        for p, root in _reached(item):
            p = _canonical(p)
            found.setdefault(os.path.abspath(p), Found(p, root))
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
        with its reason), and every other name the reader opens
        (:data:`iqdemod.capture.CAPTURE_SUFFIXES`: ``.sigmf`` archives,
        ``.wav``/``.wave``/``.flac``, raw files named by SigMF datatype or
        ``.raw``/``.iq``/``.bin``). Everything else (``*.truth.json``,
        reports, hidden files and folders) is skipped. Sorted by path; the same
        file reached twice counts once.

    Raises
    ------
    IqdemodError
        For a path that does not exist or a pattern that matches nothing.

    Examples
    --------
    >>> import pathlib, tempfile
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> for name in ("b.ci16_le", "a.sigmf-meta", "a.sigmf-data", "a.truth.json", "c.wave"):
    ...     _ = (folder / name).write_bytes(b"")
    >>> [p.name for p in collect_captures([folder])]
    ['a.sigmf-meta', 'b.ci16_le', 'c.wave']
    """
    return [f.path for f in discover(paths)]


def fingerprint(path: Path) -> tuple[int | None, int | None]:
    """(size in bytes, latest mtime in ns) of a capture; a SigMF pair's two files together."""
    pair = sigmf_pair(path)
    size = mtime = None
    for f in (list(pair) if pair is not None else [path]):
        try:
            st = f.stat()
        except OSError:
            continue
        size = (size or 0) + st.st_size
        mtime = max(mtime or 0, st.st_mtime_ns)
    return size, mtime


def mtime_time(path: Path) -> str | None:
    """The data file's mtime as an ISO 8601 UTC time marked ``(mtime)``: a start time of last resort."""
    pair = sigmf_pair(path)
    for f in ([pair[1], pair[0]] if pair is not None else [path]):
        with contextlib.suppress(OSError):
            t = datetime.fromtimestamp(f.stat().st_mtime, timezone.utc)
            return t.strftime("%Y-%m-%dT%H:%M:%SZ") + " (mtime)"
    return None


def _profile_folder(found: Found) -> Path | None:
    """The nearest folder holding a link.toml, from the capture's folder up to its root."""
    root = Path(os.path.abspath(found.root))
    folder = Path(os.path.abspath(found.path)).parent
    while True:
        if (folder / FOLDER_LINK).is_file():
            return folder
        if folder == root or folder.parent == folder or root not in folder.parents:
            return None
        folder = folder.parent


def folder_links(found: list[Found], link: Link | Mapping[str, Link] | None,
                 overrides: Mapping[str, Any]) -> list[FolderLink]:
    """The link(s) of each capture: the nearest folder ``link.toml`` (with `overrides`), else `link`.

    A folder profile of one signal gives one (unnamed) link; of several ``[[signal]]`` entries,
    a mapping of them by name (:func:`iqdemod.load_links`).
    """
    cache: dict[Path, FolderLink] = {}
    out = []
    for f in found:
        hit = _profile_folder(f)
        if hit is None:
            out.append(FolderLink(link, error="" if link is not None else _NO_LINK))
            continue
        if hit not in cache:
            profile = hit / FOLDER_LINK
            root = Path(os.path.abspath(f.root))
            label = Path(os.path.relpath(hit, root)).as_posix() if hit != root else hit.name
            try:
                links = load_links([profile], **dict(overrides))
                one = next(iter(links.values())) if len(links) == 1 else links
                cache[hit] = FolderLink(one, str(profile), "", label)
            except LinkError as exc:
                cache[hit] = FolderLink(None, str(profile), str(exc), label)
        out.append(cache[hit])
    return out
