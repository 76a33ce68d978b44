"""The Sun's position against NREL's Solar Position Algorithm, via pvlib (test-only).

Reference: Reda & Andreas (2004), "Solar position algorithm for solar radiation
applications", Solar Energy 76, 577-589 (NREL/TP-560-34302), implemented by pvlib
(pvlib.solarposition.spa_python). SPA treats its input time as UT1 (delta_ut1 = 0 in
its worked example); rxlog uses IERS UT1, so the two differ by up to 0.9 s of Earth
rotation (~0.004 deg). Bound: 0.02 deg.
"""

import datetime as dt
import warnings

import numpy as np
import pandas as pd
import pytest

from rxlog.sky.tags import compute_tags

with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    import pvlib


def _spa(t_unix, lat, lon, elev, pressure_hpa=1010.0, temperature_c=10.0, delta_t=None):
    idx = pd.DatetimeIndex(pd.to_datetime(np.asarray(t_unix), unit="s", utc=True))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return pvlib.solarposition.spa_python(idx, lat, lon, altitude=elev, pressure=pressure_hpa * 100.0,
                                              temperature=temperature_c, delta_t=delta_t)


@pytest.mark.parametrize("site", [(47.5, 8.7, 450.0), (39.742476, -105.1786, 1830.14), (-41.3, 174.8, 10.0)])
def test_sun_matches_spa_airless(site):
    t = np.sort(np.random.default_rng(11).uniform(946_684_800.0, 1_767_225_600.0, 200))
    tags = compute_tags(t, *site)
    spa = _spa(t, *site)
    assert np.abs(tags["sun_alt_deg"] - spa["elevation"].to_numpy()).max() <= 0.02
    cos_alt = np.cos(np.radians(spa["elevation"].to_numpy()))
    daz = (tags["sun_az_deg"] - spa["azimuth"].to_numpy() + 180.0) % 360.0 - 180.0
    assert np.abs(daz * cos_alt).max() <= 0.02


def test_refraction_option_matches_spa_apparent_elevation():
    site = (47.5, 8.7, 450.0)
    t = np.sort(np.random.default_rng(12).uniform(946_684_800.0, 1_767_225_600.0, 400))
    spa = _spa(t, *site, pressure_hpa=950.0, temperature_c=-5.0)
    up = spa["elevation"].to_numpy() > 0.5          # SPA switches refraction off below the horizon
    tags = compute_tags(t[up], *site, refraction=True, pressure_hpa=950.0, temperature_c=-5.0)
    assert np.abs(tags["sun_alt_deg"] - spa["apparent_elevation"].to_numpy()[up]).max() <= 0.02
    airless = compute_tags(t[up], *site)
    assert np.all(tags["sun_alt_deg"] > airless["sun_alt_deg"])   # refraction lifts, never lowers


def test_reda_andreas_2004_worked_example():
    # Reda & Andreas (2004), example in the appendix: 2003-10-17 12:30:30 local time
    # (UTC-7), 39.742476 N, 105.1786 W, 1830.14 m, 820 mbar, 11 C, delta T 67 s;
    # published: topocentric zenith 50.11162 deg, azimuth 194.34024 deg (refraction included).
    t = dt.datetime(2003, 10, 17, 19, 30, 30, tzinfo=dt.timezone.utc).timestamp()
    site = (39.742476, -105.1786, 1830.14)
    tags = compute_tags([t], *site, refraction=True, pressure_hpa=820.0, temperature_c=11.0)
    assert abs((90.0 - tags["sun_alt_deg"][0]) - 50.11162) <= 0.02
    assert abs(tags["sun_az_deg"][0] - 194.34024) <= 0.02
    # and pvlib reproduces the published numbers for the same inputs
    spa = _spa([t], *site, pressure_hpa=820.0, temperature_c=11.0, delta_t=67.0)
    assert abs(spa["apparent_zenith"].iloc[0] - 50.11162) < 1e-4
    assert abs(spa["azimuth"].iloc[0] - 194.34024) < 1e-4
