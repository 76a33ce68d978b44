"""The sd_notify sender against a datagram socket the test listens on, as systemd's is.

Protocol per systemd's sd_notify(3): newline-separated KEY=VALUE in one datagram to the
AF_UNIX address in $NOTIFY_SOCKET; a leading '@' names the abstract namespace.
"""

import os
import socket

import pytest

from rxlog.station.notify import Notifier


def _listener(address):
    s = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM)
    s.bind(address)
    s.settimeout(2)
    return s


def test_messages_reach_a_filesystem_socket(tmp_path):
    path = str(tmp_path / "notify.sock")
    sock = _listener(path)
    n = Notifier({"NOTIFY_SOCKET": path})
    assert n.enabled
    assert n.ready("logging station x")
    assert sock.recv(4096).decode().split("\n") == ["READY=1", "STATUS=logging station x"]
    assert n.watchdog()
    assert sock.recv(4096) == b"WATCHDOG=1"
    assert n.status("receiver lost;\nretrying")
    # one line per assignment: a newline inside a value would start a bogus assignment
    assert sock.recv(4096) == b"STATUS=receiver lost; retrying"
    assert n.stopping()
    assert sock.recv(4096) == b"STOPPING=1"
    n.close()
    sock.close()


def test_abstract_namespace_address():
    name = f"rxlog-test-{os.getpid()}"
    sock = _listener(b"\0" + name.encode())
    n = Notifier({"NOTIFY_SOCKET": "@" + name})
    assert n.ready()
    assert sock.recv(4096) == b"READY=1"
    sock.close()


def test_without_socket_everything_is_a_no_op():
    n = Notifier({})
    assert not n.enabled
    assert n.ready() is False and n.watchdog() is False
    assert Notifier({"NOTIFY_SOCKET": "vsock:2:1234"}).enabled is False


def test_unreachable_socket_never_raises(tmp_path):
    n = Notifier({"NOTIFY_SOCKET": str(tmp_path / "gone.sock")})
    assert n.enabled and n.ready() is False


@pytest.mark.parametrize("env, expected", [
    ({"WATCHDOG_USEC": "20000000"}, 10.0),                      # half of WatchdogSec, per sd_watchdog_enabled(3)
    ({"WATCHDOG_USEC": "20000000", "WATCHDOG_PID": str(os.getpid())}, 10.0),
    ({"WATCHDOG_USEC": "20000000", "WATCHDOG_PID": "1"}, None),  # meant for another process
    ({"WATCHDOG_USEC": "0"}, None),
    ({}, None),
])
def test_watchdog_interval(env, expected):
    assert Notifier(env).watchdog_s == expected
