"""The labelling server: loopback by default, files only from the report folder, label
writes only with the page's token from the page's own origin, labels saved at once."""

import http.client
import json
import re
import select
import socket
import threading
import time

import pytest
from test_report_night import make_night

from rxlog.errors import RxlogError
from rxlog.review.night import report_dir
from rxlog.review.report import build_report
from rxlog.review.server import ReviewServer
from rxlog.store import EventStore


@pytest.fixture(scope="module")
def night(tmp_path_factory):
    root = tmp_path_factory.mktemp("served")
    cfg, night, events = make_night(root, hours=0.5, n_bursts=3)
    build_report(cfg, night)
    return cfg, night, events


@pytest.fixture
def server(night):
    cfg, n, events = night
    srv = ReviewServer(cfg, n, port=0)
    srv.start_background()
    yield srv
    srv.shutdown()
    srv.server_close()


def request(srv, method, path, body=None, headers=None, host=None):
    """A raw request: http.client sends the path exactly as given (no ../ folding)."""
    conn = http.client.HTTPConnection("127.0.0.1", srv.port, timeout=10)
    h = {"Host": host or f"127.0.0.1:{srv.port}"}
    h.update(headers or {})
    data = None if body is None else (body if isinstance(body, bytes) else json.dumps(body).encode())
    conn.putrequest(method, path, skip_host=True, skip_accept_encoding=True)
    for k, v in h.items():
        conn.putheader(k, v)
    if data is not None:
        conn.putheader("Content-Length", str(len(data)))
    conn.endheaders(data)
    r = conn.getresponse()
    out = r.status, dict(r.getheaders()), r.read()
    conn.close()
    return out


def page_token(srv) -> str:
    status, headers, body = request(srv, "GET", "/")
    assert status == 200
    m = re.search(rb'<meta name="rxlog-session" content="([^"]+)">', body)
    assert m, "served page carries no session token"
    return m.group(1).decode()


def labels_in_store(cfg):
    store = EventStore(cfg.store_path)
    try:
        return [dict(r) for r in store.db.query("select * from labels order by label_id")]
    finally:
        store.close()


def post_label(srv, token, event_id, label="jovian_l", origin=True, **extra):
    headers = {"Content-Type": "application/json"}
    if token is not None:
        headers["X-Rxlog-Token"] = token
    if origin:
        headers["Origin"] = f"http://127.0.0.1:{srv.port}"
    headers.update(extra.pop("headers", {}))
    return request(srv, "POST", "/api/label", {"event_id": event_id, "label": label, "note": "n", "who": "ana"},
                   headers=headers, **extra)


def test_binds_loopback_by_default(night):
    cfg, n, _ = night
    srv = ReviewServer(cfg, n, port=0)
    try:
        assert srv.server_address[0] == "127.0.0.1"
        assert srv.url.startswith("http://127.0.0.1:")
    finally:
        srv.server_close()


def test_other_addresses_need_the_flag_and_a_token(night):
    cfg, n, _ = night
    with pytest.raises(RxlogError, match="allow-remote"):
        ReviewServer(cfg, n, host="0.0.0.0", port=0)
    with pytest.raises(RxlogError, match="access-token"):
        ReviewServer(cfg, n, host="0.0.0.0", port=0, allow_remote=True)
    with pytest.raises(RxlogError, match="access-token"):
        ReviewServer(cfg, n, host="0.0.0.0", port=0, allow_remote=True, access_token="short")


def test_review_command_refuses_a_remote_bind_before_building(night):
    from click.testing import CliRunner

    from rxlog.cli import main

    cfg, n, _ = night
    index = report_dir(cfg, n) / "index.html"
    before = index.stat().st_mtime_ns
    r = CliRunner().invoke(main, ["review", "--config", str(cfg.path), "--night", n.name, "--serve",
                                  "--host", "0.0.0.0"])
    assert r.exit_code == 2 and "allow-remote" in r.output
    assert index.stat().st_mtime_ns == before


def test_remote_server_refuses_visitors_without_the_access_token(night):
    cfg, n, _ = night
    key = "k" * 24
    srv = ReviewServer(cfg, n, host="0.0.0.0", port=0, allow_remote=True, access_token=key)
    srv.start_background()
    try:
        assert request(srv, "GET", "/", host="station.example:1")[0] == 401
        assert request(srv, "GET", "/overview.png", host="station.example:1")[0] == 401
        status, headers, _ = request(srv, "GET", f"/?key={key}", host="station.example:1")
        assert status == 200 and "HttpOnly" in headers["Set-Cookie"]
        cookie = headers["Set-Cookie"].split(";")[0]
        assert request(srv, "GET", "/overview.png", headers={"Cookie": cookie}, host="station.example:1")[0] == 200
    finally:
        srv.shutdown()
        srv.server_close()


