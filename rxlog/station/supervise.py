"""The unattended logger behind ``rxlog run``: the supervision around its pipeline.

Two threads and a bounded queue between them:

- the **feed** thread owns the receiver: it opens it, turns samples into dynamic
  spectra (``rxlog.station.feeds``) and queues them. When the receiver fails it closes
  it, records when, and retries with a doubling wait (1 s up to ``[service]
  retry_max_s``) until it is back — no restart needed;
- the **main** thread takes spectra off the queue into the pipeline (archive, online
  detector, event store: ``rxlog.station.pipeline``), flushes crash-safely every
  ``chunk_s`` (the first flushes of a run come sooner, see FIRST_FLUSH_S), records a
  health row every ``health_interval_s``, prunes old spectra once a day, watches the
  clocks and the disk, and pings systemd.

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
- **disk nearly full**: raw spectra pause and resume by themselves
  (``rxlog.station.diskguard``), events and health go on; rows the event store cannot
  take are held in memory and written once it can (``rxlog.station.storewriter``);
- **clock step** (an NTP correction, ``rxlog.station.clock``): logged and recorded, a
  new segment starts, and rows whose times fall before data already written are
  dropped, so the archive never holds overlapping or negative-length data.
"""

from __future__ import annotations

import functools
import logging
import os
import queue
import signal
import threading
import time
from dataclasses import dataclass

from rxlog.errors import RxlogError
from rxlog.receive.blocks import EndOfStream
from rxlog.retry import DoublingWait
from rxlog.spectrum import DynamicSpectrum
from rxlog.station import health as hl
from rxlog.station.clock import Clock, ClockWatch
from rxlog.station.cutouts import cutout_ring_needed_s, save_cutout
from rxlog.station.diskguard import DiskGuard
from rxlog.station.feeds import open_feed
from rxlog.station.notify import Notifier
from rxlog.station.pipeline import Pipeline, open_archive, open_detector, prune_archive
from rxlog.station.storewriter import StoreWriter
from rxlog.store import EventStore
from rxlog.timeutil import iso

log = logging.getLogger("rxlog")

QUEUE_ITEMS = 64                # bounded queue between feed and main thread (items are chunks of spectra)
RETRY_FIRST_S = 1.0             # first wait before reopening a lost receiver; doubles up to retry_max_s
FIRST_FLUSH_S = 2.0             # first flush this long after a run's first spectra; the wait then doubles
                                # up to chunk_s, so a crash loop faster than chunk_s still archives
CLOCK_SYNC_CHECK_S = 60.0       # ask timedatectl/chronyc at most this often
RETENTION_EVERY_S = 86400.0     # prune old spectra once a day
STOP_JOIN_S = 2.0               # how long a stop waits for the feed thread


# -- what moves through the queue besides spectra ------------------------------------------

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


# -- the logger ---------------------------------------------------------------------------

