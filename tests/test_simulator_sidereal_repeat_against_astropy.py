"""The Galactic background repeats after one sidereal day, not one solar day.

Reference: astropy's mean sidereal time (IERS tables bundled with astropy, no download).
The quiet-rural category has no man-made day/night cycle, and at night the ionosphere
model does not change, so the night background is a function of sidereal time only.
"""

import numpy as np
import pytest
from astropy import units as u
from astropy.time import Time
from astropy.utils import iers

from rxlog.sim.galaxy import icrs_to_galactic_deg, local_sidereal_deg
from rxlog.sim.model import SkyModel
from rxlog.sim.render import Grid, render
from rxlog.station.config import config_from_text
from rxlog.timeutil import parse_iso

T0 = parse_iso("2026-09-01T20:00:00Z")     # a night when LST 19 h -> 2 h: the Galaxy sets
LON = 8.7


@pytest.fixture()
def model(tmp_path):
    cfg = config_from_text(f"""
[station]
name = "sidereal-test"
latitude_deg = 47.5
longitude_deg = {LON}
[spectra]
channels = 64
""", tmp_path / "station.toml")
    return SkyModel(cfg, T0, T0 + 2 * 86400, seed=1, rfi="quiet-rural", include=())


def astropy_lst_deg(t):
    with iers.conf.set_temp("auto_download", False), iers.conf.set_temp("auto_max_age", None):
        return Time(t, format="unix").sidereal_time("mean", longitude=LON * u.deg).deg


def test_local_sidereal_time_matches_astropy():
    t = T0 + np.linspace(0, 30 * 86400, 50)
    d = (local_sidereal_deg(t, LON) - astropy_lst_deg(t) + 180) % 360 - 180
    assert np.abs(d).max() < 0.01       # degrees (UT1-UTC ignored: < 0.004 deg)


def test_night_background_repeats_after_a_sidereal_day(model):
    # astropy: the interval after which the sidereal time comes back (~86164.09 s)
    advance = (astropy_lst_deg(T0 + 86400.0) - astropy_lst_deg(T0)) % 360
    sidereal_day = 86400.0 - advance / 360.0 * 86164.0905
    assert abs(sidereal_day - 86164.09) < 0.5
    t = T0 + np.arange(0, 5 * 3600, 30.0)

    def band_mean_db(times):
        g = Grid(times, model.freq_hz, np.zeros(model.freq_hz.size), 1.0, model.freq_hz[1] - model.freq_hz[0])
        total, _ = render(model, g)
        return 10 * np.log10(total.mean(axis=1))

    day1 = band_mean_db(t)
    assert day1.max() - day1.min() > 0.5        # the Galaxy moves through the beam: a real pattern
    lags = np.arange(86400.0 - 400, 86400.0 + 100, 5.0)
    err = [np.sqrt(np.mean((band_mean_db(t + lag) - day1) ** 2)) for lag in lags]
    best = lags[int(np.argmin(err))]
    assert abs(best - sidereal_day) <= 10.0, (best, sidereal_day)
    assert min(err) < 0.2 * err[list(lags).index(86400.0)]


def test_galactic_coordinates_match_astropy():
    from astropy.coordinates import SkyCoord

    rng = np.random.default_rng(2)
    ra, dec = rng.uniform(0, 360, 200), np.degrees(np.arcsin(rng.uniform(-1, 1, 200)))
    gal = SkyCoord(ra=ra * u.deg, dec=dec * u.deg, frame="icrs").galactic
    l, b = icrs_to_galactic_deg(ra, dec)
    assert np.abs((l - gal.l.deg + 180) % 360 - 180).max() < 1e-4
    assert np.abs(b - gal.b.deg).max() < 1e-4
