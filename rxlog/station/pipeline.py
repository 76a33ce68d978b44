"""The logger's data path on its main thread: spectra → archive → online detector (events
tagged with the ephemeris, cutouts from the channelizer's ring) → event store.

Each chunk of spectra is checked against what is already written (after a backward clock
step, or a restart behind the previous run's data, rows that would overlap are dropped,
so the archive never holds overlapping or negative-length data), named for its data
segment, archived unless raw spectra are paused for lack of space (``DiskGuard``) and fed
to the detector, whose events go to the store through ``StoreWriter``.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from typing import Callable

import numpy as np

from rxlog.archive.prune import prune
from rxlog.archive.write import ArchiveWriter
from rxlog.detect.online import OnlineDetector
from rxlog.errors import RxlogError
from rxlog.spectrum import DynamicSpectrum
from rxlog.station.cutouts import prune_cutouts
from rxlog.station.diskguard import DiskGuard
from rxlog.station.storewriter import StoreWriter
from rxlog.timeutil import iso, parse_iso

log = logging.getLogger("rxlog")

PREVIOUS_AHEAD_MAX_S = 3600.0   # a previous run's data further ahead than this are not waited for
OVERLAP_TOL = 1e-4              # of a cadence: rows this close are contiguous (the archive's own tolerance)


@dataclass
class Counters:
    """Counts since the last health row (reset there). Spectra archived are not counted
    here but read from the archive writer: only rows that reached the disk count."""
    spectra_received: int = 0
    spectra_not_archived: int = 0
    spectra_overlap_dropped: int = 0
    events: int = 0
    clock_step_s: float = 0.0


class Pipeline:
    """Spectra in, archive rows, events and segment rows out.

    ``archive_factory()`` makes an archive writer (again after a failed write),
    ``detector_factory()`` the online detector (again after a failure; None: no
    detection), ``ring()`` the feed's ring of full-resolution spectra or None,
    ``cutout(event, ring)`` keeps an event's cutout and returns the event, and
    ``note(text, level)`` logs what the morning reviewer should know with a health row.
    ``run_tag`` starts every segment name, so two runs never share one.
    """

    def __init__(self, station: str, run_tag: str, archive_factory, detector_factory,
                 writer: StoreWriter, disk: DiskGuard, ring: Callable, cutout: Callable,
                 note: Callable[[str, int], None]):
        self.station, self.run_tag = station, run_tag
        self.archive_factory = archive_factory
        self.archive = None
        self.detector_factory = detector_factory
        self.writer, self.disk = writer, disk
        self.detector = self._new_detector()
        self.ring, self.cutout, self.note = ring, cutout, note
        self.counts = Counters()
        self.events_stored = 0
        # Rows on disk: written by writers already dropped, plus the current writer's; rows
        # handed to the current writer (those neither on disk nor buffered were lost with it).
        self._rows_written_before = 0
        self._rows_handed = 0
        self.clock_epoch = 0
        self.last_end: float | None = None     # end of the latest data accepted (POSIX s)
        self.last_segment = ""
        self._gap: tuple[float, str] | None = None   # (data end, reason) while the receiver is away
        self.segments: dict[str, dict] = {}    # segment rows to upsert at the next flush

    # -- what the supervisor tells it ---------------------------------------------------------
    def pop_counts(self) -> Counters:
        """The counts since the last call; counting starts again."""
        counts, self.counts = self.counts, Counters()
        return counts

    def clock_stepped(self, step_s: float):
        """The wall clock stepped by ``step_s``: later spectra start a new segment."""
        self.clock_epoch += 1
        self.counts.clock_step_s += step_s

    def receiver_lost(self, t_utc: float, reason: str):
        """The gap in the data runs from the end of the last spectra to the first new ones."""
        self._gap = (self.last_end if self.last_end is not None else t_utc, reason)

    def start_after_previous_run(self, now: float):
        """Never overlap the data a previous run stored (a live receiver restarted after a
        crash; its clock may since have stepped back).

        Data more than PREVIOUS_AHEAD_MAX_S ahead of the clock cannot be a clock that
        stepped back (NTP steps are seconds) but a simulation run ahead of time in the same
        storage root: waiting for it would drop everything, so it is ignored with a warning."""
        stored = self.writer.stored_end()
        if stored is None:
            return
        end = parse_iso(stored)
        if end > now + PREVIOUS_AHEAD_MAX_S:
            log.warning("stored data reach %s, %.0f s ahead of the clock (a simulation run ahead of "
                        "time?); new spectra are archived beside them", stored, end - now)
            return
        if end > now:
            log.warning("stored data reach %s, %.1f s ahead of the clock: spectra before that are "
                        "dropped so data never overlap", stored, end - now)
        self.last_end = end

    # -- spectra ------------------------------------------------------------------------------
    def _segment_name(self, spec: DynamicSpectrum) -> str:
        name = f"{self.run_tag}.{spec.segment}"
        return f"{name}.c{self.clock_epoch}" if self.clock_epoch else name

    def take(self, spec: DynamicSpectrum):
        self.counts.spectra_received += spec.n_time
        # Never overlap what is already written: after a backward clock step (or a restart
        # behind the previous run's data) drop rows that start before the latest end. The
        # next rows of the same segment may start a hair early (float rounding of a
        # continuous time line) and are kept; a new segment must start at or after it.
        name = self._segment_name(spec)
        if self.last_end is not None:
            tol = OVERLAP_TOL * spec.cadence_s if name == self.last_segment else 0.0
            keep = int(np.searchsorted(spec.times, self.last_end - tol, side="left"))
            if keep:
                self.counts.spectra_overlap_dropped += min(keep, spec.n_time)
                if keep >= spec.n_time:
                    return
                spec = spec.slice_rows(keep, spec.n_time)
        spec.segment = name
        self.last_segment = name
        if self._gap is not None:
            t0, reason = self._gap
            self._gap = None
            self.note(f"receiver gap {iso(t0)} to {iso(spec.t0)} ({spec.t0 - t0:.1f} s), data resumed: {reason}",
                      logging.WARNING)
        if spec.segment not in self.segments:
            log.info("segment %s: spectra from %s, %d channels every %g s", spec.segment, iso(spec.t0),
                     spec.n_chan, spec.cadence_s)
        self.last_end = spec.t_end
        self._note_segment(spec)
        self._archive(spec)
        self._detect(spec)

    def _note_segment(self, spec: DynamicSpectrum):
        row = self.segments.get(spec.segment)
        if row is None:
            m, f = spec.meta, spec.freq_hz
            df = float(f[1] - f[0]) if f.size > 1 else 0.0
            row = {"segment_id": spec.segment, "station": self.station, "start_utc": iso(spec.t0),
                   "center_hz": m.get("center_hz"), "rate_hz": m.get("rate_hz"), "gain_db": m.get("gain_db"),
                   "channels": spec.n_chan, "fmin_mhz": round((f[0] - df / 2) / 1e6, 6),
                   "fmax_mhz": round((f[-1] + df / 2) / 1e6, 6), "cadence_s": spec.cadence_s,
                   "settings": ";".join(f"{k}={v}" for k, v in sorted(m.items()))}
            self.segments[spec.segment] = row
        row["end_utc"] = iso(spec.t_end)

    # -- archive ------------------------------------------------------------------------------
    def _archive(self, spec: DynamicSpectrum):
        admit, probing = self.disk.admit()
        if not admit:
            self.counts.spectra_not_archived += spec.n_time
            return
        try:
            if self.archive is None:
                self.archive = self.archive_factory()
                self._rows_handed = 0
        except (RxlogError, OSError) as e:
            self.counts.spectra_not_archived += spec.n_time
            self._archive_failed(e)
            return
        try:
            self._rows_handed += spec.n_time
            self.archive.write(spec)
            if probing:
                self.archive.flush()      # say "resumed" only once a chunk has reached the disk
        except (RxlogError, OSError) as e:
            self._archive_failed(e)
            return
        if probing:
            self.disk.resumed()

    def on_disk(self) -> int:
        """Spectra of this run that reached the disk (rows in the writer's buffer do not count)."""
        return self._rows_written_before + (self.archive.rows_written if self.archive is not None else 0)

    def rows_buffered(self) -> int:
        """Rows held by the archive writer, not yet on disk."""
        return self.archive.rows_buffered if self.archive is not None else 0

    def _drop_writer(self):
        """Forget the archive writer; the rows it was handed and never wrote are lost."""
        if self.archive is None:
            return
        self.counts.spectra_not_archived += self._rows_handed - self.archive.rows_written
        self._rows_written_before += self.archive.rows_written
        self.archive = None
        self._rows_handed = 0

    def _archive_failed(self, e: Exception):
        """The writer is dropped without closing it (closing would retry the failed write);
        chunks it already wrote are consolidated by the next writer."""
        self._drop_writer()
        self.disk.archive_failed(e)

    # -- detector and store ---------------------------------------------------------------------
    def _detect(self, spec: DynamicSpectrum):
        if self.detector is None:
            return
        try:
            events = self.detector.feed(spec)
        except Exception:
            log.error("detector: failure on %s..%s; spectra kept, detector restarted",
                      iso(spec.t0), iso(spec.t_end), exc_info=True)
            self.detector = self._new_detector()
            return
        self.store_events(self.with_cutouts(events))

    def _new_detector(self):
        """A fresh online detector that takes up what the RFI mask learned in earlier runs
        (kept in the event store every hour and at a stop), so a restart does not unmask
        the station's broadcasters until it learns them again."""
        if not self.detector_factory:
            return None
        det = self.detector_factory()
        det.load_occupancy(self.writer.learned_occupancy())
        return det

    def with_cutouts(self, events: list[dict]) -> list[dict]:
        """Keep each new event's stretch of the channelizer's full-resolution ring as a
        cutout and let the detector look at it again (S-bursts are only visible there).
        Interference events get none; nothing is kept while raw spectra are paused for lack
        of space, or when the ring has moved on."""
        ring = self.ring()
        if ring is None or self.disk.paused or not events:
            return events
        out = []
        for ev in events:
            if ev.get("class") != "rfi":
                try:
                    ev = self.cutout(ev, ring)
                except (RxlogError, OSError) as e:
                    log.warning("cutout for %s not kept: %s", ev.get("event_id"), e)
                except Exception:
                    log.error("cutout for %s failed", ev.get("event_id"), exc_info=True)
            out.append(ev)
        return out

    def store_events(self, events: list[dict]):
        """Store new events with the detector's episodes and hourly quality rows; what the
        store cannot take now (disk full, a long lock) is held for the next try."""
        episodes = self.detector.pop_episodes() if self.detector is not None else []
        quality = self.detector.pop_quality() if self.detector is not None else []
        # the mask's occupancy goes with each hour's quality rows (and the last ones at a stop)
        occupancy = self.detector.occupancy_state() if quality else None
        written = self.writer.write_events(events, episodes, quality, occupancy)
        self.counts.events += written
        self.events_stored += written

    # -- flush and stop -----------------------------------------------------------------------
    def flush(self):
        """The archive's chunk in progress to disk, and every row held for the event store."""
        if self.archive is not None:
            try:
                self.archive.flush()
            except (RxlogError, OSError) as e:
                self._archive_failed(e)
        self.store_events([])
        self.writer.write_health()
        if self.writer.write_segments(self.segments.values()):
            # keep only the segment still growing
            current = max(self.segments.values(), key=lambda r: r["end_utc"])
            self.segments = {current["segment_id"]: current}

    def finish(self):
        """At a stop: the detector's pending events stored, the last chunk written."""
        if self.detector is not None:
            try:
                self.store_events(self.with_cutouts(self.detector.flush()))
            except Exception:
                log.error("detector: flush failed at stop", exc_info=True)
        self.flush()
        if self.archive is not None:
            try:
                self.archive.close()
            except (RxlogError, OSError) as e:
                log.warning("archive: last chunk not written at stop: %s", e)
            self._drop_writer()


# -- the real stages, from the station config ------------------------------------------------

def open_archive(cfg) -> ArchiveWriter:
    return ArchiveWriter(cfg.archive_dir, cfg["station"], lossless=cfg["storage"]["lossless"],
                         chunk_s=cfg["service"]["chunk_s"])


def open_detector(cfg) -> OnlineDetector:
    return OnlineDetector(cfg)


def prune_archive(cfg, now: float | None = None) -> list:
    """Daily retention: archived spectra and event cutouts older than ``retention_days``."""
    days = cfg["storage"]["retention_days"]
    return prune(cfg.archive_dir, days, now=now) + prune_cutouts(cfg, days, now=now)
