"""Header cards to axes: the WCS of a dynamic spectrum, one of ours or one from elsewhere.

Standard WCS (Greisen & Calabretta 2002, Paper I) with the time axis of Rots et al. 2015
(A&A 574, A36, Paper VII): the time axis's origin (MJDREF, MJDREFI + MJDREFF, JDREF or
DATEREF; DATE-OBS as a fallback), time scale (TIMESYS), unit and TIMEPIXR; a frequency
axis in Hz, kHz or MHz; the observing site from OBSGEO-B/L/H or OBSGEO-X/Y/Z. A card
that does not give what is needed is an RxlogError naming the file and the keyword.
"""

from __future__ import annotations

import datetime as dt
import math

import erfa
import numpy as np

from rxlog.constants import GPS_MINUS_TAI_S, TT_MINUS_TAI_S
from rxlog.errors import RxlogError

MJD_UNIX_EPOCH = 40587              # MJD of 1970-01-01T00:00:00 UTC
FREQ_UNITS = {"HZ": 1.0, "KHZ": 1e3, "MHZ": 1e6, "GHZ": 1e9}
_TIME_UNITS = {"S": 1.0, "MIN": 60.0, "H": 3600.0, "D": 86400.0}


def header_float(h, key: str, path) -> float:
    if key not in h:
        raise RxlogError(f"{path}: missing keyword {key}")
    if isinstance(h[key], bool):
        raise RxlogError(f"{path}: keyword {key} = {h[key]!r} is not a number")
    try:
        v = float(h[key])
    except (TypeError, ValueError):
        raise RxlogError(f"{path}: keyword {key} = {h[key]!r} is not a number") from None
    if not math.isfinite(v):
        raise RxlogError(f"{path}: keyword {key} = {h[key]!r} is not a finite number")
    return v


def _opt_float(h, key: str, default: float, path) -> float:
    return header_float(h, key, path) if key in h else default


def axis_scale(h, i: int, path) -> float:
    """Pixel spacing of axis i: CDi_i, or CDELTi times PCi_i; off-diagonal terms must be 0."""
    j = 3 - i
    if any(k in h for k in (f"CD{i}_{i}", f"CD{i}_{j}", f"CD{j}_{i}", f"CD{j}_{j}")):
        if _opt_float(h, f"CD{i}_{j}", 0.0, path) != 0.0 or _opt_float(h, f"CD{j}_{i}", 0.0, path) != 0.0:
            raise RxlogError(f"{path}: keyword CD{i}_{j}/CD{j}_{i}: rotated axes are not supported; "
                             "expected time and frequency along the image axes")
        scale = header_float(h, f"CD{i}_{i}", path)
    else:
        if _opt_float(h, f"PC{i}_{j}", 0.0, path) != 0.0 or _opt_float(h, f"PC{j}_{i}", 0.0, path) != 0.0:
            raise RxlogError(f"{path}: keyword PC{i}_{j}/PC{j}_{i}: rotated axes are not supported; "
                             "expected time and frequency along the image axes")
        scale = header_float(h, f"CDELT{i}", path) * _opt_float(h, f"PC{i}_{i}", 1.0, path)
    if scale == 0.0:
        raise RxlogError(f"{path}: keyword CDELT{i} is 0; expected the pixel spacing")
    return scale


def _parse_date(text, key: str, path) -> float:
    """FITS date string (ISO 8601 'YYYY-MM-DD[Thh:mm:ss[.s...]]', FITS Standard 4.0 §4.4.2.1)
    -> POSIX seconds, the clock reading taken as given (time scale applied by the caller)."""
    s = str(text).strip()
    try:
        d = dt.datetime.fromisoformat(s[:-1] if s.endswith("Z") else s)
    except ValueError:
        raise RxlogError(f"{path}: keyword {key} = {text!r} is not a FITS date "
                         "(expected e.g. '2026-12-01T22:00:00')") from None
    if d.tzinfo is None:
        d = d.replace(tzinfo=dt.timezone.utc)
    return d.timestamp()


