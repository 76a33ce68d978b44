"""Simulated seasons: a month or more of spectra, written day by day into the archive.

Jovian storms are planned once for the whole span from the ephemeris, per source region
(``sources.REGION_STORMS``: chances per passage after Carr, Desch & Alexander 1983, from
memory), and handed to each day as its schedule, so a storm across midnight is the same
storm on both sides. Solar activity varies from day to day: the day's burst and fadeout
rates are the cycle's (``ionosphere.solar_r12``) times a factor that follows the Sun's
rotation (active regions come back every 27.3 days, the synodic Carrington period) and
scatters log-normally from day to day. Interference is planned per day as always.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

# Writing simulated spectra as an archive reaches the archive's stage above the simulator,
# as sim.write does; the archive never imports the simulator.
from rxlog.archive.write import ArchiveWriter
from rxlog.errors import RxlogError
from rxlog.sim.events import DAY_S
from rxlog.sim.interference import check_rfi_category
from rxlog.sim.model import SkyModel
from rxlog.sim.spectra import iter_spectra
from rxlog.sim.truth import write_truth_csv
from rxlog.timeutil import iso, parse_iso

CARRINGTON_DAYS = 27.2753       # synodic rotation of the Sun (Carrington rotation period)
ROTATION_DEPTH = 0.5            # log-amplitude of the rotation's modulation (from memory: rates
ACTIVITY_SIGMA = 0.6            # swing by a few times over a rotation and day to day)
JOVIAN = frozenset({"jovian_l", "jovian_s"})
MAX_DAYS = 400
HOUR_S = 3600.0


def solar_activity(seed: int, days) -> np.ndarray:
    """The factor on the solar burst and fadeout rates of each UTC day number in ``days``:
    mean 1, a rotation-long swing with a phase from the seed, and a log-normal scatter
    drawn per day from its own stream (so a day's factor does not depend on the span)."""
    days = np.asarray(list(days), dtype=np.int64)
    phase = np.random.default_rng([seed, 38]).uniform(0, 2 * np.pi)
    noise = np.array([np.random.default_rng([seed, int(d), 39]).standard_normal() for d in days])
    log_f = ROTATION_DEPTH * np.sin(2 * np.pi * days / CARRINGTON_DAYS + phase) + ACTIVITY_SIGMA * noise
    # subtract the log-normal's mean so the factor averages 1 (E[exp(s N)] = exp(s^2 / 2))
    return np.exp(log_f - (ACTIVITY_SIGMA ** 2 + ROTATION_DEPTH ** 2 / 2) / 2)


def _db(row) -> float:
    v = row.get("peak_excess_db")
    return float(v) if v not in (None, "") else -math.inf


def _whole_storm(row: dict, storms: list[dict]) -> dict:
    """A day's truth row of a Jovian storm ends at the day's edge: give it the planned
    storm's whole extent (the storm it is a piece of)."""
    if row["class"] not in JOVIAN:
        return row
    a, b = parse_iso(row["start_utc"]), parse_iso(row["end_utc"])
    for s in storms:
        if s["start"] - 1e-3 <= a and b <= s["end"] + 1e-3:
            return {**row, "start_utc": iso(s["start"]), "end_utc": iso(s["end"])}
    return row


def season_storms(cfg, start_unix: float, end_unix: float, seed: int) -> list[dict]:
    """Jovian storms over the whole span from the ephemeris and the region table, as a
    ``jupiter_schedule`` (start, end, region, s20, s_bursts)."""
    sky = SkyModel(cfg, start_unix, end_unix, seed=seed, include=JOVIAN)
    return [{"start": e.t_start, "end": e.t_end, "region": e.region, "s20": e.params["s20"],
             "s_bursts": bool(e.params["s_bursts"])} for e in sky.events if e.cls in JOVIAN]


def write_season(cfg, start_unix: float, days: int, out, seed: int | None = None, rfi: str | None = None,
                 progress=None) -> dict:
    """Simulate ``days`` whole days from ``start_unix`` into the archive folder ``out``,
    one day at a time, with a truth CSV (truth.csv) for the whole span. ``progress(done,
    total)`` counts rows. Returns paths, rows, truth rows and the solar activity per day."""
    if not (isinstance(days, int) and 1 <= days <= MAX_DAYS):
        raise RxlogError(f"--days: expected a whole number of days from 1 to {MAX_DAYS}, got {days!r}")
    out = Path(out)
    if out.suffix.lower() in (".fits", ".fit", ".fts"):
        raise RxlogError(f"--out {out}: --days writes the archive's layout; give a folder, not a .fits file")
    seed = int(cfg["receiver"]["sim_seed"] if seed is None else seed)
    rfi = check_rfi_category(cfg["receiver"]["sim_rfi"] if rfi is None else rfi)
    end_unix = start_unix + days * DAY_S
    storms = season_storms(cfg, start_unix, end_unix, seed)
    day0 = math.floor(start_unix / DAY_S)
    activity = solar_activity(seed, range(day0, day0 + days + 1))
    cadence = float(cfg["spectra"]["cadence_s"])
    total, done, truth = int(round(days * DAY_S / cadence)), 0, {}
    # hour-long chunks: a season is written in bulk, not live, and minute chunks (the
    # logger's crash safety) would cost more than the simulation itself
    with ArchiveWriter(out, cfg["station"], lossless=cfg["storage"]["lossless"], chunk_s=HOUR_S) as w:
        for k in range(days):
            a = start_unix + k * DAY_S
            mine = [s for s in storms if s["end"] > a - 3600.0 and s["start"] < a + DAY_S]
            # rates per UTC day: the day this piece mostly falls in
            rate = float(activity[math.floor((a + DAY_S / 2) / DAY_S) - day0])
            run = iter_spectra(cfg, a, 24.0, seed=seed, rfi=rfi, jupiter_schedule=mine, event_rate=rate,
                               chunk_s=HOUR_S)
            for spec in run:
                w.write(spec)
                done += spec.n_time
                if progress:
                    progress(done, total)
            for row in run.truth_rows():      # a storm across midnight is listed once, at its brightest
                row = _whole_storm(row, mine)
                key = (row["class"], row["start_utc"], row["end_utc"], row["fmin_mhz"], row["fmax_mhz"])
                old = truth.get(key)
                if old is None or _db(row) > _db(old):
                    truth[key] = row
    rows = sorted(truth.values(), key=lambda r: (r["start_utc"], r["class"]))
    truth_path = out / "truth.csv"
    write_truth_csv(rows, truth_path)
    return {"path": out, "truth_path": truth_path, "rows": done, "truth_rows": len(rows),
            "activity": [float(x) for x in activity[:days]]}
