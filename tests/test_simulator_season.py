"""Simulated seasons: solar activity that varies from day to day around the cycle's rate
and does not depend on the span asked for; Jovian storms planned over the whole span,
each inside its source region with Jupiter up; ``rxlog simulate --days`` refuses what it
cannot do in one line."""

import csv

import numpy as np
from click.testing import CliRunner

from rxlog.archive.read import read_archive
from rxlog.cli import main
from rxlog.sim.season import season_storms, solar_activity
from rxlog.sky.tags import station_tags
from rxlog.station.config import config_from_text
from rxlog.timeutil import iso, parse_iso

CONFIG = """
[station]
name = "season-sim"
latitude_deg = 47.5
longitude_deg = 8.7
elevation_m = 450.0

[spectra]
channels = 32
cadence_s = 10.0
"""


def test_solar_activity_varies_day_to_day_averages_one_and_ignores_the_span():
    days = range(20_000, 20_730)                         # two years of UTC day numbers
    f = solar_activity(7, days)
    assert abs(f.mean() - 1.0) < 0.1
    assert np.std(np.log(f)) > 0.4                      # quiet and busy days, not a constant
    assert np.ptp(f[:27]) > 2.0
    assert np.allclose(solar_activity(7, range(20_100, 20_110)), f[100:110])
    assert not np.allclose(solar_activity(8, days), f)


def test_season_storms_lie_in_their_source_region_with_jupiter_up(tmp_path):
    cfg = config_from_text(CONFIG, tmp_path / "station.toml")
    t0 = parse_iso("2026-12-01T00:00:00Z")
    storms = season_storms(cfg, t0, t0 + 30 * 86400.0, seed=5)
    assert len(storms) >= 5
    mid = np.array([(s["start"] + s["end"]) / 2 for s in storms])
    tags = station_tags(cfg, mid)
    assert (tags["jupiter_alt_deg"] > 0).all()
    named = [s["region"] for s in storms]
    assert sum(r == t for r, t in zip(named, tags["source_region"])) >= 0.9 * len(storms)
    assert {"Io-A", "Io-B", "Io-C", "Io-D"} & set(named)


def test_simulate_days_refuses_iq_fits_and_both_lengths(tmp_path):
    cfg = config_from_text(CONFIG, tmp_path / "station.toml")
    base = ["simulate", "--config", str(cfg.path), "--start", "2026-12-01T00:00Z"]
    for extra in (["--days", "2", "--iq", "--out", str(tmp_path / "iq")],
                  ["--days", "2", "--out", str(tmp_path / "one.fits")],
                  ["--days", "2", "--hours", "3", "--out", str(tmp_path / "x")],
                  ["--out", str(tmp_path / "x")]):
        r = CliRunner().invoke(main, base + extra)
        errors = [line for line in r.output.splitlines() if line.startswith("rxlog:")]
        assert r.exit_code == 2 and len(errors) == 1 and "Traceback" not in r.output, (extra, r.output)
    assert not (tmp_path / "x").exists() and not (tmp_path / "one.fits").exists()


def test_simulate_days_writes_whole_days_and_lists_each_storm_once(tmp_path):
    cfg = config_from_text(CONFIG, tmp_path / "station.toml")
    t0 = parse_iso("2026-11-30T11:00:00Z")        # seed 16 plans a bright Io-A storm across the day boundary
    r = CliRunner().invoke(main, ["simulate", "--config", str(cfg.path), "--start", "2026-11-30T11:00Z",
                                  "--days", "2", "--out", str(tmp_path / "season"), "--seed", "16", "--rfi", "quiet-rural"])
    assert r.exit_code == 0, r.output
    got = read_archive(tmp_path / "season", t0, t0 + 2 * 86400.0)
    assert sum(s.n_time for s in got.segments) == 2 * 8640 and got.gaps == []
    with open(tmp_path / "season" / "truth.csv", newline="") as fh:
        truth = list(csv.DictReader(fh))
    storms = [(t["start_utc"], t["end_utc"]) for t in truth if t["class"].startswith("jovian")]
    planned = {(iso(s["start"]), iso(s["end"])) for s in season_storms(cfg, t0, t0 + 2 * 86400.0, seed=16)}
    boundary = iso(t0 + 86400.0)
    assert len(storms) == len(set(storms)) and set(storms) <= planned     # faint storms stay out of the truth
    assert any(a < boundary < b for a, b in storms)
