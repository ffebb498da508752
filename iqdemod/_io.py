"""Output files that are never left half-written: write beside, then rename into place."""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path
from typing import IO, Iterator

__all__ = ["atomic_writer"]


@contextlib.contextmanager
def atomic_writer(path: str | os.PathLike, mode: str = "w", *, encoding: str | None = "utf-8") -> Iterator[IO]:
    """Open a temporary file in `path`'s folder; on success rename it to `path`.

    On any exception (KeyboardInterrupt included) the temporary file is removed
    and an existing `path` is left as it was.
    """
    target = Path(path)
    folder = target.parent if str(target.parent) else Path(".")
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=folder)
    binary = "b" in mode
    try:
        with os.fdopen(fd, mode, **({} if binary else {"encoding": encoding, "newline": ""})) as fh:
            yield fh
            fh.flush()
            os.fsync(fh.fileno())
        try:
            mask = os.umask(0)
            os.umask(mask)
            os.chmod(tmp, 0o666 & ~mask)
        except OSError:
            pass
        os.replace(tmp, target)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
