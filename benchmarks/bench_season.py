"""Seasons: days re-detected per hour with 1 and 2 Dask workers (their ratio), peak memory
per worker, and ``season_report`` over a year of quality rows and episodes.

The archive is built fast with numpy (the simulator costs minutes per day): 1024
channels at 1 s, a Galactic background falling with frequency (T_sky ~ lambda^2.55,
common rule of thumb) drifting over the sidereal day, radiometer noise 0.11 dB, a few
carriers and a Type III group every two hours. ``RXLOG_BENCH_SEASON_DAYS`` days
(default 4; the target is stated for 30) are re-detected once with one worker and once
with two, in one run, so the ratio is comparable on a noisy machine.

    python -m benchmarks season
"""

from __future__ import annotations

import os
import resource
import tempfile
import time
from pathlib import Path

import numpy as np

from rxlog.archive.write import ArchiveWriter
from rxlog.season.report import season_report
from rxlog.season.reprocess import open_client, reprocess
from rxlog.spectrum import DynamicSpectrum, channel_grid
from rxlog.station.config import config_from_text
from rxlog.store import EventStore
from rxlog.timeutil import iso

N_CHAN = 1024
DAYS = int(os.environ.get("RXLOG_BENCH_SEASON_DAYS", "4"))
T0 = 1796083200.0                 # 2026-12-01T00:00:00Z
TARGET_SPEEDUP = 1.8
TARGET_YEAR_H = 2.0               # a year on a 2-core machine within 2 h: >= 182.5 days/hour with 2 workers
TARGET_WORKER_MB = 500.0
TARGET_SEASON_S = 10.0
CONFIG = """
[station]
name = "bench"
latitude_deg = 47.5
longitude_deg = 8.7
elevation_m = 450.0

[storage]
root = "store"
"""


def _hour(h: int, rng) -> DynamicSpectrum:
    f = channel_grid(16.0, 24.0, N_CHAN)
    t = T0 + 3600.0 * h + np.arange(3600.0)
    sky = -25.5 * np.log10(f / 20e6)
    drift = 2.0 * np.sin(2 * np.pi * t / 86164.1)
    power = (sky[None, :] - 60.0 + drift[:, None]).astype(np.float32)
    power += rng.normal(0.0, 0.11, power.shape).astype(np.float32)
    power[:, [100, 400, 777]] += 12.0
    if h % 2 == 0:                               # a Type III group (Alvarez & Haddock 1973 drift)
        for k in range(4):
            tp = 1200 + 40 * k + ((f / 1e6) ** -0.84 - 24.0 ** -0.84) / (0.84 * 0.01)
            x = np.arange(3600.0)[:, None] - tp[None, :]
            power += (3.0 * np.exp(-0.5 * (x / 1.5) ** 2)).astype(np.float32)
    return DynamicSpectrum(power_db=power, t0=float(t[0]), cadence_s=1.0, freq_hz=f,
                           flags=np.zeros(power.shape, np.uint8), chan_offset_s=np.zeros(N_CHAN, np.float32),
                           segment="bench", meta={"receiver": "synthetic"})


def _archive(cfg):
    rng = np.random.default_rng(3)
    with ArchiveWriter(cfg.archive_dir, cfg["station"], chunk_s=3600.0) as w:
        for h in range(24 * DAYS):
            w.write(_hour(h, rng))


def _worker_peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def _reprocess(cfg, workers: int) -> tuple[float, float]:
    client = open_client(workers)
    try:
        t = time.perf_counter()
        reprocess(cfg, T0, T0 + DAYS * 86400.0, client=client)
        spent = time.perf_counter() - t
        peak = max(client.run(_worker_peak_mb).values())
    finally:
        cluster = client.cluster
        client.close()
        cluster.close()
    return DAYS / spent * 3600.0, peak


def _season_year(root: Path) -> float:
    """season_report over a year of hourly quality rows and a storm episode a night."""
    cfg = config_from_text(CONFIG, root / "year" / "station.toml")
    year = T0 + 86400.0 * np.arange(365)
    store = EventStore(cfg.store_path)
    store.record_quality([{"station": "bench", "hour_utc": iso(h), "covered_s": 3600.0, "gap_s": 0.0,
                           "masked_fraction": 0.1} for h in np.arange(T0, T0 + 365 * 86400.0, 3600.0)])
    eps = [{"episode_id": f"ep-{k}", "station": "bench", "start_utc": iso(d + 3600 * 2),
            "end_utc": iso(d + 3600 * 3), "class": "jovian_l", "n_events": 5, "fmin_mhz": 17.0,
            "fmax_mhz": 23.0} for k, d in enumerate(year)]
    store.replace_events("bench", T0, T0 + 365 * 86400.0, [], eps)
    store.close()
    t = time.perf_counter()
    season_report(cfg, T0, T0 + 365 * 86400.0, root / "year" / "season")
    return time.perf_counter() - t


def run() -> list[tuple]:
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        rates, peaks = {}, {}
        for workers in (1, 2):
            cfg = config_from_text(CONFIG, root / f"w{workers}" / "station.toml")
            if workers == 1:
                _archive(cfg)
                archive = cfg.archive_dir
            else:
                cfg.archive_dir.parent.mkdir(parents=True, exist_ok=True)
                os.symlink(archive, cfg.archive_dir)
            rates[workers], peaks[workers] = _reprocess(cfg, workers)
        season_s = _season_year(root)
    ratio = rates[2] / rates[1]
    year_h = 365.0 / rates[2]
    return [
        (f"days re-detected per hour, 1 worker ({DAYS} days, {N_CHAN} ch x 1 s)", rates[1], "days/h", "", True),
        (f"days re-detected per hour, 2 workers ({DAYS} days)", rates[2], "days/h", "", True),
        ("speed-up, 2 workers over 1", ratio, "x", f">= {TARGET_SPEEDUP}", ratio >= TARGET_SPEEDUP),
        ("a year with 2 workers", year_h, "h", f"<= {TARGET_YEAR_H}", year_h <= TARGET_YEAR_H),
        ("peak memory per worker", max(peaks.values()), "MB", f"<= {TARGET_WORKER_MB}",
         max(peaks.values()) <= TARGET_WORKER_MB),
        ("rxlog season over a year", season_s, "s", f"<= {TARGET_SEASON_S}", season_s <= TARGET_SEASON_S),
    ]
