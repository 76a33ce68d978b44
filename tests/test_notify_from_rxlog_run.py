"""`rxlog run` under a notification socket the test listens on, as systemd's
(Type=notify, WatchdogSec=): READY=1 once it is up, WATCHDOG=1 at half the watchdog
interval, STATUS= lines, and STOPPING=1 on SIGTERM (systemd's sd_notify(3))."""

import os
import signal
import socket
import time

from service_helpers import Run, write_config


def test_ready_watchdog_status_stopping(tmp_path):
    name = f"rxlog-notify-test-{os.getpid()}"
    sock = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM)
    sock.bind(b"\0" + name.encode())           # abstract namespace: '@name' in $NOTIFY_SOCKET
    sock.settimeout(0.2)
    path = write_config(tmp_path)
    run = Run(path, env={"NOTIFY_SOCKET": "@" + name, "WATCHDOG_USEC": "1000000"})   # WatchdogSec=1s
    got = []                                    # (receive time, assignments)

    def collect(until):
        while time.monotonic() < until and run.proc.poll() is None:
            try:
                got.append((time.monotonic(), sock.recv(4096).decode().split("\n")))
            except socket.timeout:
                continue

    def collect_rest():
        while True:
            try:
                got.append((time.monotonic(), sock.recv(4096).decode().split("\n")))
            except (socket.timeout, BlockingIOError):
                return

    try:
        run.wait_for("segment ", timeout=30)
        collect(time.monotonic() + 3.0)
        run.signal(signal.SIGTERM)
        t_sigterm = time.monotonic()
        collect(time.monotonic() + 5.0)
        assert run.wait(10) == 0, run.stderr
        collect_rest()
    finally:
        run.kill()
        sock.close()

    keys = [a.split("=", 1)[0] + ("=1" if a.endswith("=1") else "") for _, m in got for a in m]
    assert keys.count("READY=1") == 1
    ready = keys.index("READY=1")
    stopping = keys.index("STOPPING=1")
    assert ready < stopping and "WATCHDOG=1" in keys[ready:stopping]
    assert "WATCHDOG=1" not in keys[stopping:], "pings after STOPPING=1"
    t_stopping = next(t for t, m in got if "STOPPING=1" in m)
    assert t_stopping >= t_sigterm
    assert any(a.startswith("STATUS=streaming") for _, m in got for a in m)
    # pings at about half of WatchdogSec while running: at least 3 in the 3 s of streaming
    pings = [t for t, m in got if "WATCHDOG=1" in m]
    assert len(pings) >= 3 and max(b - a for a, b in zip(pings, pings[1:])) < 1.0
