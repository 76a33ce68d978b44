"""Raw spectra pause while the disk is nearly full, and resume by themselves.

When free space under the storage root falls below ``disk_min_free_mb``, or an archive
or event-store write fails for lack of space, raw spectra stop being archived (events
and health go on) with one warning. Archiving resumes, with one more warning, once free
space is back above ``DISK_RESUME_FACTOR`` × the threshold and a test flush reached the
disk; failed test flushes in between are quiet and come at doubling waits.
"""

from __future__ import annotations

import logging
from typing import Callable

from rxlog.retry import DoublingWait
from rxlog.station.health import disk_free_mb

log = logging.getLogger("rxlog")

DISK_RESUME_FACTOR = 1.2        # resume archiving when free space is back above this × disk_min_free_mb
DISK_CHECK_S = 1.0              # look at free space at most this often
DISK_RETRY_S = 5.0              # after a pause, wait at least this long before archiving again
DISK_RETRY_MAX_S = 60.0         # the wait doubles after each failed attempt, up to this


class DiskGuard:
    """Whether raw spectra are archived now (``paused`` when not).

    ``note(text, level)`` is told of each pause and resumption (the logger logs it and
    writes a health row at once); ``monotonic`` is the logger's clock.
    """

    def __init__(self, storage_root, min_free_mb: float, monotonic: Callable[[], float],
                 note: Callable[[str, int], None]):
        self.storage_root = storage_root
        self.min_free_mb = float(min_free_mb)
        self.monotonic = monotonic
        self.note = note
        self.paused = False
        self._paused_at = 0.0
        self._resume_above_mb = 0.0
        self._retry = DoublingWait(DISK_RETRY_S, DISK_RETRY_MAX_S)
        self._free = (None, -1e9)       # (free MB, when looked)
        self._probe_free = 0.0          # free space when the latest test flush was let through

    def free_mb(self) -> float:
        free, when = self._free
        now = self.monotonic()
        if free is None or now - when >= DISK_CHECK_S:
            free = disk_free_mb(self.storage_root)
            self._free = (free, now)
        return free

    def admit(self) -> tuple[bool, bool]:
        """Before archiving a chunk: (archive it?, is it a test flush?). A test flush must
        reach the disk before ``resumed()``; while paused otherwise the chunk is not archived."""
        free = self.free_mb()
        if not self.paused and free < self.min_free_mb:
            self.pause(f"disk free {free:.1f} MB below disk_min_free_mb {self.min_free_mb:g} MB")
        probe = self.paused and free >= self._resume_above_mb and \
            self.monotonic() - self._paused_at >= self._retry.s
        self._probe_free = free
        return not self.paused or probe, probe

    def resumed(self):
        """A test flush reached the disk: archive again."""
        self.paused = False
        self._retry.reset()
        self.note(f"raw spectra resumed: disk free {self._probe_free:.1f} MB", logging.WARNING)

    def archive_failed(self, e: Exception):
        """A write or flush failed (disk full, a quota, permissions): pause raw spectra. A
        failed attempt to resume only makes the next attempt wait longer: the pause was
        already reported."""
        self._free = (None, -1e9)
        if not self.paused:
            self.pause(f"archive write failed: {e}", failed=True)
            return
        log.debug("raw spectra still paused: %s", e)
        self._paused_at = self.monotonic()
        self._retry.double()
        self._resume_above_mb = max(self._resume_above_mb, self.free_mb() + 1.0)

    def pause(self, why: str, failed: bool = False):
        self.paused = True
        self._paused_at = self.monotonic()
        self._retry.reset()
        # After a failed write the threshold alone may already be met (e.g. threshold 0):
        # then wait for a megabyte more than there was when the write failed.
        self._resume_above_mb = max(DISK_RESUME_FACTOR * self.min_free_mb,
                                    self.free_mb() + 1.0 if failed else 0.0)
        self.note(f"raw spectra paused ({why}); events and health continue", logging.WARNING)
