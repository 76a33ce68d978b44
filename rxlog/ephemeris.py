"""Ephemeris tags: CML (System III), Io phase, Jupiter and Sun positions, source regions.

Everything here takes an array of POSIX seconds (UTC) and returns arrays of the same
shape. Positions come from ERFA, the C library under astropy: ``epv00`` for the Earth
and the Sun (the SOFA/ERFA Earth ephemeris, VSOP87-based) and ``plan94`` for Jupiter
(Simon et al. 1994, A&A 282, 663) -- astropy's ``builtin`` ephemeris, which needs no
download. Earth orientation (UT1-UTC) and leap seconds come from the tables bundled
with astropy (package ``astropy-iers-data``); nothing is ever fetched. Past the end of
the Earth-orientation table UT1-UTC is held at its last value and a one-line warning
is logged: alt/az then drift by about 0.004 deg per second of UT1 error, CML and Io
phase are unaffected.

Definitions and sources
- CML III: west longitude of the sub-Earth point in System III (1965), from the IAU
  WGCCRE 2015 rotation of Jupiter (Archinal et al. 2018, Celest. Mech. Dyn. Astr. 130:22,
  Table 1), evaluated at the time the light left Jupiter. The periodic pole terms of that
  table (< 0.003 deg) are left out.
- Io phase: Io's orbital angle from superior geocentric conjunction, increasing with its
  motion (0 deg behind Jupiter, 90 deg near eastern elongation, 180 deg in transit).
  Io's longitude is the mean longitude of Lieske's E5 theory (Lieske 1998, A&A Suppl.
  129, 205; as tabulated in Meeus, Astronomical Algorithms, 2nd ed., ch. 44) plus its
  largest periodic term, 0.47259 sin 2(l1 - l2) (Io's forced eccentricity). The terms
  left out sum to less than 0.1 deg. E5 longitudes are broken longitudes: from the
  B1950 equinox along the B1950 ecliptic to the node of Jupiter's orbit, along the
  orbit to the node of Jupiter's equator, then along the equator.
- Topocentric altitude/azimuth: the geocentric apparent (aberrated, light-time
  corrected) place from ERFA's ``apci``/``atciqz`` (nutation IAU 2000B, ~1 mas), turned
  to the site by the Earth rotation angle, less the site's WGS84 position (parallax),
  and to the horizon by ``hd2ae``; airless unless refraction is asked for. Polar motion
  and diurnal aberration (each < 0.5 arcsec) are ignored. Azimuth is from north
  through east.
- DE: jovicentric declination of the Earth, from the same IAU pole. Elongation: the
  angle Sun-Earth-Jupiter. Distance and light time: Earth centre to Jupiter at the
  light-departure time.

Speed: ERFA is evaluated on a grid of nodes every ``NODE_STEP_S`` (12 h) around the
requested times, and only the slow, site-independent quantities are interpolated from
them (4-point Lagrange): geocentric apparent directions of Jupiter and the Sun in CIRS,
light time, distances, the Earth's jovicentric longitudes and DE. They change by at most
~1 deg/day, so the interpolation error is below 0.001 arcsec. Everything fast is
computed at each instant: the Earth rotation angle (from UT1) and the site's parallax
for alt/az, W(t - tau) for CML, Io's longitude for the Io phase. Sparse sets of times
(fewer than the nodes they would need) are computed directly.

astropy is imported on first use (its IERS module takes seconds to import), and its
IERS settings (no download, no age limit, degraded accuracy past the table allowed) are
applied before rxlog touches anything else in astropy.
"""

from __future__ import annotations

import functools
import logging
import math
import warnings
from dataclasses import dataclass

import erfa
import numpy as np

from rxlog.errors import RxlogError

log = logging.getLogger("rxlog.ephemeris")

# --- constants -----------------------------------------------------------------------

AU_M = 149_597_870_700.0            # IAU 2012 Resolution B2 (exact)
C_M_S = 299_792_458.0               # SI definition (exact)
AU_LIGHT_S = AU_M / C_M_S           # light time for 1 au, s (~499.005)
J2000_UNIX = 946_728_000.0          # 2000-01-01T12:00:00 UTC as POSIX seconds
J2000_JD = 2451545.0
MJD_UNIX_EPOCH = 40587.0            # MJD of 1970-01-01T00:00:00 UTC
TT_MINUS_TAI_S = 32.184             # IAU 1991 Resolution A4 (exact)
E5_EPOCH_JD = 2443000.5             # 1976 Aug 10.0 TDT, epoch of Lieske's E5 theory
B1950_JD = 2433282.4235             # Besselian epoch B1950.0 (Lieske 1979)