def _time_origin(h, path) -> tuple[float, str]:
    """Reference time as POSIX seconds on the clock of TIMESYS, and where it came from.

    Paper VII (Rots et al. 2015, §4.1.2.3; FITS Standard 4.0 §9.2.2) gives the reference
    time as MJDREF (or MJDREFI + MJDREFF), JDREF (or JDREFI + JDREFF) or DATEREF, in that
    order of precedence (the order astropy.io.fits.fitstime also follows). With none of
    them the standard implies MJD 0, which no dynamic spectrum means: rxlog then falls back
    to DATE-OBS as the origin of the time axis (documented in the README), else refuses.
    """
    def num(key):
        return header_float(h, key, path)

    if "MJDREFI" in h or "MJDREFF" in h:
        i = num("MJDREFI") if "MJDREFI" in h else 0.0
        f = num("MJDREFF") if "MJDREFF" in h else 0.0
        return (i - MJD_UNIX_EPOCH) * 86400.0 + f * 86400.0, "MJDREFI+MJDREFF"
    if "MJDREF" in h:
        return (num("MJDREF") - MJD_UNIX_EPOCH) * 86400.0, "MJDREF"
    if "JDREFI" in h or "JDREFF" in h:
        i = num("JDREFI") if "JDREFI" in h else 0.0
        f = num("JDREFF") if "JDREFF" in h else 0.0
        return (i - 2400000.5 - MJD_UNIX_EPOCH) * 86400.0 + f * 86400.0, "JDREFI+JDREFF"
    if "JDREF" in h:
        return (num("JDREF") - 2400000.5 - MJD_UNIX_EPOCH) * 86400.0, "JDREF"
    if "DATEREF" in h:
        return _parse_date(h["DATEREF"], "DATEREF", path), "DATEREF"
    if "DATE-OBS" in h:
        return _parse_date(h["DATE-OBS"], "DATE-OBS", path), "DATE-OBS"
    raise RxlogError(f"{path}: missing keyword MJDREF: the time axis needs its origin "
                     "(MJDREF, MJDREFI+MJDREFF, JDREF or DATEREF per FITS WCS Paper VII; or DATE-OBS)")


def _to_utc_offset(scale: str, t_ref: float, path, key: str) -> float:
    """Seconds to add to a reading on ``scale`` to get UTC, at the reference time.

    TAI - UTC from the leap-second table built into ERFA (``erfa.dat``, no download);
    TT = TAI + 32.184 s and GPS = TAI - 19 s by definition (IERS Conventions 2010, ch. 1).
    A file spanning a leap second would be off by 1 s after it: not worth more here.
    """
    if scale in ("UTC", "UT"):
        return 0.0
    shift = {"TAI": 0.0, "TT": TT_MINUS_TAI_S, "TDT": TT_MINUS_TAI_S, "GPS": GPS_MINUS_TAI_S}
    if scale not in shift:
        raise RxlogError(f"{path}: keyword {key} = {scale!r}: time scale not supported; "
                         "expected 'UTC' (or TAI, TT, GPS)")
    try:
        d = dt.datetime(1970, 1, 1) + dt.timedelta(seconds=t_ref)
    except (OverflowError, ValueError):
        raise RxlogError(f"{path}: keyword {key} = {scale!r}: the reference time ({t_ref:g} s from 1970) "
                         "has no calendar date; expected a time origin within the receiver era") from None
    tai_utc = float(erfa.dat(d.year, d.month, d.day, (d.hour * 3600 + d.minute * 60 + d.second) / 86400.0))
    return -(tai_utc + shift[scale])


