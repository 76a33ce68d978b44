"""systemd units and a udev rule for a station, filled in from its config.

- ``rxlog.service``: the logger (``rxlog run``), ``Type=notify`` so systemd knows when
  it is up and restarts it when its watchdog pings stop (systemd.service(5)); runs as a
  dedicated system user with the filesystem read-only except the storage root
  (systemd.exec(5): NoNewPrivileges, ProtectSystem=strict, ReadWritePaths, PrivateTmp).
- ``rxlog-review.service`` + ``rxlog-review.timer``: the morning report every day at
  ``[service] review_time`` in the station's time zone (systemd.time(7) calendar events
  accept a trailing IANA zone); ``Persistent=true`` catches up a run missed while the
  computer was off.
- ``60-rxlog-rtlsdr.rules``: lets the service user's group open RTL2832U dongles.

``systemd/`` in the source tree holds the same units rendered for the install layout
the README describes; a test keeps the two in step.
"""

from __future__ import annotations

import re
import sys
from pathlib import Path

from rxlog.errors import RxlogError
from rxlog.station.config import SCHEMA

# Install layout assumed by the units shipped in systemd/ (README "Running a station").
DEFAULT_PYTHON = "/opt/rxlog/venv/bin/python"
DEFAULT_CONFIG = "/etc/rxlog/station.toml"
DEFAULT_STORAGE = "/var/lib/rxlog"

# USB ids of RTL2832U-based receivers (from memory; the same list librtlsdr's own
# rules file carries for the common dongles): Realtek's reference ids and the Generic RTL2832U.
RTLSDR_USB_IDS = (("0bda", "2838"), ("0bda", "2832"))

# The sandbox both services run in: write access only to the storage root.
_HARDENING = """\
NoNewPrivileges=yes
ProtectSystem=strict
ProtectHome=read-only
ReadWritePaths={storage}
PrivateTmp=yes
ProtectKernelTunables=yes
ProtectKernelModules=yes
ProtectControlGroups=yes
RestrictSUIDSGID=yes
LockPersonality=yes
"""

_SERVICE = """\
[Unit]
Description=rxlog decametric radio logger{station}
Wants=network-online.target time-sync.target
After=network-online.target time-sync.target

[Service]
Type=notify
NotifyAccess=main
User={user}
Group={user}
# Create the storage root for the service user before the sandbox is set up ('+': as root).
ExecStartPre=+/usr/bin/install -d -o {user} -g {user} -m 0750 {storage}
ExecStart={python} -m rxlog run --config {config}
Environment=PYTHONUNBUFFERED=1
SyslogIdentifier=rxlog
WatchdogSec={watchdog}
Restart=on-failure
RestartSec=10
# rxlog stops cleanly on SIGTERM within 5 s; allow more before systemd kills it.
TimeoutStopSec=20
""" + _HARDENING + """
[Install]
WantedBy=multi-user.target
"""

_REVIEW_SERVICE = """\
[Unit]
Description=rxlog morning review report{station}

[Service]
Type=oneshot
User={user}
Group={user}
# The report of the night that began yesterday (local noon to noon), as far as it got.
ExecStart=/bin/sh -c 'exec {python} -m rxlog review --config {config} --night "$$({tz}date -d yesterday +%%F)"'
SyslogIdentifier=rxlog-review
Nice=10
""" + _HARDENING

_REVIEW_TIMER = """\
[Unit]
Description=rxlog morning review at {review_time} ({zone}){station}

[Timer]
OnCalendar=*-*-* {review_time}:00{zone_suffix}
Persistent=true
Unit=rxlog-review.service

[Install]
WantedBy=timers.target
"""

_UDEV_HEAD = """\
# rxlog: let members of group '{user}' open RTL2832U-based receivers.
# Install as /etc/udev/rules.d/60-rxlog-rtlsdr.rules, then: udevadm control --reload && udevadm trigger
"""
_UDEV_LINE = 'SUBSYSTEM=="usb", ATTRS{{idVendor}}=="{vid}", ATTRS{{idProduct}}=="{pid}", GROUP="{user}", MODE="0660"\n'


# Characters a path may hold to go into the units unquoted: systemd splits command lines
# and ReadWritePaths= on white space and interprets quotes, backslashes and '$'; the
# review unit also hands its command line to /bin/sh.
_SAFE_PATH = re.compile(r"[A-Za-z0-9_./+,:=@%~-]+")


def _unit_path(what: str, p: str) -> str:
    """A path for the unit files, its '%' escaped as systemd's specifier syntax wants (systemd.unit(5))."""
    p = str(p)
    if not _SAFE_PATH.fullmatch(p):
        raise RxlogError(f"{what} {p!r}: systemd unit files cannot carry this path safely (white space, "
                         "quotes, '$' or backslashes); use a path of letters, digits and ./_+,:=@%~-")
    return p.replace("%", "%%")


def render(station: str, user: str, python: str, config: str, storage: str,
           watchdog_s: float, review_time: str, timezone: str | None) -> dict[str, str]:
    """The unit files' texts by file name, from plain values."""
    v = dict(station=f", station {station}" if station else "", user=user,
             python=_unit_path("python", python), config=_unit_path("config", config),
             storage=_unit_path("storage root", storage), tz=f"TZ={timezone} " if timezone else "",
             watchdog=f"{int(round(watchdog_s))}s", review_time=review_time,
             zone=timezone or "system local time", zone_suffix=f" {timezone}" if timezone else "")
    udev = _UDEV_HEAD.format(**v) + "".join(_UDEV_LINE.format(vid=a, pid=b, user=user) for a, b in RTLSDR_USB_IDS)
    return {
        "rxlog.service": _SERVICE.format(**v),
        "rxlog-review.service": _REVIEW_SERVICE.format(**v),
        "rxlog-review.timer": _REVIEW_TIMER.format(**v),
        "60-rxlog-rtlsdr.rules": udev,
    }


def units_for_config(cfg, python: str | None = None) -> dict[str, str]:
    """The units for a loaded station config, running this Python (or ``python``)."""
    svc = cfg["service"]
    return render(station=cfg["station"]["name"], user=svc["user"], python=python or sys.executable,
                  config=str(cfg.path), storage=str(Path(cfg.storage_root).resolve()),
                  watchdog_s=svc["watchdog_s"], review_time=svc["review_time"],
                  timezone=cfg["station"]["timezone"])


def write_units(units: dict[str, str], out_dir: str | Path) -> list[Path]:
    """Write each unit into ``out_dir`` (created if needed); return the paths written."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    paths = []
    for name, text in units.items():
        p = out / name
        tmp = p.with_name(p.name + ".tmp")
        tmp.write_text(text, encoding="utf-8")
        tmp.replace(p)
        paths.append(p)
    return paths


def default_units() -> dict[str, str]:
    """The units shipped in systemd/: the README's install layout, the system's local time zone."""
    svc = SCHEMA["service"]
    return render(station="", user=svc["user"].default, python=DEFAULT_PYTHON, config=DEFAULT_CONFIG,
                  storage=DEFAULT_STORAGE, watchdog_s=svc["watchdog_s"].default,
                  review_time=svc["review_time"].default, timezone=None)
