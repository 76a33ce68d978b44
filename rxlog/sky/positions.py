"""Where Jupiter and the Sun are: the site-independent quantities from ERFA, on a grid
of nodes and interpolated; altitude and azimuth at a site; optical refraction.

- Topocentric altitude/azimuth: the geocentric apparent (aberrated, light-time
  corrected) place from ERFA's ``apci``/``atciqz`` (nutation IAU 2000B, ~1 mas), turned
  to the site by the Earth rotation angle, less the site's WGS84 position (parallax),
  and to the horizon by ``hd2ae``; airless unless refraction is asked for. Polar motion
  and diurnal aberration (each < 0.5 arcsec) are ignored. Azimuth is from north
  through east.
- Elongation: the angle Sun-Earth-Jupiter.

Speed: ERFA is evaluated on a grid of nodes every ``NODE_STEP_S`` (12 h) around the
requested times, and only the slow, site-independent quantities are interpolated from
them (4-point Lagrange): geocentric apparent directions of Jupiter and the Sun in CIRS,
light time, distances, the Earth's jovicentric longitudes and DE. They change by at most
~1 deg/day, so the interpolation error is below 0.001 arcsec. Everything fast is
computed at each instant: the Earth rotation angle (from UT1) and the site's parallax
for alt/az, W(t - tau) for CML, Io's longitude for the Io phase. Sparse sets of times
(fewer than the nodes they would need) are computed directly.
"""

from __future__ import annotations

import math
import warnings

import erfa
import numpy as np

from rxlog.constants import AU_M
from rxlog.sky.jupiter import earth_from_jupiter, light_time
from rxlog.sky.timescales import (
    J2000_JD,
    J2000_UNIX,
    tai_minus_utc,
    tt_days,
    ut1_minus_utc,
)

NODE_STEP_S = 43200.0               # ERFA node spacing for interpolation (12 h)

# Saemundsson (1986, Sky & Telescope 72, 70), as in Meeus eq. 16.4 and NREL SPA eq. 42:
# R = 1.02 / tan(h + 10.3/(h + 5.11)) arcmin for 1010 hPa and 10 C (from memory; the
# tests check it against pvlib's SPA).
REFRACTION_MIN_ALT_DEG = -1.0


def geocentric(t: np.ndarray) -> dict[str, np.ndarray]:
    """The slowly changing, site-independent quantities at times t, straight from ERFA.

    Returns tau (light time, s), dist_au, theta (rad, Earth's longitude seen from
    Jupiter, in the IAU equator from its ICRF node), lam_e5 (rad, the same in E5's
    frame), de (rad), elong (rad), tdb_tt (s), and for Jupiter and the Sun the
    geocentric apparent direction in CIRS (jup_cirs, sun_cirs: unit vectors, (n, 3))
    and the Sun's distance sun_dist_au.
    """
    d_tt = tt_days(t, tai_minus_utc(t))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", erfa.ErfaWarning)  # "dubious year": reported by warn_once
        tdb_tt = erfa.dtdb(J2000_JD, d_tt, 0.0, 0.0, 0.0, 0.0)
        d_tdb = d_tt + tdb_tt / 86400.0
        pvh, pvb = erfa.epv00(J2000_JD, d_tdb)
        # CIP X, Y and CIO locator s by IAU 2000B (~1 mas)
        x, y, s = erfa.xys00b(J2000_JD, d_tt)
        astrom = erfa.apci(J2000_JD, d_tdb, pvb, pvh["p"], x, y, s)
    earth = pvb["p"]
    # The Sun's barycentric motion (~13 m/s) over a light time moves it < 40 km (< 0.01
    # arcsec as seen from here), so the Sun is taken at t for every light path.
    sun = pvb["p"] - pvh["p"]
    jup, tau = light_time(d_tdb, earth, sun)
    cirs = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", erfa.ErfaWarning)
        for name, pos in (("jup", jup), ("sun", sun)):
            ra, dec = erfa.c2s(pos - earth)
            ri, di = erfa.atciqz(ra, dec, astrom)   # light deflection, aberration, bias-precession-nutation
            cirs[name] = erfa.s2c(ri, di)

    r = jup - earth
    theta, de, lam_e5 = earth_from_jupiter(r, d_tdb - tau / 86400.0)
    return {"tau": tau, "dist_au": np.linalg.norm(r, axis=-1), "theta": theta, "lam_e5": lam_e5,
            "de": de, "elong": erfa.sepp(sun - earth, r), "tdb_tt": tdb_tt, "jup_cirs": cirs["jup"],
            "sun_cirs": cirs["sun"], "sun_dist_au": np.linalg.norm(sun - earth, axis=-1)}