# Supported range: leap seconds are defined from 1972; plan94 is fitted 1000-3000 AD
# but rxlog has no use for dates this far out.
T_MIN_UNIX = 63_072_000.0           # 1972-01-01T00:00:00Z
T_MAX_UNIX = 4_102_444_800.0        # 2100-01-01T00:00:00Z

NODE_STEP_S = 43200.0               # ERFA node spacing for interpolation (12 h)

# IAU WGCCRE 2015, Jupiter (Archinal et al. 2018, Table 1); T in Julian centuries and
# d in days from J2000 TDB. W is System III (1965).
JUP_POLE_RA0, JUP_POLE_RA1 = 268.056595, -0.006499
JUP_POLE_DEC0, JUP_POLE_DEC1 = 64.495303, 0.002413
JUP_W0, JUP_W_RATE = 284.95, 870.5360000

# Lieske E5 mean longitudes of Io and Europa, degrees and degrees/day from E5_EPOCH_JD
# (Meeus, Astronomical Algorithms 2nd ed., ch. 44, high-accuracy method). These E5
# values are from memory; the tests check the result against PyEphem and Meeus's
# low-accuracy method (agreement ~0.1 deg).
IO_L0, IO_RATE = 106.07719, 203.488955790
EUROPA_L0, EUROPA_RATE = 175.73161, 101.374724735
IO_FORCED_TERM = 0.47259            # deg, coefficient of sin 2(l1 - l2)
# E5's frame (same source, from memory): node of Jupiter's equator on its orbit, counted
# as a broken longitude from the B1950 equinox, and the equator's inclination to the
# orbit. The frame's pole they give agrees with the IAU 2015 pole within 0.003 deg.
E5_PSI, E5_I = 316.5182, 3.120262
JUPITER_PERIOD_D = 4332.59          # sidereal period, days (mean motion 0.0830912 deg/day)

# Saemundsson (1986, Sky & Telescope 72, 70), as in Meeus eq. 16.4 and NREL SPA eq. 42:
# R = 1.02 / tan(h + 10.3/(h + 5.11)) arcmin for 1010 hPa and 10 C (from memory; the
# tests check it against pvlib's SPA).
REFRACTION_MIN_ALT_DEG = -1.0

TAG_KEYS = ("cml3_deg", "io_phase_deg", "jupiter_alt_deg", "jupiter_az_deg", "sun_alt_deg",
            "sun_az_deg", "source_region", "jupiter_distance_au", "light_time_s", "de_deg",
            "elongation_deg")


# --- source regions ------------------------------------------------------------------

# Approximate Io-A..D and non-Io-A boxes in the CML III / Io-phase plane, after Carr,
# Desch & Alexander (1983), "Phenomenology of magnetospheric radio emissions", in
# Physics of the Jovian Magnetosphere (Cambridge UP) -- values from memory, so they are
# configurable. Order is precedence: the first box that contains a point names it; the
# Io-controlled boxes come before non-Io-A, which contains Io-A, and Io-B before Io-D,
# which it touches.
DEFAULT_REGION_BOXES: list[dict] = [
    {"name": "Io-A", "cml": [200.0, 270.0], "io_phase": [195.0, 265.0]},
    {"name": "Io-B", "cml": [105.0, 185.0], "io_phase": [75.0, 105.0]},
    {"name": "Io-C", "cml": [280.0, 360.0], "io_phase": [225.0, 250.0]},
    {"name": "Io-D", "cml": [0.0, 200.0], "io_phase": [95.0, 130.0]},
    {"name": "non-Io-A", "cml": [200.0, 290.0], "io_phase": "any"},
]


@dataclass(frozen=True)
class Region:
    """A box in the CML III / Io-phase plane, degrees, edges included.

    A range whose start is above its end wraps through 0/360 (e.g. 330..30). An Io
    range of None means any Io phase.
    """

    name: str
    cml_from: float
    cml_to: float
    io_from: float | None = None
    io_to: float | None = None

    def contains(self, cml_deg, io_phase_deg) -> np.ndarray:
        inside = _in_range(np.asarray(cml_deg, dtype=np.float64), self.cml_from, self.cml_to)
        if self.io_from is not None:
            inside &= _in_range(np.asarray(io_phase_deg, dtype=np.float64), self.io_from, self.io_to)
        return inside


