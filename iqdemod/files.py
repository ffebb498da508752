"""Writing outputs safely: never half-written, never onto an input, never replacing a device.

One place decides how every output is written:

- a regular file, or a name that does not exist yet, is written to a temporary
  file in the same folder and renamed into place (:func:`atomic_writer`), so an
  interrupted run leaves the old file as it was;
- a symbolic link is followed, and its *target* is replaced that way (the link stays);
- a FIFO, a character device (``/dev/null``, a terminal) or ``-`` (standard
  output) is written into as a stream: replacing it by a regular file would cut
  off its reader, or, as root, replace a system device;
- a folder, a block device or a socket is refused.

:func:`check_distinct` refuses, before any work, an output that is one of the
inputs or another output (same device and inode, or the same real path for
names that do not exist yet). :class:`FileSet` makes several files visible
together or not at all (synth's capture, batch's report and frames).
"""

from __future__ import annotations

import contextlib
import errno
import os
import secrets
import stat
import sys
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import IO, Iterable, Iterator

from .errors import OutputError, quote

__all__ = ["OutputTarget", "classify_output", "atomic_writer", "check_distinct", "FileSet", "atomic_files",
           "STDOUT_NAME"]

STDOUT_NAME = "-"


@dataclass(frozen=True)
class OutputTarget:
    """Where an output really goes.

    Attributes
    ----------
    given : str
        The name as the user gave it.
    kind : str
        ``"file"`` (a regular file, or a new one: temporary file and rename),
        ``"stream"`` (FIFO or character device: written into) or ``"stdout"``.
    path : Path
        The file really written: a symbolic link's target, resolved.
    exists : bool
    """

    given: str
    kind: str
    path: Path
    exists: bool


def read_small_text(path: str | os.PathLike, limit: int, error: type[Exception], where: str, what: str,
                    *, regular_only: bool = False) -> str:
    """A small text file (metadata, a profile) read whole, but never more than `limit` bytes.

    Reading at most limit + 1 bytes keeps an endless file (a link to /dev/zero) from filling
    memory; `error` (the package's own, e.g. CaptureError) says what went wrong, `where` first
    and `what` naming the kind of file.
    """
    try:
        if regular_only and not stat.S_ISREG(os.stat(path).st_mode):
            raise error(f"{where}: {what} is not a regular file (a FIFO, device or folder)")
        with open(path, "rb") as fh:  # a FIFO (a shell's <(…)) works too where allowed; the cap stops an endless one
            data = fh.read(limit + 1)
    except FileNotFoundError:
        raise error(f"{where}: no such {what}") from None
    except OSError as exc:
        raise error(f"{where}: cannot read {what} ({exc.strerror or exc.__class__.__name__})") from None
    if len(data) > limit:
        raise error(f"{where}: {what} larger than {limit >> 20} MB: refused")
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError:
        raise error(f"{where}: cannot read {what} (not UTF-8 text)") from None


