"""Ground truth of a simulation: one row per event, in the event store's column names.

Truth rows are measured on the archive grid (noise-free): ``peak_excess_db`` is
10 log10((background + event) / background) at the event's strongest cell (negative for
a fadeout), the background being the sky, the man-made noise and the receiver without
any event. Events that stay below 0.01 dB (a carrier whose path is closed, a burst with
its source near the horizon) have no row.

Interference rows name their kind (``rfi_kind``: one of ``events.RFI_KINDS``); sky rows
name the true episode they belong to (``episode``, an id; ``episode_kind``: one of
``events.EPISODE_KINDS``) and, for a flare's episodes, the ``sequence`` they share.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np

from rxlog.sim.cells import archive_grid
from rxlog.sim.model import NODE_S, SkyModel
from rxlog.sim.render import render
from rxlog.timeutil import iso

TRUTH_FIELDS = ("station", "event_id", "class", "start_utc", "end_utc", "peak_utc", "fmin_mhz", "fmax_mhz",
                "peak_excess_db", "drift_mhz_s", "source_region", "rfi_kind", "episode", "episode_kind", "sequence",
                "reason")
MIN_TRUTH_DB = 0.01


def truth_rows(model: SkyModel, peaks: dict, start: float, end: float) -> list[dict]:
    """Truth rows of the events in ``peaks`` (id -> [ratio, t, f], from ``render``) over [start, end)."""
    rows = []
    for e in model.events:
        pk = peaks.get(id(e))
        if pk is None:
            continue
        db = 10 * math.log10(pk[0])
        if abs(db) < MIN_TRUTH_DB:
            continue
        if e.t_end <= start or e.t_start >= end:
            continue              # only a faint tail (below a tenth of its peak) falls in the span
        t0, t1 = max(e.t_start, start), min(e.t_end, end)
        if e.source == "skywave" and e.cls == "rfi":
            t0, t1 = _open_path(model, e, t0, t1)
        rows.append({"station": model.name, "class": e.cls, "start_utc": iso(t0), "end_utc": iso(max(t0, t1)),
                     "peak_utc": iso(pk[1]),
                     "fmin_mhz": round(float(max(e.f_lo, model.fmin)) / 1e6, 6),
                     "fmax_mhz": round(float(min(e.f_hi, model.fmax)) / 1e6, 6),
                     "peak_excess_db": round(db, 3),
                     "drift_mhz_s": None if math.isnan(e.drift_mhz_s) else round(float(e.drift_mhz_s), 4),
                     "source_region": e.region, "rfi_kind": e.rfi_kind, "episode": e.episode,
                     "episode_kind": e.episode_kind, "sequence": e.sequence, "reason": e.reason})
    rows.sort(key=lambda r: (r["start_utc"], r["fmin_mhz"]))
    for k, r in enumerate(rows):
        r["event_id"] = f"sim-{model.name}-{k + 1:05d}"
    return rows


def _open_path(model, e, t0, t1):
    """A distant transmitter is received only while its path is open: clip to that."""
    t = np.arange(t0, t1 + NODE_S, NODE_S / 4)
    t = t[t <= t1]
    ok = model.source_propagation("skywave", t, 0.5 * (e.f_lo + e.f_hi)) > 0.1
    if not ok.any():
        return t0, t1
    return float(t[ok][0]), float(min(t1, t[ok][-1] + NODE_S / 4))


def interference_share(run, threshold_db: float = 1.0, stride: int = 1) -> dict:
    """The share of a run's cells that its interference lifts by more than ``threshold_db``
    over the sky without it: the noise-free model drawn with every event and with the sky
    events only, on the archive grid's covered channels. The man-made noise floor (ITU-R
    P.372) is in both: it is the site's background, not something a mask could take.

    ``run``: a ``SpectralRun``. ``stride``: draw every stride-th row only (an unbiased
    estimate, ``stride`` times faster). Returns dict(share=..., hours={start of each UTC
    hour (POSIX s): share of that hour's cells}).
    """
    model, layout = run.model, run.layout
    sky = [e for e in model.events if e.cls != "rfi"]
    hours: dict[float, list[int]] = {}
    step = run.chunk_rows * max(1, int(stride))
    for i0 in range(0, run.n_rows, step):
        g = archive_grid(model, layout, run.start, run.cadence, i0, min(run.n_rows, i0 + step))
        g.times = g.times[::max(1, int(stride))]
        every, _ = render(model, g)
        without, _ = render(model, g, events=sky)
        up = (10 * np.log10(every[:, layout.covered] / without[:, layout.covered]) > threshold_db).sum(axis=1)
        hour = np.floor(g.times / 3600.0) * 3600.0
        for h in np.unique(hour):
            acc = hours.setdefault(float(h), [0, 0])
            acc[0] += int(up[hour == h].sum())
            acc[1] += int((hour == h).sum()) * int(layout.covered.sum())
    lifted = sum(a for a, _ in hours.values())
    cells = sum(n for _, n in hours.values())
    return {"share": lifted / max(cells, 1), "hours": {h: a / n for h, (a, n) in sorted(hours.items())}}


def write_truth_csv(rows: list[dict], path) -> Path:
    """Truth rows as CSV (ISO 8601 UTC times; empty cells for undefined values)."""
    p = Path(path)
    p.parent.mkdir(parents=True, exist_ok=True)
    tmp = p.with_name(p.name + ".tmp")
    with open(tmp, "w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=TRUTH_FIELDS, extrasaction="ignore")
        w.writeheader()
        for r in rows:
            w.writerow({k: ("" if r.get(k) is None else r.get(k)) for k in TRUTH_FIELDS})
    tmp.replace(p)
    return p
