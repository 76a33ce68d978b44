"""The labelling server: serves one night's report folder and saves labels to the event store.

Built on the standard library's ``http.server.ThreadingHTTPServer``: the page needs four
routes, a few requests a minute and no templates, so a framework would add a
dependency and no safety. Safety rules:

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

import collections
import hmac
import io
import ipaddress
import json
import secrets
import selectors
import socket
import threading
import time
import urllib.parse
from http import HTTPStatus
from http.cookies import SimpleCookie
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

from rxlog.errors import RxlogError
from rxlog.report import Night, report_dir
from rxlog.store import LABELS, EventStore
from rxlog.timeutil import parse_iso

STATIC_TYPES = {".png": "image/png", ".html": "text/html; charset=utf-8", ".txt": "text/plain; charset=utf-8",
                ".json": "application/json", ".svg": "image/svg+xml"}
MAX_BODY = 16 * 1024
MAX_NOTE = 2000
MAX_WHO = 100
MIN_ACCESS_TOKEN = 16
COOKIE = "rxlog_key"

# Connection limits. A person's browser sends a request within milliseconds of opening a
# connection and a few requests a second at most; these bounds only ever bite on clients
# that stall, trickle or flood.
REQUEST_TIMEOUT_S = 5.0   # first byte, then request line + headers + body, each within this
MAX_HANDLERS = 16         # requests handled at once (one thread each)
SLOT_WAIT_S = 2.0         # a request waits this long for a free handler, then gets 503
MAX_WAITING = 256         # connections that have sent nothing yet; beyond, the oldest is closed
WRITE_TIMEOUT_S = 10.0    # to send one WRITE_CHUNK: a client must read at least ~6.5 kB/s
WRITE_CHUNK = 64 * 1024


def is_loopback(host: str) -> bool:
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


LABEL_FIELDS = ("event_id", "class", "label", "label_note", "label_who", "label_utc")


class NightLabels:
    """The night's events with their current labels, kept between requests.

    Reading the whole night from the store for every request would be wasteful; the rows
    are re-read only when the store changed behind the server's back (a signature of the
    events and labels tables, one cheap query each). A label saved through the server
    changes exactly one event's row (labels are bound to event ids), so only that row is
    read again.
    """

    def __init__(self, station: str, t0: float, t1: float):
        self.station, self.t0, self.t1 = station, t0, t1
        self.lock = threading.Lock()
        self.sig = None
        self.rows: dict[str, dict] = {}

    def _signature(self, store: EventStore) -> tuple:
        labels = store.db.execute("select count(*), coalesce(max(label_id), 0) from labels").fetchone()
        events = store.db.execute("select count(*), max(detected_utc) from events where station = ?",
                                  [self.station]).fetchone()
        return tuple(labels) + tuple(events)

    def _fresh(self, store: EventStore):
        sig = self._signature(store)
        if sig != self.sig:
            self.rows = {r["event_id"]: r for r in store.events(self.t0, self.t1, station=self.station)}
            self.sig = sig

    def all(self, store: EventStore) -> list[dict]:
        with self.lock:
            self._fresh(store)
            return list(self.rows.values())

    def get(self, store: EventStore, event_id: str) -> dict | None:
        with self.lock:
            self._fresh(store)
            return self.rows.get(event_id)

    def add_label(self, store: EventStore, event_id: str, label: str, note: str, who: str) -> dict | None:
        """Save a label and return the event's row as the store now sees it (None: not this night's)."""
        with self.lock:
            self._fresh(store)
            if event_id not in self.rows:
                return None
            store.add_label(event_id, label, note=note, who=who)
            self.rows[event_id] = store.get_event(event_id)
            self.sig = self._signature(store)
            return self.rows[event_id]


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
            import socket
            self.address_family = socket.AF_INET6
        super().__init__((host, port), ReviewHandler)
        self.port = self.server_address[1]
        shown = f"[{host}]" if family_v6 else ("127.0.0.1" if host == "localhost" else host)
        self.url = f"http://{shown}:{self.port}/"
        self.allowed_hosts = {f"{h}:{self.port}" for h in ("127.0.0.1", "localhost", "[::1]", shown)}
        self.lobby = _Lobby(self)

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


BUSY_BODY = json.dumps({"error": "the review server is busy; try again in a moment"}).encode()
BUSY_RESPONSE = (b"HTTP/1.1 503 Service Unavailable\r\nContent-Type: application/json\r\n"
                 b"Content-Length: " + str(len(BUSY_BODY)).encode() + b"\r\nRetry-After: 1\r\n"
                 b"Connection: close\r\n\r\n" + BUSY_BODY)


class _Lobby:
    """Where accepted connections wait, holding no thread, for their first bytes and then
    for one of the server's ``max_handlers`` handler threads.

    One thread watches every waiting socket with a selector. A connection that sends
    nothing within ``request_timeout_s`` is closed, and so is the oldest silent one when
    more than ``max_waiting`` are silent; one whose request has begun to arrive but finds
    every handler busy for ``slot_wait_s`` is answered 503. Connections are served in
    the order their first bytes arrived.
    """

    def __init__(self, server: ReviewServer):
        self.server = server
        self.slots = threading.BoundedSemaphore(server.max_handlers)
        self.sel = selectors.DefaultSelector()
        self.inbox: collections.deque = collections.deque()   # (sock, addr) from the accept loop
        self.silent: dict = {}                                # sock -> (addr, deadline), insertion order
        self.ready: collections.deque = collections.deque()   # (sock, addr, since): waiting for a handler
        self.wake_r, self.wake_w = socket.socketpair()
        self.wake_r.setblocking(False)
        self.wake_w.setblocking(False)
        self.sel.register(self.wake_r, selectors.EVENT_READ)
        self.closed = False
        self.thread = threading.Thread(target=self._run, name="rxlog-review-lobby", daemon=True)
        self.thread.start()

    def admit(self, sock, addr):
        self.inbox.append((sock, addr))
        self._wake()

    def close(self):
        self.closed = True
        self._wake()
        self.thread.join(timeout=5.0)

    def _wake(self):
        try:
            self.wake_w.send(b"\0")
        except OSError:        # buffer full (already woken) or closed
            pass

    def _run(self):
        try:
            while not self.closed:
                self._step()
        finally:
            for sock in list(self.silent) + [r[0] for r in self.ready] + [i[0] for i in self.inbox]:
                self.server.shutdown_request(sock)
            self.sel.close()
            self.wake_r.close()
            self.wake_w.close()

    def _step(self):
        now = time.monotonic()
        due = [now + 1.0]
        if self.silent:
            due.append(next(iter(self.silent.values()))[1])
        if self.ready:
            due.append(self.ready[0][2] + self.server.slot_wait_s)
        for key, _ in self.sel.select(max(0.0, min(due) - now)):
            if key.fileobj is self.wake_r:
                try:
                    while self.wake_r.recv(4096):
                        pass
                except OSError:
                    pass
                continue
            sock = key.fileobj
            self.sel.unregister(sock)
            addr, _ = self.silent.pop(sock)
            self.ready.append((sock, addr, time.monotonic()))
        now = time.monotonic()
        while self.inbox:
            sock, addr = self.inbox.popleft()
            self.silent[sock] = (addr, now + self.server.request_timeout_s)
            self.sel.register(sock, selectors.EVENT_READ)
            if len(self.silent) > self.server.max_waiting:
                self._drop(next(iter(self.silent)))
        while self.silent:
            sock, (_, deadline) = next(iter(self.silent.items()))
            if deadline > now:
                break
            self._drop(sock)
        while self.ready and self.slots.acquire(blocking=False):
            sock, addr, _ = self.ready.popleft()
            threading.Thread(target=self._handle, args=(sock, addr), name="rxlog-review-handler",
                             daemon=True).start()
        while self.ready and self.ready[0][2] + self.server.slot_wait_s <= now:
            self._busy(self.ready.popleft()[0])

    def _handle(self, sock, addr):
        try:
            self.server.process_request_thread(sock, addr)
        finally:
            self.slots.release()
            self._wake()

    def _drop(self, sock):
        self.sel.unregister(sock)
        del self.silent[sock]
        self.server.shutdown_request(sock)

    def _busy(self, sock):
        """Answer 503 without a thread: a short answer fits an empty send buffer at once."""
        try:
            sock.setblocking(False)
            sock.send(BUSY_RESPONSE)
            for _ in range(16):     # read what was sent, so closing sends FIN rather than RST
                if not sock.recv(65536):
                    break
        except OSError:
            pass
        self.server.shutdown_request(sock)


class _DeadlineReader(io.RawIOBase):
    """A socket's reads, each allowed only what is left of one deadline: a client that
    trickles a byte at a time cannot stretch its request past it."""

    def __init__(self, sock, deadline: float):
        self.sock, self.deadline, self.expired = sock, deadline, False

    def readable(self) -> bool:
        return True

    def readinto(self, buf) -> int:
        left = self.deadline - time.monotonic()
        if left <= 0:
            self.expired = True
            raise TimeoutError("request not received in time")
        self.sock.settimeout(left)
        try:
            return self.sock.recv_into(buf)
        except TimeoutError:
            self.expired = True
            raise


class ReviewHandler(BaseHTTPRequestHandler):
    server: ReviewServer
    server_version = "rxlog-review"
    sys_version = ""
    protocol_version = "HTTP/1.1"

    # -- plumbing ---------------------------------------------------------------------
    def log_message(self, fmt, *args):   # quiet: the CLI prints the URL, not every request
        pass

    def setup(self):
        super().setup()
        self.rfile.close()
        self.reader = _DeadlineReader(self.connection, time.monotonic() + self.server.request_timeout_s)
        self.rfile = io.BufferedReader(self.reader)
        # What a response needs even when the request line never arrived.
        self.command, self.requestline, self.request_version = "", "", "HTTP/1.1"
        self.responded = False

    def handle(self):
        """One request per connection; 408 when it did not arrive in time."""
        self.close_connection = True
        try:
            self.handle_one_request()
            if self.reader.expired and not self.responded:
                self._error(HTTPStatus.REQUEST_TIMEOUT, f"request not received within "
                                                        f"{self.server.request_timeout_s:g} s")
        except (ConnectionError, TimeoutError):
            pass               # the client went away or does not read: nothing to tell it

    def send_response(self, code, message=None):
        self.responded = True
        self.connection.settimeout(self.server.write_timeout_s)
        super().send_response(code, message)

    def _send(self, status: int, body: bytes, ctype: str, extra: dict | None = None):
        self.send_response(status)
        self.send_header("Connection", "close")
        self.send_header("Content-Type", ctype)
        self.send_header("Content-Length", str(len(body)))
        self.send_header("X-Content-Type-Options", "nosniff")
        self.send_header("Referrer-Policy", "no-referrer")
        self.send_header("X-Frame-Options", "DENY")
        self.send_header("Cross-Origin-Resource-Policy", "same-origin")
        for k, v in (extra or {}).items():
            self.send_header(k, v)
        self.end_headers()
        if self.command != "HEAD":
            # In pieces, each with its own write timeout: a large image to a slow but
            # reading client is not cut off, one that stops reading is.
            for k in range(0, len(body), WRITE_CHUNK):
                self.wfile.write(body[k:k + WRITE_CHUNK])

    def _json(self, status: int, obj):
        self._send(status, json.dumps(obj).encode(), "application/json", {"Cache-Control": "no-store"})

    def _error(self, status: int, message: str):
        # A refused request may leave a body unread: do not reuse the connection.
        self.close_connection = True
        self._json(status, {"error": message})

    def _gate(self) -> bool:
        """Host and access checks shared by every request; False when a refusal was sent."""
        srv = self.server
        host = (self.headers.get("Host") or "").strip().lower()
        if srv.loopback and host not in srv.allowed_hosts:
            self._error(HTTPStatus.FORBIDDEN, "unexpected Host header")
            return False
        if srv.access_token:
            query = urllib.parse.parse_qs(urllib.parse.urlsplit(self.path).query)
            given = (query.get("key") or [""])[0]
            cookie = SimpleCookie(self.headers.get("Cookie") or "")
            if not given and COOKIE in cookie:
                given = cookie[COOKIE].value
            if not hmac.compare_digest(given.encode(), srv.access_token.encode()):
                self._error(HTTPStatus.UNAUTHORIZED, "access token required (open the URL with ?key=...)")
                return False
        return True

    def _cookie_header(self) -> dict:
        srv = self.server
        if not srv.access_token:
            return {}
        return {"Set-Cookie": f"{COOKIE}={srv.access_token}; HttpOnly; SameSite=Strict; Path=/"}

    # -- GET --------------------------------------------------------------------------
    def do_HEAD(self):
        self.do_GET()

    def do_GET(self):
        if not self._gate():
            return
        parts = urllib.parse.urlsplit(self.path)
        path = parts.path
        if path in ("/", "/index.html"):
            return self._page()
        if path == "/api/events":
            return self._events()
        if path == "/api/history":
            q = urllib.parse.parse_qs(parts.query)
            return self._history((q.get("event") or [""])[0])
        return self._static(path)

    def _page(self):
        srv = self.server
        text = (srv.root / "index.html").read_text(encoding="utf-8")
        nonce = secrets.token_urlsafe(16)
        text = text.replace('<meta name="rxlog-session" content="">',
                            f'<meta name="rxlog-session" content="{srv.csrf_token}">', 1)
        text = text.replace("<script data-rxlog-app>", f'<script data-rxlog-app nonce="{nonce}">', 1)
        csp = (f"default-src 'none'; img-src 'self'; style-src 'unsafe-inline'; script-src 'nonce-{nonce}'; "
               "connect-src 'self'; base-uri 'none'; form-action 'none'; frame-ancestors 'none'")
        extra = {"Content-Security-Policy": csp, "Cache-Control": "no-store", **self._cookie_header()}
        self._send(HTTPStatus.OK, text.encode("utf-8"), STATIC_TYPES[".html"], extra)

    def _static(self, raw_path: str):
        srv = self.server
        rel = urllib.parse.unquote(raw_path)
        pieces = [p for p in rel.split("/") if p]
        if "\x00" in rel or "\\" in rel or any(p in (".", "..") or p.startswith(".") for p in pieces):
            return self._error(HTTPStatus.FORBIDDEN, "path outside the report folder")
        target = srv.root.joinpath(*pieces) if pieces else srv.root
        try:
            real = target.resolve(strict=True)
        except (OSError, RuntimeError):
            return self._error(HTTPStatus.NOT_FOUND, "no such file in this report")
        if not real.is_relative_to(srv.root):
            return self._error(HTTPStatus.FORBIDDEN, "path outside the report folder")
        ctype = STATIC_TYPES.get(real.suffix.lower())
        if not real.is_file() or ctype is None:
            return self._error(HTTPStatus.NOT_FOUND, "no such file in this report")
        self._send(HTTPStatus.OK, real.read_bytes(), ctype, {"Cache-Control": "no-cache"})

    def _events(self):
        srv = self.server
        store = srv.open_store()
        try:
            rows = srv.labels.all(store)
        finally:
            store.close()
        rows.sort(key=lambda r: r["peak_utc"])
        self._json(HTTPStatus.OK, {"events": [{k: r.get(k) for k in LABEL_FIELDS} for r in rows]})

    def _history(self, event_id: str):
        store = self.server.open_store()
        try:
            ev = self._night_event(store, event_id)
            if ev is None:
                return
            hist = store.label_history(event_id)
        finally:
            store.close()
        self._json(HTTPStatus.OK, {"event_id": event_id, "history": _history_rows(hist, self.server.night)})

    def _night_event(self, store: EventStore, event_id: str) -> dict | None:
        """The event if it belongs to this station and night; otherwise send 404 and return None."""
        ev = self.server.labels.get(store, event_id)
        if ev is None:
            self._not_this_night(event_id)
        return ev

    def _not_this_night(self, event_id: str):
        self._error(HTTPStatus.NOT_FOUND, f"event {event_id!r} is not one of this night's events "
                                          "(re-run rxlog review if detection was re-run)")

    # -- POST -------------------------------------------------------------------------
    def do_POST(self):
        if not self._gate():
            return
        srv = self.server
        if urllib.parse.urlsplit(self.path).path != "/api/label":
            return self._error(HTTPStatus.NOT_FOUND, "no such endpoint")
        origin = self.headers.get("Origin")
        if origin is not None:
            o = urllib.parse.urlsplit(origin)
            if o.scheme != "http" or (o.netloc or "").lower() != (self.headers.get("Host") or "").lower():
                return self._error(HTTPStatus.FORBIDDEN, "cross-site label request refused")
        given = self.headers.get("X-Rxlog-Token") or ""
        if not hmac.compare_digest(given.encode(), srv.csrf_token.encode()):
            return self._error(HTTPStatus.FORBIDDEN, "missing or wrong page token; reload the page")
        if (self.headers.get("Content-Type") or "").split(";")[0].strip().lower() != "application/json":
            return self._error(HTTPStatus.UNSUPPORTED_MEDIA_TYPE, "expected application/json")
        try:
            length = int(self.headers.get("Content-Length") or "0")
        except ValueError:
            length = -1
        if not 0 < length <= MAX_BODY:
            return self._error(HTTPStatus.BAD_REQUEST, f"expected a JSON body of at most {MAX_BODY} bytes")
        raw = self.rfile.read(length)      # TimeoutError past the deadline: 408 from handle()
        try:
            body = json.loads(raw)
        except (ValueError, RecursionError):   # malformed, undecodable, nested too deep, digits too many
            return self._error(HTTPStatus.BAD_REQUEST, "body is not valid JSON")
        if not isinstance(body, dict):
            return self._error(HTTPStatus.BAD_REQUEST, "expected a JSON object")
        event_id, label = body.get("event_id"), body.get("label")
        note, who = body.get("note") or "", body.get("who") or ""
        if not all(isinstance(x, str) for x in (event_id, label, note, who)):
            return self._error(HTTPStatus.BAD_REQUEST, "event_id, label, note and who must be strings")
        if label not in LABELS:
            return self._error(HTTPStatus.BAD_REQUEST, f"label must be one of {', '.join(LABELS)}")
        if len(note) > MAX_NOTE or len(who) > MAX_WHO:
            return self._error(HTTPStatus.BAD_REQUEST, f"note at most {MAX_NOTE} and name at most {MAX_WHO} characters")
        store = srv.open_store()
        try:
            ev = srv.labels.add_label(store, event_id, label, note.strip(), who.strip())
            if ev is None:
                return self._not_this_night(event_id)
            hist = store.label_history(event_id)
        finally:
            store.close()
        self._json(HTTPStatus.OK, {"event": {k: ev.get(k) for k in LABEL_FIELDS}, "history": _history_rows(hist, self.server.night)})


def _history_rows(rows: list[dict], night: Night) -> list[dict]:
    """A label history for the page; ``created_shown`` is the time in the page's own style
    (local, with its zone), which the page's status line uses too."""
    return [{**{k: r.get(k) for k in ("label", "note", "who", "created_utc")},
             "created_shown": night.stamp(parse_iso(r["created_utc"]))} for r in rows]


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
