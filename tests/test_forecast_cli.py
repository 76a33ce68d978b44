"""`rxlog forecast`: table, iCalendar and plot files, local and UTC times, the shortest
watch from the config or --min-window, clean errors."""

import datetime as dt
import zoneinfo

import pytest
from click.testing import CliRunner

from rxlog.cli import main
from rxlog.sky.forecast import make_forecast
from rxlog.station.config import load_config

STATION = """[station]
name = "cli-site"
latitude_deg = 47.5
longitude_deg = 8.7
elevation_m = 450
timezone = "Europe/Zurich"
"""


@pytest.fixture()
def config(tmp_path):
    p = tmp_path / "station.toml"
    p.write_text(STATION, encoding="utf-8")
    return p


def _run(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def _local_noon(day: str) -> float:
    d = dt.date.fromisoformat(day)
    return dt.datetime(d.year, d.month, d.day, 12, 0, tzinfo=zoneinfo.ZoneInfo("Europe/Zurich")).timestamp()


def test_forecast_table_ics_and_plot(config, tmp_path):
    ics, png = tmp_path / "j.ics", tmp_path / "j.png"
    r = _run("forecast", "--config", config, "--start", "2026-12-01", "--days", 3, "--ics", ics, "--plot", png)
    assert r.exit_code == 0, r.output
    # a date starts at local noon that day
    watches = make_forecast(load_config(config), _local_noon("2026-12-01"), 3)["watches"]
    lines = r.stdout.splitlines()
    assert len(watches) >= 2 and "Europe/Zurich" in lines[0]
    for w, line in zip(watches, lines[1:]):
        local = dt.datetime.fromtimestamp(w["start"], tz=zoneinfo.ZoneInfo("Europe/Zurich"))
        assert local.strftime("%Y-%m-%d %H:%M") in line and w["start_utc"][11:16] in line and w["region"] in line
    assert ics.read_bytes().count(b"BEGIN:VEVENT") == len(watches)
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert f"calendar: {ics}" in r.stdout and f"plot: {png}" in r.stdout


def test_thresholds_are_passed_through(config):
    loose = _run("forecast", "--config", config, "--start", "2026-12-01T12:00Z", "--days", 4)
    strict = _run("forecast", "--config", config, "--start", "2026-12-01T12:00Z", "--days", 4,
                  "--min-jupiter-alt", 40, "--max-sun-alt", -18)
    assert loose.exit_code == 0 and strict.exit_code == 0
    t0 = 1_796_126_400.0                                      # 2026-12-01T12:00Z
    expected = make_forecast(load_config(config), t0, 4, 40.0, -18.0)["text"]
    assert strict.stdout.rstrip("\n") == expected and strict.stdout != loose.stdout


def test_shortest_watch_from_the_option_or_the_config(config, tmp_path):
    t0 = _local_noon("2026-12-01")
    every = make_forecast(load_config(config), t0, 3, min_window_min=0.0)["watches"]
    short = [w for w in every if w["duration_min"] < 20.0]
    assert short, "the span should hold a watch shorter than 20 minutes"
    by_default = _run("forecast", "--config", config, "--start", "2026-12-01", "--days", 3)
    with_option = _run("forecast", "--config", config, "--start", "2026-12-01", "--days", 3, "--min-window", 0)
    assert len(by_default.stdout.splitlines()) == 1 + len(every) - len(short)
    assert len(with_option.stdout.splitlines()) == 1 + len(every)
    zero = tmp_path / "zero.toml"
    zero.write_text(STATION + "\n[forecast]\nmin_window_min = 0\n", encoding="utf-8")
    from_config = _run("forecast", "--config", zero, "--start", "2026-12-01", "--days", 3)
    assert from_config.stdout == with_option.stdout


@pytest.mark.parametrize("args, words", [
    (["--days", 0], "--days"),
    (["--days", 500], "--days"),
    ([], "--days"),
    (["--days", 1, "--start", "soon"], "--start"),
    (["--days", 1, "--min-jupiter-alt", 100], "--min-jupiter-alt"),
    (["--days", 1, "--min-window", -5], "--min-window"),
    (["--days", 1, "--ics", "/no/such/folder/x.ics"], "folder"),
])
def test_bad_arguments_exit_2(config, args, words):
    r = _run("forecast", "--config", config, *args)
    assert r.exit_code == 2, r.output
    assert words in r.output and "Traceback" not in r.output
    assert len(r.output.strip().splitlines()) <= 2 and "Usage:" not in r.output


def test_bad_min_window_in_the_config_names_the_key(config, tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text(STATION + "\n[forecast]\nmin_window_min = -1\n", encoding="utf-8")
    r = _run("forecast", "--config", bad, "--days", 1)
    assert r.exit_code == 2 and "[forecast] min_window_min" in r.output
