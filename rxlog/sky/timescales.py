"""Time scales for the ephemeris: UTC to TAI, TT and UT1.

Leap seconds (TAI-UTC) and Earth orientation (UT1-UTC) come from the tables bundled
with astropy (package ``astropy-iers-data``); nothing is ever fetched. Past the end of
the Earth-orientation table UT1-UTC is held at its last value and a one-line warning
is logged: alt/az then drift by about 0.004 deg per second of UT1 error, CML and Io
phase are unaffected. Past the leap-second table's expiry no new leap second is
assumed, with the same kind of warning.

astropy is imported on first use (its IERS module takes seconds to import), and its
IERS settings (no download, no age limit, degraded accuracy past the table allowed) are
applied before rxlog touches anything else in astropy.
"""

from __future__ import annotations

import datetime as dt
import functools
import logging

import numpy as np

from rxlog.constants import TT_MINUS_TAI_S
from rxlog.errors import RxlogError

log = logging.getLogger("rxlog.sky")

J2000_UNIX = 946_728_000.0          # 2000-01-01T12:00:00 UTC as POSIX seconds
J2000_JD = 2451545.0
MJD_UNIX_EPOCH = 40587.0            # MJD of 1970-01-01T00:00:00 UTC

# Supported range: leap seconds are defined from 1972; plan94 is fitted 1000-3000 AD
# but rxlog has no use for dates this far out.
T_MIN_UNIX = 63_072_000.0           # 1972-01-01T00:00:00Z
T_MAX_UNIX = 4_102_444_800.0        # 2100-01-01T00:00:00Z

_warned: set[str] = set()


def warn_once(key: str, message: str) -> None:
    """Log ``message`` the first time ``key`` is seen in this process."""
    if key not in _warned:
        _warned.add(key)
        log.warning(message)


@functools.cache
def _tables():
    """IERS offline settings, then the bundled leap-second and UT1 tables as numpy arrays."""
    # Imported here, not at the top: astropy's IERS module takes seconds to import, and
    # importing rxlog.sky should stay light until a time is converted.
    import astropy_iers_data
    from astropy.utils import iers

    iers.conf.auto_download = False
    iers.conf.auto_max_age = None
    iers.conf.iers_degraded_accuracy = "warn"
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


def tai_minus_utc(t: np.ndarray) -> np.ndarray:
    """TAI-UTC (s) at POSIX times t."""
    # A lookup in the bundled table rather than erfa.utctai: the same TAI-UTC, but erfa
    # took 0.88 s against 0.10 s here for 10^6 times (timed on the development machine).
    tb = _tables()
    i = np.searchsorted(tb["leap_unix"], t, side="right") - 1
    if t.size and t.max() > tb["leap_expires_unix"]:
        warn_once("leap", "rxlog ephemeris: leap-second table expires "
                  f"{_day(tb['leap_expires_unix'])}; later times assume no new leap second")
    return tb["leap_tai_utc"][np.clip(i, 0, None)]


def ut1_minus_utc(t: np.ndarray, tai_utc: np.ndarray) -> np.ndarray:
    """UT1-UTC (s) at POSIX times t, given TAI-UTC there."""
    # Linear in UT1-TAI (continuous across leap seconds), as astropy's IERS.ut1_utc is in
    # UT1-UTC with its leap-second correction: the same values within 1e-14 s, but 0.14 s
    # against astropy's 0.37 s for 10^6 times (timed on the development machine).
    tb = _tables()
    eu = tb["eop_unix"]
    if t.size and (t.max() > eu[-1] or t.min() < eu[0]):
        warn_once("eop", "rxlog ephemeris: times outside the bundled IERS table "
                  f"({_day(eu[0])} to {_day(eu[-1])}); UT1-UTC held at the table's end value "
                  "(alt/az slightly less accurate)")
    return np.interp(t, eu, tb["ut1_tai"]) + tai_utc


def tt_days(t: np.ndarray, tai_utc: np.ndarray) -> np.ndarray:
    """TT days from J2000 for POSIX seconds t, given TAI-UTC there."""
    return (t - J2000_UNIX + tai_utc + TT_MINUS_TAI_S) / 86400.0


def check_times(times_unix) -> np.ndarray:
    """POSIX seconds as a float array; RxlogError unless finite and within 1972-2099."""
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


def _day(t: float) -> str:
    return dt.datetime.fromtimestamp(float(t), tz=dt.timezone.utc).strftime("%Y-%m-%d")
