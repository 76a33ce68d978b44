"""Forecast windows agree with the tags at their edges; touching windows are one watch and
short watches are left out; iCalendar output against the icalendar package (RFC 5545
reader, test-only); the CML-Io plot for a few days and the calendar of nights for a
month; Jupiter/Sun-up bands."""

import datetime as dt
import zoneinfo

import numpy as np
import pytest

from rxlog.errors import RxlogError
from rxlog.sky.forecast import (
    MIN_WINDOW_MIN,
    REGION_COLOURS,
    TOUCH_S,
    calendar_bars,
    forecast_figure,
    forecast_watches,
    forecast_windows,
    format_forecast,
    make_forecast,
    plot_forecast,
    write_ics,
)
from rxlog.sky.regions import DEFAULT_REGION_BOXES
from rxlog.sky.tags import body_up_intervals, station_tags
from rxlog.station.config import SCHEMA

START = 1_796_083_200.0          # 2026-12-01T00:00Z: Jupiter is a morning/evening object
CFG = {"station": {"name": "test-site", "latitude_deg": 47.5, "longitude_deg": 8.7, "elevation_m": 450.0,
                   "timezone": "Europe/Zurich"}}


@pytest.fixture(scope="module")
def windows():
    return forecast_windows(CFG, START, 4)


@pytest.fixture(scope="module")
def watches(windows):
    return forecast_watches(windows, 0.0)


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


def test_ics_is_valid_rfc5545_per_the_icalendar_package(watches, tmp_path):
    import icalendar

    windows = watches
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
    assert done["text"] == format_forecast(done["watches"], "Europe/Zurich")


def test_text_table_shows_local_and_utc_times(windows):
    text = format_forecast(windows, "Europe/Zurich").splitlines()
    assert len(text) == len(windows) + 1
    w = windows[0]
    assert w["start_utc"][11:16] in text[1] and w["region"] in text[1]
    import datetime as dt
    import zoneinfo
    local = dt.datetime.fromtimestamp(w["start"], tz=zoneinfo.ZoneInfo("Europe/Zurich")).strftime("%H:%M")
    assert local in text[1]


# --- watches ------------------------------------------------------------------------

def test_touching_windows_are_one_watch_with_their_regions_in_order(windows, watches):
    touching = [(a, b) for a, b in zip(windows, windows[1:]) if b["start"] - a["end"] <= TOUCH_S]
    assert touching, "the span should hold windows that follow one another"
    assert [p for w in watches for p in w["parts"]] == windows          # every window in one watch, in order
    for a, b in zip(watches, watches[1:]):
        assert b["start"] - a["end"] > TOUCH_S                          # watches never touch
    for w in watches:
        parts = w["parts"]
        assert w["start"] == parts[0]["start"] and w["end"] == parts[-1]["end"]
        assert all(q["start"] - p["end"] <= TOUCH_S for p, q in zip(parts, parts[1:]))
        assert w["region"] == ", ".join(dict.fromkeys(p["region"] for p in parts))
        assert w["max_jupiter_alt_deg"] == max(p["max_jupiter_alt_deg"] for p in parts)
        assert abs(w["duration_min"] - (w["end"] - w["start"]) / 60.0) < 0.06
    assert any(len(w["parts"]) > 1 for w in watches)


def test_watches_shorter_than_the_minimum_are_left_out(windows, watches):
    short = [w for w in watches if w["duration_min"] < 20.0]
    assert short, "the span should hold a watch shorter than 20 minutes"
    assert forecast_watches(windows, 20.0) == [w for w in watches if w["end"] - w["start"] >= 1200.0]
    with pytest.raises(RxlogError, match="min window"):
        forecast_watches(windows, -1.0)


def test_min_window_comes_from_the_config_unless_given():
    assert SCHEMA["forecast"]["min_window_min"].default == MIN_WINDOW_MIN
    default = make_forecast(CFG, START, 4)["watches"]
    assert default == forecast_watches(forecast_windows(CFG, START, 4), MIN_WINDOW_MIN)
    every = make_forecast(dict(CFG, forecast={"min_window_min": 0.0}), START, 4)["watches"]
    assert len(every) > len(default)
    assert make_forecast(dict(CFG, forecast={"min_window_min": 0.0}), START, 4, min_window_min=MIN_WINDOW_MIN
                         )["watches"] == default


