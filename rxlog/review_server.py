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
  without a CORS preflight, which this server never grants.
"""

from __future__ import annotations

import hmac
import ipaddress
import json
import secrets
import threading
import urllib.parse
from http import HTTPStatus
from http.cookies import SimpleCookie
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

from rxlog.errors import RxlogError
from rxlog.report import Night, report_dir
from rxlog.store import LABELS, EventStore

STATIC_TYPES = {".png": "image/png", ".html": "text/html; charset=utf-8", ".txt": "text/plain; charset=utf-8",
                ".json": "application/json", ".svg": "image/svg+xml"}
MAX_BODY = 16 * 1024
MAX_NOTE = 2000
MAX_WHO = 100
MIN_ACCESS_TOKEN = 16
COOKIE = "rxlog_key"


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

    def start_background(self) -> threading.Thread:
        """Serve on a daemon thread (tests, embedding); stop with ``shutdown()``."""
        t = threading.Thread(target=self.serve_forever, name="rxlog-review", daemon=True)
        t.start()
        return t

    def open_store(self) -> EventStore:
        return EventStore(self.cfg.store_path)


class ReviewHandler(BaseHTTPRequestHandler):
    server: ReviewServer
    server_version = "rxlog-review"
    sys_version = ""
    protocol_version = "HTTP/1.1"

    # -- plumbing ---------------------------------------------------------------------
    def log_message(self, fmt, *args):   # quiet: the CLI prints the URL, not every request
        pass

    def _send(self, status: int, body: bytes, ctype: str, extra: dict | None = None):
        self.send_response(status)
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
            self.wfile.write(body)

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
        self._json(HTTPStatus.OK, {"event_id": event_id, "history": _history_rows(hist)})

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
        try:
            body = json.loads(self.rfile.read(length))
        except (ValueError, UnicodeDecodeError):
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
        self._json(HTTPStatus.OK, {"event": {k: ev.get(k) for k in LABEL_FIELDS}, "history": _history_rows(hist)})


def _history_rows(rows: list[dict]) -> list[dict]:
    return [{k: r.get(k) for k in ("label", "note", "who", "created_utc")} for r in rows]


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
