"""Listings of stored events and episodes for the shell (``rxlog events``): by night,
class, or still unlabelled."""

from __future__ import annotations

import datetime as dt
from zoneinfo import ZoneInfo

from rxlog.review.night import Night, parse_night, zone_name
from rxlog.review.summary import fmt_num
from rxlog.store import EventStore
from rxlog.timeutil import parse_iso


def list_events(cfg, night: str | Night | None = None, cls: str | None = None,
                unlabelled: bool = False) -> list[dict]:
    """This station's stored events (oldest first), optionally one night's, one class's, or only unlabelled ones."""
    if isinstance(night, str):
        night = parse_night(cfg, night)
    t0, t1 = (night.t0, night.t1) if night is not None else (None, None)
    store = EventStore(cfg.store_path)
    try:
        return store.events(t0, t1, cls=cls, unlabelled=unlabelled, station=cfg["station"]["name"])
    finally:
        store.close()


def event_table(cfg, night: str | Night | None = None, cls: str | None = None, unlabelled: bool = False) -> str:
    """``list_events`` as a plain-text table with local peak times, each with its zone."""
    rows = list_events(cfg, night, cls, unlabelled)
    if not rows:
        return "no events match"
    tz = ZoneInfo(cfg["station"]["timezone"])
    head = ("event_id", "peak", "class", "confidence", "MHz", "dur s", "S/N", "region", "label")
    body = []
    for r in rows:
        peak = dt.datetime.fromtimestamp(parse_iso(r["peak_utc"]), tz)
        body.append((r["event_id"], f"{peak:%Y-%m-%d %H:%M:%S} {zone_name(peak)}", r["class"],
                     fmt_num(r.get("confidence"), "{:.2f}"),
                     f"{r['fmin_mhz']:.2f}-{r['fmax_mhz']:.2f}", fmt_num(r.get("duration_s"), "{:.1f}"),
                     fmt_num(r.get("snr"), "{:.1f}"), r.get("source_region") or "-",
                     (r["label"] + (f" ({r['label_who']})" if r.get("label_who") else "")) if r.get("label") else "-"))
    widths = [max(len(str(x)) for x in col) for col in zip(head, *body)]
    line = lambda cells: "  ".join(str(c).ljust(w) for c, w in zip(cells, widths)).rstrip()
    return "\n".join([line(head), line(["-" * w for w in widths])] + [line(b) for b in body]
                     + [f"{len(rows)} event{'s' if len(rows) != 1 else ''} ({tz})"])


def list_episodes(cfg, night: str | Night | None = None, cls: str | None = None,
                  unlabelled: bool = False) -> list[dict]:
    """This station's stored episodes (oldest first) with their context, optionally one
    night's (starting in it), one class's, or only unlabelled ones."""
    if isinstance(night, str):
        night = parse_night(cfg, night)
    t0, t1 = (night.t0, night.t1) if night is not None else (None, None)
    store = EventStore(cfg.store_path)
    try:
        rows = store.episodes_with_context(t0, t1, station=cfg["station"]["name"], starting=True)
    finally:
        store.close()
    return [r for r in rows if (cls is None or r["class"] == cls) and not (unlabelled and r["label"])]


def episode_table(cfg, night: str | Night | None = None, cls: str | None = None, unlabelled: bool = False) -> str:
    """``list_episodes`` as a plain-text table with local times, each with its zone."""
    rows = list_episodes(cfg, night, cls, unlabelled)
    if not rows:
        return "no episodes match"
    tz = ZoneInfo(cfg["station"]["timezone"])
    head = ("episode_id", "span", "class", "confidence", "bursts", "MHz", "region", "label")
    body = []
    for r in rows:
        a, b = (dt.datetime.fromtimestamp(parse_iso(r[k]), tz) for k in ("start_utc", "end_utc"))
        when = f"{a:%Y-%m-%d %H:%M} {zone_name(a)}–{b:%H:%M} {zone_name(b)}"
        body.append((r["episode_id"], when, r["class"], fmt_num(r.get("confidence"), "{:.2f}"), r["n_bursts"],
                     f"{r['fmin_mhz']:.2f}-{r['fmax_mhz']:.2f}", r.get("source_region") or "-",
                     (r["label"] + (f" ({r['label_who']})" if r.get("label_who") else "")) if r.get("label") else "-"))
    widths = [max(len(str(x)) for x in col) for col in zip(head, *body)]
    line = lambda cells: "  ".join(str(c).ljust(w) for c, w in zip(cells, widths)).rstrip()  # noqa: E731
    return "\n".join([line(head), line(["-" * w for w in widths])] + [line(b) for b in body]
                     + [f"{len(rows)} episode{'s' if len(rows) != 1 else ''} ({tz})"])