def test_ics_entry_of_a_watch_lists_each_region_with_its_times(watches, tmp_path):
    import icalendar

    tz = zoneinfo.ZoneInfo(CFG["station"]["timezone"])
    hhmm = lambda t, zone: dt.datetime.fromtimestamp(t, tz=zone).strftime("%H:%M")     # noqa: E731
    cal = icalendar.Calendar.from_ical(write_ics(watches, tmp_path / "w.ics", CFG["station"]).read_bytes())
    events = [c for c in cal.walk() if c.name == "VEVENT"]
    assert len(events) == len(watches)
    for e, w in zip(events, watches):
        lines = str(e["DESCRIPTION"]).splitlines()
        assert f"{hhmm(w['start'], tz)}-{hhmm(w['end'], tz)} Europe/Zurich" in lines[0]
        assert len(lines) == len(w["parts"]) + 2
        for line, p in zip(lines[1:], w["parts"]):
            assert line.startswith(f"{p['region']} {hhmm(p['start'], tz)}-{hhmm(p['end'], tz)} "
                                   f"({hhmm(p['start'], dt.timezone.utc)}-{hhmm(p['end'], dt.timezone.utc)} UTC)")
        categories = [str(c) for c in e["CATEGORIES"].cats]
        assert categories == ["Jupiter", *dict.fromkeys(p["region"] for p in w["parts"])]


# --- the calendar of nights -----------------------------------------------------------

def test_calendar_bars_keep_a_night_on_one_row_in_local_clock_hours():
    # Europe/Zurich is UTC+1 in December (CET): 22:30Z is 23:30 local
    t = lambda s: dt.datetime.fromisoformat(s).timestamp()      # noqa: E731
    over_midnight = calendar_bars([(t("2026-12-05T22:30+00:00"), t("2026-12-06T01:00+00:00"), "Io-B")],
                                  "Europe/Zurich")
    assert over_midnight == [(dt.date(2026, 12, 5), 23.5, 26.0, "Io-B")]
    over_noon = calendar_bars([(t("2026-12-06T10:00+00:00"), t("2026-12-06T12:00+00:00"), "x")], "Europe/Zurich")
    assert over_noon == [(dt.date(2026, 12, 5), 35.0, 36.0, "x"), (dt.date(2026, 12, 6), 12.0, 13.0, "x")]
    in_utc = calendar_bars([(t("2026-12-05T22:30+00:00"), t("2026-12-06T01:00+00:00"), "Io-B")], "UTC")
    assert in_utc == [(dt.date(2026, 12, 5), 22.5, 25.0, "Io-B")]


@pytest.fixture(scope="module")
def month():
    watches = make_forecast(CFG, START, 31)["watches"]
    return watches, forecast_figure(CFG, START, 31, watches)


def test_a_month_is_drawn_as_a_calendar_of_nights_by_local_hour(month):
    watches, fig = month
    ax = fig.axes[0]
    assert "Europe/Zurich" in ax.get_xlabel() and "Europe/Zurich" in ax.get_ylabel()
    nights = [t.get_text() for t in ax.get_yticklabels()]
    # START is 01:00 local: the night that began on the day before; the month ends inside night 31
    night_of = lambda t: (dt.datetime.fromtimestamp(t, tz=zoneinfo.ZoneInfo("Europe/Zurich"))     # noqa: E731
                          - dt.timedelta(hours=12)).date()
    first, last = night_of(START), night_of(START + 31 * 86400.0 - 1.0)
    assert nights[0].endswith(first.isoformat()) and nights[-1].endswith(last.isoformat())
    assert len(nights) == (last - first).days + 1 == 32
    legend = [t.get_text() for t in fig.legends[0].get_texts()]
    regions = list(dict.fromkeys(p["region"] for w in watches for p in w["parts"]))
    assert len(regions) >= 3 and set(regions) <= set(legend)


def test_calendar_shows_each_region_in_its_own_colour(month, tmp_path):
    from matplotlib.colors import to_rgb
    from matplotlib.image import imread

    watches, fig = month
    fig.savefig(tmp_path / "month.png", format="png")
    img = imread(tmp_path / "month.png")[..., :3]
    colours = dict(zip([box["name"] for box in DEFAULT_REGION_BOXES], REGION_COLOURS))
    minutes = {}
    for w in watches:
        for p in w["parts"]:
            minutes[p["region"]] = minutes.get(p["region"], 0.0) + (p["end"] - p["start"]) / 60.0
    for region, total in minutes.items():
        pixels = int((np.abs(img - np.array(to_rgb(colours[region]))).max(axis=-1) < 2 / 255).sum())
        assert pixels > 2 * total / 60.0, (region, pixels, total)      # bars, not only a legend patch


def test_a_few_days_stay_on_the_cml_io_plane(windows):
    fig = forecast_figure(CFG, START, 4, windows)
    assert fig.axes[0].get_xlabel().startswith("CML")