def classify_output(path: str | os.PathLike) -> OutputTarget:
    """Decide how `path` is written (see the module notes).

    Raises
    ------
    OutputError
        For an empty name, a folder, a block device or socket, or a missing folder.

    Examples
    --------
    >>> import os, tempfile
    >>> tmp = tempfile.TemporaryDirectory()
    >>> new = classify_output(os.path.join(tmp.name, "frames.csv"))
    >>> new.kind, new.exists, new.path.name
    ('file', False, 'frames.csv')
    >>> classify_output("-").kind, classify_output(os.devnull).kind
    ('stdout', 'stream')
    >>> classify_output(tmp.name)
    Traceback (most recent call last):
    ...
    iqdemod.errors.OutputError: output '...': is a folder, expected a file name
    >>> tmp.cleanup()
    """
    given = os.fspath(path)
    if given == "":
        raise OutputError("output name is empty")
    if given == STDOUT_NAME:
        return OutputTarget(given, "stdout", Path(given), True)
    if given.endswith(os.sep):
        raise OutputError(f"output {quote(given)}: names a folder, expected a file name")
    try:
        st = os.stat(given)  # follows links as open() will, /proc's fd links (/dev/stdout) included
    except FileNotFoundError:
        st = None
    except OSError as exc:
        raise OutputError(f"output {quote(given)}: cannot check it ({exc.strerror})") from None
    if st is not None and (stat.S_ISFIFO(st.st_mode) or stat.S_ISCHR(st.st_mode)):
        return OutputTarget(given, "stream", Path(given), True)
    real = Path(os.path.realpath(given))  # a symbolic link (even a chain, even dangling) is followed
    if st is None:
        folder = real.parent
        if not folder.is_dir():
            raise OutputError(f"output {quote(given)}: folder {quote(str(Path(given).parent))} does not exist")
        return OutputTarget(given, "file", real, False)
    mode = st.st_mode
    if stat.S_ISREG(mode):
        return OutputTarget(given, "file", real, True)
    if stat.S_ISDIR(mode):
        raise OutputError(f"output {quote(given)}: is a folder, expected a file name")
    raise OutputError(f"output {quote(given)}: is a block device or socket; refusing to write to it")


def _identity(path: str | os.PathLike) -> tuple[str, tuple[int, int] | None]:
    """(real path, (st_dev, st_ino) or None when it does not exist)."""
    real = os.path.realpath(os.fspath(path))
    try:
        st = os.stat(path)
    except OSError:
        return real, None
    return real, (st.st_dev, st.st_ino)


def check_distinct(outputs: Iterable[tuple[str, str | os.PathLike | None]],
                   inputs: Iterable[tuple[str, str | os.PathLike | None]] = ()) -> None:
    """Refuse an output that is an input, or two outputs that are one file.

    Parameters
    ----------
    outputs, inputs : iterable of (role, path)
        Each file with the role it plays, for the message (e.g. ``("--frames",
        path)``, ``("capture data", path)``). ``None`` paths are ignored, and so
        is ``-`` (standard output).

    Raises
    ------
    OutputError
        Naming both roles and the file.

    Notes
    -----
    Files are compared by device and inode (which catches hard links, symbolic
    links and other spellings of one name) and, for names that do not exist
    yet, by their real path. Character devices may appear twice among the
    outputs (``/dev/null`` for two outputs is harmless); any output that is an
    input is refused.

    Examples
    --------
    Outputs that are distinct files pass; an output that is an input, by
    another spelling of its name, is refused:

    >>> import os, tempfile
    >>> tmp = tempfile.TemporaryDirectory()
    >>> capture = os.path.join(tmp.name, "night.cu8")
    >>> _ = open(capture, "wb").close()
    >>> check_distinct([("--frames", os.path.join(tmp.name, "frames.csv")), ("--report", "-")],
    ...                inputs=[("capture", capture)])
    >>> check_distinct([("--frames", os.path.join(tmp.name, ".", "night.cu8"))], inputs=[("capture", capture)])
    Traceback (most recent call last):
    ...
    iqdemod.errors.OutputError: --frames '...night.cu8' is the capture '...night.cu8': refusing to overwrite an input
    >>> tmp.cleanup()
    """
    seen_in: dict = {}
    for role, p in inputs:
        if p is None or os.fspath(p) == STDOUT_NAME:
            continue
        real, ident = _identity(p)
        for key in filter(None, (ident, real)):
            seen_in.setdefault(key, (role, p))
    seen_out: dict = {}
    for role, p in outputs:
        if p is None or os.fspath(p) == STDOUT_NAME:
            continue
        real, ident = _identity(p)
        key = ident or real
        hit = (seen_in.get(ident) if ident is not None else None) or seen_in.get(real)
        if hit is not None:
            raise OutputError(f"{role} {quote(os.fspath(p))} is the {hit[0]} {quote(os.fspath(hit[1]))}: "
                              "refusing to overwrite an input")
        with contextlib.suppress(OSError):
            if stat.S_ISCHR(os.stat(p).st_mode):
                continue
        other = seen_out.get(key) or seen_out.get(real)
        if other is not None:
            raise OutputError(f"{role} {quote(os.fspath(p))} and {other[0]} {quote(os.fspath(other[1]))} "
                              "are the same file: give them different names")
        seen_out[key] = seen_out[real] = (role, p)


