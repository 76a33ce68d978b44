"""What ``rxlog status`` says about a station: is the logger running and since when, its
latest health row, the last archived spectrum and event, what was dropped in the last
day, and how many days of disk are left at the archive's growth rate.

Reads the event store read-only and the archive from file names and FITS headers: it
changes nothing and needs no lock.
"""

from __future__ import annotations

import json
import math
import sqlite3
import time

from rxlog.archive.read import archive_hours, file_spans
from rxlog.errors import RxlogError
from rxlog.station.health import disk_free_mb, running_logger
from rxlog.timeutil import iso, parse_iso

# What `rxlog status` reckons from history (rxlog's own choices).
DAY_S = 86400.0
GROWTH_MIN_DATA_S = 6 * 3600.0    # archive growth needs this much data in the last day, else "unknown"
WORST_GROUPS = 5                  # channel groups `rxlog status` names as the most masked


def station_status(cfg, now: float | None = None) -> dict:
    """What ``rxlog status`` shows, as of ``now`` (POSIX s, default: the clock):

    - ``pid``: the running logger's pid, or None; ``uptime_s``: seconds since that
      logger's "logger started" health row (None when not running or no such row);
      ``starts_24h``: "logger started" rows in the last day (a crash loop shows here);
    - ``health``: the latest health row (dict) or None; ``age_s``: its age;
    - ``dropped_24h``: sums over the last day's health rows: ``samples_received``,
      ``samples_dropped``, ``spectra_dropped``, ``spectra_not_archived``;
    - ``last_event``: {event_id, class, peak_utc} of the latest event (by peak), or None;
    - ``worst_channels``: the channel groups the RFI mask took out most in the last day
      (see ``worst_channels``), worst first; empty before the first hour is stored;
    - ``last_archived``: {time_utc: end of the last archived row, path: the archive file
      holding it}, or None for an empty (or unreadable) archive; ``archive_error``: why
      the archive could not be read, or None;
    - ``disk``: see ``disk_outlook``;
    - ``store``: the event store's path.

    Reads the event store read-only and creates nothing: run as root, an ordinary open
    would leave SQLite's -wal/-shm files owned by root, which the service user then could
    not write. Without a -wal file (no logger has the store open) the file is read as
    immutable, which needs neither. The archive is read from file names and FITS headers
    only, without its lock.
    """
    now = time.time() if now is None else float(now)
    pid = running_logger(cfg.storage_root)
    out = {"pid": pid, "store": cfg.store_path, **_store_status(cfg, now, pid)}
    if out["pid"] is not None and out["started_utc"] is not None:
        out["uptime_s"] = now - parse_iso(out["started_utc"])
    else:
        out["uptime_s"] = None
    out.update(_archive_status(cfg, now))
    return out


def _store_status(cfg, now: float, pid: int | None) -> dict:
    out = {"health": None, "age_s": None, "started_utc": None, "starts_24h": 0,
           "dropped_24h": None, "last_event": None, "worst_channels": []}
    path = cfg.store_path
    if not path.exists():
        return out
    station = cfg["station"]["name"]
    day_ago = iso(now - DAY_S)
    wal = path.with_name(path.name + "-wal").exists()
    uri = f"{path.resolve().as_uri()}?mode=ro" + ("" if wal else "&immutable=1")

    def one(conn, sql, args):
        try:
            row = conn.execute(sql, args).fetchone()
        except sqlite3.OperationalError as e:
            if "no such" in str(e):          # a table or column this store does not have yet
                return None
            raise
        return dict(row) if row is not None else None

    try:
        conn = sqlite3.connect(uri, uri=True, timeout=5)
        conn.row_factory = sqlite3.Row
        try:
            out["health"] = one(conn, "select * from health where station = ? order by time_utc desc limit 1",
                                [station])
            if pid is not None:
                started = one(conn, "select time_utc from health where station = ? and pid = ? and "
                              "note = 'logger started' order by time_utc desc limit 1", [station, pid])
                out["started_utc"] = started and started["time_utc"]
            starts = one(conn, "select count(*) as n from health where station = ? and time_utc >= ? "
                         "and note = 'logger started'", [station, day_ago])
            out["starts_24h"] = starts["n"] if starts else 0
            out["dropped_24h"] = one(
                conn, "select coalesce(sum(samples_received), 0) as samples_received, "
                "coalesce(sum(samples_dropped), 0) as samples_dropped, "
                "coalesce(sum(spectra_dropped), 0) as spectra_dropped, "
                "coalesce(sum(spectra_not_archived), 0) as spectra_not_archived "
                "from health where station = ? and time_utc >= ?", [station, day_ago])
            out["last_event"] = one(conn, "select event_id, class, peak_utc from events where station = ? "
                                    "order by peak_utc desc limit 1", [station])
            out["worst_channels"] = worst_channels(_day_quality(conn, station, day_ago))
        finally:
            conn.close()
    except sqlite3.Error as e:
        raise RxlogError(f"{path}: cannot read the event store ({e})") from None
    if out["health"] is not None:
        out["age_s"] = now - parse_iso(out["health"]["time_utc"])
    return out


