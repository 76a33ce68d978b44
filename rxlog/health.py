"""The station's vital signs: clock sync, CPU, disk, and whether a logger is running.

Everything here is cheap enough to call once a minute from the logger and from
``rxlog status``, and nothing raises for a missing tool: a host without systemd or
chrony reports its clock as "unknown".
"""

from __future__ import annotations

import errno
import fcntl
import math
import os
import shutil
import subprocess
import time
from pathlib import Path

# Clock-sync states written to the health table.
SYNCED, UNSYNCED, UNKNOWN = "synced", "unsynced", "unknown"

LOCK_NAME = "rxlog-run.lock"


def _run(argv: list[str], timeout: float = 3.0) -> str | None:
    """stdout of a short command, or None when it is missing, fails or hangs."""
    try:
        p = subprocess.run(argv, capture_output=True, text=True, timeout=timeout,
                           env={**os.environ, "LC_ALL": "C"})
    except (OSError, subprocess.SubprocessError):
        return None
    return p.stdout if p.returncode == 0 else None


def parse_timedatectl(text: str) -> str:
    """``timedatectl show`` output (KEY=VALUE lines) -> clock-sync state.

    systemd's timedatectl(1): ``NTPSynchronized=yes|no`` says whether the kernel clock
    is synchronised (set by whichever NTP daemon runs, timesyncd or chrony or ntpd).
    """
    for line in text.splitlines():
        key, _, value = line.partition("=")
        if key.strip() == "NTPSynchronized":
            v = value.strip().lower()
            return SYNCED if v == "yes" else UNSYNCED if v == "no" else UNKNOWN
    return UNKNOWN


def parse_chronyc_tracking(text: str) -> str:
    """``chronyc tracking`` output -> clock-sync state.

    chronyc(1): the "Leap status" line reads "Normal" (or "Insert second" /
    "Delete second") when chronyd is synchronised, "Not synchronised" otherwise.
    """
    for line in text.splitlines():
        key, _, value = line.partition(":")
        if key.strip().lower() == "leap status":
            v = value.strip().lower()
            if v.startswith("not sync"):
                return UNSYNCED
            if v in ("normal", "insert second", "delete second"):
                return SYNCED
            return UNKNOWN
    return UNKNOWN


def clock_sync_state() -> str:
    """'synced' / 'unsynced' from timedatectl, else from chronyc, else 'unknown'."""
    out = _run(["timedatectl", "show"]) if shutil.which("timedatectl") else None
    state = parse_timedatectl(out) if out else UNKNOWN
    if state == UNKNOWN and shutil.which("chronyc"):
        out = _run(["chronyc", "-n", "tracking"])
        state = parse_chronyc_tracking(out) if out else UNKNOWN
    return state


class CpuMeter:
    """This process's CPU use (user + system, all threads) in percent of one core since the last call."""

    def __init__(self):
        self._last = (time.monotonic(), self._cpu())

    @staticmethod
    def _cpu() -> float:
        t = os.times()
        return t.user + t.system

    def percent(self) -> float:
        now, cpu = time.monotonic(), self._cpu()
        wall = now - self._last[0]
        used = cpu - self._last[1]
        self._last = (now, cpu)
        return 100.0 * used / wall if wall > 0 else 0.0


def disk_free_mb(path: str | os.PathLike) -> float:
    """Free space (MB = 1e6 bytes, available to unprivileged users) on the filesystem holding
    ``path``, or its nearest existing parent."""
    p = Path(path).absolute()
    while not p.exists() and p != p.parent:
        p = p.parent
    st = os.statvfs(p)
    return st.f_bavail * st.f_frsize / 1e6


def rss_mb() -> float:
    """Resident set size of this process in MB, from /proc (Linux); 0.0 where unavailable."""
    try:
        with open("/proc/self/statm") as f:
            pages = int(f.read().split()[1])
        return pages * os.sysconf("SC_PAGE_SIZE") / 1e6
    except (OSError, ValueError, IndexError):
        return 0.0


