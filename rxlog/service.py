"""The unattended logger behind ``rxlog run``.

Two threads and a bounded queue between them:

- the **feed** thread owns the receiver: it opens it, turns samples into dynamic
  spectra (channelizer, or the sweeper for a sweep plan) and queues them. When the
  receiver fails it closes it, records when, and retries with a doubling wait (1 s up
  to ``[service] retry_max_s``) until it is back — no restart needed;
- the **main** thread takes spectra off the queue and writes them to the archive
  (flushed crash-safely every ``chunk_s``; the first flushes of a run come sooner, see
  FIRST_FLUSH_S), feeds the online detector (which tags events
  with the ephemeris) and stores its events; it records a health row every
  ``health_interval_s``, prunes old spectra once a day, watches the clocks and the disk,
  and pings systemd.

What the logger does about each fault:

- **receiver lost**: a health row says so at once, another gives the gap in the data
  (from the last spectra to the first new ones, and why) when they resume; nothing is
  glued over, the archive simply has no rows there;
- **stop** (SIGTERM / SIGINT): the chunk in progress is flushed, the detector's
  pending events stored, a last health row written; exit status 0 within a few seconds;
- **SIGKILL / power cut**: nothing to do here — the archive's chunks and SQLite's WAL
  are crash-safe, and the run lock is a flock the kernel drops with the process. A
  logger in a crash loop still leaves data: its first flush comes a few seconds after
  its first spectra, not a whole ``chunk_s`` later;
- **disk nearly full** (free space under ``disk_min_free_mb``, or an archive or event
  store write failing for lack of space): raw spectra stop being archived, events and
  health go on (rows the event store cannot take are held in memory and written once it
  can), one warning is logged; archiving resumes, with one more warning, once free space
  is back above 1.2 × the threshold and a test flush reached the disk. Retries in
  between are quiet;
- **clock step** (an NTP correction): seen as a jump of CLOCK_REALTIME against
  CLOCK_MONOTONIC between two looks (the sample counter would mix steps with drops and
  crystal drift). It is logged and recorded, starts a new segment, and any rows whose
  times fall before data already written are dropped, so the archive never holds
  overlapping or negative-length data.
"""

from __future__ import annotations

import logging
import math
import os
import queue
import signal
import sqlite3
import sys
import threading
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from rxlog import health as hl
from rxlog.errors import RxlogError
from rxlog.notify import Notifier
from rxlog.receive.blocks import EndOfStream
from rxlog.spectrum import DynamicSpectrum
from rxlog.timeutil import iso, parse_iso

log = logging.getLogger("rxlog")

QUEUE_ITEMS = 64                # bounded queue between feed and main thread (items are chunks of spectra)
RETRY_FIRST_S = 1.0             # first wait before reopening a lost receiver; doubles up to retry_max_s
DISK_RESUME_FACTOR = 1.2        # resume archiving when free space is back above this × disk_min_free_mb
DISK_CHECK_S = 1.0              # look at free space at most this often
DISK_RETRY_S = 5.0              # after a pause, wait at least this long before archiving again
DISK_RETRY_MAX_S = 60.0         # the wait doubles after each failed attempt, up to this
FIRST_FLUSH_S = 2.0             # first flush this long after a run's first spectra; the wait then doubles
                                # up to chunk_s, so a crash loop faster than chunk_s still archives
STORE_RETRY_S = 5.0             # while the event store refuses rows, try again at most this often
HELD_ROWS_MAX = 10000           # rows of each kind held in memory for the event store (a week of health rows)
CLOCK_SYNC_CHECK_S = 60.0       # ask timedatectl/chronyc at most this often
RETENTION_EVERY_S = 86400.0     # prune old spectra once a day
PREVIOUS_AHEAD_MAX_S = 3600.0   # a previous run's data further ahead than this are not waited for
OVERLAP_TOL = 1e-4              # of a cadence: rows this close are contiguous (the archive's own tolerance)
STOP_JOIN_S = 2.0               # how long a stop waits for the feed thread
CLOCK_STEPS_ENV = "RXLOG_FAKE_CLOCK_STEPS"   # test hook, see Clock.from_env


# -- logging ----------------------------------------------------------------------------------

# sd-daemon(3) priority prefixes, understood by journald on a service's stderr.
_SD_PRIORITY = {logging.DEBUG: "<7>", logging.INFO: "<6>", logging.WARNING: "<4>",
                logging.ERROR: "<3>", logging.CRITICAL: "<2>"}


class JournalFormatter(logging.Formatter):
    """One line per message, level first: 'WARNING disk nearly full ...'.

    Under systemd (``$JOURNAL_STREAM`` set) each line also starts with its sd-daemon
    priority prefix, so ``journalctl -p warning`` finds it. Tracebacks are folded into
    the same line.
    """

    def __init__(self, journal: bool):
        super().__init__()
        self.journal = journal

    def format(self, record: logging.LogRecord) -> str:
        text = record.getMessage()
        if record.exc_info:
            text += " | " + self.formatException(record.exc_info)
        text = " | ".join(part for part in text.splitlines() if part.strip())
        line = f"{record.levelname} {text}"
        return (_SD_PRIORITY.get(record.levelno, "<6>") + line) if self.journal else line


def setup_logging(level: str = "info", stream=None) -> logging.Handler:
    """Send rxlog's log to stderr, one line per message; return the handler."""
    handler = logging.StreamHandler(stream or sys.stderr)
    handler.setFormatter(JournalFormatter(journal=bool(os.environ.get("JOURNAL_STREAM"))))
    root = logging.getLogger("rxlog")
    for h in list(root.handlers):
        root.removeHandler(h)
    root.addHandler(handler)
    root.setLevel(level.upper())
    root.propagate = False
    return handler


