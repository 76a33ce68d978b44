"""The logger's rows for the event store (events, episodes, hourly quality, health rows,
data segments, what the RFI mask learned), held in memory while the store refuses them.

The store refuses a write when the disk is full ("database or disk is full") or a long
reader holds its lock. The rows are then kept (at most ``HELD_ROWS_MAX`` of each kind)
and tried again at most every ``STORE_RETRY_S``. A full disk pauses raw spectra, which is
the one warning about it; any other trouble gets one warning until the store works again.
"""

from __future__ import annotations

import logging
import sqlite3
from typing import Callable, Iterable

from rxlog.station.diskguard import DiskGuard
from rxlog.timeutil import iso

log = logging.getLogger("rxlog")

STORE_RETRY_S = 5.0             # while the event store refuses rows, try again at most this often
HELD_ROWS_MAX = 10000           # rows of each kind held in memory for the event store (a week of health rows)


class StoreWriter:
    """Writes to ``store`` (an ``rxlog.store.EventStore``) as far as it takes the rows."""

    def __init__(self, store, station: str, monotonic: Callable[[], float], disk: DiskGuard):
        self.store = store
        self.station = station
        self.monotonic = monotonic
        self.disk = disk
        self.events: list[dict] = []       # rows the store could not take yet, of each kind
        self.episodes: list[dict] = []
        self.quality: list[dict] = []
        self.health: list[dict] = []
        self.occupancy: list[dict] | None = None   # the mask's latest learned state, not yet stored
        self.trouble: str | None = None    # why the event store refuses rows, while it does
        self._retry_at = -1e9

    def write_events(self, events: list[dict], episodes: list[dict], quality: list[dict],
                     occupancy: list[dict] | None = None) -> int:
        """Hold new events, episodes, hourly quality rows and the mask's learned occupancy
        (``OnlineDetector.occupancy_state``; the latest replaces any held) and write all
        that is held; return how many events reached the store (0 while it refuses them)."""
        self.episodes.extend(episodes)
        self.quality.extend(quality)
        if occupancy:
            self.occupancy = occupancy
        if events:
            self.events.extend(events)
        if not (self.episodes or self.quality or self.events or self.occupancy) or not self.may_try():
            self._trim()
            return 0
        try:
            self.store.upsert_episodes(self.episodes)
            self.episodes = []
            self.store.record_quality(self.quality)
            self.quality = []
            if self.occupancy:
                self.store.save_occupancy(self.station, self.occupancy)
                self.occupancy = None
            if self.events:
                self.store.upsert_events(self.events)
        except sqlite3.OperationalError as e:
            self._failed(e)
            self._trim()
            return 0
        self._ok()
        written, self.events = len(self.events), []
        return written

    def add_health(self, row: dict):
        self.health.append(row)
        self.write_health()

    def write_health(self):
        """Write the health rows held for the store, oldest first, as far as it takes them."""
        if not self.health or not self.may_try():
            self._trim()
            return
        try:
            while self.health:
                self.store.record_health(self.health[0])
                self.health.pop(0)
        except sqlite3.OperationalError as e:
            self._failed(e)
            self._trim()
            return
        self._ok()

    def write_segments(self, rows: Iterable[dict]) -> bool:
        """Upsert data-segment rows; True when all were written."""
        rows = list(rows)
        if not rows or not self.may_try():
            return False
        try:
            for row in rows:
                self.store.upsert_segment(row)
        except sqlite3.OperationalError as e:
            self._failed(e)
            return False
        self._ok()
        return True

    def health_time(self, t: float) -> str:
        """``t`` in ISO text, free as a health row's key; after a backward clock step 'now' can
        repeat an earlier row's time to the millisecond: move on by 1 ms until free."""
        held = {r["time_utc"] for r in self.health}
        for _ in range(1000):
            text = iso(t)
            if text in held:
                t += 0.001
                continue
            try:
                taken = self.store.db.execute("select 1 from health where station = ? and time_utc = ?",
                                              [self.station, text]).fetchone()
            except sqlite3.Error:
                return text
            if not taken:
                return text
            t += 0.001
        return text

    def learned_occupancy(self) -> list[dict]:
        """What the RFI mask of this station learned before (empty when the store cannot
        tell: the mask then learns again from the data)."""
        try:
            return self.store.occupancy(self.station)
        except sqlite3.Error as e:
            log.warning("event store: the RFI mask's learned occupancy not read (%s); it learns again", e)
            return []

    def stored_end(self) -> str | None:
        """End (ISO text) of the latest data segment this station stored, or None."""
        try:
            row = self.store.db.execute("select max(end_utc) from segments where station = ?",
                                        [self.station]).fetchone()
        except sqlite3.Error:
            return None
        return row[0] if row and row[0] else None

    def retry_now(self):
        """Let the next write try the store even within STORE_RETRY_S of a refusal."""
        self._retry_at = -1e9

    def held(self) -> dict[str, int]:
        return {"health rows": len(self.health), "events": len(self.events),
                "episodes": len(self.episodes), "quality rows": len(self.quality)}

    def may_try(self) -> bool:
        """While the store refuses rows, try again only every STORE_RETRY_S."""
        return self.trouble is None or self.monotonic() >= self._retry_at

    def _trim(self):
        for held in (self.events, self.episodes, self.quality, self.health):
            del held[:-HELD_ROWS_MAX]

    def _failed(self, e: Exception):
        why = str(e)
        self._retry_at = self.monotonic() + STORE_RETRY_S
        first, self.trouble = self.trouble is None, why
        full = "full" in why.lower()          # SQLITE_FULL: "database or disk is full"
        if full and not self.disk.paused:
            self.disk.pause(f"event store: {why}", failed=True)
        elif first and not full:
            log.warning("event store: %s; rows are held in memory and written once it works again", why)
        else:
            log.debug("event store still refuses rows: %s", why)

    def _ok(self):
        if self.trouble is not None:
            self.trouble = None
            log.info("event store: writing again")