@pytest.mark.parametrize("path", ["/../events.sqlite", "/events/../../events.sqlite", "/%2e%2e/events.sqlite",
                                  "/..%2fevents.sqlite", "/events/%2e%2e/%2e%2e/station.toml", "/.hidden",
                                  "/..\\events.sqlite"])
def test_paths_outside_the_report_folder_are_refused(server, path):
    status, _, body = request(server, "GET", path)
    assert status in (403, 404)
    assert b"SQLite" not in body and b"[station]" not in body


def test_symlink_out_of_the_folder_is_refused(server, night):
    cfg, n, _ = night
    link = report_dir(cfg, n) / "store.png"
    link.symlink_to(cfg.store_path)
    try:
        assert request(server, "GET", "/store.png")[0] == 403
    finally:
        link.unlink()


def test_report_files_are_served(server):
    status, headers, body = request(server, "GET", "/overview.png")
    assert status == 200 and headers["Content-Type"] == "image/png" and body[:4] == b"\x89PNG"
    assert request(server, "GET", "/summary.txt")[0] == 200
    assert request(server, "GET", "/nothing.png")[0] == 404


def test_foreign_host_header_is_refused(server):
    # A page on another site reaching the server through DNS rebinding sends its own Host.
    assert request(server, "GET", "/", host=f"attacker.example:{server.port}")[0] == 403


def test_label_without_the_page_token_is_refused(server, night):
    cfg, n, events = night
    before = labels_in_store(cfg)
    status, _, body = post_label(server, None, events[0]["event_id"])
    assert status == 403 and b"token" in body
    status, _, _ = post_label(server, "not-the-token", events[0]["event_id"])
    assert status == 403
    assert labels_in_store(cfg) == before


def test_label_from_another_origin_is_refused(server, night):
    cfg, n, events = night
    before = labels_in_store(cfg)
    token = page_token(server)
    status, _, _ = post_label(server, token, events[0]["event_id"], origin=False,
                              headers={"Origin": "http://attacker.example"})
    assert status == 403
    status, _, _ = post_label(server, token, events[0]["event_id"], origin=False, headers={"Origin": "null"})
    assert status == 403
    assert labels_in_store(cfg) == before


def test_label_as_a_form_post_is_refused(server, night):
    # A cross-site HTML form can only send form encodings, never application/json.
    cfg, n, events = night
    before = labels_in_store(cfg)
    token = page_token(server)
    status, _, _ = request(server, "POST", "/api/label", b"event_id=x&label=rfi",
                           headers={"Content-Type": "application/x-www-form-urlencoded", "X-Rxlog-Token": token})
    assert status == 415
    assert labels_in_store(cfg) == before


def test_label_with_the_token_is_saved_at_once_with_history(server, night):
    cfg, n, events = night
    token = page_token(server)
    eid = events[1]["event_id"]
    status, _, body = post_label(server, token, eid, label="rfi")
    assert status == 200, body
    status, _, body = post_label(server, token, eid, label="unsure")
    assert status == 200, body
    answer = json.loads(body)
    assert answer["event"]["label"] == "unsure"
    assert [h["label"] for h in answer["history"]][-2:] == ["rfi", "unsure"]
    store = EventStore(cfg.store_path)
    try:
        assert store.get_event(eid)["label"] == "unsure"
        assert store.get_event(eid)["label_who"] == "ana"
    finally:
        store.close()
    status, _, body = request(server, "GET", f"/api/history?event={eid}")
    assert status == 200 and [h["label"] for h in json.loads(body)["history"]][-2:] == ["rfi", "unsure"]
    status, _, body = request(server, "GET", "/api/events")
    rows = {r["event_id"]: r for r in json.loads(body)["events"]}
    assert rows[eid]["label"] == "unsure"


def _listed(srv) -> dict:
    status, _, body = request(srv, "GET", "/api/events")
    assert status == 200
    return {r["event_id"]: r for r in json.loads(body)["events"]}


def test_event_list_follows_labels_saved_elsewhere(server, night):
    # A label from the shell (rxlog label) while the page is open shows on the next read.
    cfg, n, events = night
    eid = events[2]["event_id"]
    assert _listed(server)[eid]["label"] != "solar_ii"
    store = EventStore(cfg.store_path)
    store.add_label(eid, "solar_ii", who="cli")
    store.close()
    assert (_listed(server)[eid]["label"], _listed(server)[eid]["label_who"]) == ("solar_ii", "cli")