_ANGLES = ("theta", "lam_e5")


def interpolated(t: np.ndarray, step: float = NODE_STEP_S) -> dict[str, np.ndarray]:
    """``geocentric`` quantities at t, from nodes every ``step`` s (4-point Lagrange)."""
    k0 = np.floor(t / step)
    s = t / step - k0
    nodes = np.unique(np.concatenate([k0 - 1, k0, k0 + 1, k0 + 2]))
    if nodes.size >= t.size:
        return geocentric(t)
    at_nodes = geocentric(nodes * step)
    i = np.searchsorted(nodes, k0 - 1)
    w = np.stack([-s * (s - 1) * (s - 2) / 6.0, (s + 1) * (s - 1) * (s - 2) / 2.0,
                  -(s + 1) * s * (s - 2) / 2.0, (s + 1) * s * (s - 1) / 6.0], axis=-1)
    out = {}
    for key, v in at_nodes.items():
        four = np.stack([v[i + j] for j in range(4)], axis=1)       # (n, 4) or (n, 4, 3)
        if key in _ANGLES:  # unwrap each stencil about its first node
            four = four[:, :1] + np.angle(np.exp(1j * (four - four[:, :1])))
        if four.ndim == 3:
            out[key] = erfa.pn(np.einsum("nk,nkc->nc", w, four))[1]
        else:
            out[key] = np.einsum("nk,nk->n", w, four)
    return out


def earth_rotation(t: np.ndarray, tai_utc: np.ndarray) -> np.ndarray:
    """Rotations (n, 3, 3) CIRS -> terrestrial by the Earth rotation angle (IERS 2010
    Conventions, erfa.era00, from UT1) at POSIX times t, given TAI-UTC there. Polar
    motion and s' (< 0.5 arcsec) are left out."""
    era = erfa.era00(J2000_JD, (t - J2000_UNIX + ut1_minus_utc(t, tai_utc)) / 86400.0)
    return erfa.rz(era, np.eye(3))


def site_alt_az(rotation: np.ndarray, cirs: np.ndarray, dist_au: np.ndarray, lat_deg: float,
                lon_deg: float, elev_m: float) -> tuple[np.ndarray, np.ndarray]:
    """Altitude and azimuth (deg, azimuth from north through east) at the site of a body at
    geocentric CIRS direction and distance, airless; ``rotation`` from ``earth_rotation``.

    The site's own WGS84 position (erfa.gd2gc) is subtracted in the terrestrial frame
    (topocentric parallax: up to 8.8 arcsec for the Sun); erfa.hd2ae turns the local hour
    angle and declination into the horizon. Diurnal aberration (< 0.3 arcsec) is left out.
    """
    lat, lon = math.radians(lat_deg), math.radians(lon_deg)
    site = erfa.gd2gc(1, lon, lat, elev_m) / AU_M    # WGS84, au
    body_lon, dec = erfa.c2s(erfa.rxp(rotation, cirs * dist_au[:, None]) - site)
    az, alt = erfa.hd2ae(lon - body_lon, dec, lat)
    return np.degrees(alt), np.degrees(az)


def refraction_deg(alt_deg, pressure_hpa: float = 1010.0, temperature_c: float = 10.0) -> np.ndarray:
    """Optical refraction (deg) to add to a true altitude, Saemundsson (1986) as in NREL SPA.

    Zero below -1 deg. Optical only: at 16-24 MHz the ionosphere bends rays by other
    amounts, which is why rxlog's tags are airless unless asked otherwise.
    """
    h = np.asarray(alt_deg, dtype=np.float64)
    hc = np.maximum(h, REFRACTION_MIN_ALT_DEG)
    r = (pressure_hpa / 1010.0) * (283.0 / (273.0 + temperature_c)) * 1.02 / (
        60.0 * np.tan(np.radians(hc + 10.3 / (hc + 5.11))))
    return np.where(h >= REFRACTION_MIN_ALT_DEG, r, 0.0)
