"""Re-run detection over the archive: archive -> detector -> event store.

``detect_range`` is what ``rxlog detect`` runs: it reads the archive an hour at a time
(bounded memory), feeds the online detector, and replaces the station's detections in
the span in one transaction; running it twice gives the same store. It is two steps,
``detect_span`` (compute, no store) and ``store_detections`` (the one writer), so
that many processes can compute days while one writes them.
"""

from __future__ import annotations

import math
from typing import Callable

from rxlog.archive.read import archive_extent, read_archive
from rxlog.detect.events import TagsFn
from rxlog.detect.online import OnlineDetector, latest
from rxlog.detect.settings import Settings
from rxlog.errors import RxlogError
from rxlog.store import EventStore
from rxlog.timeutil import iso, parse_iso


def detect_range(cfg, t0: float | None = None, t1: float | None = None,
                 progress: Callable[[float, float], None] | None = None, tags_fn: TagsFn | None = None,
                 hours_per_read: float = 1.0) -> dict:
    """Re-run detection over the archive between t0 and t1 (default: all of it) into the store.

    Reads the archive an hour at a time (bounded memory) from a little before t0, so the
    background is settled when t0 arrives, to a little after t1, so events near t1
    finish; then replaces the station's detections peaking in [t0, t1) in one
    transaction (labels are kept apart and re-attach by overlap), the episodes starting
    there, and the hourly quality rows. Running it twice gives the same store.
    ``progress(done_s, total_s)`` is called with the seconds of archive read so far.
    Returns a summary: t0, t1, events, by_class, episodes, hours, segments, and the
    labels that moved to a new event (labels_moved: (label_id, from, to)) or found none
    (labels_orphaned: label rows, kept in the store).
    """
    extent = archive_extent(cfg.archive_dir)
    if extent is None:
        raise RxlogError(f"{cfg.archive_dir}: the archive holds no spectra yet; record some first "
                         "(rxlog run) or ingest FITS dynamic spectra (rxlog ingest)")
    t0 = extent[0] if t0 is None else float(t0)
    t1 = extent[1] if t1 is None else float(t1)
    found = detect_span(cfg, t0, t1, extent, progress=progress, tags_fn=tags_fn, hours_per_read=hours_per_read)
    return store_detections(cfg, found)


def detect_span(cfg, t0: float, t1: float, extent: tuple[float, float],
                progress: Callable[[float, float], None] | None = None, tags_fn: TagsFn | None = None,
                hours_per_read: float = 1.0) -> dict:
    """What ``detect_range`` finds in [t0, t1), without touching the store: a pure function
    of the archive, the detector settings and the archive's ``extent`` (first, last time).

    Returns t0, t1, station, events, episodes, quality (hourly rows) and segments (count),
    for ``store_detections``.
    """
    if not t1 > t0:
        raise RxlogError(f"--end ({iso(t1)}) must be after --start ({iso(t0)})")
    s = Settings.from_config(cfg)
    margin = s.slow_window_s / 2 + s.fast_window_s + 3 * s.block_s
    a = max(extent[0], t0 - margin)
    b = min(extent[1], t1 + margin)
    det = OnlineDetector(cfg, tags_fn=tags_fn, settings=s)
    events, segments = [], set()
    step = 3600.0 * hours_per_read
    cursor = math.floor(a / step) * step
    gaps: list[tuple[float, float]] = []
    while cursor < b:
        lo, hi = max(cursor, a), min(cursor + step, b)
        got = read_archive(cfg.archive_dir, lo, hi)
        gaps += got.gaps
        for spec in got.segments:
            segments.add(spec.segment)
            events += det.feed(spec)
        if progress is not None:
            progress(min(max(hi - a, 0.0), b - a), b - a)
        cursor += step
    events = latest(events + det.flush())
    keep = [e for e in events if t0 <= parse_iso(e["peak_utc"]) < t1]
    episodes = [ep for ep in det.pop_episodes() if t0 <= parse_iso(ep["start_utc"]) < t1]
    quality = _with_gaps([q for q in det.pop_quality() if t0 - 3600.0 < parse_iso(q["hour_utc"]) < t1],
                         gaps, s.station, t0, t1)
    return {"t0": t0, "t1": t1, "station": s.station, "events": keep, "episodes": episodes,
            "quality": quality, "segments": len(segments), "occupancy": det.occupancy_state()}


def store_detections(cfg, found: dict) -> dict:
    """Write what ``detect_span`` found into the event store (one writer): replace the
    station's detections in [t0, t1), re-attach labels, upsert the quality rows, keep the
    mask's occupancy where the store has none. Returns
    ``detect_range``'s summary."""
    keep, t0, t1 = found["events"], found["t0"], found["t1"]
    store = EventStore(cfg.store_path)
    try:
        labels = store.replace_events(found["station"], t0, t1, keep, found["episodes"])
        store.record_quality(found["quality"])
        # What the mask learned, for the report's picture, where no logger has stored its
        # own yet (an ingested or simulated archive): a logger's live state is never replaced
        # by a re-run over older data.
        if found.get("occupancy") and not store.occupancy(found["station"]):
            store.save_occupancy(found["station"], found["occupancy"])
    finally:
        store.close()
    by_class: dict[str, int] = {}
    for e in keep:
        by_class[e["class"]] = by_class.get(e["class"], 0) + 1
    return {"t0": t0, "t1": t1, "events": len(keep), "by_class": dict(sorted(by_class.items())),
            "episodes": len(found["episodes"]), "hours": len(found["quality"]), "segments": found["segments"],
            "labels_moved": labels["reattached"], "labels_orphaned": labels["orphans"]}


def _with_gaps(rows: list[dict], gaps: list[tuple[float, float]], station: str, t0: float, t1: float) -> list[dict]:
    """Add the archive's gaps (stretches without any segment) to the hourly gap seconds."""
    by_hour = {r["hour_utc"]: dict(r) for r in rows}
    for a, b in gaps:
        a, b = max(a, t0), min(b, t1)
        h = math.floor(a / 3600.0) * 3600.0
        while h < b:
            part = min(b, h + 3600.0) - max(a, h)
            if part > 0:
                r = by_hour.setdefault(iso(h), {"station": station, "hour_utc": iso(h), "masked_fraction": None,
                                                "gap_s": 0.0, "covered_s": 0.0})
                r["gap_s"] = float(r["gap_s"] or 0.0) + part
            h += 3600.0
    return [by_hour[k] for k in sorted(by_hour)]