def _umask_mode() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


def _open_stream(target: OutputTarget, mode: str, encoding: str | None) -> tuple[IO, bool]:
    """(handle, owned) for a stream target; stdout is not ours to close."""
    binary = "b" in mode
    if target.kind == "stdout":
        if sys.stdout is None:
            raise OutputError("standard output is closed: nowhere to write the results (give an output file)")
        return (sys.stdout.buffer if binary else sys.stdout), False
    # "a" never truncates, so a device or FIFO sees exactly what a plain write would send
    fh = open(target.path, "ab" if binary else "a", **({} if binary else {"encoding": encoding, "newline": ""}))
    return fh, True


def _mkstemp(target: Path, suffix: str) -> tuple[int, str]:
    try:
        return tempfile.mkstemp(prefix=f".{target.name}.", suffix=suffix, dir=target.parent)
    except FileNotFoundError:
        raise OutputError(f"output {quote(str(target))}: folder {quote(str(target.parent))} does not exist") from None


@contextlib.contextmanager
def atomic_writer(path: str | os.PathLike, mode: str = "w", *, encoding: str | None = "utf-8") -> Iterator[IO]:
    """Open `path` for writing so that it is never seen half-written.

    A regular (or new) file is written to a temporary file in its folder and
    renamed into place on success; on any exception (KeyboardInterrupt
    included) the temporary file is removed and an existing file is left as it
    was. A symbolic link's target is replaced the same way. A FIFO, a character
    device or ``-`` (standard output) is written into directly.

    Raises
    ------
    OutputError
        See :func:`classify_output`.

    Examples
    --------
    The file appears whole on success; on an error the old contents stay:

    >>> import os, tempfile
    >>> tmp = tempfile.TemporaryDirectory()
    >>> path = os.path.join(tmp.name, "buoys.csv")
    >>> with atomic_writer(path) as fh:
    ...     _ = fh.write("buoy,t_s" + os.linesep)
    >>> try:
    ...     with atomic_writer(path) as fh:
    ...         _ = fh.write("half a line")
    ...         raise RuntimeError("interrupted")
    ... except RuntimeError:
    ...     pass
    >>> open(path, encoding="utf-8").read().strip(), sorted(os.listdir(tmp.name))
    ('buoy,t_s', ['buoys.csv'])
    >>> tmp.cleanup()
    """
    target = classify_output(path)
    if target.kind != "file":
        fh, owned = _open_stream(target, mode, encoding)
        try:
            yield fh
            fh.flush()
        finally:
            if owned:
                fh.close()
        return
    with atomic_files() as files:
        yield files.open(target.path, mode, encoding=encoding)


@dataclass
class _Member:
    target: Path
    tmp: Path | None  # None: a stream, already written
    fh: IO | None
    adopted: bool = False  # `tmp` is a file the caller wrote (e.g. a journal): put back on undo
    backup: Path | None = None
    done: bool = False


