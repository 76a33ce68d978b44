"""Re-detect a date range day by day on Dask: many processes (or machines) compute days,
one writer in the client puts them into the event store.

Each day is ``rxlog detect`` over [day start, day start + 24 h): the workers run
``rxlog.detect.rerun.detect_span`` (a pure function of the archive and the detector
settings) and hand back events, episodes and hourly quality; the client writes them
with ``store_detections`` in day order, so the store is the one that running
``rxlog detect`` over each day in turn gives, whatever the number of workers (the
hour straddling two days and the labels that move are written in the same order).
Dask (``dask.distributed``) is the engine: a ``LocalCluster`` of processes sized to the
machine, or a running cluster at ``--scheduler``; there is no scheduler of our own.

Days written are kept in ``reprocess-state.json`` under the storage root, with a
fingerprint of the detector settings: a killed run restarts where it stopped, and a
change of settings starts the range anew. A day whose archive files cannot be read is
reported and skipped (and tried again next time); the rest go on.
"""

from __future__ import annotations

import hashlib
import json
import logging
import os
import time
from dataclasses import dataclass, field
from typing import Callable

from dask.distributed import Client, LocalCluster

from rxlog import fileio
from rxlog.archive.layout import HOUR_S
from rxlog.archive.read import archive_extent, archive_hours, file_spans
from rxlog.detect.rerun import detect_span, store_detections
from rxlog.detect.settings import Settings
from rxlog.errors import RxlogError
from rxlog.timeutil import iso

DAY_S = 86400.0
STATE_NAME = "reprocess-state.json"
STATE_VERSION = 1


def plan_days(t0: float, t1: float) -> list[tuple[float, float]]:
    """[t0, t1) cut into 24-hour days counted from t0 (the last one may be shorter)."""
    if not t1 > t0:
        raise RxlogError(f"--end ({iso(t1)}) must be after --start ({iso(t0)})")
    out, a = [], float(t0)
    while a < t1:
        out.append((a, min(a + DAY_S, float(t1))))
        a += DAY_S
    return out


def detect_day(cfg, t0: float, t1: float, extent: tuple[float, float]) -> dict:
    """One day's detections (what a worker runs): ``detect_span``'s result, or
    ``{"t0", "t1", "error"}`` when the day's archive files cannot be read."""
    try:
        return detect_span(cfg, t0, t1, extent)
    except RxlogError as e:
        return {"t0": t0, "t1": t1, "error": str(e)}


def _extent(root) -> tuple[float, float]:
    """The archive's first and last time, as ``rxlog detect`` takes them; when the first or
    last file is damaged (``rxlog detect`` then stops), from the files' headers, or their
    hours, so that the days in between still go on."""
    try:
        extent = archive_extent(root)
    except RxlogError:
        hours = archive_hours(root)
        try:
            spans = file_spans(root, hours[0], hours[0]) + file_spans(root, hours[-1], hours[-1])
            extent = (min(s.t0 for s in spans), max(s.t_end for s in spans)) if spans else None
        except RxlogError:
            extent = (hours[0] * HOUR_S, (hours[-1] + 1) * HOUR_S)
    if extent is None:
        raise RxlogError(f"{root}: the archive holds no spectra yet; record some first "
                         "(rxlog run) or ingest FITS dynamic spectra (rxlog ingest)")
    return extent


def settings_fingerprint(cfg) -> str:
    """What the detections depend on besides the archive: detector and RFI settings, the
    station and its region table. A change starts a range anew instead of resuming."""
    what = {"settings": repr(Settings.from_config(cfg)), "station": cfg.get("station"),
            "regions": cfg.get("regions")}
    return hashlib.sha256(json.dumps(what, sort_keys=True, default=str).encode()).hexdigest()[:16]


def state_path(cfg):
    return cfg.storage_root / STATE_NAME


def load_state(cfg) -> dict:
    """The days already written, ``{"fingerprint", "done": {day start ISO: day end ISO}}``;
    an empty state when there is none or the detector settings changed since."""
    fresh = {"version": STATE_VERSION, "fingerprint": settings_fingerprint(cfg), "done": {}}
    path = state_path(cfg)
    if not path.is_file():
        return fresh
    try:
        state = json.loads(path.read_text(encoding="utf-8"))
        ok = (state.get("version") == STATE_VERSION and isinstance(state.get("done"), dict)
              and state.get("fingerprint") == fresh["fingerprint"])
    except (OSError, ValueError, AttributeError):
        ok = False                 # unreadable: recomputing is safe, each day replaces itself
    return state if ok else fresh


