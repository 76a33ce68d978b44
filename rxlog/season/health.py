"""Station health over a season: an uptime calendar (hours covered per day, gaps and
their causes from the health log) and the masked fraction by hour of day."""

from __future__ import annotations

from collections import Counter

import numpy as np

from rxlog.timeutil import iso, parse_iso

DAY_S = 86400.0
GOOD_STATE = "streaming"          # rxlog.station.supervise's receiver state while all is well


def uptime_calendar(t0: float, t1: float, quality_rows: list[dict], health_rows: list[dict]) -> list[dict]:
    """One row per UTC day of [t0, t1): hours covered, hours of gaps, and the causes the
    health log gives that day (receiver states other than streaming, notes), counted."""
    first, last = int(np.floor(t0 / DAY_S)), int(np.floor((t1 - 1e-6) / DAY_S))
    rows = {iso(d * DAY_S)[:10]: {"date": iso(d * DAY_S)[:10], "covered_h": 0.0, "gap_h": 0.0, "causes": Counter()}
            for d in range(first, last + 1)}
    for q in quality_rows:
        r = rows.get(q["hour_utc"][:10])
        if r is not None:
            r["covered_h"] += float(q.get("covered_s") or 0.0) / 3600.0
            r["gap_h"] += float(q.get("gap_s") or 0.0) / 3600.0
    for h in health_rows:
        r = rows.get(h["time_utc"][:10])
        if r is None:
            continue
        state = h.get("receiver_state")
        if state and state != GOOD_STATE:
            r["causes"][f"receiver {state}"] += 1
        if h.get("samples_dropped"):
            r["causes"]["samples dropped"] += 1
        if h.get("note"):
            r["causes"][str(h["note"])] += 1
    out = []
    for r in rows.values():
        causes = "; ".join(f"{k} x{n}" for k, n in r["causes"].most_common())
        out.append({**r, "causes": causes})
    return out


def masked_by_hour(quality_rows: list[dict]) -> list[dict]:
    """Mean masked fraction (weighted by the seconds covered) for each UTC hour of day."""
    num, den = np.zeros(24), np.zeros(24)
    for q in quality_rows:
        if q.get("masked_fraction") is None:
            continue
        h = int(round(parse_iso(q["hour_utc"]) % DAY_S / 3600.0)) % 24
        c = float(q.get("covered_s") or 0.0)
        num[h] += c * float(q["masked_fraction"])
        den[h] += c
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = np.where(den > 0, num / den, np.nan)
    return [{"hour_utc": h, "masked_fraction": float(frac[h]), "hours_covered": float(den[h] / 3600.0)}
            for h in range(24)]
