"""Forecast windows agree with the tags at their edges; iCalendar output against the
icalendar package (RFC 5545 reader, test-only); the CML-Io plot; Jupiter/Sun-up bands."""

import numpy as np
import pytest

from rxlog.sky.tags import body_up_intervals, station_tags
from rxlog.errors import RxlogError
from rxlog.forecast import format_forecast, forecast_windows, make_forecast, plot_forecast, write_ics

START = 1_796_083_200.0          # 2026-12-01T00:00Z: Jupiter is a morning/evening object
CFG = {"station": {"name": "test-site", "latitude_deg": 47.5, "longitude_deg": 8.7, "elevation_m": 450.0,
                   "timezone": "Europe/Zurich"}}


@pytest.fixture(scope="module")
def windows():
    return forecast_windows(CFG, START, 4)


def _state(t, min_alt=10.0, max_sun=-6.0):
    tags = station_tags(CFG, np.asarray(t, dtype=float))
    ok = (tags["jupiter_alt_deg"] >= min_alt) & (tags["sun_alt_deg"] <= max_sun) & (tags["source_region"] != "none")
    return np.where(ok, tags["source_region"], "")


def test_window_edges_agree_with_the_tags_at_those_instants(windows):
    assert len(windows) >= 4
    end = START + 4 * 86400.0
    for w in windows:
        inside = _state([w["start"] + 0.5, 0.5 * (w["start"] + w["end"]), w["end"] - 0.5])
        assert (inside == w["region"]).all(), w
        if w["start"] > START:
            assert _state([w["start"] - 0.5])[0] != w["region"], w
        if w["end"] < end:
            assert _state([w["end"] + 0.5])[0] != w["region"], w


def test_windows_match_a_brute_force_scan_at_ten_seconds(windows):
    t = START + np.arange(0.0, 1.5 * 86400.0, 10.0)
    state = _state(t)
    change = np.flatnonzero(state[1:] != state[:-1]) + 1
    starts = [t[i] for i in change if state[i] != ""]
    ours = [w["start"] for w in windows if w["start"] < t[-1]]
    if state[0] != "":
        starts = [t[0]] + starts
    assert len(ours) == len(starts)
    assert np.abs(np.array(ours) - np.array(starts)).max() <= 10.0


def test_window_fields(windows):
    for a, b in zip(windows, windows[1:]):
        assert a["end"] <= b["start"]
    for w in windows:
        assert START <= w["start"] < w["end"] <= START + 4 * 86400.0
        assert w["start_utc"].endswith("Z") and w["end_utc"].endswith("Z")
        edge_alt = station_tags(CFG, np.array([w["start"], w["end"]]))["jupiter_alt_deg"]
        assert w["max_jupiter_alt_deg"] >= edge_alt.max() - 0.01 and w["max_jupiter_alt_deg"] >= 10.0
        assert abs(w["duration_min"] - (w["end"] - w["start"]) / 60.0) < 0.06


def test_stricter_limits_give_windows_inside_the_looser_ones(windows):
    strict = forecast_windows(CFG, START, 4, min_jupiter_alt_deg=30.0, max_sun_alt_deg=-18.0)
    assert sum(w["end"] - w["start"] for w in strict) < sum(w["end"] - w["start"] for w in windows)
    for s in strict:
        assert any(w["start"] - 0.1 <= s["start"] and s["end"] <= w["end"] + 0.1 and w["region"] == s["region"]
                   for w in windows), s


def test_regions_from_config_are_used():
    cfg = dict(CFG, regions={"boxes": [{"name": "everywhere", "cml": [0, 360], "io_phase": "any"}]})
    got = forecast_windows(cfg, START, 2)
    up = body_up_intervals(cfg, START, START + 2 * 86400.0, "jupiter", 10.0)
    assert {w["region"] for w in got} == {"everywhere"}
    # with one box covering the plane, windows are Jupiter-up time with the Sun low: never more
    assert sum(w["end"] - w["start"] for w in got) <= sum(b - a for a, b in up) + 1.0


@pytest.mark.parametrize("kwargs, words", [
    (dict(days=0), "days"), (dict(days=500), "days"), (dict(days=1, step_s=0), "step"),
    (dict(days=1, min_jupiter_alt_deg=95), "Jupiter altitude"), (dict(days=1, max_sun_alt_deg=-100), "Sun altitude"),
])
def test_bad_arguments_raise_clear_errors(kwargs, words):
    with pytest.raises(RxlogError, match=words):
        forecast_windows(CFG, START, **kwargs)


