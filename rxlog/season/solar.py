"""The Sun over a season: bursts per type per day beside the hours the station listened
with the Sun up, burst rates against the Sun's altitude, and fadeouts per month."""

from __future__ import annotations

import numpy as np

from rxlog.season.exposure import Timeline, body_weight
from rxlog.timeutil import iso, parse_iso

SOLAR_TYPES = ("solar_iii", "solar_ii", "solar_iv")
ALT_BIN_DEG = 10.0
DAY_S = 86400.0


def _day(t: float) -> str:
    return iso(t)[:10]


def solar_daily(tl: Timeline, events: list[dict], min_alt_deg: float = 0.0) -> list[dict]:
    """One row per UTC day: hours listened with the Sun up, and the count of each burst
    type and of fadeouts peaking that day."""
    w = body_weight(tl, "sun", min_alt_deg)
    days = np.floor(tl.mid / DAY_S).astype(np.int64)
    first, last = int(days.min()), int(days.max())
    hours = np.bincount(days - first, weights=w, minlength=last - first + 1) / 3600.0
    rows = {_day(d * DAY_S): {"date": _day(d * DAY_S), "sun_hours_listened": float(hours[d - first]),
                              **{c: 0 for c in SOLAR_TYPES}, "fadeout": 0}
            for d in range(first, last + 1)}
    for e in events:
        r = rows.get(_day(parse_iso(e["peak_utc"])))
        if r is not None and e["class"] in (*SOLAR_TYPES, "fadeout"):
            r[e["class"]] += 1
    return list(rows.values())


def solar_by_altitude(tl: Timeline, events: list[dict], min_alt_deg: float = 0.0) -> list[dict]:
    """One row per band of the Sun's altitude (``ALT_BIN_DEG``): hours listened with the
    Sun there, bursts of each type peaking there and their rate per hour listened."""
    w = body_weight(tl, "sun", min_alt_deg)
    lo = max(0.0, np.floor(min_alt_deg / ALT_BIN_DEG) * ALT_BIN_DEG)
    edges = np.arange(lo, 90.0 + ALT_BIN_DEG / 2, ALT_BIN_DEG)
    alt = tl.tags["sun_alt_deg"]
    hours = np.histogram(alt, bins=edges, weights=w)[0] / 3600.0
    rows = []
    for i in range(edges.size - 1):
        row = {"sun_alt_from_deg": float(edges[i]), "sun_alt_to_deg": float(edges[i + 1]),
               "hours_listened": float(hours[i])}
        for c in SOLAR_TYPES:
            n = sum(1 for e in events if e["class"] == c and e.get("sun_alt_deg") is not None
                    and edges[i] <= e["sun_alt_deg"] < edges[i + 1])
            row[c] = n
            row[f"{c}_per_hour"] = n / hours[i] if hours[i] > 0 else float("nan")
        rows.append(row)
    return rows


def fadeouts_per_month(daily: list[dict]) -> list[dict]:
    """Fadeouts and Sun-up hours listened per calendar month (UTC), from ``solar_daily``."""
    months: dict[str, dict] = {}
    for r in daily:
        m = months.setdefault(r["date"][:7], {"month": r["date"][:7], "fadeouts": 0, "sun_hours_listened": 0.0})
        m["fadeouts"] += r["fadeout"]
        m["sun_hours_listened"] += r["sun_hours_listened"]
    return list(months.values())
