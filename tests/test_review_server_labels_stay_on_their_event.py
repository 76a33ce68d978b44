"""A label saved from the review page lands on the event it was given to, also when that
event lies inside a larger event's time-frequency box, and the page's rows agree with
the store."""

import json

from test_report_night import _event, make_night
from test_review_server import page_token, post_label, request

from rxlog.review.report import build_report
from rxlog.review.server import ReviewServer
from rxlog.store import EventStore
from rxlog.timeutil import parse_iso


def test_page_label_on_a_nested_event_stays_there(tmp_path):
    cfg, night, events = make_night(tmp_path, hours=0.5, n_bursts=3)
    t = parse_iso(events[0]["peak_utc"])
    big = _event(t + 10, 60.0, 16.5, 23.5, "solar_iv")
    small = _event(t + 10, 4.0, 19.0, 20.0, "solar_iii")
    store = EventStore(cfg.store_path)
    store.upsert_events([small, big])
    store.close()
    build_report(cfg, night)
    srv = ReviewServer(cfg, night, port=0)
    srv.start_background()
    try:
        token = page_token(srv)
        status, _, body = post_label(srv, token, small["event_id"], label="solar_iii")
        assert status == 200, body
        assert json.loads(body)["event"]["label"] == "solar_iii"
        status, _, body = request(srv, "GET", "/api/events")
        rows = {r["event_id"]: r for r in json.loads(body)["events"]}
        assert rows[small["event_id"]]["label"] == "solar_iii"
        assert rows[big["event_id"]]["label"] is None
    finally:
        srv.shutdown()
        srv.server_close()
    store = EventStore(cfg.store_path)
    try:
        assert store.get_event(small["event_id"])["label"] == "solar_iii"
        assert store.get_event(big["event_id"])["label"] is None
    finally:
        store.close()
