"""The event records the detector hands out: their fields and ids, the ephemeris tags
they carry, and the later versions of burst pieces that turn out to belong to a long
event."""

from __future__ import annotations

from typing import Callable

import numpy as np

from rxlog.store import make_event_id
from rxlog.timeutil import iso, parse_iso

EVENT_FIELDS = ("station", "event_id", "episode_id", "start_utc", "end_utc", "peak_utc",
                "fmin_mhz", "fmax_mhz", "peak_excess_db", "snr", "integrated_excess",
                "drift_mhz_s", "drift_err_mhz_s", "duration_s", "bandwidth_mhz", "class",
                "confidence", "reason", "rfi_kind", "cml3_deg", "io_phase_deg", "cml3_start_deg",
                "cml3_end_deg", "io_phase_start_deg", "io_phase_end_deg", "source_region",
                "jupiter_alt_deg", "sun_alt_deg", "cutout_path")

# Long events whose short pieces, found first by the burst path, take their class.
LONG_NAMES = {"solar_iv": "Type IV continuum", "jovian_l": "Jovian storm"}

TagsFn = Callable[[np.ndarray], dict]


def feature_tags(tags_fn: TagsFn, feats: list[dict]) -> dict:
    """Ephemeris tags of each event at its peak (sun and Jupiter altitude, source region,
    CML and Io phase) and at its start and end (CML and Io phase), as lists by event."""
    n = len(feats)
    times = np.array([f["peak"] for f in feats] + [f["start"] for f in feats] + [f["end"] for f in feats])
    raw = tags_fn(times)
    out = {}
    for k in ("sun_alt_deg", "jupiter_alt_deg", "source_region"):
        if k in raw:
            out[k] = list(np.asarray(raw[k])[:n])
    for k in ("cml3_deg", "io_phase_deg"):
        if k in raw:
            v = np.asarray(raw[k], dtype=np.float64)
            out[k], out[k.replace("_deg", "_start_deg")], out[k.replace("_deg", "_end_deg")] = \
                list(v[:n]), list(v[n:2 * n]), list(v[2 * n:])
    return out


def sky_context(tags: dict, i: int) -> tuple[dict, str | None]:
    """Event i's tags (altitudes that are not finite become None) and its Io source
    region (None outside the regions)."""
    ctx = {k: tags[k][i] for k in tags} if tags else {}
    region = ctx.get("source_region")
    region = None if region is None or str(region).lower() in ("", "none") else str(region)
    for k in ("sun_alt_deg", "jupiter_alt_deg"):
        if k in ctx and (ctx[k] is None or not np.isfinite(ctx[k])):
            ctx[k] = None
    return ctx, region


def event_record(station: str, f: dict, ctx: dict, cls: str, conf: float, reason: str) -> dict:
    """The event as stored and exported (EVENT_FIELDS) from its features, tags and class."""
    def num(x, nd=3):
        return None if x is None or not np.isfinite(x) else round(float(x), nd)

    e = {k: None for k in EVENT_FIELDS}
    e.update(station=station,
             event_id=make_event_id(station, f["peak"], f["fmin"], f["fmax"]),
             start_utc=iso(f["start"]), end_utc=iso(f["end"]), peak_utc=iso(f["peak"]),
             fmin_mhz=num(f["fmin"], 4), fmax_mhz=num(f["fmax"], 4),
             peak_excess_db=num(f["peak_excess_db"]), snr=num(f["snr"], 1),
             integrated_excess=num(f["integrated_excess"], 4),
             drift_mhz_s=num(f["drift"], 4), drift_err_mhz_s=num(f["drift_err"], 4),
             duration_s=num(f["run_s"], 2), bandwidth_mhz=num(f["bandwidth_mhz"], 4),
             confidence=round(float(min(max(conf, 0.0), 1.0)), 2), reason=reason)
    e["class"] = cls
    for k in ("cml3_deg", "io_phase_deg", "cml3_start_deg", "cml3_end_deg", "io_phase_start_deg",
              "io_phase_end_deg", "jupiter_alt_deg", "sun_alt_deg"):
        if k in ctx and ctx[k] is not None:
            e[k] = num(ctx[k], 2)
    if ctx.get("source_region"):
        e["source_region"] = str(ctx["source_region"])
    return e


class LongEventPieces:
    """Short pieces of a long event found by the burst path before the long event was
    known (the fluctuations of a Type IV continuum or a storm, left "unknown") take the
    long event's class once it is reported: their updated versions (same event_id)
    come out with it. Pieces are remembered for two slow windows."""

    def __init__(self, block_s: float, slow_window_s: float):
        self.block_s, self.slow_window_s = block_s, slow_window_s
        self.pieces: list[dict] = []   # recent "unknown" bursts a long event may still claim

    def updates(self, events: list[tuple[dict, dict]]) -> list[dict]:
        """Remember this batch's pieces ((features, event) pairs) and return the updated
        versions of the pieces its long events claim."""
        updates = []
        for f, e in events:
            if f["path"] == "fine" and e["class"] == "unknown":
                self.pieces.append(e)
        for f, e in events:
            if f["path"] != "slow" or f["sign"] < 0 or e["class"] not in LONG_NAMES:
                continue
            a, b = parse_iso(e["start_utc"]) - self.block_s, parse_iso(e["end_utc"]) + self.block_s
            keep = []
            for x in self.pieces:
                inside = (a <= parse_iso(x["start_utc"]) and parse_iso(x["end_utc"]) <= b
                          and x["fmin_mhz"] < e["fmax_mhz"] and x["fmax_mhz"] > e["fmin_mhz"])
                if not inside:
                    keep.append(x)
                    continue
                updates.append(dict(x, **{"class": e["class"], "confidence": round(0.9 * e["confidence"], 2),
                                          "reason": f"within the {LONG_NAMES[e['class']]} {e['event_id']}; "
                                                    f"{x['reason']}"}))
            self.pieces = keep
        if events:
            newest = max(parse_iso(e["end_utc"]) for _, e in events)
            self.pieces = [x for x in self.pieces if parse_iso(x["end_utc"]) >= newest - 2 * self.slow_window_s]
        return updates
