"""An episode's context, from its member events: how many bursts, CML III and Io-phase
range, source region, Jupiter's and the Sun's altitude, and a confidence and reason where
the detector gave none. Plain dicts in, a plain dict out (the event store's field names),
so the store, the review and the exchange read an episode alike.
"""

from __future__ import annotations


def _most_common(values) -> str | None:
    """The most frequent non-empty value (the first seen among equals), or None."""
    counts: dict = {}
    for v in values:
        if v:
            counts[v] = counts.get(v, 0) + 1
    return max(counts, key=counts.get) if counts else None


def _span(values) -> tuple[float | None, float | None]:
    vals = [v for v in values if v is not None]
    return (min(vals), max(vals)) if vals else (None, None)


def episode_context(ep: dict, members: list[dict]) -> dict:
    """What an episode's bursts say about it: ``n_bursts``; confidence and reason where the
    detector gave none (the highest burst confidence; the bursts' most common reason);
    CML III and Io phase from the start of its first burst to the end of its last (a
    range that may wrap through 0/360: start and end, not min and max), its most common
    source region, and the ranges of Jupiter's and the Sun's altitude at the bursts' peaks."""
    out = {"n_bursts": ep.get("n_events") if ep.get("n_events") is not None else len(members)}
    same = [m for m in members if m["class"] == ep["class"]] or members
    if ep.get("confidence") is None:
        out["confidence"] = max((m["confidence"] for m in same if m["confidence"] is not None), default=None)
    if not ep.get("reason"):
        out["reason"] = _most_common(m["reason"] for m in same) or (
            f"{out['n_bursts']} bursts of class {ep['class']} grouped in time")
    first = min(members, key=lambda m: m["start_utc"], default=None)
    last = max(members, key=lambda m: m["end_utc"], default=None)
    pick = lambda m, edge, peak: None if m is None else (m[edge] if m[edge] is not None else m[peak])
    out.update(cml3_start_deg=pick(first, "cml3_start_deg", "cml3_deg"),
               cml3_end_deg=pick(last, "cml3_end_deg", "cml3_deg"),
               io_phase_start_deg=pick(first, "io_phase_start_deg", "io_phase_deg"),
               io_phase_end_deg=pick(last, "io_phase_end_deg", "io_phase_deg"),
               source_region=_most_common(m["source_region"] for m in members))
    out["sun_alt_min_deg"], out["sun_alt_max_deg"] = _span(m["sun_alt_deg"] for m in members)
    out["jupiter_alt_min_deg"], out["jupiter_alt_max_deg"] = _span(m["jupiter_alt_deg"] for m in members)
    return out
