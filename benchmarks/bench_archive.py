"""Archive: MB per day on disk, worst quantisation error, write and read throughput.

A realistic night at 1024 channels and 1 s cadence: a galactic background falling with
frequency (T_sky ~ lambda^2.55, common rule of thumb) drifting by a few dB over the day,
radiometer noise sigma = 0.11 dB per cell, a few fading carriers and impulsive rows
flagged as RFI, scattered single-cell flags. Two full UTC hours are written through
ArchiveWriter one spectrum at a time (as the logger does) and scaled to a day; one hour
in lossless mode.

    python -m benchmarks archive
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

import numpy as np

from rxlog.archive.read import read_archive
from rxlog.archive.write import ArchiveWriter
from rxlog.spectrum import FLAG_RFI, DynamicSpectrum, channel_grid

N_CHAN = 1024
HOURS = 2
T0 = 1796162400.0                # 2026-12-01T22:00:00Z, on an hour boundary
BUDGET_MB_DAY = 50.0
MAX_ERROR_DB = 0.02
STATION = {"name": "bench", "latitude_deg": 47.5, "longitude_deg": 8.7, "elevation_m": 450.0}


def night(n_time: int, seed: int = 7) -> DynamicSpectrum:
    rng = np.random.default_rng(seed)
    f = channel_grid(16.0, 24.0, N_CHAN)
    t = np.arange(n_time, dtype=np.float64)
    sky = -25.5 * np.log10(f / 20e6)                                  # dB, lambda^2.55
    drift = 2.0 * np.sin(2 * np.pi * (T0 + t) / 86164.1)              # sidereal day
    power = (sky[None, :] - 60.0 + drift[:, None]).astype(np.float32)
    power += rng.normal(0.0, 0.11, power.shape).astype(np.float32)
    flags = np.zeros(power.shape, dtype=np.uint8)
    carriers = rng.choice(N_CHAN, 20, replace=False)
    fade = 10.0 + 8.0 * np.sin(t[:, None] / rng.uniform(60, 600, carriers.size)[None, :])
    power[:, carriers] += fade.astype(np.float32)
    flags[:, carriers] |= FLAG_RFI
    impulses = rng.choice(n_time, n_time // 300, replace=False)      # one sferic or arc every 5 min
    power[impulses] += 6.0
    flags[impulses] |= FLAG_RFI
    flags[rng.random(power.shape) < 0.002] |= FLAG_RFI                # scattered kurtosis flags
    return DynamicSpectrum(power_db=power, t0=T0, cadence_s=1.0, freq_hz=f, flags=flags,
                           chan_offset_s=np.linspace(0, 0.9, N_CHAN, dtype=np.float32),
                           segment="bench", meta={"receiver": "simulated", "gain_db": 29.7})


def _write(root: Path, spec: DynamicSpectrum, lossless: bool) -> float:
    t = time.perf_counter()
    with ArchiveWriter(root, STATION, lossless=lossless) as w:
        for i in range(spec.n_time):
            w.write(spec.slice_rows(i, i + 1))
    return time.perf_counter() - t


def _size(root: Path) -> int:
    return sum(p.stat().st_size for p in root.rglob("*.fits"))


def run() -> list[tuple]:
    spec = night(HOURS * 3600)
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        q_root = Path(tmp) / "quantised"
        t_write = _write(q_root, spec, lossless=False)
        mb_day = _size(q_root) / 1e6 * 24 / HOURS
        t = time.perf_counter()
        got = read_archive(q_root, spec.t0, spec.t_end)
        t_read = time.perf_counter() - t
        [back] = got.segments
        err = float(np.nanmax(np.abs(back.power_db - spec.power_db)))

        l_root = Path(tmp) / "lossless"
        one_hour = spec.slice_rows(0, 3600)
        t_lwrite = _write(l_root, one_hour, lossless=True)
        l_mb_day = _size(l_root) / 1e6 * 24
        t = time.perf_counter()
        [lback] = read_archive(l_root, one_hour.t0, one_hour.t_end).segments
        t_lread = time.perf_counter() - t
        l_exact = bool(np.array_equal(lback.power_db, one_hour.power_db, equal_nan=True))

    n = spec.n_time
    rows += [
        ("MB/day quantised (1024 ch, 1 s)", mb_day, "MB/day", f"<= {BUDGET_MB_DAY:g}", mb_day <= BUDGET_MB_DAY),
        ("worst quantisation error", err, "dB", f"<= {MAX_ERROR_DB:g}", err <= MAX_ERROR_DB),
        ("write quantised, 1 spectrum per call", n / t_write, "spectra/s", ">= 50 (50x real time)",
         n / t_write >= 50),
        ("read quantised", n / t_read, "spectra/s", ">= 2000", n / t_read >= 2000),
        ("MB/day lossless", l_mb_day, "MB/day", "none (for comparison)", True),
        ("lossless round trip exact", str(l_exact), "", "True", l_exact),
        ("write lossless", 3600 / t_lwrite, "spectra/s", ">= 50", 3600 / t_lwrite >= 50),
        ("read lossless", 3600 / t_lread, "spectra/s", ">= 2000", 3600 / t_lread >= 2000),
        ("lossless / quantised size", l_mb_day / mb_day, "x", "ratio", True),
    ]
    return rows


if __name__ == "__main__":
    for row in run():
        print(row)
