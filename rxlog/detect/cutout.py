"""A second look at an event in a high-time-resolution cutout from the channelizer's ring.

Jovian S-bursts last milliseconds: they can only be seen in spectra a few milliseconds
apart, never in 1-s spectra, so ``jovian_s`` comes only from here.
"""

from __future__ import annotations

import numpy as np

from rxlog.detect.online import detect_spectrum
from rxlog.detect.settings import SBURST_MAX_CADENCE_S, Settings
from rxlog.spectrum import DynamicSpectrum


def refine_with_cutout(cfg, event: dict, cutout: DynamicSpectrum, path: str | None = None) -> dict:
    """Look at an event again in a high-time-resolution cutout from the channelizer's ring.

    Jovian S-bursts last milliseconds and drift at -5 to -30 MHz/s: they can only be seen
    in spectra a few milliseconds apart, never in 1-s spectra. The cutout is searched with
    the burst path scaled to its own resolution (smoothing over three time steps and
    50 kHz); when at least three S-burst-like bursts are found (resolved drift in
    SBURST_DRIFT, under 50 ms at fixed frequency) and Jupiter is up, the event becomes
    ``jovian_s``. A cutout coarser than SBURST_MAX_CADENCE_S leaves the class alone.
    Returns a new event dict (with ``cutout_path`` when given).
    """
    out = dict(event)
    if path is not None:
        out["cutout_path"] = str(path)
    if cutout.cadence_s > SBURST_MAX_CADENCE_S or cutout.n_time < 8:
        return out
    jup = event.get("jupiter_alt_deg")
    s = Settings.from_config(cfg)
    span = cutout.n_time * cutout.cadence_s
    block = max(cutout.cadence_s * 4, min(s.block_s, span / 8))
    fine = s.replace(block_s=block, fast_window_s=max(10 * block, 4 * block), slow_window_s=max(1e6, 10 * span),
                     smooth_time_s=3 * cutout.cadence_s, smooth_freq_mhz=0.05, merge_gap_s=cutout.cadence_s,
                     max_event_s=max(1.0, span), static_ranges=())

    def tags(times):
        n = len(times)
        return {"jupiter_alt_deg": np.full(n, np.nan if jup is None else float(jup)),
                "sun_alt_deg": np.full(n, np.nan if event.get("sun_alt_deg") is None else float(event["sun_alt_deg"]))}

    res = detect_spectrum(cfg, cutout, tags_fn=tags, settings=fine)
    sb = [e for e in res.events if e["class"] == "jovian_s"]
    if len(sb) >= 3 and (jup is None or jup > s.jupiter_up_deg):
        drift = float(np.median([e["drift_mhz_s"] for e in sb]))
        out["class"] = "jovian_s"
        out["confidence"] = 0.8 if jup is not None else 0.5
        out["reason"] = (f"{len(sb)} millisecond bursts drifting {drift:.1f} MHz/s in the "
                         f"{1000 * cutout.cadence_s:.0f}-ms cutout (S-bursts)"
                         + (f"; Jupiter up ({jup:.0f}°)" if jup is not None else ""))
    return out