def _in_range(x: np.ndarray, lo: float, hi: float) -> np.ndarray:
    x = np.mod(x, 360.0)
    if hi - lo >= 360.0:
        return np.ones(x.shape, dtype=bool)
    if lo <= hi:
        # 360 as an upper edge means "up to and including 0/360"
        return ((x >= lo) & (x <= hi)) | ((hi == 360.0) & (x == 0.0))
    return (x >= lo) | (x <= hi)


def _range_problem(value, what: str, allow_any: bool) -> str | None:
    if allow_any and value == "any":
        return None
    expected = f"{what} = [from, to] in degrees 0-360" + (" or \"any\"" if allow_any else "")
    if (not isinstance(value, list) or len(value) != 2
            or not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in value)):
        return f"expected {expected}, got {value!r}"
    lo, hi = value
    if not (0 <= lo <= 360 and 0 <= hi <= 360):
        return f"expected {expected}, got {value!r} (outside 0-360)"
    if lo == hi:
        return f"expected {expected} with from != to, got {value!r} (a start above the end wraps through 0)"
    return None


def check_region_boxes(boxes) -> list[str]:
    """Problems with a ``[regions] boxes`` list, one line per bad box ([] when fine)."""
    if not isinstance(boxes, list):
        return [f"expected a list of boxes like {{ name = \"Io-B\", cml = [105, 185], io_phase = [75, 105] }}, got {boxes!r}"]
    problems: list[str] = []
    seen: set[str] = set()
    for n, box in enumerate(boxes, start=1):
        if not isinstance(box, dict):
            problems.append(f"box {n}: expected a table {{ name = ..., cml = [from, to], io_phase = [from, to] or \"any\" }}, got {box!r}")
            continue
        name = box.get("name")
        label = f"box {n}" + (f" ({name!r})" if isinstance(name, str) else "")
        unknown = sorted(set(box) - {"name", "cml", "io_phase"})
        if unknown:
            problems.append(f"{label}: unknown key(s) {', '.join(unknown)} (expected name, cml, io_phase)")
        if not isinstance(name, str) or not name.strip() or name.strip() == "none":
            problems.append(f"{label}: expected name = a non-empty string other than \"none\", got {name!r}")
        elif name in seen:
            problems.append(f"{label}: duplicate name {name!r} (each box needs its own name)")
        else:
            seen.add(name)
        for key, allow_any in (("cml", False), ("io_phase", True)):
            if key not in box:
                problems.append(f"{label}: missing {key}")
                continue
            p = _range_problem(box[key], key, allow_any)
            if p:
                problems.append(f"{label}: {p}")
    return problems


def regions_from_boxes(boxes) -> list[Region]:
    """Region list from ``[regions] boxes`` tables; RxlogError naming each bad box."""
    problems = check_region_boxes(boxes)
    if problems:
        raise RxlogError("[regions] boxes: " + "; ".join(problems))
    out = []
    for box in boxes:
        io = box["io_phase"]
        io_from, io_to = (None, None) if io == "any" else (float(io[0]), float(io[1]))
        out.append(Region(box["name"], float(box["cml"][0]), float(box["cml"][1]), io_from, io_to))
    return out


def regions_from_config(cfg) -> list[Region]:
    """The station's region table (``[regions] boxes``, or the defaults), in order of precedence."""
    boxes = (cfg.get("regions") or {}).get("boxes", DEFAULT_REGION_BOXES)
    return regions_from_boxes(boxes)


def source_region(cml_deg, io_phase_deg, regions=None) -> np.ndarray:
    """Name of the first region containing each (CML, Io phase) point, 'none' outside all.

    ``regions`` is a list of ``Region`` in order of precedence (default: the built-in table).
    """
    regions = regions_from_boxes(DEFAULT_REGION_BOXES) if regions is None else list(regions)
    cml = np.asarray(cml_deg, dtype=np.float64)
    io = np.broadcast_to(np.asarray(io_phase_deg, dtype=np.float64), cml.shape)
    width = max([4] + [len(r.name) for r in regions])
    out = np.full(cml.shape, "none", dtype=f"<U{width}")
    free = np.ones(cml.shape, dtype=bool)
    for r in regions:
        hit = free & r.contains(cml, io)
        out[hit] = r.name
        free &= ~hit
    return out


