"""Solar bursts only while the Sun is up, Jovian storms only while Jupiter is up and the
ephemeris puts (CML, Io phase) in a source region.

Reference for altitudes: skyfield with JPL DE421 (skyfield-data), test-only. Regions:
rxlog.sky (the package the simulator plans from; its own tests check it against
skyfield). A day at a raised event rate so the check is not vacuous.
"""

import datetime as dt
import warnings

import numpy as np
import pytest

from rxlog.sim.spectra import iter_spectra
from rxlog.sky.tags import station_tags
from rxlog.station.config import config_from_text
from rxlog.timeutil import parse_iso

with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    from skyfield.api import Loader, load, wgs84
    from skyfield_data import get_skyfield_data_path

START = parse_iso("2026-12-01T00:00:00Z")
LAT, LON, ELEV = 47.5, 8.7, 450.0


@pytest.fixture(scope="module")
def day(tmp_path_factory):
    cfg = config_from_text(f"""
[station]
name = "visibility-test"
latitude_deg = {LAT}
longitude_deg = {LON}
elevation_m = {ELEV}
[spectra]
channels = 64
cadence_s = 10.0
""", tmp_path_factory.mktemp("vis") / "station.toml")
    classes = ("solar_iii", "solar_ii", "solar_iv", "fadeout", "jovian_l", "jovian_s")
    run = iter_spectra(cfg, START, 48, seed=3, rfi="quiet-rural", include=classes, event_rate=30)
    return cfg, run.truth_rows()


def skyfield_alt(body, t_unix):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        eph = Loader(get_skyfield_data_path(), verbose=False)("de421.bsp")
    ts = load.timescale(builtin=True)
    t = ts.from_datetimes([dt.datetime.fromtimestamp(x, tz=dt.timezone.utc) for x in t_unix])
    site = eph["earth"] + wgs84.latlon(LAT, LON, elevation_m=ELEV)
    target = eph["sun"] if body == "sun" else eph["jupiter barycenter"]
    return site.at(t).observe(target).apparent().altaz()[0].degrees


def _times(rows):
    return np.array([parse_iso(r[k]) for r in rows for k in ("start_utc", "peak_utc", "end_utc")])


def test_solar_events_only_while_the_sun_is_up(day):
    _, rows = day
    solar = [r for r in rows if r["class"].startswith("solar") or r["class"] == "fadeout"]
    assert len(solar) >= 10
    # 15-s visibility steps: the Sun may be a few hundredths of a degree below at an edge
    assert skyfield_alt("sun", _times(solar)).min() > -0.2


def test_jovian_storms_only_while_jupiter_is_up_and_in_a_source_region(day):
    cfg, rows = day
    jovian = [r for r in rows if r["class"].startswith("jovian")]
    assert jovian
    t = _times(jovian)
    assert skyfield_alt("jupiter", t).min() > -0.2
    for r in jovian:
        inside = np.linspace(parse_iso(r["start_utc"]) + 60, parse_iso(r["end_utc"]) - 60, 20)
        regions = set(station_tags(cfg, inside)["source_region"])
        assert regions == {r["source_region"]}, (r, regions)