class Logger:
    """One run of the logger on a station config. ``run()`` returns a summary dict.

    The stages are passed in so the library and its tests can assemble them; ``run(cfg)``
    below builds the real ones from the config. The config is read here, once: the
    pieces get plain values.
    """

    def __init__(self, cfg, feed, archive_factory, detector_factory, store, clock: Clock | None = None,
                 notifier: Notifier | None = None, prune=None):
        self.station = cfg["station"]["name"]
        self.storage_root = cfg.storage_root
        svc = cfg["service"]
        self.chunk_s = float(svc["chunk_s"])
        self.health_s = float(svc["health_interval_s"])
        self.retry_max_s = float(svc["retry_max_s"])
        self.retention_days = cfg["storage"]["retention_days"]
        self.ring_s = float(cfg.get("sweep", {}).get("ring_s", 0.0))
        self.ring_needed_s = cutout_ring_needed_s(cfg)
        self.feed = feed
        self.store = store
        self.clock = clock or Clock()
        self.notifier = notifier or Notifier()
        self.prune = prune
        self.disk = DiskGuard(self.storage_root, svc["disk_min_free_mb"], self.clock.monotonic, self._notable)
        self.writer = StoreWriter(store, self.station, self.clock.monotonic, self.disk)
        self.pipeline = Pipeline(self.station, time.strftime("%Y%m%dT%H%M%S", time.gmtime(self.clock.realtime())),
                                 archive_factory, detector_factory, self.writer, self.disk,
                                 ring=lambda: getattr(self.feed, "ring", None),
                                 cutout=functools.partial(save_cutout, cfg), note=self._notable)
        self.clockwatch = ClockWatch(self.clock, float(svc["clock_step_s"]))
        self.cpu = hl.CpuMeter()
        self.queue: queue.Queue = queue.Queue(maxsize=QUEUE_ITEMS)
        self.stop_event = threading.Event()
        self.stop_reason = ""
        # cumulative counts read at each health row: (feed samples received, dropped; queue drops)
        self.queue_dropped = 0
        self._last_cumulative = (0, 0, 0)
        self._last_health = self.clock.monotonic()
        self._last_on_disk = 0
        self.totals = {"spectra_archived": 0, "clock_steps": 0, "receiver_gaps": 0}
        self.receiver_state = "starting"
        self.feed_heartbeat = self.clock.monotonic()
        self._clock_sync = (hl.UNKNOWN, -1e9)
        self._prune_thread: threading.Thread | None = None
        self._feed_thread: threading.Thread | None = None

    # -- feed thread --------------------------------------------------------------------------
    def _feed_loop(self):
        wait = DoublingWait(RETRY_FIRST_S, self.retry_max_s)
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
                    wait.reset()
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
                    log.warning("receiver: %s; retrying in %.0f s", reason, wait.s)
                else:
                    log.error("receiver: unexpected failure; retrying in %.0f s", wait.s, exc_info=True)
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
                deadline = self.clock.monotonic() + wait.s
                while not self.stop_event.is_set() and self.clock.monotonic() < deadline:
                    self.feed_heartbeat = self.clock.monotonic()
                    self.stop_event.wait(min(0.2, max(0.0, deadline - self.clock.monotonic())))
                wait.double()
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

    # -- main thread: health and housekeeping ---------------------------------------------------
    def _clock_sync_state(self) -> str:
        state, when = self._clock_sync
        now = self.clock.monotonic()
        if now - when >= CLOCK_SYNC_CHECK_S:
            state = hl.clock_sync_state()
            self._clock_sync = (state, now)
        return state

    def _health(self, note: str = ""):
        c = self.pipeline.pop_counts()
        raw = "paused" if self.disk.paused else "on"
        now = self.clock.monotonic()
        cum = (int(getattr(self.feed, "samples_received", 0)), int(getattr(self.feed, "samples_dropped", 0)),
               self.queue_dropped)
        d_rx, d_drop, d_queue = (a - b for a, b in zip(cum, self._last_cumulative))
        on_disk = self.pipeline.on_disk()
        row = {"station": self.station, "time_utc": self.writer.health_time(self.clock.realtime()),
               "interval_s": round(now - self._last_health, 3),
               "samples_received": d_rx, "samples_dropped": d_drop,
               "queue_depth": self.queue.qsize(), "cpu_percent": round(self.cpu.percent(), 2),
               "disk_free_mb": round(hl.disk_free_mb(self.storage_root), 2),
               "clock_sync": self._clock_sync_state(), "receiver_state": self.receiver_state,
               "note": note,
               "spectra_received": c.spectra_received, "spectra_archived": on_disk - self._last_on_disk,
               "spectra_buffered": self.pipeline.rows_buffered(),
               "spectra_not_archived": c.spectra_not_archived,
               "spectra_dropped": c.spectra_overlap_dropped + d_queue,
               "events": c.events, "clock_step_s": c.clock_step_s, "raw_archiving": raw,
               "rss_mb": round(hl.rss_mb(), 1), "pid": os.getpid()}
        self.totals["spectra_archived"] = on_disk
        self._last_cumulative = cum
        self._last_on_disk = on_disk
        self._last_health = now
        # The row is kept (in memory while the store refuses it), so the counts start again.
        self.writer.add_health(row)
        self.notifier.status(f"{self.receiver_state}; raw spectra {raw}; {self.pipeline.events_stored} events; "
                             f"disk {row['disk_free_mb']:.0f} MB free; clock {row['clock_sync']}")

    def _notable(self, text: str, level=logging.INFO):
        """Log something the morning reviewer should know and record it in a health row at once."""
        log.log(level, "%s", text)
        self._health(note=text)

    def _check_clock(self):
        step = self.clockwatch.check()
        if step is None:
            return
        self.pipeline.clock_stepped(step)
        self.totals["clock_steps"] += 1
        last_end = self.pipeline.last_end
        then = (f"rows before {iso(last_end)} will be dropped so data never overlap"
                if step < 0 and last_end is not None else "the data jump with it")
        self._notable(f"clock step {step:+.3f} s at {iso(self.clock.realtime())} (wall clock against "
                      f"monotonic); new segment; {then}", level=logging.WARNING)

    def _maybe_prune(self):
        if self.prune is None or (self._prune_thread and self._prune_thread.is_alive()):
            return

        def work():
            try:
                removed = self.prune()
                log.info("retention: %d files older than %g days removed", len(removed), self.retention_days)
            except Exception:
                log.error("retention: prune failed", exc_info=True)

        self._prune_thread = threading.Thread(target=work, name="rxlog-prune", daemon=True)
        self._prune_thread.start()

    def _on_marker(self, item):
        if isinstance(item, ReceiverLost):
            self.totals["receiver_gaps"] += 1
            self.pipeline.receiver_lost(item.t_utc, item.reason)
            self._notable(f"receiver lost at {iso(item.t_utc)}: {item.reason}", level=logging.WARNING)
        elif isinstance(item, ReceiverBack):
            log.warning("receiver back at %s after %.1f s", iso(item.back_utc), item.back_utc - item.lost_utc)

    # -- the run ------------------------------------------------------------------------------
    def request_stop(self, reason: str):
        if not self.stop_event.is_set():
            self.stop_reason = reason
            self.stop_event.set()

    def _start(self):
        """Start the feed thread, say so in the log, a health row and to systemd."""
        # A live receiver restarted after a crash must not write over what the last run
        # stored (its clock may since have stepped back); a replayed recording keeps its times.
        if getattr(self.feed, "paced", True):
            self.pipeline.start_after_previous_run(self.clock.realtime())
        self._feed_thread = threading.Thread(target=self._feed_loop, name="rxlog-feed", daemon=True)
        self._feed_thread.start()
        log.info("logging station %s to %s (chunk %g s, health every %g s)", self.station,
                 self.storage_root, self.chunk_s, self.health_s)
        if self.pipeline.detector is not None and 0 < self.ring_s < self.ring_needed_s:
            log.warning("[sweep] ring_s = %g s is shorter than the detector's latency plus a minute (%g s): "
                        "most events will get no cutout", self.ring_s, self.ring_needed_s)
        self._health(note="logger started")
        self.notifier.ready(f"logging station {self.station}")

    def run(self, duration_s: float | None = None) -> dict:
        clock = self.clock
        start = clock.monotonic()
        self._start()
        wd = self.notifier.watchdog_s
        # Flush FIRST_FLUSH_S after the first spectra, then at doubling waits up to chunk_s:
        # a logger that crashes and restarts faster than chunk_s still archives (about the
        # first half of each run), and a health row shows it.
        flush_wait = DoublingWait(min(FIRST_FLUSH_S, self.chunk_s), self.chunk_s)
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
                self.pipeline.take(item)
            elif isinstance(item, FeedEnded):
                ended = True
                self.request_stop("end of feed")
            elif item is not None:
                self._on_marker(item)
            now = clock.monotonic()
            if next_flush is None and self.pipeline.last_segment:
                next_flush = now + flush_wait.s
            if next_flush is not None and now >= next_flush:
                first = self.pipeline.on_disk() == 0
                self.pipeline.flush()
                if first and self.pipeline.on_disk():
                    self._health(note=f"first spectra archived, up to {iso(self.pipeline.last_end)}")
                    next_health = now + self.health_s
                next_flush = now + flush_wait.double()
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
                self.pipeline.take(item)
        self.pipeline.finish()
        self.writer.retry_now()                 # one last try for whatever the store refused
        self._health(note=f"logger stopped: {self.stop_reason}")
        self.writer.retry_now()
        self.pipeline.store_events([])
        held = self.writer.held()
        if any(held.values()):
            log.warning("event store: %s lost at stop (%s)", ", ".join(f"{n} {k}" for k, n in held.items() if n),
                        self.writer.trouble)
        summary = dict(spectra_archived=self.totals["spectra_archived"], events=self.pipeline.events_stored,
                       clock_steps=self.totals["clock_steps"], receiver_gaps=self.totals["receiver_gaps"],
                       stop_reason=self.stop_reason, ended=ended)
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