# -- clocks -----------------------------------------------------------------------------------

class Clock:
    """The host's wall clock (CLOCK_REALTIME) and monotonic clock (CLOCK_MONOTONIC).

    ``steps`` [(after_s, delta_s), ...] shift the wall clock by delta_s once after_s
    monotonic seconds have passed since the clock was made: a stand-in for an NTP step,
    which a test cannot make on the host's own clock.
    """

    def __init__(self, steps: list[tuple[float, float]] = ()):
        self._origin = time.monotonic()
        self._steps = sorted(steps)

    @classmethod
    def from_env(cls, env=None) -> "Clock":
        """Read ``$RXLOG_FAKE_CLOCK_STEPS`` ('after_s:delta_s,...', e.g. '3:+30,6:-20')."""
        text = (os.environ if env is None else env).get(CLOCK_STEPS_ENV, "").strip()
        steps = []
        for item in filter(None, (s.strip() for s in text.split(","))):
            a, _, d = item.partition(":")
            try:
                steps.append((float(a), float(d)))
            except ValueError:
                raise RxlogError(f"${CLOCK_STEPS_ENV}: {item!r} is not 'after_s:delta_s'") from None
        return cls(steps)

    def monotonic(self) -> float:
        return time.monotonic()

    def realtime(self) -> float:
        t = time.time()
        if self._steps:
            age = time.monotonic() - self._origin
            t += sum(d for a, d in self._steps if age >= a)
        return t


class ClockWatch:
    """Detect steps of the wall clock against the monotonic clock.

    The offset realtime − monotonic stays constant while the wall clock runs freely and
    changes only slowly while NTP slews it (at most 500 ppm, adjtimex(2)); a change of
    more than ``threshold_s`` between two looks is a step.
    """

    def __init__(self, clock: Clock, threshold_s: float):
        self.clock = clock
        self.threshold_s = threshold_s
        self.offset = clock.realtime() - clock.monotonic()

    def check(self) -> float | None:
        """The size of a step since the last look (s, positive = clock moved ahead), or None."""
        offset = self.clock.realtime() - self.clock.monotonic()
        step = offset - self.offset
        self.offset = offset
        return step if abs(step) > self.threshold_s else None


# -- what moves through the queue -------------------------------------------------------------

@dataclass
class ReceiverLost:
    t_utc: float
    reason: str


@dataclass
class ReceiverBack:
    lost_utc: float
    back_utc: float
    reason: str


class FeedEnded:
    """The feed has no more data (a recording or a finite simulation ran out)."""


@dataclass
class Counters:
    """Counts since the last health row (reset there). Spectra archived are not counted
    here but read from the archive writer: only rows that reached the disk count."""
    spectra_received: int = 0
    spectra_not_archived: int = 0
    spectra_overlap_dropped: int = 0
    events: int = 0
    clock_step_s: float = 0.0


# -- the logger ---------------------------------------------------------------------------

