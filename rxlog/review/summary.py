"""A night's summary: the numbers the page and the terminal show (recording and gaps,
masked fraction, review items and events per class, Sun and Jupiter up, forecast windows
and what fell in them), and how times and numbers are written — every time with its zone.
"""

from __future__ import annotations

import time
from typing import TYPE_CHECKING

import numpy as np

from rxlog.review.items import is_review_item, review_items, span
from rxlog.review.night import Night
from rxlog.store import CLASSES
from rxlog.timeutil import iso, parse_iso

if TYPE_CHECKING:   # for annotations only: reading spectra (scipy, astropy) is not needed to write
    from rxlog.review.data import NightData

JOVIAN = ("jovian_l", "jovian_s")   # the classes counted as Jovian candidates


def night_summary(cfg, night: Night, events: list[dict], data: NightData, quality: list[dict],
                  jupiter_up, sun_up, forecast, items: list[dict] | None = None) -> dict:
    """The numbers the page and the terminal show, as plain values.

    ``items``: the night's review items (rxlog.review.items; default: each event its own
    item). Forecast windows list the Jovian items seen in them by item key."""
    items = review_items(events, []) if items is None else items
    length = night.t1 - night.t0
    per_class = {c: 0 for c in CLASSES}
    for e in events:
        per_class[e["class"]] = per_class.get(e["class"], 0) + 1
    items_per_class = {c: 0 for c in CLASSES}
    for it in items:
        items_per_class[it["row"]["class"]] = items_per_class.get(it["row"]["class"], 0) + 1
    masked_total, hourly, masked_source = _masked(night, data, quality)
    jovian = [it for it in items if it["row"]["class"] in JOVIAN]
    windows = [_forecast_window(w, jovian, data) for w in forecast]
    in_windows = {key for w in windows for key in w["seen"]}
    outside = [it["key"] for it in jovian if it["key"] not in in_windows]
    return {
        "station": cfg["station"]["name"], "night": night.name, "timezone": str(night.tz),
        "start": night.t0, "end": night.t1, "length_s": length,
        "recorded_s": data.covered_s, "uptime": data.covered_s / length if length else 0.0,
        "gaps": data.gaps(min_s=max(2.0 * float(cfg["spectra"]["cadence_s"]), 10.0)),
        "masked_fraction": masked_total, "masked_source": masked_source,
        "hourly_masked": hourly,
        "n_events": len(events), "per_class": per_class,
        "n_labelled": sum(1 for e in events if e.get("label")),
        "n_items": sum(1 for it in items if is_review_item(it)), "items_per_class": items_per_class,
        "n_item_episodes": sum(1 for it in items if is_review_item(it) and it["kind"] == "episode"),
        "n_items_labelled": sum(1 for it in items if is_review_item(it) and it["row"].get("label")),
        "jupiter_up": jupiter_up, "sun_up": sun_up,
        "forecast": windows, "jovian_outside_forecast": outside,
        "generated_utc": iso(time.time()),
    }


def _forecast_window(w: dict, jovian: list[dict], data: NightData) -> dict:
    """A forecast window with how much of it was recorded and the keys of the Jovian review
    items inside it."""
    a, b = float(w["start"]), float(w["end"])
    seen = [it["key"] for it in jovian if overlap_s(*span(it), a, b) > 0]
    rec = sum(overlap_s(c0, c1, a, b) for c0, c1 in data.covered)
    return {"start": a, "end": b, "region": w.get("region", ""),
            "max_jupiter_alt_deg": w.get("max_jupiter_alt_deg"),
            "recorded_fraction": rec / (b - a) if b > a else 0.0, "seen": seen}


def _masked(night: Night, data: NightData, quality: list[dict]):
    """(night's masked fraction, [(hour start, fraction)], source), or (None, [], None) if unknown.

    The detector records, per UTC hour, the fraction of cells its RFI mask removed; that
    record is used when there is one. Otherwise flags stored in the archive (spectra
    ingested with their mask) are counted. Without either, nothing is known yet.
    """
    rows = []
    for q in quality:
        h = parse_iso(q["hour_utc"])
        if q["masked_fraction"] is not None and night.t0 - 3600 < h < night.t1:
            rows.append((h, float(q["masked_fraction"]), float(q["covered_s"] or 0.0)))
    if rows:
        rows.sort()
        w = np.array([r[2] for r in rows])
        m = np.array([r[1] for r in rows])
        total = float((m * w).sum() / w.sum()) if w.sum() > 0 else float(m.mean())
        return total, [(h, f) for h, f, _ in rows], "detection"
    if data.cells_masked > 0:
        hourly = sorted((h, mv[0] / mv[1]) for h, mv in data.hourly_masked.items() if mv[1] > 0)
        return data.cells_masked / data.cells_valid, hourly, "archive flags"
    return None, [], None


