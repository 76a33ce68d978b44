"""Observing nights: local noon to the next local noon at the station.

A night runs from local noon to the next local noon in the station's ``timezone``, so an
evening and the morning after are one night; it is named by the local date on which it
begins. Here: the ``Night`` itself, how times in it are written (always with their
zone), which night holds an instant or a date, the store's events and episodes of a night and where
its report folder is. (The default night, which depends on what the archive holds, is
in ``data.py``: importing this module stays light for the server and the listings.)
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from pathlib import Path
from zoneinfo import ZoneInfo

from rxlog.errors import RxlogError
from rxlog.store import EventStore
from rxlog.timeutil import iso


@dataclass(frozen=True)
class Night:
    """One observing night: [t0, t1) from local noon on ``date`` to local noon the day after."""
    date: dt.date
    t0: float
    t1: float
    tz: ZoneInfo

    @property
    def name(self) -> str:
        return self.date.isoformat()

    def local(self, t: float) -> dt.datetime:
        return dt.datetime.fromtimestamp(t, self.tz)

    def zone(self, t: float) -> str:
        """The station zone's name at ``t`` as clocks show it ('EST', 'CEST'; 'UTC+05:30' where it has none)."""
        return zone_name(self.local(t))

    def stamp(self, t: float, seconds: bool = True) -> str:
        """Local date and time with the zone: '2027-02-03 21:04:05 EST'."""
        return f"{self.local(t):%Y-%m-%d %H:%M{':%S' if seconds else ''}} {self.zone(t)}"


def zone_name(d: dt.datetime) -> str:
    """An aware datetime's zone abbreviation; 'UTC+hh:mm' where the zone has only a numeric one."""
    name = d.tzname() or ""
    if not name or name[0] in "+-" or name[0].isdigit():
        off = d.strftime("%z") or "+0000"
        return f"UTC{off[:3]}:{off[3:5]}"
    return name


def utc_stamp(t: float, seconds: bool = True) -> str:
    """'2027-02-04 02:04:05 UTC'."""
    return iso(t)[:19 if seconds else 16].replace("T", " ") + " UTC"


def night_starting(cfg, date: dt.date) -> Night:
    """The night that begins at local noon of ``date`` (23 or 25 h long across a clock change)."""
    tz = ZoneInfo(cfg["station"]["timezone"])
    start = dt.datetime.combine(date, dt.time(12), tzinfo=tz)
    end = dt.datetime.combine(date + dt.timedelta(days=1), dt.time(12), tzinfo=tz)
    return Night(date, start.timestamp(), end.timestamp(), tz)


def night_of(cfg, t_unix: float) -> Night:
    """The night containing the instant ``t_unix``."""
    tz = ZoneInfo(cfg["station"]["timezone"])
    local = dt.datetime.fromtimestamp(t_unix, tz)
    date = local.date() if local.hour >= 12 else local.date() - dt.timedelta(days=1)
    return night_starting(cfg, date)


def parse_night(cfg, text: str) -> Night:
    """'YYYY-MM-DD' (the local date on which the night begins) -> Night."""
    try:
        date = dt.date.fromisoformat(str(text).strip())
    except ValueError:
        raise RxlogError(f"night {text!r}: expected a date YYYY-MM-DD, the local date on which "
                         f"the night begins (it runs noon to noon)") from None
    return night_starting(cfg, date)


def night_events(cfg, night: Night) -> list[dict]:
    """This station's stored events of the night, oldest first."""
    store = EventStore(cfg.store_path)
    try:
        return store.events(night.t0, night.t1, station=cfg["station"]["name"])
    finally:
        store.close()


def night_episodes(cfg, night: Night) -> list[dict]:
    """This station's stored episodes starting in the night, oldest first, with their
    context and labels (rxlog.store.EventStore.episodes_with_context)."""
    store = EventStore(cfg.store_path)
    try:
        return store.episodes_with_context(night.t0, night.t1, station=cfg["station"]["name"], starting=True)
    finally:
        store.close()


def report_dir(cfg, night: Night) -> Path:
    """The night's report folder: ``<reports_dir>/<night>/``."""
    return Path(cfg.reports_dir) / night.name