class Logger:
    """One run of the logger on a station config. ``run()`` returns a summary dict.

    The stages are passed in so the library and its tests can assemble them; ``run(cfg)``
    below builds the real ones from the config.
    """

    def __init__(self, cfg, feed, archive_factory, detector_factory, store, clock: Clock | None = None,
                 notifier: Notifier | None = None, prune=None):
        self.cfg = cfg
        self.station = cfg["station"]["name"]
        svc = cfg["service"]
        self.chunk_s = float(svc["chunk_s"])
        self.health_s = float(svc["health_interval_s"])
        self.disk_min_mb = float(svc["disk_min_free_mb"])
        self.retry_max_s = float(svc["retry_max_s"])
        self.feed = feed
        self.archive_factory = archive_factory
        self.archive = None
        self.detector_factory = detector_factory
        self.detector = detector_factory() if detector_factory else None
        self.store = store
        self.clock = clock or Clock()
        self.notifier = notifier or Notifier()
        self.prune = prune
        self.clockwatch = ClockWatch(self.clock, float(svc["clock_step_s"]))
        self.cpu = hl.CpuMeter()
        self.queue: queue.Queue = queue.Queue(maxsize=QUEUE_ITEMS)
        self.stop_event = threading.Event()
        self.stop_reason = ""
        self.counts = Counters()
        # cumulative counts read at each health row: (feed samples received, dropped; queue drops)
        self.queue_dropped = 0
        self._last_cumulative = (0, 0, 0)
        self._last_health = self.clock.monotonic()
        self.totals = {"spectra_archived": 0, "events": 0, "clock_steps": 0, "receiver_gaps": 0}
        self.receiver_state = "starting"
        self.feed_heartbeat = self.clock.monotonic()
        self.raw_paused = False
        self._paused_at = 0.0
        self._resume_above_mb = 0.0
        self._disk_retry_s = DISK_RETRY_S
        # Rows on disk: written by writers already dropped, plus the current writer's; rows
        # handed to the current writer (those neither on disk nor buffered were lost with it).
        self._rows_written_before = 0
        self._rows_handed = 0
        self._last_on_disk = 0
        self.clock_epoch = 0
        self.last_end: float | None = None     # end of the latest data accepted (POSIX s)
        self._last_segment = ""
        self._gap: tuple[float, str] | None = None   # (data end, reason) while the receiver is away
        self.segments: dict[str, dict] = {}    # segment rows to upsert at the next flush
        self.pending_events: list[dict] = []   # events the store could not take yet
        self.pending_episodes: list[dict] = []
        self.pending_quality: list[dict] = []
        self.pending_health: list[dict] = []   # health rows the store could not take yet
        self._store_trouble: str | None = None # why the event store refuses rows, while it does
        self._store_retry_at = -1e9
        self.run_tag = time.strftime("%Y%m%dT%H%M%S", time.gmtime(self.clock.realtime()))
        self._clock_sync = (hl.UNKNOWN, -1e9)
        self._disk = (None, -1e9)
        self._prune_thread: threading.Thread | None = None
        self._feed_thread: threading.Thread | None = None

    # -- feed thread --------------------------------------------------------------------------
    def _feed_loop(self):
        wait = RETRY_FIRST_S
        lost: ReceiverLost | None = None
        is_open = False
        while not self.stop_event.is_set():
            self.feed_heartbeat = self.clock.monotonic()
            try:
                if not is_open:
                    self.receiver_state = "opening"
                    self.feed.open()
                    is_open = True
                    self.receiver_state = "streaming"
                    if lost is not None:
                        self._put(ReceiverBack(lost.t_utc, self.clock.realtime(), lost.reason), block=True)
                        lost = None
                    wait = RETRY_FIRST_S
                try:
                    rows = self.feed.read()
                except EndOfStream:
                    self._put(FeedEnded(), block=True)
                    return
                for spec in rows:
                    if spec.n_time:
                        self._put(spec, block=not self.feed.paced)
            except Exception as e:  # any receiver failure: close, note, retry; never give up
                reason = f"{type(e).__name__}: {e}" if not isinstance(e, RxlogError) else str(e)
                if isinstance(e, (RxlogError, OSError)):
                    log.warning("receiver: %s; retrying in %.0f s", reason, wait)
                else:
                    log.error("receiver: unexpected failure; retrying in %.0f s", wait, exc_info=True)
                if is_open:
                    self._salvage()
                try:
                    self.feed.close()
                except Exception:
                    log.debug("receiver: error while closing after a failure", exc_info=True)
                is_open = False
                if lost is None:
                    lost = ReceiverLost(self.clock.realtime(), reason)
                    self._put(lost, block=True)
                self.receiver_state = "retrying"
                deadline = self.clock.monotonic() + wait
                while not self.stop_event.is_set() and self.clock.monotonic() < deadline:
                    self.feed_heartbeat = self.clock.monotonic()
                    self.stop_event.wait(min(0.2, max(0.0, deadline - self.clock.monotonic())))
                wait = min(wait * 2, self.retry_max_s)
        if is_open:
            self._salvage()
            try:
                self.feed.close()
            except Exception:
                log.warning("receiver: error while closing", exc_info=True)
        self.receiver_state = "stopped"

    def _salvage(self):
        """Queue the rows the feed still holds (the row being averaged) before it is closed."""
        try:
            rows = self.feed.salvage()
        except Exception:
            log.debug("receiver: nothing salvaged from the row in progress", exc_info=True)
            return
        for spec in rows:
            if spec.n_time:
                try:
                    self.queue.put_nowait(spec)
                except queue.Full:
                    self.queue_dropped += spec.n_time

    def _put(self, item, block: bool):
        """Queue an item. A receiver paced at real time cannot wait: a full queue drops the chunk."""
        while not self.stop_event.is_set():
            self.feed_heartbeat = self.clock.monotonic()   # waiting on the main thread is no stall
            try:
                self.queue.put(item, timeout=0.2 if block else 0)
                return
            except queue.Full:
                if not block:
                    self.queue_dropped += item.n_time if isinstance(item, DynamicSpectrum) else 0
                    return

    # -- main thread: data ----------------------------------------------------------------
    def _segment_name(self, spec: DynamicSpectrum) -> str:
        name = f"{self.run_tag}.{spec.segment}"
        return f"{name}.c{self.clock_epoch}" if self.clock_epoch else name

    def _take(self, spec: DynamicSpectrum):
        self.counts.spectra_received += spec.n_time
        # Never overlap what is already written: after a backward clock step (or a restart
        # behind the previous run's data) drop rows that start before the latest end. The
        # next rows of the same segment may start a hair early (float rounding of a
        # continuous time line) and are kept; a new segment must start at or after it.
        name = self._segment_name(spec)
        if self.last_end is not None:
            tol = OVERLAP_TOL * spec.cadence_s if name == self._last_segment else 0.0
            keep = int(np.searchsorted(spec.times, self.last_end - tol, side="left"))
            if keep:
                self.counts.spectra_overlap_dropped += min(keep, spec.n_time)
                if keep >= spec.n_time:
                    return
                spec = spec.slice_rows(keep, spec.n_time)
        spec.segment = name
        self._last_segment = name
        if self._gap is not None:
            self._note_gap(spec)
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

    def _disk_free(self) -> float:
        free, when = self._disk
        now = self.clock.monotonic()
        if free is None or now - when >= DISK_CHECK_S:
            free = hl.disk_free_mb(self.cfg.storage_root)
            self._disk = (free, now)
        return free

    def _archive(self, spec: DynamicSpectrum):
        free = self._disk_free()
        if not self.raw_paused and free < self.disk_min_mb:
            self._pause_raw(f"disk free {free:.1f} MB below disk_min_free_mb {self.disk_min_mb:g} MB")
        probing = self.raw_paused and free >= self._resume_above_mb and \
            self.clock.monotonic() - self._paused_at >= self._disk_retry_s
        if self.raw_paused and not probing:
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
            self.raw_paused = False
            self._disk_retry_s = DISK_RETRY_S
            self._notable(f"raw spectra resumed: disk free {free:.1f} MB", level=logging.WARNING)

    def _on_disk(self) -> int:
        """Spectra of this run that reached the disk (rows in the writer's buffer do not count)."""
        return self._rows_written_before + (self.archive.rows_written if self.archive is not None else 0)

    def _drop_writer(self):
        """Forget the archive writer; the rows it was handed and never wrote are lost."""
        if self.archive is None:
            return
        self.counts.spectra_not_archived += self._rows_handed - self.archive.rows_written
        self._rows_written_before += self.archive.rows_written
        self.archive = None
        self._rows_handed = 0

    def _archive_failed(self, e: Exception):
        """A write or flush failed (disk full, a quota, permissions): pause raw spectra.

        The writer is dropped without closing it (closing would retry the failed write);
        chunks it already wrote are consolidated by the next writer. A failed attempt to
        resume only makes the next attempt wait longer: the pause was already reported."""
        self._drop_writer()
        self._disk = (None, -1e9)
        if not self.raw_paused:
            self._pause_raw(f"archive write failed: {e}", failed=True)
            return
        log.debug("raw spectra still paused: %s", e)
        self._paused_at = self.clock.monotonic()
        self._disk_retry_s = min(2 * self._disk_retry_s, DISK_RETRY_MAX_S)
        self._resume_above_mb = max(self._resume_above_mb, self._disk_free() + 1.0)

    def _pause_raw(self, why: str, failed: bool = False):
        self.raw_paused = True
        self._paused_at = self.clock.monotonic()
        self._disk_retry_s = DISK_RETRY_S
        # After a failed write the threshold alone may already be met (e.g. threshold 0):
        # then wait for a megabyte more than there was when the write failed.
        self._resume_above_mb = max(DISK_RESUME_FACTOR * self.disk_min_mb,
                                    self._disk_free() + 1.0 if failed else 0.0)
        self._notable(f"raw spectra paused ({why}); events and health continue", level=logging.WARNING)

    def _detect(self, spec: DynamicSpectrum):
        if self.detector is None:
            return
        try:
            events = self.detector.feed(spec)
        except Exception:
            log.error("detector: failure on %s..%s; spectra kept, detector restarted",
                      iso(spec.t0), iso(spec.t_end), exc_info=True)
            self.detector = self.detector_factory()
            return
        self._store_events(self._with_cutouts(events))

    def _with_cutouts(self, events: list[dict]) -> list[dict]:
        """Keep each new event's stretch of the channelizer's full-resolution ring as a FITS
        cutout under ``<storage root>/cutouts/YYYY/MM/DD/`` and let the detector look at it
        again (S-bursts are only visible there). Interference events get none; nothing is
        kept while raw spectra are paused for lack of space, or when the ring has moved on."""
        ring = getattr(self.feed, "ring", None)
        if ring is None or self.raw_paused or not events:
            return events
        out = []
        for ev in events:
            if ev.get("class") != "rfi":
                try:
                    ev = save_cutout(self.cfg, ev, ring)
                except (RxlogError, OSError) as e:
                    log.warning("cutout for %s not kept: %s", ev.get("event_id"), e)
                except Exception:
                    log.error("cutout for %s failed", ev.get("event_id"), exc_info=True)
            out.append(ev)
        return out

    def _store_events(self, events):
        """Store new events (and the detector's episodes and hourly quality rows); what the
        store cannot take now (disk full, a long lock) is kept for the next try."""
        if self.detector is not None:
            self.pending_episodes.extend(self.detector.pop_episodes())
            self.pending_quality.extend(self.detector.pop_quality())
        if events:
            self.pending_events.extend(events)
        if not (self.pending_episodes or self.pending_quality or self.pending_events) or not self._store_may_try():
            self._trim_held()
            return
        try:
            self.store.upsert_episodes(self.pending_episodes)
            self.pending_episodes = []
            self.store.record_quality(self.pending_quality)
            self.pending_quality = []
            if self.pending_events:
                self.store.upsert_events(self.pending_events)
        except sqlite3.OperationalError as e:
            self._store_failed(e)
            self._trim_held()
            return
        self._store_ok()
        self.counts.events += len(self.pending_events)
        self.totals["events"] += len(self.pending_events)
        self.pending_events = []

    def _trim_held(self):
        for held in (self.pending_events, self.pending_episodes, self.pending_quality, self.pending_health):
            del held[:-HELD_ROWS_MAX]

    def _store_may_try(self) -> bool:
        """While the store refuses rows, try again only every STORE_RETRY_S."""
        return self._store_trouble is None or self.clock.monotonic() >= self._store_retry_at

    def _store_failed(self, e: Exception):
        """The event store refused a write ("database or disk is full", or locked by a long
        reader): rows are held for a retry. A full disk pauses raw spectra, which is the one
        warning about it; any other trouble gets one warning until the store works again."""
        why = str(e)
        self._store_retry_at = self.clock.monotonic() + STORE_RETRY_S
        first, self._store_trouble = self._store_trouble is None, why
        full = "full" in why.lower()          # SQLITE_FULL: "database or disk is full"
        if full and not self.raw_paused:
            self._pause_raw(f"event store: {why}", failed=True)
        elif first and not full:
            log.warning("event store: %s; rows are held in memory and written once it works again", why)
        else:
            log.debug("event store still refuses rows: %s", why)

    def _store_ok(self):
        if self._store_trouble is not None:
            self._store_trouble = None
            log.info("event store: writing again")

    # -- main thread: housekeeping --------------------------------------------------------
    def _flush(self):
        if self.archive is not None:
            try:
                self.archive.flush()
            except (RxlogError, OSError) as e:
                self._archive_failed(e)
        self._store_events([])
        self._store_health()
        if self.segments and self._store_may_try():
            try:
                for row in self.segments.values():
                    self.store.upsert_segment(row)
            except sqlite3.OperationalError as e:
                self._store_failed(e)
                return
            self._store_ok()
            # keep only the segment still growing
            current = max(self.segments.values(), key=lambda r: r["end_utc"])
            self.segments = {current["segment_id"]: current}

    def _clock_sync_state(self) -> str:
        state, when = self._clock_sync
        now = self.clock.monotonic()
        if now - when >= CLOCK_SYNC_CHECK_S:
            state = hl.clock_sync_state()
            self._clock_sync = (state, now)
        return state

    def _health(self, note: str = ""):
        c = self.counts
        raw = "paused" if self.raw_paused else "on"
        now = self.clock.monotonic()
        cum = (int(getattr(self.feed, "samples_received", 0)), int(getattr(self.feed, "samples_dropped", 0)),
               self.queue_dropped)
        d_rx, d_drop, d_queue = (a - b for a, b in zip(cum, self._last_cumulative))
        on_disk = self._on_disk()
        row = {"station": self.station, "time_utc": self._health_time(),
               "interval_s": round(now - self._last_health, 3),
               "samples_received": d_rx, "samples_dropped": d_drop,
               "queue_depth": self.queue.qsize(), "cpu_percent": round(self.cpu.percent(), 2),
               "disk_free_mb": round(hl.disk_free_mb(self.cfg.storage_root), 2),
               "clock_sync": self._clock_sync_state(), "receiver_state": self.receiver_state,
               "note": note,
               "spectra_received": c.spectra_received, "spectra_archived": on_disk - self._last_on_disk,
               "spectra_buffered": self.archive.rows_buffered if self.archive is not None else 0,
               "spectra_not_archived": c.spectra_not_archived,
               "spectra_dropped": c.spectra_overlap_dropped + d_queue,
               "events": c.events, "clock_step_s": c.clock_step_s, "raw_archiving": raw,
               "rss_mb": round(hl.rss_mb(), 1), "pid": os.getpid()}
        # The row is kept (in memory while the store refuses it), so the counts start again.
        self.pending_health.append(row)
        self.totals["spectra_archived"] = on_disk
        self.counts = Counters()
        self._last_cumulative = cum
        self._last_on_disk = on_disk
        self._last_health = now
        self._store_health()
        self.notifier.status(f"{self.receiver_state}; raw spectra {raw}; {self.totals['events']} events; "
                             f"disk {row['disk_free_mb']:.0f} MB free; clock {row['clock_sync']}")

    def _store_health(self):
        """Write the health rows held for the store, oldest first, as far as it takes them."""
        if not self.pending_health or not self._store_may_try():
            self._trim_held()
            return
        try:
            while self.pending_health:
                self.store.record_health(self.pending_health[0])
                self.pending_health.pop(0)
        except sqlite3.OperationalError as e:
            self._store_failed(e)
            self._trim_held()
            return
        self._store_ok()

    def _health_time(self) -> str:
        """Now, in ISO text; after a backward clock step 'now' can repeat an earlier row's time
        to the millisecond, and health rows are keyed by time: move on by 1 ms until free."""
        t = self.clock.realtime()
        held = {r["time_utc"] for r in self.pending_health}
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

    def _notable(self, text: str, level=logging.INFO):
        """Log something the morning reviewer should know and record it in a health row at once."""
        log.log(level, "%s", text)
        self._health(note=text)

    def _check_clock(self):
        step = self.clockwatch.check()
        if step is None:
            return
        self.clock_epoch += 1
        self.totals["clock_steps"] += 1
        self.counts.clock_step_s += step
        then = (f"rows before {iso(self.last_end)} will be dropped so data never overlap"
                if step < 0 and self.last_end is not None else "the data jump with it")
        self._notable(f"clock step {step:+.3f} s at {iso(self.clock.realtime())} (wall clock against "
                      f"monotonic); new segment; {then}", level=logging.WARNING)

    def _maybe_prune(self):
        if self.prune is None or (self._prune_thread and self._prune_thread.is_alive()):
            return

        def work():
            try:
                removed = self.prune()
                log.info("retention: %d files older than %g days removed", len(removed),
                         self.cfg["storage"]["retention_days"])
            except Exception:
                log.error("retention: prune failed", exc_info=True)

        self._prune_thread = threading.Thread(target=work, name="rxlog-prune", daemon=True)
        self._prune_thread.start()

    def _on_marker(self, item):
        if isinstance(item, ReceiverLost):
            self.totals["receiver_gaps"] += 1
            # The gap in the data runs from the end of the last spectra to the first new ones.
            self._gap = (self.last_end if self.last_end is not None else item.t_utc, item.reason)
            self._notable(f"receiver lost at {iso(item.t_utc)}: {item.reason}", level=logging.WARNING)
        elif isinstance(item, ReceiverBack):
            log.warning("receiver back at %s after %.1f s", iso(item.back_utc), item.back_utc - item.lost_utc)

    def _note_gap(self, spec: DynamicSpectrum):
        t0, reason = self._gap
        self._gap = None
        self._notable(f"receiver gap {iso(t0)} to {iso(spec.t0)} ({spec.t0 - t0:.1f} s), data resumed: {reason}",
                      level=logging.WARNING)

    # -- the run ------------------------------------------------------------------------------
    def request_stop(self, reason: str):
        if not self.stop_event.is_set():
            self.stop_reason = reason
            self.stop_event.set()

    def run(self, duration_s: float | None = None) -> dict:
        clock = self.clock
        start = clock.monotonic()
        # A live receiver restarted after a crash must not write over what the last run
        # stored (its clock may since have stepped back); a replayed recording keeps its times.
        self.last_end = self._previous_end() if getattr(self.feed, "paced", True) else None
        self._feed_thread = threading.Thread(target=self._feed_loop, name="rxlog-feed", daemon=True)
        self._feed_thread.start()
        log.info("logging station %s to %s (chunk %g s, health every %g s)", self.station,
                 self.cfg.storage_root, self.chunk_s, self.health_s)
        need = cutout_ring_needed_s(self.cfg)
        ring_s = float(self.cfg.get("sweep", {}).get("ring_s", 0.0))
        if self.detector is not None and 0 < ring_s < need:
            log.warning("[sweep] ring_s = %g s is shorter than the detector's latency plus a minute (%g s): "
                        "most events will get no cutout", ring_s, need)
        self._health(note="logger started")
        self.notifier.ready(f"logging station {self.station}")
        wd = self.notifier.watchdog_s
        # Flush FIRST_FLUSH_S after the first spectra, then at doubling waits up to chunk_s:
        # a logger that crashes and restarts faster than chunk_s still archives (about the
        # first half of each run), and a health row shows it.
        flush_wait = min(FIRST_FLUSH_S, self.chunk_s)
        next_flush = None
        next_health = start + self.health_s
        next_prune = start
        next_ping = start
        ended = False
        while not self.stop_event.is_set():
            try:
                item = self.queue.get(timeout=0.2)
            except queue.Empty:
                item = None
            self._check_clock()
            if isinstance(item, DynamicSpectrum):
                self._take(item)
            elif isinstance(item, FeedEnded):
                ended = True
                self.request_stop("end of feed")
            elif item is not None:
                self._on_marker(item)
            now = clock.monotonic()
            if next_flush is None and self._last_segment:
                next_flush = now + flush_wait
            if next_flush is not None and now >= next_flush:
                first = self._on_disk() == 0
                self._flush()
                if first and self._on_disk():
                    self._health(note=f"first spectra archived, up to {iso(self.last_end)}")
                    next_health = now + self.health_s
                flush_wait = min(2 * flush_wait, self.chunk_s)
                next_flush = now + flush_wait
            if now >= next_health:
                self._health()
                next_health = now + self.health_s
            if now >= next_prune:
                self._maybe_prune()
                next_prune = now + RETENTION_EVERY_S
            # Ping only while the feed thread shows signs of life: a hung receiver read
            # stops the pings and systemd restarts the logger (WatchdogSec).
            if wd and now >= next_ping and now - self.feed_heartbeat < 2 * wd:
                self.notifier.watchdog()
                next_ping = now + wd
            if duration_s is not None and now - start >= duration_s:
                self.request_stop("duration reached")
        return self._finish(ended)

    def _previous_end(self) -> float | None:
        """End of the data a previous run stored, so a restart never overlaps it.

        Data more than PREVIOUS_AHEAD_MAX_S ahead of the clock cannot be a clock that
        stepped back (NTP steps are seconds) but a simulation run ahead of time in the same
        storage root: waiting for it would drop everything, so it is ignored with a warning."""
        try:
            row = self.store.db.execute("select max(end_utc) from segments where station = ?",
                                        [self.station]).fetchone()
        except sqlite3.Error:
            return None
        if not (row and row[0]):
            return None
        end, now = parse_iso(row[0]), self.clock.realtime()
        if end > now + PREVIOUS_AHEAD_MAX_S:
            log.warning("stored data reach %s, %.0f s ahead of the clock (a simulation run ahead of "
                        "time?); new spectra are archived beside them", row[0], end - now)
            return None
        if end > now:
            log.warning("stored data reach %s, %.1f s ahead of the clock: spectra before that are "
                        "dropped so data never overlap", row[0], end - now)
        return end

    def _finish(self, ended: bool) -> dict:
        t_stop = self.clock.monotonic()
        self.notifier.stopping(f"stopping: {self.stop_reason}")
        log.info("stopping: %s", self.stop_reason)
        if self._feed_thread is not None:
            self._feed_thread.join(STOP_JOIN_S)
        # Take what the feed already queued, within the stop budget.
        while self.clock.monotonic() - t_stop < 1.0:
            try:
                item = self.queue.get_nowait()
            except queue.Empty:
                break
            if isinstance(item, DynamicSpectrum):
                self._take(item)
        if self.detector is not None:
            try:
                self._store_events(self._with_cutouts(self.detector.flush()))
            except Exception:
                log.error("detector: flush failed at stop", exc_info=True)
        self._flush()
        if self.archive is not None:
            try:
                self.archive.close()
            except (RxlogError, OSError) as e:
                log.warning("archive: last chunk not written at stop: %s", e)
            self._drop_writer()
        self._store_retry_at = -1e9             # one last try for whatever the store refused
        self._health(note=f"logger stopped: {self.stop_reason}")
        self._store_retry_at = -1e9
        self._store_events([])
        held = {"health rows": len(self.pending_health), "events": len(self.pending_events),
                "episodes": len(self.pending_episodes), "quality rows": len(self.pending_quality)}
        if any(held.values()):
            log.warning("event store: %s lost at stop (%s)", ", ".join(f"{n} {k}" for k, n in held.items() if n),
                        self._store_trouble)
        summary = dict(self.totals, stop_reason=self.stop_reason, ended=ended)
        log.info("stopped: %(spectra_archived)d spectra archived, %(events)d events, "
                 "%(receiver_gaps)d receiver gaps, %(clock_steps)d clock steps", summary)
        return summary