def overlap_s(a0: float, a1: float, b0: float, b1: float) -> float:
    """Length of the overlap of [a0, a1] and [b0, b1] (0 when they are apart)."""
    return max(0.0, min(a1, b1) - max(a0, b0))


# -- writing times and numbers ----------------------------------------------------------

def fmt_clock(night: Night, t: float, seconds=False) -> str:
    """Local clock time, without the zone (the caller writes it once beside)."""
    return night.local(t).strftime("%H:%M:%S" if seconds else "%H:%M")


def fmt_span(night: Night, a: float, b: float) -> str:
    """'17:41–07:46 EST' (the zone named once, or at both ends when a clock change falls inside)."""
    za, zb = night.zone(a), night.zone(b)
    if za == zb:
        return f"{fmt_clock(night, a)}–{fmt_clock(night, b)} {za}"
    return f"{fmt_clock(night, a)} {za}–{fmt_clock(night, b)} {zb}"


def fmt_hours(s: float) -> str:
    return f"{s / 3600:.1f} h"


def fmt_num(x, fmt="{:.1f}", unit=""):
    """A number in ``fmt`` with its unit, or '—' when it is missing."""
    return "—" if x is None else fmt.format(x) + unit


def format_summary(summary: dict, night: Night) -> str:
    """The terminal summary: a few lines a person reads over coffee."""
    s = summary
    lines = [f"{s['station']} — night of {s['night']} (local noon to noon, {s['timezone']})"]
    gaps = s["gaps"]
    gap_text = ", ".join(fmt_span(night, a, b) for a, b in gaps[:6]) + (" …" if len(gaps) > 6 else "")
    lines.append(f"  recorded {fmt_hours(s['recorded_s'])} of {fmt_hours(s['length_s'])} "
                 f"({100 * s['uptime']:.0f} %); {len(gaps)} gap{'s' if len(gaps) != 1 else ''}"
                 + (f": {gap_text}" if gaps else ""))
    if s["masked_fraction"] is not None:
        lines.append(f"  masked as interference: {100 * s['masked_fraction']:.1f} % (from {s['masked_source']})")
    else:
        lines.append("  masked as interference: not measured yet (run rxlog detect over this night)")
    items = ", ".join(f"{c} {n}" for c, n in s["items_per_class"].items() if n and c != "rfi")
    n_ep, n_single = s["n_item_episodes"], s["n_items"] - s["n_item_episodes"]
    lines.append(f"  to review: {s['n_items']} item{'s' if s['n_items'] != 1 else ''}"
                 + (f" ({items})" if items else "")
                 + f": {n_ep} episode{'s' if n_ep != 1 else ''}, {n_single} single burst{'s' if n_single != 1 else ''}"
                 + f"; labelled {s['n_items_labelled']}"
                 + (f"; interference: {s['items_per_class']['rfi']} items" if s["items_per_class"]["rfi"] else ""))
    counts = ", ".join(f"{c} {n}" for c, n in s["per_class"].items() if n)
    lines.append(f"  events: {s['n_events']}" + (f" ({counts})" if counts else "")
                 + f"; labelled {s['n_labelled']}")
    for body, key in (("Jupiter", "jupiter_up"), ("Sun", "sun_up")):
        spans = ", ".join(fmt_span(night, a, b) for a, b in s[key]) or "not up"
        lines.append(f"  {body} up: {spans}")
    if s["forecast"]:
        for w in s["forecast"]:
            seen = f"seen {len(w['seen'])} Jovian item{'s' if len(w['seen']) != 1 else ''}" if w["seen"] \
                else "nothing seen"
            lines.append(f"  forecast {w['region']} {fmt_span(night, w['start'], w['end'])}: {seen} "
                         f"(recorded {100 * w['recorded_fraction']:.0f} %)")
    else:
        lines.append("  forecast: no windows this night")
    if s["jovian_outside_forecast"]:
        lines.append(f"  Jovian items outside forecast windows: {len(s['jovian_outside_forecast'])}")
    return "\n".join(lines)
