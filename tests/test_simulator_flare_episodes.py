"""A flare's episodes as the simulator draws them: a Type II's band-split lanes (two
parallel lanes a few hundred kHz to a MHz apart at 16-24 MHz: the simulator's stated
range, after Nelson & Melrose 1985's review; from memory), a long Type IV that lasts
what was asked, a fadeout that recovers when asked; natural Type III groups named as
one episode; an unknown episode kind refused."""

import numpy as np
import pytest

from rxlog.errors import RxlogError
from rxlog.sim.events import EPISODE_KINDS
from rxlog.sim.render import render
from rxlog.sim.spectra import SpectralRun, simulate_spectra
from rxlog.station.config import config_from_text
from rxlog.timeutil import parse_iso

NOON = parse_iso("2027-01-19T10:00:00Z")       # the Sun ~20 deg up at 47.5 N


@pytest.fixture(scope="module")
def cfg(tmp_path_factory):
    return config_from_text("""
[station]
name = "flare-test"
latitude_deg = 47.5
longitude_deg = 8.7
[spectra]
channels = 512
""", tmp_path_factory.mktemp("flare") / "station.toml")


def test_a_band_split_type_ii_shows_two_parallel_lanes_split_mhz_apart(cfg):
    inject = [{"class": "solar_ii", "t": NOON + 60, "fmax_mhz": 23.0, "drift_mhz_s": -0.03, "split_mhz": 0.8,
               "duration_s": 600.0, "peak_excess_db": 6.0}]
    quiet = dict(seed=2, include=(), noise=False, rfi="quiet-rural")
    base, _ = simulate_spectra(cfg, NOON, 0.25, **quiet)
    spec, truth = simulate_spectra(cfg, NOON, 0.25, inject=inject, **quiet)
    d = spec.power_db.astype(np.float64) - base.power_db
    f = spec.freq_hz / 1e6
    # 20 MHz fundamental: f = 23 exp(-t / (20 / 0.03)) -> t = 93 s after the start
    row = d[int(round(60 + 667 * np.log(23 / 20)))]
    peaks = [i for i in range(1, len(row) - 1) if row[i] >= row[i - 1] and row[i] >= row[i + 1] and row[i] > 0.3 * row.max()]
    assert len(peaks) == 2
    assert f[peaks[1]] - f[peaks[0]] == pytest.approx(0.8, abs=0.1)
    (ii,) = truth
    assert ii["episode_kind"] == "type_ii" and ii["class"] == "solar_ii"


def test_a_long_type_iv_and_a_fadeout_last_what_was_asked(cfg):
    inject = [{"class": "solar_iv", "t": NOON, "duration_s": 9000.0, "peak_excess_db": 2.0},
              {"class": "fadeout", "t": NOON + 600, "duration_s": 2700.0, "peak_excess_db": -2.0}]
    run = SpectralRun(cfg, NOON - 600, 3.0, seed=2, include=(), noise=False, rfi="quiet-rural", inject=inject)
    rows = {r["class"]: r for r in run.truth_rows()}
    for cls, asked in (("solar_iv", 9000.0), ("fadeout", 2700.0)):
        r = rows[cls]
        assert parse_iso(r["end_utc"]) - parse_iso(r["start_utc"]) == pytest.approx(asked, abs=1.0)
    # the Type IV holds its peak: an hour in, it is still within its slow modulation of it
    g = run.grid(int(4200 / run.cadence), int(4200 / run.cadence) + 1)
    (iv,) = [e for e in run.model.events if e.cls == "solar_iv"]
    total, background = render(run.model, g, events=[iv])
    assert 10 * np.log10(total / background).max() > 1.0


def test_natural_type_iii_groups_are_one_episode_each(cfg):
    run = SpectralRun(cfg, NOON - 3600, 5.0, seed=4, include=("solar_iii",), event_rate=20.0, noise=False,
                      rfi="quiet-rural")
    rows = [r for r in run.truth_rows() if r["class"] == "solar_iii"]
    by_episode = {}
    for r in rows:
        by_episode.setdefault(r["episode"], []).append(r)
    assert len(by_episode) >= 3
    for name, members in by_episode.items():
        kinds = {m["episode_kind"] for m in members}
        assert kinds == {"type_iii_group"} if len(members) > 1 else kinds <= {"type_iii_group", "isolated_burst"}
        starts = [parse_iso(m["start_utc"]) for m in members]
        assert max(starts) - min(starts) < 200                    # a group lasts seconds to three minutes
    assert all(r["episode_kind"] in EPISODE_KINDS and r["rfi_kind"] == "" for r in rows)


def test_an_unknown_episode_kind_is_refused(cfg):
    with pytest.raises(RxlogError, match="episode_kind 'storm'"):
        simulate_spectra(cfg, NOON, 0.1, inject=[{"class": "jovian_l", "t": NOON, "peak_excess_db": 3.0,
                                                  "episode_kind": "storm"}])
