"""What a comparison writes: matched_events.csv, matched_episodes.csv (when episode lists
were compared), stations.csv, summary.txt and the timeline."""

from __future__ import annotations

import csv
import io
import math
from pathlib import Path

import numpy as np

from rxlog.exchange.episodes import EPISODE_ROW_COLUMNS
from rxlog.exchange.timeline import plot_timeline
from rxlog.exchange.timing import Events
from rxlog.fileio import write_atomic
from rxlog.store import CLASSES

# Columns of matched_events.csv (one row per event) and of stations.csv (one per station).
ROW_COLUMNS = ("match_id", "n_stations", "stations", "station", "event_id", "class", "start_utc",
               "peak_utc", "end_utc", "fmin_mhz", "fmax_mhz", "snr", "used_for_clock", "clock_residual_s")
STATION_COLUMNS = ("station", "n_events", "n_confirmed", "n_clock_events", "n_type3", "n_lightcurves",
                   "offset_s", "offset_err_s", "event_offset_s", "event_offset_err_s", "in_reference",
                   "flagged", "clock_sync", "latitude_deg", "longitude_deg", "cadence_s", "n_episodes",
                   "n_episodes_confirmed")


def match_rows(E: Events, grp, n_at, names, used, resid) -> list[dict]:
    """One row per event, groups numbered by time, members of a group together."""
    first_peak = np.full(int(grp.max()) + 1 if len(grp) else 0, np.inf)
    np.minimum.at(first_peak, grp, E.peak)
    rank = np.empty(len(first_peak), dtype=np.int64)
    rank[np.argsort(first_peak, kind="stable")] = np.arange(len(first_peak))
    g_rank = rank[grp].tolist()
    station = E.station.tolist()
    members: dict[int, list[str]] = {}
    for g, s in zip(g_rank, station):
        members.setdefault(g, []).append(names[s])
    joined = {g: "+".join(sorted(m)) for g, m in members.items()}
    n_at_l, used_l = n_at.tolist(), used.tolist()
    resid_l = [None if not math.isfinite(r) else round(r, 4) for r in resid.tolist()]
    cls_l = E.cls.tolist()
    rows = []
    for i in np.lexsort((E.station, rank[grp])).tolist():
        e = E.ev[i]
        rows.append({
            "match_id": f"M{g_rank[i] + 1:06d}", "n_stations": n_at_l[i], "stations": joined[g_rank[i]],
            "station": names[station[i]], "event_id": e["event_id"], "class": CLASSES[cls_l[i]],
            "start_utc": e["start_utc"], "peak_utc": e["peak_utc"], "end_utc": e["end_utc"],
            "fmin_mhz": e["fmin_mhz"], "fmax_mhz": e["fmax_mhz"], "snr": e.get("snr"),
            "used_for_clock": int(used_l[i]), "clock_residual_s": resid_l[i]})
    return rows


def _csv_text(columns, rows) -> bytes:
    """Rows (dicts) as CSV under a row of ``columns``; None is an empty cell."""
    out = io.StringIO(newline="")
    w = csv.writer(out, lineterminator="\n")
    w.writerow(columns)
    for r in rows:
        w.writerow(["" if r.get(c) is None else r[c] for c in columns])  # str(float) is its repr
    return out.getvalue().encode("utf-8")


def write_outputs(result, E: Events, grp, n_at, names, outdir: Path) -> dict[str, Path]:
    """Write a comparison's ``result`` (rxlog.exchange.compare.CompareResult) to ``outdir``:
    matched_events.csv, matched_episodes.csv (with episodes), stations.csv, summary.txt and timeline.png."""
    outdir.mkdir(parents=True, exist_ok=True)
    files = {"matched": write_atomic(outdir / "matched_events.csv", _csv_text(ROW_COLUMNS, result.rows))}
    if result.episode_rows:
        files["episodes"] = write_atomic(outdir / "matched_episodes.csv",
                                         _csv_text(EPISODE_ROW_COLUMNS, result.episode_rows))
    srows = [{"station": s.name, "n_events": s.n_events, "n_confirmed": s.n_confirmed,
              "n_clock_events": s.n_clock, "n_type3": s.n_type3, "n_lightcurves": s.n_lightcurves,
              "offset_s": s.offset_s, "offset_err_s": s.offset_err_s, "event_offset_s": s.event_offset_s,
              "event_offset_err_s": s.event_offset_err_s, "in_reference": int(s.in_reference),
              "flagged": int(s.flagged), "clock_sync": s.clock_sync,
              "latitude_deg": s.header.get("latitude_deg"), "longitude_deg": s.header.get("longitude_deg"),
              "cadence_s": s.header.get("cadence_s"), "n_episodes": s.n_episodes,
              "n_episodes_confirmed": s.n_episodes_confirmed} for s in result.stations]
    files["stations"] = write_atomic(outdir / "stations.csv", _csv_text(STATION_COLUMNS, srows))
    text = "\n".join(result.summary_lines() + [""] + result.notices) + "\n"
    files["summary"] = write_atomic(outdir / "summary.txt", text.encode("utf-8"))
    files["timeline"] = plot_timeline(E, grp, n_at, names, outdir / "timeline.png")
    return files