def _day_quality(conn, station: str, since: str) -> list[dict]:
    """The quality rows since ``since`` that carry per-group fractions (schema 4 on)."""
    try:
        rows = conn.execute("select hour_utc, covered_s, group_fmin_mhz, group_mhz, masked_by_group from quality "
                            "where station = ? and hour_utc >= ? and masked_by_group is not null",
                            [station, since]).fetchall()
    except sqlite3.OperationalError as e:
        if "no such" in str(e):              # a store from before schema version 4
            return []
        raise
    return [dict(r, masked_by_group=json.loads(r["masked_by_group"])) for r in rows]


def worst_channels(quality: list[dict], n: int = WORST_GROUPS) -> list[dict]:
    """The ``n`` channel groups with the largest masked fraction over the quality rows
    given (each hour weighted by its covered seconds), worst first, leaving out groups
    never masked: dicts of fmin_mhz, fmax_mhz and masked_fraction."""
    sums: dict[float, list[float]] = {}
    for q in quality:
        w = float(q.get("covered_s") or 0.0)
        gmhz = float(q["group_mhz"])
        for i, frac in enumerate(q["masked_by_group"]):
            if frac is None or w <= 0:
                continue
            lo = round(float(q["group_fmin_mhz"]) + i * gmhz, 6)
            acc = sums.setdefault((lo, gmhz), [0.0, 0.0])
            acc[0] += w * frac
            acc[1] += w
    groups = [{"fmin_mhz": lo, "fmax_mhz": round(lo + g, 6), "masked_fraction": m / w}
              for (lo, g), (m, w) in sums.items() if w > 0 and m > 0]
    return sorted(groups, key=lambda x: -x["masked_fraction"])[:n]


def describe_worst(groups: list[dict]) -> str:
    """One line of ``rxlog status`` from ``worst_channels``."""
    if not groups:
        return "most masked channels (last 24 h): none masked, or no hourly quality rows yet"
    return "most masked channels (last 24 h): " + ", ".join(
        f"{g['fmin_mhz']:.2f}-{g['fmax_mhz']:.2f} MHz {100 * g['masked_fraction']:.0f} %" for g in groups)