# -- one logger per storage root ------------------------------------------------------------
#
# A lock file under the storage root holds an exclusive flock(2) for as long as the logger
# runs, with the logger's pid written inside. The kernel drops the lock when the process
# dies in any way (SIGKILL and power cuts included), so a stale file never blocks a restart.

class RunLock:
    """Exclusive lock for ``rxlog run`` on one storage root; ``acquire()`` returns False if held."""

    def __init__(self, storage_root: str | os.PathLike):
        self.path = Path(storage_root) / LOCK_NAME
        self._fd: int | None = None

    def acquire(self, wait_s: float = 1.0) -> bool:
        self.path.parent.mkdir(parents=True, exist_ok=True)
        fd = os.open(self.path, os.O_RDWR | os.O_CREAT | os.O_CLOEXEC, 0o644)
        deadline = time.monotonic() + wait_s
        while True:
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                break
            except OSError as e:
                # A status query holds a shared lock for a moment: retry briefly before giving up.
                if e.errno not in (errno.EWOULDBLOCK, errno.EAGAIN) or time.monotonic() > deadline:
                    os.close(fd)
                    return False
                time.sleep(0.05)
        os.ftruncate(fd, 0)
        os.write(fd, f"{os.getpid()}\n".encode())
        os.fsync(fd)
        self._fd = fd
        return True

    def release(self):
        if self._fd is not None:
            os.ftruncate(self._fd, 0)
            os.close(self._fd)
            self._fd = None


def running_logger(storage_root: str | os.PathLike) -> int | None:
    """The pid of the logger running on this storage root, or None when none holds the lock."""
    path = Path(storage_root) / LOCK_NAME
    try:
        fd = os.open(path, os.O_RDONLY | os.O_CLOEXEC)
    except OSError:
        return None
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_SH | fcntl.LOCK_NB)
        except OSError:
            text = os.pread(fd, 32, 0).decode(errors="replace").strip()
            return int(text) if text.isdigit() else -1
        fcntl.flock(fd, fcntl.LOCK_UN)
        return None
    finally:
        os.close(fd)


# What `rxlog status` reckons from history (rxlog's own choices).
DAY_S = 86400.0
GROWTH_MIN_DATA_S = 6 * 3600.0    # archive growth needs this much data in the last day, else "unknown"


def station_status(cfg, now: float | None = None) -> dict:
    """What ``rxlog status`` shows, as of ``now`` (POSIX s, default: the clock):

    - ``pid``: the running logger's pid, or None; ``uptime_s``: seconds since that
      logger's "logger started" health row (None when not running or no such row);
      ``starts_24h``: "logger started" rows in the last day (a crash loop shows here);
    - ``health``: the latest health row (dict) or None; ``age_s``: its age;
    - ``dropped_24h``: sums over the last day's health rows: ``samples_received``,
      ``samples_dropped``, ``spectra_dropped``, ``spectra_not_archived``;
    - ``last_event``: {event_id, class, peak_utc} of the latest event (by peak), or None;
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
        from rxlog.timeutil import parse_iso
        out["uptime_s"] = now - parse_iso(out["started_utc"])
    else:
        out["uptime_s"] = None
    out.update(_archive_status(cfg, now))
    return out


def _store_status(cfg, now: float, pid: int | None) -> dict:
    import sqlite3

    from rxlog.timeutil import iso, parse_iso

    out = {"health": None, "age_s": None, "started_utc": None, "starts_24h": 0,
           "dropped_24h": None, "last_event": None}
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
        finally:
            conn.close()
    except sqlite3.Error as e:
        from rxlog.errors import RxlogError
        raise RxlogError(f"{path}: cannot read the event store ({e})") from None
    if out["health"] is not None:
        out["age_s"] = now - parse_iso(out["health"]["time_utc"])
    return out


def _archive_status(cfg, now: float) -> dict:
    """The last archived row and the disk outlook, from the archive's files. An archive
    that cannot be read (a damaged file, no permission) is reported, not raised: the
    rest of the status still answers."""
    from rxlog.archive.read import archive_hours, file_spans
    from rxlog.errors import RxlogError
    from rxlog.timeutil import iso

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
