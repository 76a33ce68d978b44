"""Simulator invariants: same seed -> same output; chunking does not change results; an
injected event's peak excess is exactly what was asked; the truth CSV holds the rows."""

import csv

import numpy as np
import pytest

from rxlog.errors import RxlogError
from rxlog.sim.spectra import iter_spectra, simulate_spectra
from rxlog.sim.truth import TRUTH_FIELDS, write_truth_csv
from rxlog.station.config import config_from_text
from rxlog.timeutil import parse_iso

NIGHT = parse_iso("2026-12-01T22:00:00Z")
DAY = parse_iso("2026-12-02T10:30:00Z")


@pytest.fixture(scope="module")
def cfg(tmp_path_factory):
    return config_from_text("""
[station]
name = "invariant-test"
latitude_deg = 47.5
longitude_deg = 8.7
[spectra]
channels = 256
""", tmp_path_factory.mktemp("inv") / "station.toml")


def test_same_seed_gives_identical_spectra_and_truth(cfg):
    a, ta = simulate_spectra(cfg, NIGHT, 0.1, seed=11, rfi="city")
    b, tb = simulate_spectra(cfg, NIGHT, 0.1, seed=11, rfi="city")
    c, _ = simulate_spectra(cfg, NIGHT, 0.1, seed=12, rfi="city")
    np.testing.assert_array_equal(a.power_db, b.power_db)
    assert ta == tb and ta
    assert not np.array_equal(a.power_db, c.power_db)


def test_chunk_size_does_not_change_the_spectra(cfg):
    runs = [iter_spectra(cfg, NIGHT, 0.1, seed=4, chunk_s=s) for s in (600.0, 77.0)]
    a, b = (np.concatenate([p.power_db for p in r]) for r in runs)
    np.testing.assert_array_equal(a, b)
    assert runs[0].truth_rows() == runs[1].truth_rows()


def test_a_run_split_in_two_gives_the_same_spectra(cfg):
    # the sky is planned per UTC day and the noise seeded by absolute row: the logger's
    # successive runs join without a seam and never repeat their noise
    whole, _ = simulate_spectra(cfg, NIGHT, 0.2, seed=6)
    first, _ = simulate_spectra(cfg, NIGHT, 0.1, seed=6)
    second, _ = simulate_spectra(cfg, NIGHT + 360, 0.1, seed=6)
    np.testing.assert_array_equal(whole.power_db, np.concatenate([first.power_db, second.power_db]))
    assert not np.array_equal(first.power_db - first.power_db.mean(0), second.power_db - second.power_db.mean(0))


@pytest.mark.parametrize("spec", [
    {"class": "solar_iii", "peak_excess_db": 2.5},
    {"class": "solar_ii", "peak_excess_db": 4.0, "drift_mhz_s": -0.1},
    {"class": "jovian_l", "peak_excess_db": 6.0, "duration_s": 300},
    {"class": "rfi", "kind": "carrier", "peak_excess_db": 15.0, "fmin_mhz": 21.6},
    {"class": "fadeout", "peak_excess_db": -3.0},
])
def test_injected_peak_excess_is_what_was_asked(cfg, spec):
    t = DAY + 120
    inject = [dict(spec, t=t)]
    quiet = dict(seed=2, include=(), noise=False, rfi="quiet-rural")
    base, _ = simulate_spectra(cfg, DAY, 0.4, **quiet)
    with_ev, truth = simulate_spectra(cfg, DAY, 0.4, inject=inject, **quiet)
    d = with_ev.power_db.astype(np.float64) - base.power_db
    measured = d.min() if spec["class"] == "fadeout" else d.max()
    assert abs(measured - spec["peak_excess_db"]) < 0.02
    (row,) = [r for r in truth if r["class"] == spec["class"]]
    assert abs(row["peak_excess_db"] - spec["peak_excess_db"]) < 0.01
    assert row["start_utc"] <= row["peak_utc"] <= row["end_utc"] or spec["class"] == "rfi"


def test_bad_injection_and_category_are_reported(cfg):
    with pytest.raises(RxlogError, match="fadeout is a dip"):
        simulate_spectra(cfg, DAY, 0.1, inject=[{"class": "fadeout", "t": DAY, "peak_excess_db": 3}])
    with pytest.raises(RxlogError, match="class 'type3'"):
        simulate_spectra(cfg, DAY, 0.1, inject=[{"class": "type3", "t": DAY, "peak_excess_db": 3}])
    with pytest.raises(RxlogError, match="P.372"):
        simulate_spectra(cfg, DAY, 0.1, rfi="suburban")


def test_truth_csv_round_trip(cfg, tmp_path):
    _, truth = simulate_spectra(cfg, NIGHT, 0.1, seed=1, rfi="residential")
    path = write_truth_csv(truth, tmp_path / "truth.csv")
    with open(path, newline="") as fh:
        back = list(csv.DictReader(fh))
    assert [r["event_id"] for r in back] == [r["event_id"] for r in truth]
    assert set(TRUTH_FIELDS) == set(back[0])
    for r, b in zip(truth, back):
        assert float(b["peak_excess_db"]) == pytest.approx(r["peak_excess_db"])
        assert b["class"] in ("jovian_l", "jovian_s", "solar_iii", "solar_ii", "solar_iv", "fadeout", "rfi")


def test_explicit_jupiter_schedule_replaces_the_predicted_storms(cfg):
    start = parse_iso("2026-12-05T04:00:00Z")          # Jupiter ~55 deg up over 47.5 N
    sched = [dict(start="2026-12-05T04:10:00Z", end="2026-12-05T04:30:00Z", region="Io-B", s20=100.0)]
    _, truth = simulate_spectra(cfg, start, 1.0, include=("jovian_l", "jovian_s"),
                                jupiter_schedule=sched, rfi="quiet-rural")
    (row,) = [r for r in truth if r["class"].startswith("jovian")]
    assert (row["start_utc"], row["end_utc"]) == ("2026-12-05T04:10:00.000Z", "2026-12-05T04:30:00.000Z")
    assert row["source_region"] == "Io-B" and row["peak_excess_db"] > 0.5


def test_event_rate_zero_leaves_only_injected_sky_events(cfg):
    inject = [{"class": "solar_iii", "t": DAY + 60, "peak_excess_db": 3.0}]
    _, truth = simulate_spectra(cfg, DAY, 2.0, include=("solar_iii", "solar_ii", "solar_iv", "fadeout"),
                                event_rate=0.0, inject=inject, noise=False)
    assert [r["class"] for r in truth] == ["solar_iii"]
