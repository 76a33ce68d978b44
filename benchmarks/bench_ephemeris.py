"""Ephemeris and forecast speed, and the error the node interpolation costs.

Figures, all measured in this run on this machine:
- cold start: a fresh interpreter importing rxlog.sky.tags and tagging one instant
  (astropy import, bundled IERS and leap-second tables);
- all tags for 100,000 instants: one night at 1 s cadence (the detector's case), a
  month of scattered events, and ten years of scattered events (the ERFA-direct path);
- the largest difference between interpolated and directly computed tags over 30 days
  at 30 s cadence, checked on instants ~1.25 days apart (which are computed directly);
- a 7-day forecast (what the demo prints) and a 365-day forecast, both at 1-minute steps.

    python -m benchmarks ephemeris
"""

from __future__ import annotations

import subprocess
import sys
import time

import numpy as np

from rxlog.sky.forecast import forecast_windows
from rxlog.sky.tags import compute_tags

SITE = (47.5, 8.7, 450.0)
T0 = 1796083200.0                 # 2026-12-01T00:00:00Z
CFG = {"station": {"name": "bench", "latitude_deg": SITE[0], "longitude_deg": SITE[1], "elevation_m": SITE[2],
                   "timezone": "Europe/Zurich"}}


def _timed(fn):
    t = time.perf_counter()
    out = fn()
    return time.perf_counter() - t, out


def _angle(a, b):
    return float(np.abs((a - b + 180.0) % 360.0 - 180.0).max())


def run() -> list[tuple]:
    rows = []
    cold = subprocess.run([sys.executable, "-c", "import time; t = time.perf_counter(); "
                           "from rxlog.sky.tags import compute_tags; "
                           f"compute_tags([{T0}], 47.5, 8.7, 450.0); print(time.perf_counter() - t)"],
                          capture_output=True, text=True, check=True)
    rows.append(("cold start: import and tag one instant", float(cold.stdout.strip()), "s", "report", None))
    compute_tags([T0], *SITE)                       # warm: tables loaded
    rng = np.random.default_rng(1)
    cases = [("100k tags, one night at 1 s", T0 + np.arange(100_000, dtype=np.float64)),
             ("100k tags, scattered over 30 days", np.sort(T0 + rng.uniform(0, 30 * 86400.0, 100_000))),
             ("100k tags, scattered over 10 years", np.sort(T0 - rng.uniform(0, 3652 * 86400.0, 100_000)))]
    for name, t in cases:
        secs, _ = _timed(lambda t=t: compute_tags(t, *SITE))
        rows.append((name, secs, "s", "<= 3", secs <= 3.0))

    days = T0 + np.arange(0.0, 30 * 86400.0, 30.0)
    dense = compute_tags(days, *SITE)
    pick = np.arange(0, days.size, 3607)             # ~1.25 days apart: computed directly by ERFA
    direct = compute_tags(days[pick], *SITE)
    alt = max(float(np.abs(dense[k][pick] - direct[k]).max()) for k in ("jupiter_alt_deg", "sun_alt_deg"))
    az = max(_angle(dense[k][pick], direct[k]) for k in ("jupiter_az_deg", "sun_az_deg"))
    cml = max(_angle(dense[k][pick], direct[k]) for k in ("cml3_deg", "io_phase_deg"))
    rows.append(("interpolation error, alt (max)", alt * 3600.0, "arcsec", "<= 1", alt * 3600.0 <= 1.0))
    rows.append(("interpolation error, az (max)", az * 3600.0, "arcsec", "report", None))
    rows.append(("interpolation error, CML/Io phase (max)", cml * 3600.0, "arcsec", "<= 1", cml * 3600.0 <= 1.0))

    secs, week = _timed(lambda: forecast_windows(CFG, T0, 7))
    rows.append(("forecast 7 days at 1 min", secs, "s", "<= 2", secs <= 2.0))
    secs, year = _timed(lambda: forecast_windows(CFG, T0, 365))
    rows.append(("forecast 365 days at 1 min", secs, "s", "<= 30", secs <= 30.0))
    rows.append(("forecast 365 days: windows found", len(year), "windows", "report", None))
    return [(n, v, u, tgt, True if ok is None else ok) for n, v, u, tgt, ok in rows]


if __name__ == "__main__":
    for row in run():
        print(row)
