"""Exposure: how long the station really listened, step by step over a season.

The season is cut into steps of ``STEP_S``; each step carries the share of it the
station listened with the band unmasked (from the store's hourly quality rows: covered
seconds, less the masked fraction) and the ephemeris at its middle (CML III, Io phase,
the altitudes of Jupiter and the Sun, the source region), from
``rxlog.sky.tags.compute_tags``. An hour without a quality row counts as not listening:
the logger was not running, or the hour was never detected.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from rxlog.errors import RxlogError
from rxlog.sky.regions import regions_from_config
from rxlog.sky.tags import compute_tags
from rxlog.timeutil import iso, parse_iso

# 2 minutes: CML III moves ~1.2 deg and Io phase ~0.3 deg in a step (870.5 and
# 203.5 deg/day, IAU WGCCRE 2015 and Io's 1.769-day period), well inside a 10-deg bin;
# a year is 263 000 steps, a few seconds of ephemeris.
STEP_S = 120.0
HOUR_S = 3600.0


@dataclass
class Timeline:
    """A season step by step: step starts ``t``, the share of each step listened with the
    band unmasked (``listening``, 0-1) and recorded at all (``covered``), and the
    ephemeris tags at each step's middle."""
    t: np.ndarray
    step_s: float
    listening: np.ndarray
    covered: np.ndarray
    tags: dict

    @property
    def mid(self) -> np.ndarray:
        return self.t + self.step_s / 2


def season_steps(t0: float, t1: float, step_s: float = STEP_S) -> np.ndarray:
    if not t1 > t0:
        raise RxlogError(f"--end ({iso(t1)}) must be after --start ({iso(t0)})")
    return t0 + step_s * np.arange(int(math.ceil((t1 - t0) / step_s)))


def hourly_shares(t: np.ndarray, quality_rows: list[dict]) -> tuple[np.ndarray, np.ndarray]:
    """(listening, covered) shares of the hour each time falls in, from quality rows
    {hour_utc, covered_s, masked_fraction}; 0 for hours without a row."""
    if not quality_rows:
        return np.zeros(t.shape), np.zeros(t.shape)
    rows = sorted(quality_rows, key=lambda r: r["hour_utc"])
    hours = np.array([parse_iso(r["hour_utc"]) for r in rows])
    covered = np.array([float(r.get("covered_s") or 0.0) for r in rows]) / HOUR_S
    masked = np.array([float(r["masked_fraction"]) if r.get("masked_fraction") is not None else 0.0
                       for r in rows])
    h = np.floor(t / HOUR_S) * HOUR_S
    i = np.clip(np.searchsorted(hours, h), 0, hours.size - 1)
    hit = hours[i] == h
    cov = np.where(hit, np.clip(covered[i], 0.0, 1.0), 0.0)
    return cov * (1.0 - np.clip(masked[i], 0.0, 1.0)), cov


def season_timeline(cfg, t0: float, t1: float, quality_rows: list[dict], step_s: float = STEP_S) -> Timeline:
    """The station's timeline over [t0, t1) from its quality rows (other stations' rows are
    left out)."""
    station = cfg["station"]["name"]
    own = [r for r in quality_rows if r.get("station", station) == station]
    t = season_steps(t0, t1, step_s)
    listening, covered = hourly_shares(t + step_s / 2, own)
    st = cfg["station"]
    tags = compute_tags(t + step_s / 2, st["latitude_deg"], st["longitude_deg"], st.get("elevation_m", 0.0),
                        regions=regions_from_config(cfg))
    return Timeline(t=t, step_s=step_s, listening=listening, covered=covered, tags=tags)


def merge_spans(spans) -> np.ndarray:
    """(start, end) spans merged where they overlap or touch: an (n, 2) array, sorted."""
    arr = np.array(sorted((float(a), float(b)) for a, b in spans if b >= a), dtype=np.float64).reshape(-1, 2)
    if arr.shape[0] < 2:
        return arr
    start_new = np.concatenate([[True], arr[1:, 0] > np.maximum.accumulate(arr[:-1, 1])])
    group = np.cumsum(start_new) - 1
    ends = np.full(group[-1] + 1, -np.inf)
    np.maximum.at(ends, group, arr[:, 1])
    return np.column_stack([arr[start_new, 0], ends])


def inside_spans(t: np.ndarray, spans) -> np.ndarray:
    """True where a time falls inside one of the (start, end) spans, edges included."""
    merged = merge_spans(spans)
    if merged.shape[0] == 0:
        return np.zeros(np.shape(t), dtype=bool)
    i = np.searchsorted(merged[:, 0], t, side="right") - 1
    ok = i >= 0
    return ok & (t <= merged[np.clip(i, 0, None), 1])


def body_weight(tl: Timeline, body: str, min_alt_deg: float) -> np.ndarray:
    """Seconds of each step the station listened with ``body`` (jupiter, sun) at or above
    ``min_alt_deg``."""
    up = tl.tags[f"{body}_alt_deg"] >= min_alt_deg
    return tl.step_s * tl.listening * up