def test_event_list_after_page_labels_is_what_the_store_says(server, night):
    cfg, n, events = night
    token = page_token(server)
    for e, lab in zip(events, ["noise", "jovian_l", "unsure"]):
        assert post_label(server, token, e["event_id"], label=lab)[0] == 200
    store = EventStore(cfg.store_path)
    try:
        expected = {r["event_id"]: (r["label"], r["label_note"], r["label_who"], r["label_utc"])
                    for r in store.events(n.t0, n.t1)}
    finally:
        store.close()
    listed = _listed(server)
    assert {k: (r["label"], r["label_note"], r["label_who"], r["label_utc"]) for k, r in listed.items()} == expected


def test_token_is_per_server_session(night):
    cfg, n, events = night
    a, b = ReviewServer(cfg, n, port=0), ReviewServer(cfg, n, port=0)
    try:
        assert a.csrf_token != b.csrf_token and len(a.csrf_token) >= 32
    finally:
        a.server_close()
        b.server_close()


@pytest.mark.parametrize("body, status", [
    ({"event_id": "nope", "label": "rfi"}, 404),
    ({"label": "rfi"}, 400),
    ({"event_id": "x", "label": "jupiter"}, 400),
    ({"event_id": "x", "label": "rfi", "note": "x" * 3000}, 400),
])
def test_bad_label_requests_are_refused_without_touching_the_store(server, night, body, status):
    cfg, n, events = night
    before = labels_in_store(cfg)
    token = page_token(server)
    if body.get("event_id") == "x":
        body["event_id"] = events[0]["event_id"]
    got, _, _ = request(server, "POST", "/api/label", body, headers={
        "Content-Type": "application/json", "X-Rxlog-Token": token, "Origin": f"http://127.0.0.1:{server.port}"})
    assert got == status
    assert labels_in_store(cfg) == before


def test_served_page_has_a_strict_content_security_policy(server):
    status, headers, body = request(server, "GET", "/")
    csp = headers["Content-Security-Policy"]
    nonce = re.search(r"'nonce-([^']+)'", csp).group(1)
    assert f'nonce="{nonce}"'.encode() in body
    assert "default-src 'none'" in csp and "connect-src 'self'" in csp


# -- bodies that do not parse ------------------------------------------------------------

def _post_raw(srv, token, data: bytes):
    return request(srv, "POST", "/api/label", data, headers={
        "Content-Type": "application/json", "X-Rxlog-Token": token, "Origin": f"http://127.0.0.1:{srv.port}"})


@pytest.mark.parametrize("data", [
    b"[" * 16000,                               # nested deeper than the decoder's recursion limit
    b'{"a":' * 2500 + b"1" + b"}" * 2500,      # the same with objects, and well formed
    b'{"event_id": ' + b"9" * 5000 + b"}",    # an integer longer than Python converts
    b'{"event_id": "\xff\xfe"}',                 # not UTF-8
])
def test_every_unparsable_body_gets_the_same_400_as_malformed_json(server, night, data):
    cfg, n, events = night
    before = labels_in_store(cfg)
    token = page_token(server)
    expected = _post_raw(server, token, b"{not json")
    assert expected[0] == 400
    status, headers, body = _post_raw(server, token, data)
    assert (status, headers["Content-Type"], body) == (400, "application/json", expected[2])
    assert labels_in_store(cfg) == before
    assert request(server, "GET", "/api/events")[0] == 200       # and the server still answers


# -- slow, idle and too many clients -----------------------------------------------------

class QuickServer(ReviewServer):
    """The review server with limits small enough for a test to reach them quickly."""
    request_timeout_s = 1.0
    max_handlers = 3
    slot_wait_s = 0.3


@pytest.fixture
def quick(night):
    cfg, n, _ = night
    srv = QuickServer(cfg, n, port=0)
    srv.start_background()
    yield srv
    srv.shutdown()
    srv.server_close()


def _open(srv, first: bytes = b""):
    s = socket.create_connection(("127.0.0.1", srv.port), timeout=10)
    if first:
        s.sendall(first)
    return s


def _until_closed(s, limit_s: float) -> tuple[bytes, float]:
    """Everything the server sends until it closes the connection, and how long that took."""
    t0, got = time.monotonic(), b""
    s.settimeout(limit_s)
    try:
        while chunk := s.recv(65536):
            got += chunk
    except (TimeoutError, ConnectionResetError):
        pass
    return got, time.monotonic() - t0


