"""Crash-safe file writes: one way for every file rxlog writes whole.

A file is written under a temporary name in its own folder, flushed and fsynced, renamed
over the target (``os.replace`` is atomic on POSIX), and the folder is fsynced so the
rename itself survives a power cut. A reader therefore sees the old file or the new one,
never half of either, and a failure leaves the old file as it was.

Files meant for people and partners (exports, notices, reports, forecasts) get the usual
mode for the user's umask (0644 with the common umask 022) rather than the 0600 that
``tempfile.mkstemp`` gives its files.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path
from typing import BinaryIO, Callable

from rxlog.errors import RxlogError


def fsync_dir(path: str | os.PathLike) -> None:
    """fsync a folder so that names created or renamed in it are on disk."""
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def ensure_dir(path: str | os.PathLike) -> None:
    """mkdir -p, fsyncing each parent whose listing changed so the new folder survives a crash."""
    path = Path(path)
    if path.is_dir():
        return
    ensure_dir(path.parent)
    with contextlib.suppress(FileExistsError):
        path.mkdir()
    fsync_dir(path.parent)


def umask_mode() -> int:
    """The mode a plain ``open(..., "w")`` would give a new file under the current umask."""
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


def write_atomic(path: str | os.PathLike, data: bytes | str | Callable[[BinaryIO], None],
                 what: str = "file") -> Path:
    """Write ``data`` (bytes, text as UTF-8, or a function writing to a binary file) to ``path``.

    A missing parent folder is created. Raises RxlogError naming the file when it cannot
    be written (no space, no permission); the old file, if any, is then untouched.
    """
    path = Path(path)
    try:
        ensure_dir(path.parent if str(path.parent) else Path("."))
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    except OSError as e:
        raise RxlogError(f"{path}: cannot write {what} ({e.strerror or e}); "
                         "check the folder, free space and permissions") from None
    try:
        with os.fdopen(fd, "wb") as fh:
            if callable(data):
                data(fh)
            else:
                fh.write(data.encode("utf-8") if isinstance(data, str) else data)
            fh.flush()
            os.fchmod(fh.fileno(), umask_mode())
            os.fsync(fh.fileno())
        os.replace(tmp, path)
        fsync_dir(path.parent if str(path.parent) else Path("."))
    except OSError as e:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise RxlogError(f"{path}: cannot write {what} ({e.strerror or e}); "
                         "check free space and permissions") from None
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
    return path
