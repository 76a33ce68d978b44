"""`rxlog ephem`: the table, CSV and JSON agree with the library; bad arguments exit 2."""

import csv
import datetime as dt
import io
import json
import time
import zoneinfo

import numpy as np
import pytest
from click.testing import CliRunner

from rxlog.cli import main
from rxlog.sky.tags import station_tags
from rxlog.timeutil import parse_iso

STATION = """[station]
name = "cli-site"
latitude_deg = -33.9
longitude_deg = 151.2
elevation_m = 40
timezone = "Australia/Sydney"

[regions]
boxes = [
  { name = "west", cml = [180, 360], io_phase = "any" },
  { name = "east", cml = [0, 180], io_phase = "any" },
]
"""
COLUMNS = ["time_utc", "cml3_deg", "io_phase_deg", "jupiter_alt_deg", "jupiter_az_deg",
           "sun_alt_deg", "sun_az_deg", "source_region"]


@pytest.fixture()
def config(tmp_path):
    p = tmp_path / "station.toml"
    p.write_text(STATION, encoding="utf-8")
    return str(p)


def _run(*args):
    return CliRunner().invoke(main, list(args))


def test_csv_rows_match_the_library(config):
    r = _run("ephem", "--config", config, "--start", "2026-12-01T10:00:00Z", "--end", "2026-12-01T12:00:00Z",
             "--step", "1800", "--format", "csv")
    assert r.exit_code == 0, r.output
    rows = list(csv.DictReader(io.StringIO(r.stdout)))
    assert list(rows[0]) == COLUMNS and len(rows) == 5
    t = np.array([parse_iso(x["time_utc"]) for x in rows])
    assert np.allclose(np.diff(t), 1800.0)
    from rxlog.station.config import load_config
    ref = station_tags(load_config(config), t)
    for key in COLUMNS[1:-1]:
        assert np.allclose([float(x[key]) for x in rows], ref[key], atol=6e-4), key
    assert [x["source_region"] for x in rows] == list(ref["source_region"])
    assert set(ref["source_region"]) <= {"west", "east"}        # the config's boxes are used


def test_json_and_table(config):
    r = _run("ephem", "--config", config, "--start", "2026-12-01T10:00:00Z", "--format", "json")
    assert r.exit_code == 0, r.output
    rows = json.loads(r.stdout)
    assert len(rows) == 1 and list(rows[0]) == COLUMNS and rows[0]["time_utc"] == "2026-12-01T10:00:00.000Z"
    r = _run("ephem", "--config", config, "--start", "2026-12-01T10:00:00Z", "--end", "2026-12-01T11:00Z")
    lines = r.stdout.strip().splitlines()
    assert r.exit_code == 0 and lines[0].split() == COLUMNS and len(lines) == 1 + 7


def test_start_now_is_the_current_time(config):
    before = time.time()
    r = _run("ephem", "--config", config, "--start", "now", "--format", "json")
    assert r.exit_code == 0, r.output
    t = parse_iso(json.loads(r.stdout)[0]["time_utc"])
    assert before - 1.0 <= t <= time.time()


def test_a_date_starts_at_local_noon_at_the_station(config):
    r = _run("ephem", "--config", config, "--start", "2026-12-01", "--format", "json")
    assert r.exit_code == 0, r.output
    noon = dt.datetime(2026, 12, 1, 12, tzinfo=zoneinfo.ZoneInfo("Australia/Sydney")).timestamp()
    assert parse_iso(json.loads(r.stdout)[0]["time_utc"]) == noon


def test_refraction_flag_raises_altitudes_above_the_horizon(config):
    args = ["ephem", "--config", config, "--start", "2026-12-01T02:00:00Z", "--format", "json"]
    airless = json.loads(_run(*args).stdout)[0]
    refracted = json.loads(_run(*args, "--refraction").stdout)[0]
    assert airless["sun_alt_deg"] > 0 and refracted["sun_alt_deg"] > airless["sun_alt_deg"]
    assert refracted["cml3_deg"] == airless["cml3_deg"]


@pytest.mark.parametrize("args, words", [
    (["--start", "tomorrow"], "--start"),
    (["--start", "2026-12-02", "--end", "2026-12-01"], "end"),
    (["--start", "2026-12-01", "--step", "0"], "--step"),
    (["--start", "2026-12-01", "--format", "xml"], "--format"),
    (["--start", "1950-01-01"], "1972"),
    (["--start", "2026-01-01", "--end", "2027-01-01", "--step", "1"], "rows"),
    ([], "--start"),
])
def test_bad_arguments_exit_2_with_a_clean_message(config, args, words):
    r = _run("ephem", "--config", config, *args)
    assert r.exit_code == 2, r.output
    assert words in r.output and "Traceback" not in r.output
    assert len(r.output.strip().splitlines()) <= 2 and "Usage:" not in r.output


def test_missing_or_bad_config_exit_2(tmp_path):
    r = _run("ephem", "--config", str(tmp_path / "none.toml"), "--start", "2026-12-01")
    assert r.exit_code == 2 and "cannot read" in r.output
    bad = tmp_path / "bad.toml"
    bad.write_text(STATION.replace('io_phase = "any" },\n  { name = "east"', 'io_phase = "some" },\n  { name = "east"'))
    r = _run("ephem", "--config", str(bad), "--start", "2026-12-01")
    assert r.exit_code == 2 and "[regions] boxes" in r.output and "box 1" in r.output
