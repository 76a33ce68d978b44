"""Retention: archive files older than the station keeps them are deleted, and nothing else."""

from __future__ import annotations

import contextlib
import math
import time
from pathlib import Path

from rxlog.archive.layout import HOUR_S, archive_files
from rxlog.archive.write import locked
from rxlog.fileio import fsync_dir


def prune(root, retention_days: float, now: float | None = None) -> list[Path]:
    """Delete archive files (hour files and chunks) whose whole hour ended more than
    ``retention_days`` ago, and folders left empty. Nothing else under ``root`` or beside
    it (event store, reports) is touched: only names of the archive's own pattern."""
    root = Path(root)
    if not root.is_dir():
        return []
    cutoff = (time.time() if now is None else float(now)) - float(retention_days) * 86400.0
    last_hour = math.floor(cutoff / HOUR_S) - 1            # hours ending at or before the cutoff
    deleted = []
    with locked(root):
        for path, _name, hour, _chunk in archive_files(root, None, last_hour):
            path.unlink()
            deleted.append(path)
        for folder in {p.parent for p in deleted}:
            fsync_dir(folder)
            for d in (folder, folder.parent, folder.parent.parent):
                with contextlib.suppress(OSError):
                    d.rmdir()                              # only succeeds when empty
    return deleted
