"""Tell systemd how the logger is doing: the sd_notify datagram protocol.

A service started with ``Type=notify`` finds the address of systemd's notification
socket in ``$NOTIFY_SOCKET`` and sends it newline-separated ``KEY=VALUE`` assignments,
one datagram per message (systemd's sd_notify(3) and its "notify socket" protocol
description in systemd.exec(5) / sd_notify(3)):

- ``READY=1``      start-up finished (systemd considers the unit started);
- ``STATUS=...``   one line shown by ``systemctl status``;
- ``WATCHDOG=1``   keep-alive; with ``WatchdogSec=`` set, systemd exports
                   ``$WATCHDOG_USEC`` (and ``$WATCHDOG_PID``) and restarts the service
                   when pings stop for that long;
- ``STOPPING=1``   a clean stop has begun.

An address starting with ``@`` is in Linux's abstract socket namespace: the ``@`` stands
for a leading NUL byte. Without ``$NOTIFY_SOCKET`` (run by hand, or under another
supervisor) every call is a harmless no-op.
"""

from __future__ import annotations

import os
import socket


def _address(path: str) -> str | bytes:
    """``$NOTIFY_SOCKET`` text -> an AF_UNIX address ('@name' is abstract: a leading NUL)."""
    if path.startswith("@"):
        return b"\0" + path[1:].encode()
    return path


class Notifier:
    """A connection-less sender to systemd's notification socket (no-op without one).

    ``env`` defaults to ``os.environ``; tests pass their own mapping.
    """

    def __init__(self, env: dict | None = None):
        env = os.environ if env is None else env
        path = env.get("NOTIFY_SOCKET", "")
        # Only unix-socket addresses ('/path' or '@abstract'); other kinds (e.g. vsock) are ignored.
        self.address = _address(path) if path[:1] in ("/", "@") else None
        self.watchdog_s = _watchdog_interval(env)
        self._sock: socket.socket | None = None

    @property
    def enabled(self) -> bool:
        return self.address is not None

    def send(self, *assignments: str) -> bool:
        """Send ``KEY=VALUE`` lines as one datagram; True if sent. Never raises for socket trouble."""
        if self.address is None:
            return False
        msg = "\n".join(a.replace("\n", " ") for a in assignments).encode("utf-8")
        try:
            if self._sock is None:
                self._sock = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM | socket.SOCK_CLOEXEC)
            self._sock.sendto(msg, self.address)
            return True
        except OSError:
            # systemd gone or the socket unreachable: the logger must keep logging regardless.
            return False

    def ready(self, status: str = "") -> bool:
        return self.send("READY=1", *([f"STATUS={status}"] if status else []))

    def status(self, text: str) -> bool:
        return self.send(f"STATUS={text}")

    def watchdog(self) -> bool:
        return self.send("WATCHDOG=1")

    def stopping(self, status: str = "") -> bool:
        return self.send("STOPPING=1", *([f"STATUS={status}"] if status else []))

    def close(self):
        if self._sock is not None:
            self._sock.close()
            self._sock = None


def _watchdog_interval(env) -> float | None:
    """Seconds between keep-alive pings: half of ``$WATCHDOG_USEC`` (sd_watchdog_enabled(3)
    recommends pinging at half the timeout), or None when no watchdog is armed for this process."""
    usec = env.get("WATCHDOG_USEC", "")
    pid = env.get("WATCHDOG_PID", "")
    if not usec.isdigit() or int(usec) == 0:
        return None
    if pid and (not pid.isdigit() or int(pid) != os.getpid()):
        return None
    return int(usec) / 2e6
