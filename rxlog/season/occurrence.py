"""Jovian occurrence probability over CML III x Io phase, per source region, and for the
network (emission confirmed at two or more stations).

Occurrence in a bin = time with Jovian emission / time observed (exposure), both counted
only while the station listened with Jupiter up. The Wilson interval
(``binomial.wilson_interval``) treats each ``TRIAL_S`` of exposure as one trial: storm
minutes are not independent (a storm lasts minutes to hours), so counting each minute
as a trial would make the intervals far too narrow; 10 minutes is about the shortest
storm (Carr, Desch & Alexander 1983 describe storms of minutes to a couple of hours;
from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rxlog.season.binomial import wilson_interval
from rxlog.season.exposure import Timeline, body_weight, inside_spans
from rxlog.timeutil import parse_iso

BIN_DEG = 10.0
TRIAL_S = 600.0
JOVIAN = ("jovian_l", "jovian_s")
OUTSIDE = "non-Io"            # the rate outside every region box
CONFIRM_STATIONS = 2


@dataclass
class OccurrenceMap:
    """Per (CML bin, Io-phase bin): exposure and emission seconds, probability and its
    Wilson interval (NaN where nothing was observed). Rows are CML, columns Io phase."""
    bin_deg: float
    exposure_s: np.ndarray
    emission_s: np.ndarray
    p: np.ndarray
    lo: np.ndarray
    hi: np.ndarray

    @property
    def edges(self) -> np.ndarray:
        return np.arange(0.0, 360.0 + self.bin_deg / 2, self.bin_deg)


def jovian_spans(events: list[dict], episodes: list[dict] = ()) -> list[tuple[float, float]]:
    """Time spans with Jovian emission: Jovian events and Jovian episodes (a storm)."""
    rows = [e for e in list(events) + list(episodes) if e.get("class") in JOVIAN]
    return [(parse_iso(r["start_utc"]), parse_iso(r["end_utc"])) for r in rows]


def _rate(exposure_s, emission_s, trial_s):
    with np.errstate(invalid="ignore", divide="ignore"):
        p = np.where(exposure_s > 0, emission_s / exposure_s, np.nan)
    lo, hi = wilson_interval(emission_s / trial_s, exposure_s / trial_s)
    return p, lo, hi


def occurrence_map(tl: Timeline, spans, min_alt_deg: float = 0.0, bin_deg: float = BIN_DEG,
                   trial_s: float = TRIAL_S) -> OccurrenceMap:
    """Exposure, emission and occurrence probability per CML III x Io-phase bin."""
    w = body_weight(tl, "jupiter", min_alt_deg)
    on = inside_spans(tl.mid, spans)
    nb = int(round(360.0 / bin_deg))
    ci = np.clip((np.mod(tl.tags["cml3_deg"], 360.0) // bin_deg).astype(int), 0, nb - 1)
    ii = np.clip((np.mod(tl.tags["io_phase_deg"], 360.0) // bin_deg).astype(int), 0, nb - 1)
    flat = ci * nb + ii
    exposure = np.bincount(flat, weights=w, minlength=nb * nb).reshape(nb, nb)
    emission = np.bincount(flat, weights=w * on, minlength=nb * nb).reshape(nb, nb)
    p, lo, hi = _rate(exposure, emission, trial_s)
    return OccurrenceMap(bin_deg, exposure, emission, p, lo, hi)


def region_rates(tl: Timeline, spans, region_names, min_alt_deg: float = 0.0,
                 trial_s: float = TRIAL_S) -> list[dict]:
    """One row per region (in the table's order) and ``OUTSIDE``: exposure and emission
    hours, occurrence probability and its Wilson interval."""
    w = body_weight(tl, "jupiter", min_alt_deg)
    on = inside_spans(tl.mid, spans)
    region = tl.tags["source_region"]
    rows = []
    for name in list(region_names) + [OUTSIDE]:
        sel = region == (name if name != OUTSIDE else "none")
        exp_s, em_s = float(w[sel].sum()), float((w * on)[sel].sum())
        p, lo, hi = _rate(np.array(exp_s), np.array(em_s), trial_s)
        rows.append({"region": name, "exposure_h": exp_s / 3600.0, "emission_h": em_s / 3600.0,
                     "probability": float(p), "wilson_lo": float(lo), "wilson_hi": float(hi)})
    return rows


def confirmed_spans(lists: dict[str, list[dict]], min_stations: int = CONFIRM_STATIONS) -> list[tuple[float, float]]:
    """Spans of Jovian emission heard at ``min_stations`` or more stations: each station's
    Jovian events (``lists``: station -> events with start_utc, end_utc, class) are joined
    where they overlap in time, across stations; a joined span counts when that many
    different stations contributed to it."""
    items = sorted((parse_iso(e["start_utc"]), parse_iso(e["end_utc"]), st)
                   for st, events in lists.items() for e in events if e.get("class") in JOVIAN)
    out, cur = [], None
    for a, b, st in items:
        if cur is not None and a <= cur[1]:
            cur[1] = max(cur[1], b)
            cur[2].add(st)
            continue
        if cur is not None and len(cur[2]) >= min_stations:
            out.append((cur[0], cur[1]))
        cur = [a, b, {st}]
    if cur is not None and len(cur[2]) >= min_stations:
        out.append((cur[0], cur[1]))
    return out
