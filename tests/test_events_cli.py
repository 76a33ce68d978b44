"""`rxlog events` lists what the store holds, filtered by night, class and labels;
`rxlog label` labels from the shell and keeps history; mistakes exit 2 with a message."""

import datetime as dt

import pytest
from click.testing import CliRunner
from test_report_night import NIGHT, _event, make_night

from rxlog.cli import main
from rxlog.store import EventStore, make_event_id
from rxlog.timeutil import parse_iso


@pytest.fixture
def station(tmp_path):
    cfg, night, events = make_night(tmp_path, hours=0.3, n_bursts=4)
    # One more event on the next night, to see --night filter.
    store = EventStore(cfg.store_path)
    store.upsert_events([_event(night.t1 + 9 * 3600, 10.0, 18.0, 19.0, "solar_iii")])
    store.close()
    return cfg, night, events


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def ids_in(output, ids):
    return [i for i in ids if i in output]


def test_events_lists_all_by_default_and_one_night_on_request(station):
    cfg, night, events = station
    r = run("events", "--config", cfg.path)
    assert r.exit_code == 0, r.output
    assert "5 events" in r.output
    r = run("events", "--config", cfg.path, "--night", NIGHT.isoformat())
    assert r.exit_code == 0
    assert ids_in(r.output, [e["event_id"] for e in events]) == [e["event_id"] for e in events]
    assert f"{len(events)} events" in r.output
    r = run("events", "--config", cfg.path, "--night", (NIGHT + dt.timedelta(days=1)).isoformat())
    assert "1 event " in r.output


def test_events_shows_local_peak_times(station):
    cfg, night, events = station
    r = run("events", "--config", cfg.path, "--night", NIGHT.isoformat())
    first = night.local(parse_iso(events[0]["peak_utc"]))
    assert first.strftime("%Y-%m-%d %H:%M:%S") in r.output


def test_class_and_unlabelled_filters(station):
    cfg, night, events = station
    jovian = [e["event_id"] for e in events if e["class"] == "jovian_l"]
    r = run("events", "--config", cfg.path, "--class", "jovian_l")
    assert r.exit_code == 0
    assert ids_in(r.output, [e["event_id"] for e in events]) == jovian
    r = run("label", "--config", cfg.path, jovian[0], "noise", "--note", "carrier", "--who", "ben")
    assert r.exit_code == 0, r.output
    assert "labelled noise by ben" in r.output
    r = run("events", "--config", cfg.path, "--class", "jovian_l", "--unlabelled")
    assert ids_in(r.output, jovian) == jovian[1:]
    r = run("events", "--config", cfg.path, "--class", "jovian_l")
    assert "noise (ben)" in r.output


def test_label_keeps_history(station):
    cfg, night, events = station
    eid = events[0]["event_id"]
    assert run("label", "--config", cfg.path, eid, "unsure", "--who", "ana").exit_code == 0
    assert run("label", "--config", cfg.path, eid, "solar_iii", "--who", "ben").exit_code == 0
    store = EventStore(cfg.store_path)
    try:
        assert [h["label"] for h in store.label_history(eid)] == ["unsure", "solar_iii"]
        assert store.get_event(eid)["label"] == "solar_iii"
    finally:
        store.close()


def test_label_mistakes_exit_2_with_a_message(station):
    cfg, night, events = station
    r = run("label", "--config", cfg.path, events[0]["event_id"], "jupiter")
    assert r.exit_code == 2 and "jupiter" in r.output
    missing = make_event_id("testsite", 0.0, 18.0, 19.0)
    r = run("label", "--config", cfg.path, missing, "rfi")
    assert r.exit_code == 2 and missing in r.output
    r = run("events", "--config", cfg.path, "--night", "2027-13-40")
    assert r.exit_code == 2 and "YYYY-MM-DD" in r.output


def test_events_on_an_empty_store_says_so(tmp_path):
    from test_report_night import station_config
    cfg = station_config(tmp_path)
    r = run("events", "--config", cfg.path)
    assert r.exit_code == 0 and "no events" in r.output


def test_a_label_given_from_the_shell_lands_on_that_event_even_inside_a_larger_box(station):
    # A short burst inside the box of a longer, wider event: `rxlog label` on the short
    # one must show on the short one in `rxlog events`, and not on the larger one.
    cfg, night, events = station
    t = parse_iso(events[0]["peak_utc"])
    big = _event(t + 10, 60.0, 16.5, 23.5, "solar_iv")
    small = _event(t + 10, 4.0, 19.0, 20.0, "solar_iii")
    store = EventStore(cfg.store_path)
    store.upsert_events([small, big])
    store.close()
    r = run("label", "--config", cfg.path, small["event_id"], "solar_iii", "--who", "ana")
    assert r.exit_code == 0, r.output
    store = EventStore(cfg.store_path)
    try:
        assert store.get_event(small["event_id"])["label"] == "solar_iii"
        assert store.get_event(big["event_id"])["label"] is None
    finally:
        store.close()
    r = run("events", "--config", cfg.path, "--unlabelled")
    assert big["event_id"] in r.output and small["event_id"] not in r.output