def save_state(cfg, state: dict) -> None:
    fileio.write_atomic(state_path(cfg), json.dumps(state, indent=1, sort_keys=True) + "\n",
                        what="reprocess state")


@dataclass
class DayReport:
    """What became of one day: its summary (``detect_range``'s), or the error that skipped it."""
    t0: float
    t1: float
    summary: dict | None = None
    error: str | None = None
    resumed: bool = False          # written by an earlier run, not computed now


@dataclass
class Progress:
    """Days done of the total, days per hour and time left, from this run's pace."""
    total: int
    done: int = 0
    computed: int = 0
    started: float = field(default_factory=time.monotonic)

    def days_per_hour(self) -> float | None:
        spent = time.monotonic() - self.started
        return 3600.0 * self.computed / spent if self.computed and spent > 0 else None

    def seconds_left(self) -> float | None:
        rate = self.days_per_hour()
        return (self.total - self.done) / rate * 3600.0 if rate else None

    def line(self) -> str:
        rate, left = self.days_per_hour(), self.seconds_left()
        pace = f"{rate:.1f} days/hour" if rate else "pace not known yet"
        eta = f"about {_hms(left)} left" if left is not None else "time left not known yet"
        return f"{self.done}/{self.total} days done, {pace}, {eta}"


def _hms(s: float) -> str:
    s = int(round(s))
    return f"{s // 3600}:{s % 3600 // 60:02d}:{s % 60:02d}"


def default_workers() -> int:
    """One worker process per core this process may use."""
    return len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)


def open_client(workers: int | None = None, scheduler: str | None = None) -> Client:
    """A Dask client: to the running scheduler at ``scheduler``, or to a new local cluster
    of ``workers`` single-threaded processes (the detector holds the GIL in places)."""
    if scheduler:
        try:
            return Client(scheduler, timeout="20s")
        except (OSError, TimeoutError, ValueError) as e:
            raise RxlogError(f"--scheduler {scheduler}: no Dask scheduler answered ({e}); expected the "
                             "address a running dask scheduler prints, e.g. tcp://10.0.0.5:8786") from None
    n = default_workers() if workers is None else int(workers)
    if n < 1:
        raise RxlogError(f"--workers: expected 1 or more, got {n}")
    # a dashboard on a free port (the default 8787 may be taken by another cluster)
    cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True, dashboard_address=":0",
                           silence_logs=logging.ERROR)
    return Client(cluster)


def reprocess(cfg, t0: float, t1: float, workers: int | None = None, scheduler: str | None = None,
              on_day: Callable[[DayReport, Progress], None] | None = None, client: Client | None = None,
              ) -> list[DayReport]:
    """Re-detect [t0, t1) day by day on Dask into the station's event store.

    Days already written under the same detector settings are skipped (resume);
    ``on_day(report, progress)`` is called as each day is written or skipped. Returns a
    DayReport per day, in order. ``client``: an open Dask client to use (and leave open).
    """
    days = plan_days(t0, t1)
    extent = _extent(cfg.archive_dir)
    state = load_state(cfg)
    progress = Progress(total=len(days))
    reports, todo = [], []
    for a, b in days:
        if state["done"].get(iso(a)) == iso(b):
            rep = DayReport(a, b, resumed=True)
            reports.append(rep)
            progress.done += 1
            if on_day:
                on_day(rep, progress)
        else:
            todo.append((a, b))
    if not todo:
        return reports
    own = client is None
    client = open_client(workers, scheduler) if own else client
    try:
        futures = [client.submit(detect_day, cfg, a, b, extent, pure=False) for a, b in todo]
        # Written in day order: the hour row two days share and labels that move land as
        # in a serial run. Later days keep computing while an earlier one is written.
        for (a, b), fut in zip(todo, futures):
            found = fut.result()
            fut.release()
            progress.done += 1
            progress.computed += 1
            if "error" in found:
                rep = DayReport(a, b, error=found["error"])
            else:
                rep = DayReport(a, b, summary=store_detections(cfg, found))
                state["done"][iso(a)] = iso(b)
                save_state(cfg, state)
            reports.append(rep)
            if on_day:
                on_day(rep, progress)
    finally:
        if own:
            cluster = getattr(client, "cluster", None)
            client.close()
            if cluster is not None:
                cluster.close()
    return sorted(reports, key=lambda r: r.t0)
