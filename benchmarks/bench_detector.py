"""Detector speed: a 24-hour, 1024-channel, 1-s dynamic spectrum through background,
RFI mask, detection, features, classification and ephemeris tags on one core.

The day is generated an hour at a time (Gaussian noise of 0.11 dB per cell on a sloped,
sidereally drifting background, with carriers, impulses and Type III bursts so the event
path is exercised) and fed to ``OnlineDetector`` in one-minute chunks, as the logger
does; only the detector's time is counted. Target: >= 3000x real time (under ~29 s).
Peak memory is the growth of the resident set over the generated input.

    python -m benchmarks detector
"""

from __future__ import annotations

import resource
import time

import numpy as np

from rxlog.detect.drift import ah_drift
from rxlog.detect.online import OnlineDetector
from rxlog.spectrum import DynamicSpectrum, channel_grid

N_CHAN = 1024
HOURS = 24
T0 = 1796083200.0                 # 2026-12-01T00:00:00Z
TARGET_X = 3000.0
CFG = {"station": {"name": "bench", "latitude_deg": 47.5, "longitude_deg": 8.7, "elevation_m": 450.0},
       "detector": {}, "rfi": {}}


def hour(h: int, rng) -> DynamicSpectrum:
    f = channel_grid(16.0, 24.0, N_CHAN) / 1e6
    t = h * 3600.0 + np.arange(3600.0)
    p = (-25.5 * np.log10(f / 20.0))[None, :] + 2.0 * np.sin(2 * np.pi * t / 86164.1)[:, None]
    p = (p + rng.normal(0.0, 0.11, p.shape)).astype(np.float32)
    for c in rng.integers(0, N_CHAN, 6):                       # carriers
        p[:, c] += 4.0
    for i in rng.integers(0, 3600, 10):                        # impulses
        p[i] += 2.0
    for t_ref in rng.uniform(0, 3500, 3):                      # Type III bursts
        tp = t_ref + (f ** -0.84 - 24.0 ** -0.84) / (0.84 * 0.01)
        i = np.arange(3600.0)[:, None]
        p += (10 * np.log10(1 + 0.6 * np.exp(-0.5 * (i - tp[None, :]) ** 2))).astype(np.float32)
    return DynamicSpectrum(p, T0 + h * 3600.0, 1.0, f * 1e6, segment="bench")


def run():
    rng = np.random.default_rng(11)
    det = OnlineDetector(CFG)
    det.feed(hour(0, rng).slice_rows(0, 1))          # imports and ephemeris tables outside the clock
    if det.tags_fn is not None:
        det.tags_fn(np.array([T0]))
    det = OnlineDetector(CFG)
    rss0 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    spent, n_events = 0.0, 0
    for h in range(HOURS):
        spec = hour(h, rng)
        t = time.process_time()
        for i in range(0, 3600, 60):
            n_events += len(det.feed(spec.slice_rows(i, i + 60)))
        spent += time.process_time() - t
    t = time.process_time()
    n_events += len(det.flush())
    spent += time.process_time() - t
    rss = (resource.getrusage(resource.RUSAGE_SELF).ru_maxrss - rss0) / 1024.0
    x = HOURS * 3600.0 / spent
    assert n_events > 0 and ah_drift(20.0) < 0
    return [("24 h x 1024 ch x 1 s, detector CPU time", round(spent, 2), "s", "< 28.8", spent < 28.8),
            ("speed", round(x, 0), "x real time", f">= {TARGET_X:.0f}", x >= TARGET_X),
            ("events found", n_events, "", "", True),
            ("resident memory growth", round(rss, 0), "MB", "bounded (one hour of input ~15 MB)", rss < 400)]


if __name__ == "__main__":
    for row in run():
        print(row)