# --- offline astropy / ERFA setup ----------------------------------------------------

_warned: set[str] = set()


def _warn_once(key: str, message: str) -> None:
    if key not in _warned:
        _warned.add(key)
        log.warning(message)


@functools.cache
def _tables():
    """IERS offline settings, then the bundled leap-second and UT1 tables as numpy arrays."""
    from astropy.utils import iers

    iers.conf.auto_download = False
    iers.conf.auto_max_age = None
    iers.conf.iers_degraded_accuracy = "warn"
    import astropy_iers_data

    leap = iers.LeapSeconds.from_iers_leap_seconds(astropy_iers_data.IERS_LEAP_SECOND_FILE)
    leap_unix = (np.asarray(leap["mjd"], dtype=np.float64) - MJD_UNIX_EPOCH) * 86400.0
    leap_tai_utc = np.asarray(leap["tai_utc"], dtype=np.float64)
    expires_unix = (float(leap.expires.mjd) - MJD_UNIX_EPOCH) * 86400.0
    eop_unix, ut1_utc = _read_finals(astropy_iers_data.IERS_A_FILE)
    # UT1-TAI is continuous across leap seconds, UT1-UTC is not: interpolate the former.
    ut1_tai = ut1_utc - leap_tai_utc[np.searchsorted(leap_unix, eop_unix, side="right") - 1]
    return {"leap_unix": leap_unix, "leap_tai_utc": leap_tai_utc,
            "leap_expires_unix": expires_unix, "eop_unix": eop_unix, "ut1_tai": ut1_tai}


def _read_finals(path) -> tuple[np.ndarray, np.ndarray]:
    """IERS finals2000A.all (fixed columns, IERS ReadMe.finals2000A): MJD in columns 8-15,
    UT1-UTC from Bulletin A in 59-68 and from Bulletin B in 155-165; B where given.

    Read by hand because astropy's ``iers.IERS_A.open`` of the same file gives the same
    UT1-UTC (within 1e-14 s) but takes ~3 s against ~0.15 s here (measured on one core
    of the development machine, astropy 8.0), which every fresh process would pay."""
    mjd, ut1 = [], []
    with open(path, encoding="ascii") as f:
        for line in f:
            value = line[154:165].strip() or line[58:68].strip()
            day = line[7:15].strip()
            if day and value:
                mjd.append(float(day))
                ut1.append(float(value))
    return (np.array(mjd) - MJD_UNIX_EPOCH) * 86400.0, np.array(ut1)


def _tai_minus_utc(t: np.ndarray, tb) -> np.ndarray:
    # A lookup in the bundled table rather than erfa.utctai: the same TAI-UTC, but erfa
    # took 0.88 s against 0.10 s here for 10^6 times (timed on the development machine).
    i = np.searchsorted(tb["leap_unix"], t, side="right") - 1
    if t.size and t.max() > tb["leap_expires_unix"]:
        _warn_once("leap", "rxlog ephemeris: leap-second table expires "
                   f"{_day(tb['leap_expires_unix'])}; later times assume no new leap second")
    return tb["leap_tai_utc"][np.clip(i, 0, None)]


def _ut1_minus_utc(t: np.ndarray, tai_utc: np.ndarray, tb) -> np.ndarray:
    # Linear in UT1-TAI (continuous across leap seconds), as astropy's IERS.ut1_utc is in
    # UT1-UTC with its leap-second correction: the same values within 1e-14 s, but 0.14 s
    # against astropy's 0.37 s for 10^6 times (timed on the development machine).
    eu = tb["eop_unix"]
    if t.size and (t.max() > eu[-1] or t.min() < eu[0]):
        _warn_once("eop", "rxlog ephemeris: times outside the bundled IERS table "
                   f"({_day(eu[0])} to {_day(eu[-1])}); UT1-UTC held at the table's end value "
                   "(alt/az slightly less accurate)")
    return np.interp(t, eu, tb["ut1_tai"]) + tai_utc


