"""Cross-station comparison: five stations with 10,000 events each, compared in at most 10 s.

The lists are CSV files written beforehand (not timed); the timed run reads them with the
strict importer, matches, fits the clock offsets and writes the matched-events table,
the station summary and the timeline plot. The known clock offsets are checked too.

    python -m benchmarks.bench_compare
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

import numpy as np

from rxlog.exchange.columns import FORMAT_NAME, FORMAT_VERSION
from rxlog.exchange.compare import compare_stations
from rxlog.exchange.export import write_event_list
from rxlog.timeutil import iso

N_STATIONS = 5
N_EVENTS = 10_000
DAYS = 20.0
TARGET_S = 10.0
OFFSETS = (0.0, 1.8, -0.9, 0.0, 3.2)   # seconds, station clock minus true time
T0 = 1_800_000_000.0
KINDS = np.array(["solar_iii", "jovian_l", "solar_ii", "unknown"])


def station_events(rng, name: str, sky: dict, offset: float, n_events: int) -> list[dict]:
    """The sky's events as one station would list them (85 % detected), topped up with local RFI."""
    seen = rng.random(len(sky["t"])) < 0.85
    t = sky["t"][seen]
    kind = sky["kind"][seen]
    dur = sky["dur"][seen]
    jitter = np.where(kind == "solar_iii", 0.15, np.where(kind == "jovian_l", 0.6, 2.0))
    start = np.ceil(t + offset + rng.normal(0.0, jitter)) * 1.0  # 1-s cadence rows
    n_rfi = max(n_events - len(t), 0)
    start = np.r_[start, rng.uniform(T0, T0 + DAYS * 86400, n_rfi)][:n_events]
    dur = np.r_[dur, rng.uniform(1, 60, n_rfi)][:n_events]
    kind = np.r_[kind, np.full(n_rfi, "rfi")][:n_events]
    fmin = np.r_[sky["fmin"][seen], rng.uniform(16, 23.9, n_rfi)][:n_events]
    fmax = np.r_[sky["fmax"][seen], 0.0 * np.ones(n_rfi)][:n_events]
    fmax = np.where(fmax > 0, fmax, fmin + 0.05)
    out = []
    for i in np.argsort(start):
        s = float(start[i])
        out.append({"station": name, "event_id": f"{name}-{i:06d}", "start_utc": iso(s),
                    "end_utc": iso(s + dur[i]), "peak_utc": iso(s + min(1.0, dur[i])),
                    "fmin_mhz": round(float(fmin[i]), 3), "fmax_mhz": round(float(fmax[i]), 3),
                    "peak_excess_db": 3.0, "snr": 10.0, "drift_mhz_s": None, "class": str(kind[i]),
                    "confidence": 0.8})
    return out


def make_lists(folder: Path, seed: int = 5) -> list[Path]:
    rng = np.random.default_rng(seed)
    n_sky = int(N_EVENTS * 0.9 / 0.85)
    kind = rng.choice(KINDS, n_sky, p=[0.3, 0.5, 0.05, 0.15])
    sky = {"t": np.sort(rng.uniform(T0, T0 + DAYS * 86400, n_sky)), "kind": kind,
           "dur": np.where(kind == "solar_ii", 300.0, rng.uniform(3, 30, n_sky)),
           "fmin": np.where(kind == "solar_iii", 16.0, rng.uniform(16, 19, n_sky)),
           "fmax": np.where(kind == "solar_iii", 24.0, rng.uniform(20, 24, n_sky))}
    paths = []
    for k in range(N_STATIONS):
        name = f"bench-{k + 1}"
        header = {"format": FORMAT_NAME, "format_version": FORMAT_VERSION, "station": name,
                  "latitude_deg": 45.0 + k, "longitude_deg": 7.0 + k, "elevation_m": 100.0,
                  "receiver": "simulated", "clock_sync": "unknown", "band_fmin_mhz": 16.0,
                  "band_fmax_mhz": 24.0, "channels": 1024, "cadence_s": 1.0}
        p = folder / f"{name}.csv"
        write_event_list(p, "csv", header, station_events(rng, name, sky, OFFSETS[k], N_EVENTS))
        paths.append(p)
    return paths


def run() -> list[tuple]:
    with tempfile.TemporaryDirectory() as tmp:
        paths = make_lists(Path(tmp))
        t, cpu = time.perf_counter(), time.process_time()
        result = compare_stations(paths, window_s=10.0, outdir=Path(tmp) / "out")
        elapsed, cpu = time.perf_counter() - t, time.process_time() - cpu
    off = {s.name: s.offset_s for s in result.stations}
    # Offsets are relative; compare differences from station 1 with the truth.
    worst = max(abs((off[f"bench-{k + 1}"] - off["bench-1"]) - (OFFSETS[k] - OFFSETS[0]))
                for k in range(N_STATIONS))
    n_multi = sum(v for k, v in result.group_sizes.items() if k >= 2)
    return [
        (f"compare {N_STATIONS} stations x {N_EVENTS} events (read, match, fit, write, plot)",
         round(elapsed, 2), "s", f"<= {TARGET_S:g}", elapsed <= TARGET_S),
        ("  of which CPU time of this process (the rest: waiting for a shared CPU)", round(cpu, 2), "s", "", True),
        ("events per second", round(N_STATIONS * N_EVENTS / elapsed), "1/s", "", True),
        ("groups seen at 2+ stations", n_multi, "", "", n_multi > 0),
        ("worst clock-offset error", round(worst, 3), "s", "<= 0.3", worst <= 0.3),
    ]


if __name__ == "__main__":
    for name, value, unit, target, ok in run():
        print(f"{name:70s} {value!s:>10} {unit:4s} {target:>8s} {'ok' if ok else 'MISSED'}")
