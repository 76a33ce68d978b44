"""Scoring a detector's day against the simulator's truth the way a reviewer meets it:
true episodes (a storm, a flare's Type III group, Type II, Type IV, a fadeout, a lone
burst) against the episodes and events the detector reports; false events traced to
the kind of interference that made them; the masked share of the day against the share
of cells interference really lifts.

Boxes are (start, end, fmin, fmax) in POSIX s and MHz; a detection overlaps a truth box
with 5 s and 0.2 MHz of slack either way (as the rest of the benchmark).
"""

from __future__ import annotations

from collections import defaultdict

import numpy as np

from rxlog.sim.cells import archive_grid
from rxlog.sim.render import render
from rxlog.timeutil import parse_iso

SLACK_S, SLACK_MHZ = 5.0, 0.2
# The detector's classes that are right for each kind of true episode.
RIGHT_CLASSES = {"jovian_storm": ("jovian_l", "jovian_s"), "type_iii_group": ("solar_iii",),
                 "isolated_burst": ("solar_iii",), "type_ii": ("solar_ii",), "type_iv": ("solar_iv",),
                 "fadeout": ("fadeout",)}
SKY_CLASSES = ("jovian_l", "jovian_s", "solar_iii", "solar_ii", "solar_iv", "fadeout")
LONG_S = 20 * 60.0              # a long episode: its coverage is scored
EDGE_S = 5 * 60.0               # ... start and end found within this
# Interference that must never make a Jovian or solar event (the worst false events).
WORST_KINDS = ("switched_broadband", "impulse", "impulse_train", "narrowband_burst")
LIFT_DB = 0.5                   # a false event is traced to interference only where it lifts a cell this much


def box(r) -> tuple[float, float, float, float]:
    return parse_iso(r["start_utc"]), parse_iso(r["end_utc"]), float(r["fmin_mhz"]), float(r["fmax_mhz"])


def overlaps(a, b) -> bool:
    return (min(a[1], b[1]) + SLACK_S > max(a[0], b[0]) - SLACK_S
            and min(a[3], b[3]) + SLACK_MHZ > max(a[2], b[2]) - SLACK_MHZ)


def true_episodes(truth: list[dict]) -> list[dict]:
    """The truth's episodes: kind, sequence, box spanning its rows, peak |excess| (dB)."""
    rows = defaultdict(list)
    for r in truth:
        if r.get("episode"):
            rows[r["episode"]].append(r)
    out = []
    for name, rs in rows.items():
        bs = [box(r) for r in rs]
        out.append({"episode": name, "kind": rs[0]["episode_kind"], "sequence": rs[0]["sequence"],
                    "box": (min(b[0] for b in bs), max(b[1] for b in bs), min(b[2] for b in bs), max(b[3] for b in bs)),
                    "peak_db": max(abs(r["peak_excess_db"]) for r in rs)})
    return sorted(out, key=lambda e: e["box"][0])


def final_episodes(popped: list[dict]) -> list[dict]:
    """The last version of each episode the detector handed out (``pop_episodes`` gives
    an episode again each time it grows)."""
    return list({e["episode_id"]: e for e in popped}.values())


def review_items(episodes: list[dict]) -> list[dict]:
    """What a reviewer is asked to look at: every episode that is not interference."""
    return [e for e in episodes if e["class"] != "rfi"]


def episode_recall(truth_eps, events, episodes, min_db=1.0) -> tuple[int, int]:
    """True episodes of at least ``min_db`` that some detected episode or event of a
    right class overlaps: (found, total)."""
    found = total = 0
    dets = [(box(d), d["class"]) for d in list(events) + list(episodes)]
    for ep in truth_eps:
        if ep["peak_db"] < min_db:
            continue
        total += 1
        right = RIGHT_CLASSES[ep["kind"]]
        found += any(c in right and overlaps(b, ep["box"]) for b, c in dets)
    return found, total


def coverage(ep: dict, events, episodes) -> dict:
    """How much of a long true episode the detected episodes and events of a right class
    cover (share of its span), and how far their first start and last end are from its
    start and end (s; positive: late)."""
    t0, t1 = ep["box"][:2]
    right = RIGHT_CLASSES[ep["kind"]]
    spans = sorted((max(b[0], t0), min(b[1], t1), b[0], b[1]) for b in
                   (box(d) for d in list(events) + list(episodes) if d["class"] in right)
                   if overlaps(b, ep["box"]))
    if not spans:
        return {"covered": 0.0, "start_err_s": None, "end_err_s": None}
    covered, reach = 0.0, t0
    for a, b, _, _ in spans:
        a = max(a, reach)
        if b > a:
            covered += b - a
            reach = b
    return {"covered": covered / max(t1 - t0, 1.0), "start_err_s": min(s[2] for s in spans) - t0,
            "end_err_s": max(s[3] for s in spans) - t1}


def covered_well(c: dict) -> bool:
    return (c["covered"] >= 0.8 and c["start_err_s"] is not None
            and abs(c["start_err_s"]) <= EDGE_S and abs(c["end_err_s"]) <= EDGE_S)


def false_events(events, truth) -> list[dict]:
    """Non-rfi detections that overlap no true sky event."""
    sky = [box(r) for r in truth if r["class"] != "rfi"]
    return [e for e in events if e["class"] != "rfi" and not any(overlaps(box(e), b) for b in sky)]


def blame(run, event: dict, max_rows: int = 600) -> str:
    """The kind of interference that made a false event: the kind whose events add the
    most excess (in units of the background) over the event's box on the noise-free
    archive grid; 'none' when no interference lifts a cell of it by LIFT_DB (noise, or
    the sky's own background). Long boxes are drawn on every n-th row."""
    model, cad = run.model, run.cadence
    t0, t1, f0, f1 = box(event)
    i0 = max(0, int(np.floor((t0 - run.start) / cad)) - 1)
    i1 = min(run.n_rows, int(np.ceil((t1 - run.start) / cad)) + 2)
    g = archive_grid(model, run.layout, run.start, cad, i0, max(i1, i0 + 1))
    g.times = g.times[::max(1, (i1 - i0) // max_rows)]
    cols = (model.freq_hz >= f0 * 1e6 - 50e3) & (model.freq_hz <= f1 * 1e6 + 50e3) & run.layout.covered
    kinds = defaultdict(list)
    for e in model.events:
        if e.cls == "rfi" and e.r_t1 > g.times[0] - 2 and e.r_t0 < g.times[-1] + 2:
            kinds[e.rfi_kind].append(e)
    best, score = "none", 0.0
    for kind, evs in kinds.items():
        total, background = render(model, g, events=evs)
        ratio = (total / background)[:, cols]
        if ratio.size and ratio.max() > 10 ** (LIFT_DB / 10) and float((ratio - 1).sum()) > score:
            best, score = kind, float((ratio - 1).sum())
    return best


def masked_fraction(quality: list[dict]) -> float:
    """The share of the day's cells the detector flagged, from its hourly quality rows."""
    rows = [q for q in quality if q["masked_fraction"] is not None]
    w = np.array([q["covered_s"] or 0.0 for q in rows])
    m = np.array([q["masked_fraction"] for q in rows])
    return float((w * m).sum() / w.sum()) if w.sum() > 0 else float("nan")