# -- assembling the real stages ---------------------------------------------------------------

def run(cfg, duration_s: float | None = None, install_signals: bool = True,
        sim_hours: float | None = None) -> dict:
    """Run the logger on a station config until SIGTERM/SIGINT, the end of the feed, or
    ``duration_s`` seconds; return a summary. Raises RxlogError if another logger holds
    the storage root. ``sim_hours`` (simulated receiver only) ends the feed after that
    much simulated data, for benchmarks and dry runs."""
    from rxlog.store import EventStore

    lock = hl.RunLock(cfg.storage_root)
    if not lock.acquire():
        pid = hl.running_logger(cfg.storage_root)
        raise RxlogError(f"{cfg.storage_root}: another rxlog run (pid {pid}) is logging here; "
                         "stop it first (systemctl stop rxlog) or use another [storage] root")
    store = None
    try:
        store = EventStore(cfg.store_path)
        store.upsert_station(cfg["station"])
        clock = Clock.from_env()
        logger = Logger(cfg, feed=open_feed(cfg, clock, sim_hours), archive_factory=lambda: open_archive(cfg),
                        detector_factory=lambda: open_detector(cfg), store=store, clock=clock,
                        prune=lambda: prune_archive(cfg))
        if install_signals:
            for sig in (signal.SIGTERM, signal.SIGINT):
                signal.signal(sig, lambda s, f: logger.request_stop(signal.Signals(s).name))
        return logger.run(duration_s)
    finally:
        if store is not None:
            store.close()
        lock.release()