def _day(t: float) -> str:
    import datetime as dt

    return dt.datetime.fromtimestamp(float(t), tz=dt.timezone.utc).strftime("%Y-%m-%d")


@functools.cache
def _icrs_to_b1950_ecliptic() -> np.ndarray:
    """Rotation: J2000 mean equator (~ICRS) -> mean ecliptic and equinox of B1950.

    Obliquity at B1950 from the IAU 1980 formula (erfa.obl80) and IAU 1976 precession
    (Lieske et al. 1977, erfa.pmat76). FK4's equinox offset and the frame bias (< 1 arcsec)
    are ignored: they move Io's longitude origin by less than 0.0003 deg.
    """
    return erfa.rx(erfa.obl80(B1950_JD, 0.0), erfa.pmat76(B1950_JD, 0.0))


@functools.cache
def _icrs_to_e5_equator() -> np.ndarray:
    """Rotation from ICRS to E5's frame of Jupiter's equator (x toward the node of the
    equator on Jupiter's orbit), by E5's chain of broken longitudes (Meeus ch. 44): B1950
    ecliptic -> node of the orbit (Omega, inclination J) -> node of the equator on the
    orbit (psi, inclination I).

    Omega and J are those of Jupiter's mean orbit on the B1950 ecliptic, averaged from
    ERFA plan94 over one orbital period about J2000. The frame's pole agrees with the
    IAU 2015 pole within 0.003 deg; the drifts of psi (-2e-6 deg/day) and I move Io's
    longitude origin by less than 1e-4 deg over this century, so they are left out.
    """
    days = np.linspace(-JUPITER_PERIOD_D / 2, JUPITER_PERIOD_D / 2, 2048, endpoint=False)
    pv = erfa.plan94(J2000_JD, days, 5)
    normal = erfa.pn(erfa.pxp(pv["p"], pv["v"]))[1].mean(axis=0)     # pole of the mean orbit
    to_ecliptic = _icrs_to_b1950_ecliptic()
    h50 = erfa.pn(erfa.rxp(to_ecliptic, normal))[1]
    omega = math.atan2(h50[0], -h50[1])
    incl = math.acos(h50[2])
    psi, i_eq = math.radians(E5_PSI), math.radians(E5_I)
    return erfa.rx(i_eq, erfa.rz(psi - omega, erfa.rx(incl, erfa.rz(omega, to_ecliptic))))


def _icrs_to_jupiter_equator(d_tdb: np.ndarray) -> np.ndarray:
    """Rotations (n, 3, 3) from ICRS to Jupiter's IAU equator frame at TDB days from J2000:
    x toward the equator's ascending node on the ICRF equator (RA a0 + 90 deg), z the pole."""
    t = d_tdb / 36525.0
    ra0 = np.radians(JUP_POLE_RA0 + JUP_POLE_RA1 * t)
    dec0 = np.radians(JUP_POLE_DEC0 + JUP_POLE_DEC1 * t)
    return erfa.rx(np.pi / 2 - dec0, erfa.rz(np.pi / 2 + ra0, np.eye(3)))


# --- the geometry, evaluated exactly at given times ----------------------------------

