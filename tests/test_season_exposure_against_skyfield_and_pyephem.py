"""Exposure over CML III x Io phase for a month at one site, against an independent
reference: skyfield with JPL DE421 (skyfield-data; Folkner et al. 2008) for Jupiter's
altitude, light time and the sub-Earth point, the IAU WGCCRE 2015 rotation of Jupiter
(Archinal et al. 2018, Table 1: System III W = 284.95 + 870.536 d) for CML III, and
PyEphem's Io (x east, y south, z toward the Earth, Jupiter radii) for the Io phase.
The reference samples every 60 s (ours every 120 s), so bins differ by the steps that
straddle their edges: each bin must agree within one bin's share of the exposure
(total exposure / number of observed bins), and the totals within 0.5 %.
"""

import datetime as dt
import warnings

import ephem
import numpy as np

from rxlog.season.exposure import season_timeline
from rxlog.season.occurrence import occurrence_map
from rxlog.station.config import config_from_text
from rxlog.timeutil import iso, parse_iso

with warnings.catch_warnings():
    warnings.simplefilter("ignore")  # skyfield-data warns that its IERS file is old; unused here
    from skyfield.api import Loader, load, wgs84
    from skyfield_data import get_skyfield_data_path

SITE = (47.5, 8.7, 450.0)
T0, T1 = parse_iso("2026-12-01T00:00:00Z"), parse_iso("2026-12-31T00:00:00Z")
MIN_ALT = 10.0
CONFIG = f"""
[station]
name = "ref"
latitude_deg = {SITE[0]}
longitude_deg = {SITE[1]}
elevation_m = {SITE[2]}
"""


def _quality():
    """Hours of a month: gaps on two days, more masking by day."""
    rows = []
    for h in np.arange(T0, T1, 3600.0):
        day, hour = int((h - T0) // 86400), int(h % 86400 // 3600)
        covered = 0.0 if day in (4, 17) and hour < 12 else 3600.0
        rows.append({"station": "ref", "hour_utc": iso(h), "covered_s": covered, "gap_s": 3600.0 - covered,
                     "masked_fraction": 0.12 if 7 <= hour < 17 else 0.03})
    return rows


def _iau_rotation(tdb_jd):
    """ICRF -> Jupiter System III body frame, R3(W) R1(90 - dec0) R3(90 + ra0) (Archinal et al. 2018)."""
    d = tdb_jd - 2451545.0
    T = d / 36525.0
    ra0, dec0 = np.radians(268.056595 - 0.006499 * T), np.radians(64.495303 + 0.002413 * T)
    W = np.radians((284.95 + 870.5360000 * d) % 360.0)

    def r1(a):
        c, s, o, z = np.cos(a), np.sin(a), np.ones_like(a), np.zeros_like(a)
        return np.array([[o, z, z], [z, c, s], [z, -s, c]]).transpose(2, 0, 1)

    def r3(a):
        c, s, o, z = np.cos(a), np.sin(a), np.ones_like(a), np.zeros_like(a)
        return np.array([[c, s, z], [-s, c, z], [z, z, o]]).transpose(2, 0, 1)

    return r3(W) @ r1(np.pi / 2 - dec0) @ r3(np.pi / 2 + ra0)


def _io_phase_pyephem(t_unix):
    """Geocentric Io phase from PyEphem: atan2(position along the apparent orbit's major
    axis, positive east; -z), the axis fitted to each day's positions."""
    out = np.empty(t_unix.size)
    days = np.floor(t_unix / 86400.0)
    for d in np.unique(days):
        sel = np.flatnonzero(days == d)
        xyz = np.array([(io.x, io.y, io.z) for io in
                        (ephem.Io(ephem.Date(dt.datetime.fromtimestamp(float(t), tz=dt.timezone.utc)
                                              .replace(tzinfo=None))) for t in t_unix[sel])])
        _, _, vt = np.linalg.svd(xyz[:, :2] - xyz[:, :2].mean(axis=0))
        axis = vt[0] if vt[0][0] > 0 else -vt[0]
        out[sel] = np.degrees(np.arctan2(xyz[:, :2] @ axis, -xyz[:, 2])) % 360.0
    return out


def _reference_exposure(quality, step_s=60.0):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        eph = Loader(get_skyfield_data_path(), verbose=False)("de421.bsp")
    ts = load.timescale(builtin=True)
    t_unix = T0 + step_s * (np.arange(int((T1 - T0) / step_s)) + 0.5)
    t = ts.from_datetimes([dt.datetime.fromtimestamp(x, tz=dt.timezone.utc) for x in t_unix])
    observer = eph["earth"] + wgs84.latlon(*SITE)
    alt = observer.at(t).observe(eph["jupiter barycenter"]).apparent().altaz()[0].degrees
    astrometric = eph["earth"].at(t).observe(eph["jupiter barycenter"])
    to_earth = -astrometric.position.au / astrometric.distance().au
    v = np.einsum("nij,jn->ni", _iau_rotation(t.tdb - astrometric.light_time), to_earth)
    cml = (-np.degrees(np.arctan2(v[:, 1], v[:, 0]))) % 360.0
    io = _io_phase_pyephem(t_unix)
    by_hour = {parse_iso(q["hour_utc"]): q["covered_s"] / 3600.0 * (1 - q["masked_fraction"]) for q in quality}
    listening = np.array([by_hour[np.floor(x / 3600.0) * 3600.0] for x in t_unix])
    w = step_s * listening * (alt >= MIN_ALT)
    grid = np.zeros((36, 36))
    np.add.at(grid, ((cml // 10).astype(int) % 36, (io // 10).astype(int) % 36), w)
    return grid


def test_exposure_over_cml_and_io_phase_matches_skyfield_and_pyephem():
    cfg = config_from_text(CONFIG, "/tmp/rxlog-season-ref/station.toml")
    quality = _quality()
    ours = occurrence_map(season_timeline(cfg, T0, T1, quality), [], min_alt_deg=MIN_ALT).exposure_s
    ref = _reference_exposure(quality)
    share = ref.sum() / np.count_nonzero(ref)
    assert ref.sum() > 100 * 3600.0                               # a month with Jupiter up at night
    assert abs(ours.sum() - ref.sum()) <= 0.005 * ref.sum()
    assert np.abs(ours - ref).max() <= share
    assert np.count_nonzero(ours) >= 0.9 * np.count_nonzero(ref)
