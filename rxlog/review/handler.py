"""The review server's requests: the page (with this session's label token and script
nonce), files of the report folder, the night's events and episodes with their labels,
label histories, and label writes (of an event, or of an episode and so of its bursts).
The rules each request is held to are listed in ``rxlog.review.server``.
"""

from __future__ import annotations

import hmac
import io
import json
import secrets
import time
import urllib.parse
from http import HTTPStatus
from http.cookies import SimpleCookie
from http.server import BaseHTTPRequestHandler
from typing import TYPE_CHECKING

from rxlog.review.connections import WRITE_CHUNK, DeadlineReader
from rxlog.review.labels import EPISODE_LABEL_FIELDS, LABEL_FIELDS, history_rows
from rxlog.store import LABELS, EventStore

if TYPE_CHECKING:   # for annotations only: the server imports this module
    from rxlog.review.server import ReviewServer

STATIC_TYPES = {".png": "image/png", ".html": "text/html; charset=utf-8", ".txt": "text/plain; charset=utf-8",
                ".json": "application/json", ".svg": "image/svg+xml"}
MAX_BODY = 16 * 1024
MAX_NOTE = 2000
MAX_WHO = 100
COOKIE = "rxlog_key"


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
        self.reader = DeadlineReader(self.connection, time.monotonic() + self.server.request_timeout_s)
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
            if "episode" in q:
                return self._episode_history((q.get("episode") or [""])[0])
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
            episodes = srv.labels.all_episodes(store)
        finally:
            store.close()
        rows.sort(key=lambda r: r["peak_utc"])
        episodes.sort(key=lambda r: r["start_utc"])
        self._json(HTTPStatus.OK, {"events": [{k: r.get(k) for k in LABEL_FIELDS} for r in rows],
                                   "episodes": [{k: r.get(k) for k in EPISODE_LABEL_FIELDS} for r in episodes]})

    def _episode_history(self, episode_id: str):
        store = self.server.open_store()
        try:
            if self.server.labels.get_episode(store, episode_id) is None:
                return self._not_this_night(episode_id, "episode")
            hist = store.episode_label_history(episode_id)
        finally:
            store.close()
        self._json(HTTPStatus.OK, {"episode_id": episode_id, "history": history_rows(hist, self.server.night)})

    def _history(self, event_id: str):
        store = self.server.open_store()
        try:
            ev = self._night_event(store, event_id)
            if ev is None:
                return
            hist = store.label_history(event_id)
        finally:
            store.close()
        self._json(HTTPStatus.OK, {"event_id": event_id, "history": history_rows(hist, self.server.night)})

    def _night_event(self, store: EventStore, event_id: str) -> dict | None:
        """The event if it belongs to this station and night; otherwise send 404 and return None."""
        ev = self.server.labels.get(store, event_id)
        if ev is None:
            self._not_this_night(event_id)
        return ev

    def _not_this_night(self, key: str, what: str = "event"):
        self._error(HTTPStatus.NOT_FOUND, f"{what} {key!r} is not one of this night's {what}s "
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
        episode_id = body.get("episode_id")
        if episode_id is not None and "event_id" in body:
            return self._error(HTTPStatus.BAD_REQUEST, "give event_id or episode_id, not both")
        event_id, label = body.get("event_id") if episode_id is None else episode_id, body.get("label")
        note, who = body.get("note") or "", body.get("who") or ""
        if not all(isinstance(x, str) for x in (event_id, label, note, who)):
            return self._error(HTTPStatus.BAD_REQUEST, "event_id (or episode_id), label, note and who must be strings")
        if label not in LABELS:
            return self._error(HTTPStatus.BAD_REQUEST, f"label must be one of {', '.join(LABELS)}")
        if len(note) > MAX_NOTE or len(who) > MAX_WHO:
            return self._error(HTTPStatus.BAD_REQUEST, f"note at most {MAX_NOTE} and name at most {MAX_WHO} characters")
        if episode_id is not None:
            return self._label_episode(episode_id, label, note.strip(), who.strip())
        store = srv.open_store()
        try:
            ev = srv.labels.add_label(store, event_id, label, note.strip(), who.strip())
            if ev is None:
                return self._not_this_night(event_id)
            hist = store.label_history(event_id)
        finally:
            store.close()
        self._json(HTTPStatus.OK, {"event": {k: ev.get(k) for k in LABEL_FIELDS}, "history": history_rows(hist, self.server.night)})

    def _label_episode(self, episode_id: str, label: str, note: str, who: str):
        """Label an episode; answer with its row, its bursts' rows (their labels follow it,
        except those with their own) and its history."""
        store = self.server.open_store()
        try:
            saved = self.server.labels.add_episode_label(store, episode_id, label, note, who)
            if saved is None:
                return self._not_this_night(episode_id, "episode")
            ep, bursts = saved
            hist = store.episode_label_history(episode_id)
        finally:
            store.close()
        self._json(HTTPStatus.OK, {"episode": {k: ep.get(k) for k in EPISODE_LABEL_FIELDS},
                                   "bursts": [{k: b.get(k) for k in LABEL_FIELDS} for b in bursts],
                                   "history": history_rows(hist, self.server.night)})