def test_body_up_interval_edges_sit_at_the_altitude_limit():
    for body, limit in (("jupiter", 0.0), ("sun", -6.0), ("jupiter", 25.0)):
        spans = body_up_intervals(CFG, START, START + 3 * 86400.0, body, limit)
        assert spans
        edges = np.array([x for a, b in spans for x in (a, b) if START < x < START + 3 * 86400.0])
        alt = station_tags(CFG, edges)[f"{body}_alt_deg"]
        assert np.abs(alt - limit).max() < 0.01
        mids = np.array([0.5 * (a + b) for a, b in spans])
        assert (station_tags(CFG, mids)[f"{body}_alt_deg"] > limit).all()
    with pytest.raises(RxlogError, match="body"):
        body_up_intervals(CFG, START, START + 3600.0, "moon")


def test_ics_is_valid_rfc5545_per_the_icalendar_package(windows, tmp_path):
    import icalendar

    station = dict(CFG["station"], name="Club, North; site")     # needs TEXT escaping
    path = write_ics(windows, tmp_path / "f.ics", station, stamp_unix=START)
    raw = path.read_bytes()
    assert raw.count(b"\r\n") == raw.count(b"\n")                 # CRLF line ends
    assert max(len(line) for line in raw.split(b"\r\n")) <= 75   # folded at 75 octets
    cal = icalendar.Calendar.from_ical(raw)
    events = [c for c in cal.walk() if c.name == "VEVENT"]
    assert str(cal["VERSION"]) == "2.0" and cal["PRODID"]
    assert len(events) == len(windows)
    assert len({str(e["UID"]) for e in events}) == len(events)
    for e, w in zip(events, windows):
        assert abs(e.decoded("DTSTART").timestamp() - w["start"]) <= 0.5
        assert abs(e.decoded("DTEND").timestamp() - w["end"]) <= 0.5
        assert w["region"] in str(e["SUMMARY"])
        assert str(e["LOCATION"]) == "Club, North; site"
        assert e.decoded("DTSTAMP").timestamp() == START


def test_ics_write_failure_leaves_an_existing_file_alone(windows, tmp_path):
    with pytest.raises(RxlogError, match="folder"):
        write_ics(windows, tmp_path / "missing" / "f.ics", CFG["station"])
    target = tmp_path / "f.ics"
    target.write_text("keep me")
    (tmp_path / "sub").mkdir()
    with pytest.raises(RxlogError):
        write_ics(windows, tmp_path / "sub", CFG["station"])
    assert target.read_text() == "keep me" and not list(tmp_path.glob(".f.ics.*"))


def test_plot_is_a_png_and_shows_the_tracks(windows, tmp_path):
    from matplotlib.image import imread

    with_tracks = imread(plot_forecast(CFG, START, 4, tmp_path / "a.png", windows))
    # the Sun never below -90 deg: nothing observable, only the region boxes
    empty = imread(plot_forecast(CFG, START, 4, tmp_path / "b.png", [], max_sun_alt_deg=-90.0))
    assert with_tracks.shape[:2] == (640, 800) and empty.shape == with_tracks.shape
    dark = lambda img: int((img[..., :3].mean(axis=-1) < 0.5).sum())     # noqa: E731
    assert dark(with_tracks) > dark(empty) + 500


def test_no_windows_no_calendar(tmp_path):
    with pytest.raises(RxlogError, match="no forecast windows"):
        write_ics([], tmp_path / "e.ics", CFG["station"])
    done = make_forecast(CFG, START, 1, max_sun_alt_deg=-90.0, ics_path=tmp_path / "e.ics")
    assert done["windows"] == [] and done["ics_path"] is None and not (tmp_path / "e.ics").exists()
    assert "no windows" in done["text"]


def test_make_forecast_checks_output_folders_first(tmp_path):
    with pytest.raises(RxlogError, match="folder"):
        make_forecast(CFG, START, 1, plot_path=tmp_path / "nope" / "p.png")
    done = make_forecast(CFG, START, 1, ics_path=tmp_path / "f.ics")
    assert done["ics_path"].exists() and done["plot_path"] is None
    assert done["text"] == format_forecast(done["windows"], "Europe/Zurich")


def test_text_table_shows_local_and_utc_times(windows):
    text = format_forecast(windows, "Europe/Zurich").splitlines()
    assert len(text) == len(windows) + 1
    w = windows[0]
    assert w["start_utc"][11:16] in text[1] and w["region"] in text[1]
    import datetime as dt
    import zoneinfo
    local = dt.datetime.fromtimestamp(w["start"], tz=zoneinfo.ZoneInfo("Europe/Zurich")).strftime("%H:%M")
    assert local in text[1]