def _archive_status(cfg, now: float) -> dict:
    """The last archived row and the disk outlook, from the archive's files. An archive
    that cannot be read (a damaged file, no permission) is reported, not raised: the
    rest of the status still answers."""
    now_hour = int(now // 3600)
    try:
        hours = archive_hours(cfg.archive_dir)
        recent = file_spans(cfg.archive_dir, now_hour - 24, None) if hours else []
        newest = file_spans(cfg.archive_dir, hours[-1], hours[-1]) if hours and not recent else recent
        error = None
    except (RxlogError, OSError) as e:
        hours, recent, newest, error = [], [], [], str(e)
    last = max(newest, key=lambda f: f.t_end, default=None)
    last_archived = None if last is None else {"time_utc": iso(last.t_end), "path": last.path}
    # Chunks carry more header per second of data than the hour file they become: left out.
    in_day = [f for f in recent if f.t_end > now - DAY_S and not f.path.name.endswith(".chunk.fits")]
    return {"last_archived": last_archived, "archive_error": error,
            "disk": disk_outlook(free_mb=disk_free_mb(cfg.storage_root),
                                 min_free_mb=float(cfg["service"]["disk_min_free_mb"]),
                                 day_bytes=sum(f.size_bytes for f in in_day),
                                 day_data_s=sum(f.data_s for f in in_day),
                                 archive_age_days=(now - hours[0] * 3600.0) / DAY_S if hours else 0.0,
                                 retention_days=float(cfg["storage"]["retention_days"]))}


def disk_outlook(free_mb: float, min_free_mb: float, day_bytes: float, day_data_s: float,
                 archive_age_days: float, retention_days: float) -> dict:
    """Days until raw spectra pause for lack of space, at the archive's current growth.

    The growth rate is the size of the archive's hour files of the last day over the
    seconds of data they hold (so a logger that was down part of the day is not mistaken
    for a slow one), in MB per day of logging; with less than GROWTH_MIN_DATA_S of data it is
    unknown. Raw spectra pause at ``min_free_mb`` (``[service] disk_min_free_mb``), so the
    space that counts is free space above it. Retention deletes what is older than
    ``retention_days``: once the archive is that old it stops growing, so if the space
    left outlasts the growth still to come the disk does not fill (``days_left`` inf).
    Other files on the disk and the event store's slow growth are not foreseen.

    Returns {'free_mb', 'rate_mb_per_day' (None: unknown), 'days_left' (None: unknown,
    0: raw spectra pause now, inf: retention levels the archive off first), 'level_mb':
    the archive's size once retention levels it off (None: unknown), 'data_h': hours of
    data the rate is taken from}.
    """
    out = {"free_mb": free_mb, "rate_mb_per_day": None, "days_left": None, "level_mb": None,
           "data_h": day_data_s / 3600.0}
    if day_data_s < GROWTH_MIN_DATA_S:
        return out
    rate = day_bytes / 1e6 / day_data_s * DAY_S
    out["rate_mb_per_day"] = rate
    out["level_mb"] = rate * retention_days
    usable = free_mb - min_free_mb
    still_to_grow = max(0.0, retention_days - archive_age_days) * rate
    if usable <= 0:
        out["days_left"] = 0.0
    elif rate <= 0 or usable >= still_to_grow:
        out["days_left"] = math.inf
    else:
        out["days_left"] = usable / rate
    return out


def format_duration(seconds: float) -> str:
    """'45 s', '17 min', '5 h 03 min', '12 d 4 h'."""
    s = max(0, int(seconds))
    if s < 120:
        return f"{s} s"
    if s < 2 * 3600:
        return f"{s // 60} min"
    if s < 2 * 86400:
        return f"{s // 3600} h {s % 3600 // 60:02d} min"
    return f"{s // 86400} d {s % 86400 // 3600} h"


def describe_disk(disk: dict, retention_days: float, min_free_mb: float) -> str:
    """One line of ``rxlog status`` from ``disk_outlook``'s answer."""
    head = f"disk: {disk['free_mb']:.0f} MB free"
    rate = disk["rate_mb_per_day"]
    if rate is None:
        return (f"{head}; days left unknown ({disk['data_h']:.1f} h of archive in the last 24 h, "
                f"the growth rate needs {GROWTH_MIN_DATA_S / 3600:.0f} h)")
    head += f", the archive grows {rate:.0f} MB a day"
    if math.isinf(disk["days_left"]):
        return (f"{head}; it will not fill: {retention_days:g}-day retention levels the archive "
                f"off at about {disk['level_mb']:.0f} MB")
    return f"{head}; {disk['days_left']:.1f} days left until raw spectra pause (below {min_free_mb:g} MB free)"
