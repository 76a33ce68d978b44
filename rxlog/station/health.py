"""The station's vital signs: clock sync, CPU, free disk, memory, and whether a logger
is running (the run lock).

Everything here is cheap enough to call once a minute from the logger and from
``rxlog status``, and nothing raises for a missing tool: a host without systemd or
chrony reports its clock as "unknown".
"""

from __future__ import annotations

import errno
import fcntl
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