def _handler_threads() -> int:
    return sum(1 for t in threading.enumerate() if t.name == "rxlog-review-handler" and t.is_alive())


def test_stalled_request_is_dropped_after_the_timeout_while_others_are_answered(quick):
    partial = f"GET / HTTP/1.1\r\nHost: 127.0.0.1:{quick.port}\r\n".encode()   # headers never end
    stalled = _open(quick, partial)
    try:
        t = time.monotonic()
        assert request(quick, "GET", "/api/events")[0] == 200
        assert time.monotonic() - t < 0.8 * quick.request_timeout_s
        got, waited = _until_closed(stalled, 5.0 + quick.request_timeout_s)
    finally:
        stalled.close()
    assert got.startswith(b"HTTP/1.1 408"), got[:60]
    assert waited < quick.request_timeout_s + 2.0


def test_trickling_client_is_dropped_at_the_deadline_not_at_each_read(quick):
    # One byte every 0.2 s never lets a single read wait a second, yet the whole
    # request must arrive within request_timeout_s.
    s = _open(quick)
    text = f"GET /api/events HTTP/1.1\r\nHost: 127.0.0.1:{quick.port}\r\nX-Slow: ".encode() + b"a" * 100
    t0, closed_after = time.monotonic(), None
    try:
        for k in range(len(text)):
            if time.monotonic() - t0 > 4 * quick.request_timeout_s:
                break
            try:
                s.sendall(text[k:k + 1])
            except OSError:
                closed_after = time.monotonic() - t0
                break
            ready, _, _ = select.select([s], [], [], 0.2)
            if ready:
                closed_after = time.monotonic() - t0
                break
    finally:
        s.close()
    assert closed_after is not None, "a trickling client kept its connection"
    assert closed_after < quick.request_timeout_s + 1.0


def test_idle_connections_hold_no_thread_and_do_not_stop_a_request(quick):
    idle = [_open(quick) for _ in range(40)]     # far more than max_handlers, and silent
    try:
        time.sleep(0.2)
        assert _handler_threads() <= quick.max_handlers
        t = time.monotonic()
        status, _, body = request(quick, "GET", "/api/events")
        assert status == 200 and json.loads(body)["events"]
        assert time.monotonic() - t < 0.8 * quick.request_timeout_s
        # The silent ones are closed once their time is up.
        got, waited = _until_closed(idle[0], 5.0 + quick.request_timeout_s)
        assert got == b"" and waited < quick.request_timeout_s + 2.0
    finally:
        for s in idle:
            s.close()


def test_handler_threads_are_bounded_and_the_next_request_gets_503_then_200(quick):
    partial = f"GET / HTTP/1.1\r\nHost: 127.0.0.1:{quick.port}\r\n".encode()
    stalled = [_open(quick, partial) for _ in range(quick.max_handlers)]
    try:
        time.sleep(0.2)
        assert _handler_threads() == quick.max_handlers
        t = time.monotonic()
        status, headers, body = request(quick, "GET", "/api/events")
        waited = time.monotonic() - t
        assert status == 503 and "busy" in json.loads(body)["error"] and headers["Retry-After"] == "1"
        assert quick.slot_wait_s - 0.05 <= waited < quick.slot_wait_s + 0.5
        assert _handler_threads() <= quick.max_handlers
        for s in stalled:            # the stalled ones are dropped at their deadline ...
            _until_closed(s, 5.0 + quick.request_timeout_s)
        assert request(quick, "GET", "/api/events")[0] == 200    # ... and requests are served again
    finally:
        for s in stalled:
            s.close()


def test_client_that_stops_reading_an_answer_is_cut_off(quick, night):
    cfg, n, _ = night
    big = report_dir(cfg, n) / "big.png"
    big.write_bytes(b"\x89PNG" + bytes(32 * 1024 * 1024))     # more than any socket buffer holds
    quick.write_timeout_s = 0.5
    s = socket.socket()
    s.setsockopt(socket.SOL_SOCKET, socket.SO_RCVBUF, 4096)
    try:
        s.connect(("127.0.0.1", quick.port))
        s.sendall(f"GET /big.png HTTP/1.1\r\nHost: 127.0.0.1:{quick.port}\r\n\r\n".encode())
        time.sleep(0.3)
        assert _handler_threads() == 1                     # sending, blocked on the full buffer
        deadline = time.monotonic() + 5.0
        while _handler_threads() and time.monotonic() < deadline:
            time.sleep(0.1)
        assert _handler_threads() == 0, "a client that does not read kept its handler"
    finally:
        s.close()
        big.unlink()
