"""`rxlog forecast`: table, iCalendar and plot files, local and UTC times, clean errors."""

import datetime as dt
import zoneinfo

import pytest
from click.testing import CliRunner

from rxlog.cli import main
from rxlog.config import load_config
from rxlog.forecast import forecast_windows

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


def test_forecast_table_ics_and_plot(config, tmp_path):
    ics, png = tmp_path / "j.ics", tmp_path / "j.png"
    r = _run("forecast", "--config", config, "--start", "2026-12-01", "--days", 3, "--ics", ics, "--plot", png)
    assert r.exit_code == 0, r.output
    # a date starts at local noon that day
    t0 = dt.datetime(2026, 12, 1, 12, 0, tzinfo=zoneinfo.ZoneInfo("Europe/Zurich")).timestamp()
    windows = forecast_windows(load_config(config), t0, 3)
    lines = r.stdout.splitlines()
    assert len(windows) >= 2 and "Europe/Zurich" in lines[0]
    for w, line in zip(windows, lines[1:]):
        local = dt.datetime.fromtimestamp(w["start"], tz=zoneinfo.ZoneInfo("Europe/Zurich"))
        assert local.strftime("%Y-%m-%d %H:%M") in line and w["start_utc"][11:16] in line and w["region"] in line
    assert ics.read_bytes().count(b"BEGIN:VEVENT") == len(windows)
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert f"calendar: {ics}" in r.stdout and f"plot: {png}" in r.stdout


def test_thresholds_are_passed_through(config):
    loose = _run("forecast", "--config", config, "--start", "2026-12-01T12:00Z", "--days", 2)
    strict = _run("forecast", "--config", config, "--start", "2026-12-01T12:00Z", "--days", 2,
                  "--min-jupiter-alt", 40, "--max-sun-alt", -18)
    assert loose.exit_code == 0 and strict.exit_code == 0
    assert len(strict.stdout.splitlines()) < len(loose.stdout.splitlines())


@pytest.mark.parametrize("args, words", [
    (["--days", 0], "--days"),
    (["--days", 500], "--days"),
    ([], "--days"),
    (["--days", 1, "--start", "soon"], "--start"),
    (["--days", 1, "--min-jupiter-alt", 100], "--min-jupiter-alt"),
    (["--days", 1, "--ics", "/no/such/folder/x.ics"], "folder"),
])
def test_bad_arguments_exit_2(config, args, words):
    r = _run("forecast", "--config", config, *args)
    assert r.exit_code == 2, r.output
    assert words in r.output and "Traceback" not in r.output
