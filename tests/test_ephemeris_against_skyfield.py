"""Ephemeris tags against skyfield with JPL DE421 (skyfield-data), a test-only reference.

Reference: skyfield (Rhodes, https://rhodesmill.org/skyfield) with the DE421 kernel
shipped by the skyfield-data package (Folkner et al. 2008, JPL IOM 343R-08-003).
rxlog uses ERFA's epv00/plan94 instead, so agreement checks both the ephemeris and the
astrometry chain. Bounds: 0.02 deg for alt/az, 0.05 deg for CML III (issue targets).
"""

import datetime as dt
import warnings

import numpy as np
import pytest

from rxlog.sky.tags import compute_tags

with warnings.catch_warnings():
    warnings.simplefilter("ignore")  # skyfield-data warns that its IERS file is old; unused here
    from skyfield.api import Loader, load, wgs84
    from skyfield_data import get_skyfield_data_path

SITES = [(47.5, 8.7, 450.0), (-33.9, 151.2, 40.0), (64.8, -147.7, 130.0)]


@pytest.fixture(scope="module")
def sky():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        eph = Loader(get_skyfield_data_path(), verbose=False)("de421.bsp")
    return eph, load.timescale(builtin=True)


@pytest.fixture(scope="module")
def times():
    # random instants 2000-2026, inside DE421 and both libraries' Earth-orientation tables
    rng = np.random.default_rng(5)
    return np.sort(rng.uniform(946_684_800.0, 1_767_225_600.0, 120))


def _sf_times(ts, t_unix):
    return ts.from_datetimes([dt.datetime.fromtimestamp(x, tz=dt.timezone.utc) for x in t_unix])


@pytest.mark.parametrize("site", SITES)
def test_sun_and_jupiter_alt_az_match_skyfield(sky, times, site):
    eph, ts = sky
    tags = compute_tags(times, *site)
    t = _sf_times(ts, times)
    observer = eph["earth"] + wgs84.latlon(*site)
    for body, key in (("sun", "sun"), ("jupiter barycenter", "jupiter")):
        alt, az, _ = observer.at(t).observe(eph[body]).apparent().altaz()  # airless
        assert np.abs(tags[f"{key}_alt_deg"] - alt.degrees).max() <= 0.02
        # azimuth difference as an angle on the sky (it is undefined at the zenith)
        daz = (tags[f"{key}_az_deg"] - az.degrees + 180.0) % 360.0 - 180.0
        assert np.abs(daz * np.cos(np.radians(alt.degrees))).max() <= 0.02


def test_distance_light_time_and_elongation_match_skyfield(sky, times):
    eph, ts = sky
    tags = compute_tags(times, *SITES[0])
    earth = eph["earth"].at(_sf_times(ts, times))
    jup = earth.observe(eph["jupiter barycenter"])
    sun = earth.observe(eph["sun"])
    assert np.abs(tags["jupiter_distance_au"] - jup.distance().au).max() < 1e-3   # plan94 ~1e-4 au
    assert np.abs(tags["light_time_s"] - jup.light_time * 86400.0).max() < 0.5
    assert np.abs(tags["elongation_deg"] - jup.separation_from(sun).degrees).max() < 0.02


def _iau_jupiter_body_frame(tdb_jd):
    """IAU WGCCRE 2015 Jupiter rotation (Archinal et al. 2018, Table 1; System III 1965):
    the ICRF -> body-fixed matrix R3(W) R1(90 - dec0) R3(90 + ra0), written out here
    independently of rxlog's own node/longitude formulation."""
    d = tdb_jd - 2451545.0
    T = d / 36525.0
    ra0 = np.radians(268.056595 - 0.006499 * T)
    dec0 = np.radians(64.495303 + 0.002413 * T)
    W = np.radians((284.95 + 870.5360000 * d) % 360.0)

    def r1(a):
        c, s = np.cos(a), np.sin(a)
        o, z = np.ones_like(a), np.zeros_like(a)
        return np.array([[o, z, z], [z, c, s], [z, -s, c]]).transpose(2, 0, 1)

    def r3(a):
        c, s = np.cos(a), np.sin(a)
        o, z = np.ones_like(a), np.zeros_like(a)
        return np.array([[c, s, z], [-s, c, z], [z, z, o]]).transpose(2, 0, 1)

    return r3(W) @ r1(np.pi / 2 - dec0) @ r3(np.pi / 2 + ra0)


def test_cml3_and_de_match_skyfield_geometry_with_iau_rotation(sky, times):
    eph, ts = sky
    tags = compute_tags(times, *SITES[0])
    t = _sf_times(ts, times)
    astrometric = eph["earth"].at(t).observe(eph["jupiter barycenter"])
    to_earth = -astrometric.position.au / astrometric.distance().au        # (3, n), ICRF
    # rotation evaluated when the light left Jupiter
    m = _iau_jupiter_body_frame(t.tdb - astrometric.light_time)
    v = np.einsum("nij,jn->ni", m, to_earth)
    east_lon = np.degrees(np.arctan2(v[:, 1], v[:, 0]))
    cml_ref = (-east_lon) % 360.0                      # west longitude of the sub-Earth point
    de_ref = np.degrees(np.arcsin(v[:, 2]))
    dcml = (tags["cml3_deg"] - cml_ref + 180.0) % 360.0 - 180.0
    assert np.abs(dcml).max() <= 0.05
    assert np.abs(tags["de_deg"] - de_ref).max() <= 0.01