class FileSet:
    """Several outputs that become visible together, or not at all.

    Open each member with :meth:`open` (or hand over an already written file
    with :meth:`adopt`), then :meth:`commit`: every temporary file is flushed
    and synced first, then each is renamed over its target in the order they
    were added, so add the file that vouches for the others (metadata, the
    report) last. When a rename fails, the ones already done are undone: the
    old files come back from hard-linked backups, new names are removed.
    Streams (FIFO, devices, ``-``) are written directly and cannot be undone.

    Use :func:`atomic_files` to get one that commits on success and cleans up
    on any exception.
    """

    def __init__(self) -> None:
        self._members: list[_Member] = []

    def open(self, path: str | os.PathLike, mode: str = "w", *, encoding: str | None = "utf-8") -> IO:
        """A handle to write one member to (a temporary file beside it, or the stream)."""
        target = classify_output(path)
        if target.kind != "file":
            fh, owned = _open_stream(target, mode, encoding)
            self._members.append(_Member(target.path, None, fh if owned else None))
            return fh
        fd, tmp = _mkstemp(target.path, ".part")
        binary = "b" in mode
        fh = os.fdopen(fd, mode, **({} if binary else {"encoding": encoding, "newline": ""}))
        self._members.append(_Member(target.path, Path(tmp), fh))
        return fh

    def adopt(self, written: str | os.PathLike, path: str | os.PathLike) -> None:
        """Make the caller's finished file `written` a member renamed onto `path` (same folder)."""
        target = classify_output(path)
        if target.kind != "file":
            raise OutputError(f"output {quote(os.fspath(path))}: a stream cannot take a finished file; "
                              "give a regular file name")
        self._members.append(_Member(target.path, Path(written), None, adopted=True))

    def commit(self) -> None:
        """Sync every member, then rename them into place in order; undo all on failure."""
        for m in self._members:
            if m.fh is not None:
                m.fh.flush()
                if m.tmp is not None:
                    os.fsync(m.fh.fileno())
                m.fh.close()
                m.fh = None
        mode = _umask_mode()
        try:
            for m in self._members:
                if m.tmp is None:
                    continue
                if not m.adopted:
                    with contextlib.suppress(OSError):
                        os.chmod(m.tmp, mode)
                m.backup = _hard_backup(m.target)
                os.replace(m.tmp, m.target)
                m.done = True
        except BaseException:
            self._undo()
            raise
        for m in self._members:
            if m.backup is not None:
                with contextlib.suppress(OSError):
                    os.unlink(m.backup)
        for folder in {m.target.parent for m in self._members if m.tmp is not None}:
            _fsync_dir(folder)

    def _undo(self) -> None:
        for m in reversed(self._members):
            if m.tmp is None:
                continue
            with contextlib.suppress(OSError):
                if m.done:
                    if m.adopted:
                        os.replace(m.target, m.tmp)  # the caller's file goes back where it was
                    if m.backup is not None:
                        os.replace(m.backup, m.target)
                    elif not m.adopted:
                        os.unlink(m.target)
                elif m.backup is not None:
                    os.unlink(m.backup)
            m.done = False
            m.backup = None
        self.discard()

    def discard(self) -> None:
        """Close and remove every temporary file (adopted files are left to their owner)."""
        for m in self._members:
            if m.fh is not None:
                with contextlib.suppress(OSError):
                    m.fh.close()
                m.fh = None
            if m.tmp is not None and not m.adopted and not m.done:
                with contextlib.suppress(OSError):
                    os.unlink(m.tmp)


def _hard_backup(target: Path) -> Path | None:
    """A second name for the file now at `target` (None when there is none), to undo a rename."""
    for _ in range(20):
        backup = target.with_name(f".{target.name}.{secrets.token_hex(4)}.old")
        try:
            os.link(target, backup)
            return backup
        except FileNotFoundError:
            return None
        except FileExistsError:
            continue
        except OSError as exc:
            if exc.errno in (errno.EPERM, errno.EXDEV, errno.EMLINK, errno.ENOTSUP, errno.EOPNOTSUPP):
                return None  # no hard links here: the set is still renamed in order, metadata last
            raise
    return None


def _fsync_dir(folder: Path) -> None:
    with contextlib.suppress(OSError, AttributeError):
        fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


@contextlib.contextmanager
def atomic_files() -> Iterator[FileSet]:
    """A :class:`FileSet` that commits when the block ends normally and is discarded on any exception.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> with atomic_files() as files:
    ...     _ = files.open(folder / "data.bin", "wb").write(b"\\x00\\x01")
    ...     _ = files.open(folder / "data.json").write("{}")
    >>> sorted(p.name for p in folder.iterdir())
    ['data.bin', 'data.json']
    """
    files = FileSet()
    try:
        yield files
    except BaseException:
        files.discard()
        raise
    files.commit()