def _unit(v: np.ndarray) -> np.ndarray:
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def _dot(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    return np.einsum("...i,...i->...", a, b)


def _jupiter_pole(t_centuries: np.ndarray) -> np.ndarray:
    ra = np.radians(JUP_POLE_RA0 + JUP_POLE_RA1 * t_centuries)
    dec = np.radians(JUP_POLE_DEC0 + JUP_POLE_DEC1 * t_centuries)
    return np.stack([np.cos(dec) * np.cos(ra), np.cos(dec) * np.sin(ra), np.sin(dec)], axis=-1)


def _tt_days(t: np.ndarray, tai_utc: np.ndarray) -> np.ndarray:
    """TT days from J2000 for POSIX seconds t."""
    return (t - J2000_UNIX + tai_utc + TT_MINUS_TAI_S) / 86400.0


def _geocentric(t: np.ndarray) -> dict[str, np.ndarray]:
    """The slowly changing, site-independent quantities at times t, straight from ERFA.

    Returns tau (light time, s), dist_au, theta (rad, Earth's longitude seen from
    Jupiter, in the IAU equator from its ICRF node), lam_e5 (rad, the same in E5's
    frame), de (rad), elong (rad), tdb_tt (s), and for Jupiter and the Sun the
    geocentric apparent direction in CIRS (jup_cirs, sun_cirs: unit vectors, (n, 3))
    and the Sun's distance sun_dist_au.
    """
    tb = _tables()
    d_tt = _tt_days(t, _tai_minus_utc(t, tb))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", erfa.ErfaWarning)  # "dubious year": reported by _warn_once
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

    tau = np.zeros_like(d_tdb)
    for _ in range(3):  # Jupiter's light time from the geocentre; converges far below 1 us
        jup = erfa.plan94(J2000_JD, d_tdb - tau / 86400.0, 5)["p"] + sun
        tau = np.linalg.norm(jup - earth, axis=-1) * AU_LIGHT_S
    cirs = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", erfa.ErfaWarning)
        for name, pos in (("jup", jup), ("sun", sun)):
            ra, dec = erfa.c2s(pos - earth)
            ri, di = erfa.atciqz(ra, dec, astrom)   # light deflection, aberration, bias-precession-nutation
            cirs[name] = erfa.s2c(ri, di)

    r = jup - earth
    dist = np.linalg.norm(r, axis=-1)
    # the Earth seen from Jupiter: longitude and latitude in its IAU equator, and E5's
    theta, de = erfa.c2s(erfa.rxp(_icrs_to_jupiter_equator(d_tdb - tau / 86400.0), -r))
    lam_e5 = math.radians(E5_PSI) + erfa.c2s(erfa.rxp(_icrs_to_e5_equator(), -r))[0]
    elong = erfa.sepp(sun - earth, r)
    return {"tau": tau, "dist_au": dist, "theta": theta, "lam_e5": lam_e5, "de": de, "elong": elong,
            "tdb_tt": tdb_tt, "jup_cirs": cirs["jup"], "sun_cirs": cirs["sun"],
            "sun_dist_au": np.linalg.norm(sun - earth, axis=-1)}


def _earth_rotation(t: np.ndarray) -> np.ndarray:
    """Rotations (n, 3, 3) CIRS -> terrestrial by the Earth rotation angle (IERS 2010
    Conventions, erfa.era00, from UT1). Polar motion and s' (< 0.5 arcsec) are left out."""
    tb = _tables()
    dut1 = _ut1_minus_utc(t, _tai_minus_utc(t, tb), tb)
    era = erfa.era00(J2000_JD, (t - J2000_UNIX + dut1) / 86400.0)
    return erfa.rz(era, np.eye(3))


def _site_alt_az(rotation: np.ndarray, cirs: np.ndarray, dist_au: np.ndarray, lat_deg: float,
                 lon_deg: float, elev_m: float) -> tuple[np.ndarray, np.ndarray]:
    """Altitude and azimuth (deg, azimuth from north through east) at the site of a body at
    geocentric CIRS direction and distance, airless.

    The site's own WGS84 position (erfa.gd2gc) is subtracted in the terrestrial frame
    (topocentric parallax: up to 8.8 arcsec for the Sun); erfa.hd2ae turns the local hour
    angle and declination into the horizon. Diurnal aberration (< 0.3 arcsec) is left out.
    """
    lat, lon = math.radians(lat_deg), math.radians(lon_deg)
    site = erfa.gd2gc(1, lon, lat, elev_m) / AU_M    # WGS84, au
    body_lon, dec = erfa.c2s(erfa.rxp(rotation, cirs * dist_au[:, None]) - site)
    az, alt = erfa.hd2ae(lon - body_lon, dec, lat)
    return np.degrees(alt), np.degrees(az)


# --- interpolation from nodes --------------------------------------------------------

_ANGLES = ("theta", "lam_e5")


def _interpolated(t: np.ndarray, step: float) -> dict[str, np.ndarray]:
    """``_geocentric`` quantities at t, from nodes every ``step`` s (4-point Lagrange)."""
    k0 = np.floor(t / step)
    s = t / step - k0
    nodes = np.unique(np.concatenate([k0 - 1, k0, k0 + 1, k0 + 2]))
    if nodes.size >= t.size:
        return _geocentric(t)
    at_nodes = _geocentric(nodes * step)
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


# --- public API ----------------------------------------------------------------------

def _check_site(lat_deg, lon_deg, elev_m) -> tuple[float, float, float]:
    try:
        lat, lon, elev = float(lat_deg), float(lon_deg), float(elev_m)
    except (TypeError, ValueError):
        raise RxlogError(f"station position: expected numbers, got latitude {lat_deg!r}, "
                         f"longitude {lon_deg!r}, elevation {elev_m!r}") from None
    if not (-90.0 <= lat <= 90.0) or not (-180.0 <= lon <= 360.0) or not (-500.0 <= elev <= 9000.0):
        raise RxlogError(f"station position: latitude {lat} (expected -90..90), longitude {lon} "
                         f"(expected -180..360, east), elevation {elev} m (expected -500..9000)")
    return lat, lon, elev


def _check_times(times_unix) -> np.ndarray:
    try:
        t = np.asarray(times_unix, dtype=np.float64)
    except (TypeError, ValueError):
        raise RxlogError(f"times: expected POSIX seconds (numbers), got {times_unix!r:.80}") from None
    if t.size and not np.all(np.isfinite(t)):
        raise RxlogError("times: expected finite POSIX seconds, got NaN or infinity")
    if t.size and (t.min() < T_MIN_UNIX or t.max() >= T_MAX_UNIX):
        raise RxlogError("times: expected dates from 1972-01-01 to 2099-12-31 UTC "
                         f"(POSIX {T_MIN_UNIX:.0f}..{T_MAX_UNIX:.0f}), got {t.min():.0f}..{t.max():.0f}")
    return t


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


CHUNK = 200_000  # times per pass: bounds memory however long the request


def compute_tags(times_unix, lat_deg, lon_deg, elev_m, regions=None, *, refraction: bool = False,
                 pressure_hpa: float = 1010.0, temperature_c: float = 10.0) -> dict[str, np.ndarray]:
    """All ephemeris tags at POSIX times (any array shape; results have the same shape).

    Keys: cml3_deg, io_phase_deg, jupiter_alt_deg, jupiter_az_deg, sun_alt_deg,
    sun_az_deg, source_region ('none' outside all boxes), jupiter_distance_au,
    light_time_s, de_deg, elongation_deg. Altitudes are airless unless ``refraction``
    (optical, Saemundsson). ``regions``: list of ``Region`` (default: built-in table).
    """
    t = _check_times(times_unix)
    lat, lon, elev = _check_site(lat_deg, lon_deg, elev_m)
    regions = regions_from_boxes(DEFAULT_REGION_BOXES) if regions is None else list(regions)
    flat = t.ravel()
    parts = [_tags_flat(flat[a:a + CHUNK], lat, lon, elev, regions, refraction, pressure_hpa,
                        temperature_c) for a in range(0, max(flat.size, 1), CHUNK)]
    return {k: np.concatenate([p[k] for p in parts])[:flat.size].reshape(t.shape) for k in TAG_KEYS}


def _tags_flat(t, lat, lon, elev, regions, refraction, pressure_hpa, temperature_c):
    if t.size == 0:
        empty = np.zeros(0)
        return {k: (np.zeros(0, dtype="<U4") if k == "source_region" else empty) for k in TAG_KEYS}
    q = _interpolated(t, NODE_STEP_S)
    tb = _tables()
    d_tdb = _tt_days(t, _tai_minus_utc(t, tb)) + q["tdb_tt"] / 86400.0
    d_ret = d_tdb - q["tau"] / 86400.0          # light-departure time, TDB days from J2000
    cml = np.mod(JUP_W0 + np.mod(JUP_W_RATE * d_ret, 360.0) - np.degrees(q["theta"]), 360.0)
    t5 = d_ret + (J2000_JD - E5_EPOCH_JD)
    l1 = IO_L0 + np.mod(IO_RATE * t5, 360.0)
    l2 = EUROPA_L0 + np.mod(EUROPA_RATE * t5, 360.0)
    io_lon = l1 + IO_FORCED_TERM * np.sin(np.radians(2.0 * (l1 - l2)))
    io_phase = np.mod(io_lon - np.degrees(q["lam_e5"]) - 180.0, 360.0)
    rotation = _earth_rotation(t)
    j_alt, j_az = _site_alt_az(rotation, q["jup_cirs"], q["dist_au"], lat, lon, elev)
    s_alt, s_az = _site_alt_az(rotation, q["sun_cirs"], q["sun_dist_au"], lat, lon, elev)
    if refraction:
        j_alt = j_alt + refraction_deg(j_alt, pressure_hpa, temperature_c)
        s_alt = s_alt + refraction_deg(s_alt, pressure_hpa, temperature_c)
    return {"cml3_deg": cml, "io_phase_deg": io_phase, "jupiter_alt_deg": j_alt,
            "jupiter_az_deg": j_az, "sun_alt_deg": s_alt, "sun_az_deg": s_az,
            "source_region": source_region(cml, io_phase, regions),
            "jupiter_distance_au": q["dist_au"], "light_time_s": q["tau"],
            "de_deg": np.degrees(q["de"]), "elongation_deg": np.degrees(q["elong"])}


def _site(cfg) -> tuple[float, float, float]:
    st = cfg["station"]
    return st["latitude_deg"], st["longitude_deg"], st.get("elevation_m", 0.0)


def station_tags(cfg, times_unix, *, refraction: bool = False) -> dict[str, np.ndarray]:
    """``compute_tags`` for the configured station and region table."""
    return compute_tags(times_unix, *_site(cfg), regions=regions_from_config(cfg), refraction=refraction)


MAX_TABLE_ROWS = 1_000_000


def tag_table(cfg, start_unix: float, end_unix: float | None = None, step_s: float = 600.0, *,
              refraction: bool = False) -> dict[str, np.ndarray]:
    """Station tags from start to end (inclusive) every step_s seconds, plus ``time_unix``.

    One row when ``end_unix`` is None. RxlogError for a bad range or step.
    """
    if end_unix is None:
        end_unix = start_unix
    if not (math.isfinite(step_s) and step_s > 0):
        raise RxlogError(f"step: expected a positive number of seconds, got {step_s!r}")
    if end_unix < start_unix:
        from rxlog.timeutil import iso

        raise RxlogError(f"end: expected a time at or after the start, got end {iso(end_unix)} "
                         f"before start {iso(start_unix)}")
    n = int(math.floor((end_unix - start_unix) / step_s + 1e-9)) + 1
    if n > MAX_TABLE_ROWS:
        raise RxlogError(f"step: {n} rows from start to end; expected at most {MAX_TABLE_ROWS} "
                         "(use a longer step or a shorter range)")
    t = start_unix + step_s * np.arange(n)
    return {"time_unix": t, **station_tags(cfg, t, refraction=refraction)}


BODIES = ("jupiter", "sun")
UP_STEP_S = 120.0  # altitude samples for rise/set: linear interpolation is good to ~0.2 s


def body_up_intervals(cfg, t0: float, t1: float, body: str = "jupiter", min_alt_deg: float = 0.0,
                      ) -> list[tuple[float, float]]:
    """(start, end) POSIX intervals within [t0, t1] when ``body`` is at or above min_alt_deg.

    Airless altitude for the configured station; edges found by linear interpolation
    between 2-minute samples (error well under a second).
    """
    if body not in BODIES:
        raise RxlogError(f"body: expected one of {', '.join(BODIES)}, got {body!r}")
    if not t1 >= t0:
        raise RxlogError(f"body_up_intervals: expected t1 >= t0, got {t0!r}..{t1!r}")
    n = int(math.ceil((t1 - t0) / UP_STEP_S)) + 1
    t = np.minimum(t0 + UP_STEP_S * np.arange(n), t1)
    alt = station_tags(cfg, t)[f"{body}_alt_deg"] - min_alt_deg
    return _above_zero_intervals(t, alt)


def _above_zero_intervals(t: np.ndarray, f: np.ndarray) -> list[tuple[float, float]]:
    """Intervals where f >= 0, edges at the zero crossings of f linearly interpolated."""
    up = f >= 0
    if t.size == 0:
        return []
    change = np.flatnonzero(up[1:] != up[:-1])
    a, b = f[change], f[change + 1]
    frac = np.where(b != a, a / (a - b), 0.5)
    edges = t[change] + frac * (t[change + 1] - t[change])
    bounds = list(edges)
    if up[0]:
        bounds.insert(0, float(t[0]))
    if up[-1]:
        bounds.append(float(t[-1]))
    return [(float(bounds[i]), float(bounds[i + 1])) for i in range(0, len(bounds), 2)
            if bounds[i + 1] > bounds[i]]