def time_axis(h, i: int, path) -> dict:
    """Time axis i of a header -> {'t0': start of the first pixel's bin (POSIX UTC),
    'cadence': s (negative if the axis runs backwards), 'origin': keyword used}."""
    ctype = str(h.get(f"CTYPE{i}", "")).strip().upper()
    unit_name = str(h.get(f"CUNIT{i}", "s")).strip()            # Paper VII: seconds by default
    unit = _TIME_UNITS.get(unit_name.upper())
    if unit is None:
        raise RxlogError(f"{path}: keyword CUNIT{i} = {unit_name!r}: expected 's' for the time axis")
    tunit_name = str(h.get("TIMEUNIT", "s")).strip()
    tunit = _TIME_UNITS.get(tunit_name.upper())
    if tunit is None:
        raise RxlogError(f"{path}: keyword TIMEUNIT = {tunit_name!r}: expected 's'")
    crpix = header_float(h, f"CRPIX{i}", path)
    crval = header_float(h, f"CRVAL{i}", path)
    step = axis_scale(h, i, path) * unit
    ref, origin = _time_origin(h, path)
    offs = _opt_float(h, "TIMEOFFS", 0.0, path) * tunit           # Paper VII clock correction
    scale = ctype if ctype != "TIME" else str(h.get("TIMESYS", "UTC")).strip().upper()
    first = ref + offs + crval * unit + (1.0 - crpix) * step        # world time of pixel 1
    first += _to_utc_offset(scale, ref, path, "TIMESYS" if ctype == "TIME" else f"CTYPE{i}")
    pixr = _opt_float(h, "TIMEPIXR", 0.5, path)                    # where in its bin a pixel's time sits
    if not 0.0 <= pixr <= 1.0:
        raise RxlogError(f"{path}: keyword TIMEPIXR = {pixr:g}: expected 0 to 1 (Paper VII)")
    t0 = first - pixr * abs(step)
    if not (math.isfinite(t0) and math.isfinite(step)):
        raise RxlogError(f"{path}: keywords CRVAL{i}, {scale_card(h, i)} and {origin}: the time axis "
                         "does not give finite times")
    return {"t0": t0, "cadence": step, "origin": origin}


def scale_card(h, i: int) -> str:
    """The card that gives axis i's pixel spacing: CDi_i when a CD matrix is used, else CDELTi."""
    return f"CD{i}_{i}" if f"CD{i}_{i}" in h else f"CDELT{i}"


def freq_axis(h, i: int, n: int, path) -> np.ndarray:
    unit_name = str(h.get(f"CUNIT{i}", "Hz")).strip()
    unit = FREQ_UNITS.get(unit_name.upper())
    if unit is None:
        raise RxlogError(f"{path}: keyword CUNIT{i} = {unit_name!r}: expected 'Hz', 'kHz' or 'MHz' "
                         "for the frequency axis")
    crpix = header_float(h, f"CRPIX{i}", path)
    crval = header_float(h, f"CRVAL{i}", path)
    f = (crval + (np.arange(1, n + 1, dtype=np.float64) - crpix) * axis_scale(h, i, path)) * unit
    if f.min() <= 0 or (f"CUNIT{i}" not in h and f.max() < 1e3):
        raise RxlogError(f"{path}: keyword CUNIT{i}: frequencies {f.min():g}..{f.max():g} Hz are not "
                         "radio frequencies; give CUNIT as 'Hz', 'kHz' or 'MHz'")
    return f


def site_meta(h, path) -> dict:
    """The observing site from OBSGEO-B/L/H, else OBSGEO-X/Y/Z (Paper VII §4.1.3)."""
    if all(k in h for k in ("OBSGEO-B", "OBSGEO-L", "OBSGEO-H")):
        return {"site_latitude_deg": header_float(h, "OBSGEO-B", path),
                "site_longitude_deg": header_float(h, "OBSGEO-L", path),
                "site_elevation_m": header_float(h, "OBSGEO-H", path)}
    if all(k in h for k in ("OBSGEO-X", "OBSGEO-Y", "OBSGEO-Z")):
        # imported here: astropy.coordinates takes ~0.9 s to load, and only geocentric sites need it
        from astropy import units as u
        from astropy.coordinates import EarthLocation

        loc = EarthLocation.from_geocentric(*(header_float(h, k, path) for k in ("OBSGEO-X", "OBSGEO-Y", "OBSGEO-Z")),
                                            unit=u.m)
        return {"site_latitude_deg": float(loc.lat.deg), "site_longitude_deg": float(loc.lon.deg),
                "site_elevation_m": float(loc.height.to_value(u.m))}
    return {}
