"""The labelling server: serves one night's report folder and saves labels to the event store.

Built on the standard library's ``http.server.ThreadingHTTPServer``: the page (written
beforehand by the report) needs four routes and a few requests a minute, so a framework
would add a dependency and no safety. The requests are answered in ``handler.py``, the
connections held in ``connections.py``, the night's labels kept in ``labels.py``.
Safety rules:

- Binds 127.0.0.1 unless told otherwise; any other address needs ``allow_remote=True``
  *and* an access token of at least 16 characters, which every request must carry
  (``?key=`` once, then an HttpOnly cookie).
- On loopback the Host header must name the loopback address and port, so a page on
  another site cannot reach the server through DNS rebinding.
- Static files come only from the report folder: no ``..``, no hidden files, no
  symlinks leading out, only the file types the report writes.
- A label POST must carry this server session's token (put into the served page) in
  the ``X-Rxlog-Token`` header, be JSON, and come from the page's own origin when the
  browser says where it comes from. A cross-site form or script cannot set that header
  without a CORS preflight, which this server never grants. Any body that does not parse
  (malformed, too deeply nested, numbers too long) gets the same 400 answer.
- Slow or idle clients cannot hold the server: a connection waits in a lobby, holding no
  thread, until its first bytes arrive (or is closed after ``request_timeout_s``); the
  request line, headers and body must then all arrive within ``request_timeout_s``
  (408 otherwise); at most ``max_handlers`` requests are handled at once, and one that
  finds them all busy for ``slot_wait_s`` gets 503. Each connection carries one request
  (``Connection: close``), so no kept-alive connection sits on a thread either.
"""

from __future__ import annotations

import ipaddress
import secrets
import socket
import threading
from http.server import ThreadingHTTPServer

from rxlog.errors import RxlogError
from rxlog.review.connections import (
    MAX_HANDLERS,
    MAX_WAITING,
    REQUEST_TIMEOUT_S,
    SLOT_WAIT_S,
    WRITE_TIMEOUT_S,
    Lobby,
)
from rxlog.review.handler import ReviewHandler
from rxlog.review.labels import NightLabels
from rxlog.review.night import Night, report_dir
from rxlog.store import EventStore

MIN_ACCESS_TOKEN = 16


def is_loopback(host: str) -> bool:
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def check_bind(host: str, allow_remote: bool = False, access_token: str | None = None) -> None:
    """Refuse (RxlogError) a non-loopback address without --allow-remote and a long enough access token."""
    if is_loopback(host):
        return
    if not allow_remote:
        raise RxlogError(f"refusing to serve on {host}: only loopback (127.0.0.1) is allowed unless "
                         f"you pass --allow-remote together with --access-token")
    if not access_token or len(access_token) < MIN_ACCESS_TOKEN:
        raise RxlogError(f"serving on {host} needs --access-token of at least {MIN_ACCESS_TOKEN} "
                         f"characters; every visitor must present it")


class ReviewServer(ThreadingHTTPServer):
    """Serves ``report_dir(cfg, night)``; ``url`` is where to point a browser."""

    daemon_threads = True
    request_timeout_s = REQUEST_TIMEOUT_S
    max_handlers = MAX_HANDLERS
    slot_wait_s = SLOT_WAIT_S
    max_waiting = MAX_WAITING
    write_timeout_s = WRITE_TIMEOUT_S

    def __init__(self, cfg, night: Night, host: str = "127.0.0.1", port: int = 0,
                 allow_remote: bool = False, access_token: str | None = None):
        check_bind(host, allow_remote, access_token)
        self.cfg, self.night = cfg, night
        self.root = report_dir(cfg, night).resolve()
        if not (self.root / "index.html").is_file():
            raise RxlogError(f"no report for the night of {night.name} in {self.root}; run rxlog review first")
        self.station = cfg["station"]["name"]
        self.loopback = is_loopback(host)
        self.access_token = access_token or None
        self.csrf_token = secrets.token_urlsafe(32)
        self.labels = NightLabels(self.station, night.t0, night.t1)
        store = self.open_store()
        try:
            self.labels.all(store)       # warm: the first page load then answers at once
        finally:
            store.close()
        family_v6 = ":" in host
        if family_v6:
            self.address_family = socket.AF_INET6
        super().__init__((host, port), ReviewHandler)
        self.port = self.server_address[1]
        shown = f"[{host}]" if family_v6 else ("127.0.0.1" if host == "localhost" else host)
        self.url = f"http://{shown}:{self.port}/"
        self.allowed_hosts = {f"{h}:{self.port}" for h in ("127.0.0.1", "localhost", "[::1]", shown)}
        self.lobby = Lobby(self)

    def process_request(self, request, client_address):
        # Not a thread per connection: the lobby hands it one once its request arrives.
        self.lobby.admit(request, client_address)

    def server_close(self):
        super().server_close()
        lobby = getattr(self, "lobby", None)
        if lobby is not None:
            lobby.close()

    def start_background(self) -> threading.Thread:
        """Serve on a daemon thread (tests, embedding); stop with ``shutdown()``."""
        t = threading.Thread(target=self.serve_forever, name="rxlog-review", daemon=True)
        t.start()
        return t

    def open_store(self) -> EventStore:
        return EventStore(self.cfg.store_path)



def serve_review(cfg, night: Night, host: str = "127.0.0.1", port: int = 8765, allow_remote: bool = False,
                 access_token: str | None = None, ready=None) -> None:
    """Serve until interrupted; ``ready(server)`` is called once it listens."""
    try:
        srv = ReviewServer(cfg, night, host=host, port=port, allow_remote=allow_remote, access_token=access_token)
    except OSError as e:
        raise RxlogError(f"cannot listen on {host}:{port} ({e.strerror or e}); try another --port") from None
    with srv:
        if ready is not None:
            ready(srv)
        try:
            srv.serve_forever()
        except KeyboardInterrupt:
            pass
