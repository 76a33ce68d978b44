"""Ephemeris tags for many times: CML III, Io phase, Jupiter and Sun positions, the
source region; station tags from the config, tag tables, and the intervals a body is up.

Every function takes POSIX seconds (UTC), as arrays where it can; see the package
docstring for the sources and ``positions`` for the speed of many times.
"""

from __future__ import annotations

import math

import numpy as np

from rxlog.errors import RxlogError
from rxlog.sky.jupiter import cml3_deg, io_phase_deg
from rxlog.sky.positions import (
    earth_rotation,
    interpolated,
    refraction_deg,
    site_alt_az,
)
from rxlog.sky.regions import (
    DEFAULT_REGION_BOXES,
    regions_from_boxes,
    regions_from_config,
    source_region,
)
from rxlog.sky.timescales import check_times, tai_minus_utc, tt_days
from rxlog.timeutil import iso

TAG_KEYS = ("cml3_deg", "io_phase_deg", "jupiter_alt_deg", "jupiter_az_deg", "sun_alt_deg",
            "sun_az_deg", "source_region", "jupiter_distance_au", "light_time_s", "de_deg",
            "elongation_deg")


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


CHUNK = 200_000  # times per pass: bounds memory however long the request


def compute_tags(times_unix, lat_deg, lon_deg, elev_m, regions=None, *, refraction: bool = False,
                 pressure_hpa: float = 1010.0, temperature_c: float = 10.0) -> dict[str, np.ndarray]:
    """All ephemeris tags at POSIX times (any array shape; results have the same shape).

    Keys: cml3_deg, io_phase_deg, jupiter_alt_deg, jupiter_az_deg, sun_alt_deg,
    sun_az_deg, source_region ('none' outside all boxes), jupiter_distance_au,
    light_time_s, de_deg, elongation_deg. Altitudes are airless unless ``refraction``
    (optical, Saemundsson). ``regions``: list of ``Region`` (default: built-in table).
    """
    t = check_times(times_unix)
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
    q = interpolated(t)
    tai_utc = tai_minus_utc(t)
    d_tdb = tt_days(t, tai_utc) + q["tdb_tt"] / 86400.0
    d_ret = d_tdb - q["tau"] / 86400.0          # light-departure time, TDB days from J2000
    cml = cml3_deg(d_ret, q["theta"])
    io_phase = io_phase_deg(d_ret, q["lam_e5"])
    rotation = earth_rotation(t, tai_utc)
    j_alt, j_az = site_alt_az(rotation, q["jup_cirs"], q["dist_au"], lat, lon, elev)
    s_alt, s_az = site_alt_az(rotation, q["sun_cirs"], q["sun_dist_au"], lat, lon, elev)
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