class SweepFeed:
    """Samples from the configured receiver through the sweep plan (or a single window)
    and the channelizer: rows on the station's channel grid.

    Live receivers read the wall clock through ``clock`` so their sample times follow it
    (and a fake clock step reaches them as a real one would)."""

    def __init__(self, cfg, clock: Clock, realtime_sim: bool = True, sim_hours: float | None = None):
        self.cfg, self.clock = cfg, clock
        self.realtime_sim, self.sim_hours = realtime_sim, sim_hours
        self.sweeper = None
        self.paced = cfg["receiver"]["kind"] != "recording" and (
            cfg["receiver"]["kind"] != "simulated" or realtime_sim)
        self._done = (0, 0)           # sample counts of sources already closed

    def open(self):
        from rxlog.receive.channelizer import Channelizer
        from rxlog.receive.sweep import Sweeper, SweepPlan
        from rxlog.station.sources import open_source

        kind = self.cfg["receiver"]["kind"]
        if kind in ("rtlsdr", "rtltcp"):
            source = open_source(self.cfg, monotonic=self.clock.monotonic, realtime=self.clock.realtime)
        elif kind == "simulated":
            source = open_source(self.cfg, realtime=self.realtime_sim, hours=self.sim_hours)
        else:
            source = open_source(self.cfg)
        plan = SweepPlan.from_config(self.cfg, source.rate_hz)
        meta = source.meta() if hasattr(source, "meta") else {"receiver": kind}
        sweeper = Sweeper(source, plan, Channelizer(self.cfg), meta=meta)
        try:
            sweeper.open()
        except BaseException:
            source.close()
            raise
        self.sweeper = sweeper
        log.info("receiver %s open: %s", kind, plan.describe())

    def read(self) -> list[DynamicSpectrum]:
        try:
            return self.sweeper.step()
        except EndOfStream:
            rows = self.sweeper.finish()
            if rows:
                return rows
            raise

    def salvage(self) -> list[DynamicSpectrum]:
        """The row in progress, as far as it got (the sweeper flags what it lacks)."""
        return self.sweeper.finish() if self.sweeper is not None else []

    def close(self):
        if self.sweeper is not None:
            rx, dr = self._done
            self._done = (rx + self.sweeper.samples_received, dr + self.sweeper.samples_dropped)
            sweeper, self.sweeper = self.sweeper, None
            sweeper.close()

    @property
    def ring(self):
        """The sweeper's ring of full-resolution spectra (for event cutouts), or None."""
        return self.sweeper.ring if self.sweeper is not None else None

    @property
    def samples_received(self) -> int:
        return self._done[0] + (self.sweeper.samples_received if self.sweeper else 0)

    @property
    def samples_dropped(self) -> int:
        return self._done[1] + (self.sweeper.samples_dropped if self.sweeper else 0)


class SpectraFeed:
    """Dynamic spectra straight from the simulator's sky model (``[service] sim_feed =
    "spectra"``): no samples, no channelizer — for dry runs, the demo and long tests.

    Paced (``realtime``), a chunk is handed out once its last row has passed on the
    monotonic clock and is stamped in UTC with the current wall-minus-monotonic offset,
    as a live receiver's disciplined sample count is; a wall-clock step therefore moves
    the data as it would on a real station. Rows whose time passed while the sky model
    was being planned are skipped, as a receiver opened late has no samples from before.
    Unpaced, chunks come as fast as they can be made, on the simulation's own time line.
    ``hours`` ends the feed; without it the sky is planned ``RUN_HOURS`` at a time.
    """

    RUN_HOURS = 6.0
    PACED_CHUNK_S = 1.0      # a chunk waits for its last row, so this is the feed's latency
    FAST_CHUNK_S = 60.0

    def __init__(self, cfg, clock: Clock, realtime: bool = True, hours: float | None = None,
                 start_unix: float | None = None, seed: int = 0):
        self.cfg, self.clock, self.paced = cfg, clock, bool(realtime)
        self.hours, self.seed = hours, int(seed)
        self.cadence = float(cfg["spectra"]["cadence_s"])
        chunk = self.PACED_CHUNK_S if self.paced else self.FAST_CHUNK_S
        self.chunk_rows = max(1, int(round(chunk / self.cadence)))
        self.start = start_unix
        self.next_t: float | None = None       # simulation time of the next row
        self.end: float | None = None
        self._runs = 0
        self._run = None
        self._i = 0
        self._shift = 0.0
        self.samples_received = self.samples_dropped = 0

    def open(self):
        if self.start is None:
            now = self.clock.realtime()
            self.start = math.ceil(now / self.cadence) * self.cadence
        if self.next_t is None:
            self.next_t = self.start
            self.end = None if self.hours is None else self.start + self.hours * 3600.0
            # The simulation's time line runs on the monotonic clock: sim time t is
            # monotonic time t - offset0, and in UTC t + (offset now - offset0).
            self._offset0 = self.clock.realtime() - self.clock.monotonic()
        self._run = None

    def _sim_now(self) -> float:
        return self.clock.monotonic() + self._offset0

    def _new_run(self):
        from rxlog.sim.spectra import iter_spectra

        hours = self.RUN_HOURS if self.end is None else min(self.RUN_HOURS, (self.end - self.next_t) / 3600.0)
        self._run = iter_spectra(self.cfg, self.next_t, hours, seed=self.seed + self._runs)
        self._runs += 1
        self._i = 0
        if self.paced:
            late = self._sim_now() - self.next_t
            self._i = min(self._run.n_rows, max(0, int(late // self.cadence)))

    def read(self) -> list[DynamicSpectrum]:
        if self.end is not None and self.next_t >= self.end - 0.5 * self.cadence:
            raise EndOfStream("simulation finished")
        if self._run is None or self._i >= self._run.n_rows:
            self._new_run()
            if self._i >= self._run.n_rows:
                self.next_t = self._run.end
                return []
        i1 = min(self._run.n_rows, self._i + self.chunk_rows)
        spec = self._run.rows(self._i, i1)
        self._i = i1
        self.next_t = spec.t_end
        if i1 >= self._run.n_rows:
            self._run = None
        if self.paced:
            while (wait := spec.t_end - self._sim_now()) > 0:
                time.sleep(min(wait, 0.25))
            # The two clocks are read microseconds apart: follow their offset only when it
            # moved by more than that jitter, so consecutive chunks stay on one time line.
            shift = (self.clock.realtime() - self.clock.monotonic()) - self._offset0
            if abs(shift - self._shift) > 1e-3:
                self._shift = shift
            spec.t0 += self._shift
        return [spec]

    def salvage(self) -> list[DynamicSpectrum]:
        return []

    def close(self):
        self._run = None


def open_feed(cfg, clock: Clock, sim_hours: float | None = None):
    """The configured data feed: the receiver through sweep and channelizer, or for a
    simulated receiver with ``[service] sim_feed = "spectra"`` the spectral simulator."""
    svc = cfg["service"]
    if cfg["receiver"]["kind"] == "simulated" and svc["sim_feed"] == "spectra":
        return SpectraFeed(cfg, clock, realtime=svc["sim_realtime"], hours=sim_hours)
    return SweepFeed(cfg, clock, realtime_sim=svc["sim_realtime"], sim_hours=sim_hours)


def open_archive(cfg):
    from rxlog.archive.write import ArchiveWriter

    return ArchiveWriter(cfg.archive_dir, cfg["station"], lossless=cfg["storage"]["lossless"],
                         chunk_s=cfg["service"]["chunk_s"])


def open_detector(cfg):
    from rxlog.detect.online import OnlineDetector

    return OnlineDetector(cfg)


def prune_archive(cfg, now: float | None = None) -> list:
    """Daily retention: archived spectra and event cutouts older than ``retention_days``."""
    from rxlog.archive.prune import prune

    days = cfg["storage"]["retention_days"]
    return prune(cfg.archive_dir, days, now=now) + prune_cutouts(cfg, days, now=now)


CUTOUT_MARGIN_S = 2.0       # kept either side of an event in its cutout


def cutout_ring_needed_s(cfg) -> float:
    """Seconds of ring a cutout needs: a burst comes out of the detector half a fast
    window plus three blocks after it ends (rxlog.detect), and a minute-long burst must
    still be in the ring then."""
    d = cfg.get("detector", {})
    return float(d.get("fast_window_s", 240.0)) / 2 + 3 * float(d.get("block_s", 30.0)) + 60.0 + 2 * CUTOUT_MARGIN_S


def cutout_relpath(ev: dict) -> Path:
    """``cutouts/YYYY/MM/DD/<event_id>.fits`` (by the event's UTC start), relative to the storage root."""
    d = ev["start_utc"][:10].split("-")
    return Path("cutouts", *d, f"{ev['event_id']}.fits")


def save_cutout(cfg, ev: dict, ring) -> dict:
    """Write the ring's rows around ``ev`` as a FITS file in the archive's layout and return
    the event as ``rxlog.detect.cutout.refine_with_cutout`` sees it then (with ``cutout_path``,
    relative to the storage root). Without rows in the ring the event comes back as it was."""
    from rxlog.archive.write import write_spectrum_fits
    from rxlog.detect.cutout import refine_with_cutout

    t0 = parse_iso(ev["start_utc"]) - CUTOUT_MARGIN_S
    t1 = parse_iso(ev["end_utc"]) + CUTOUT_MARGIN_S
    cut = ring.cutout(t0, t1)
    if cut is None or cut.n_time == 0:
        return ev
    rel = cutout_relpath(ev)
    write_spectrum_fits(cut, Path(cfg.storage_root) / rel, cfg["station"], lossless=cfg["storage"]["lossless"])
    return refine_with_cutout(cfg, ev, cut, path=str(rel))


def prune_cutouts(cfg, retention_days: float, now: float | None = None) -> list[Path]:
    """Delete cutout files of UTC days that ended more than ``retention_days`` ago, and
    their emptied folders; only ``cutouts/YYYY/MM/DD/*.fits`` is touched."""
    import datetime as dt

    root = Path(cfg.storage_root) / "cutouts"
    if not root.is_dir():
        return []
    cutoff = (time.time() if now is None else float(now)) - float(retention_days) * 86400.0
    deleted = []
    for day in sorted(root.glob("[0-9][0-9][0-9][0-9]/[0-9][0-9]/[0-9][0-9]")):
        try:
            y, m, d = (int(x) for x in day.relative_to(root).parts)
            end = dt.datetime(y, m, d, tzinfo=dt.timezone.utc).timestamp() + 86400.0
        except ValueError:
            continue
        if end > cutoff:
            continue
        for f in day.glob("*.fits"):
            f.unlink()
            deleted.append(f)
        for folder in (day, day.parent, day.parent.parent):
            try:
                folder.rmdir()
            except OSError:
                break
    return deleted
