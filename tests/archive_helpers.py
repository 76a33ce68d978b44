"""Shared makers for the archive tests: a station and synthetic dynamic spectra."""

import numpy as np

from rxlog.spectrum import FLAG_RFI, DynamicSpectrum, channel_grid

STATION = {"name": "test-station", "latitude_deg": 47.5, "longitude_deg": 8.7, "elevation_m": 450.0}

# 2026-12-01T22:00:00Z, a winter night at a mid-latitude site.
T_NIGHT = 1796162400.0


def noisy_spectrum(n_time, n_chan=64, t0=T_NIGHT, cadence=1.0, segment="seg-a", seed=0, meta=None,
                   fmin=16.0, fmax=24.0):
    """A spectrum with a sloped galactic background, 0.11-dB noise, a carrier, some NaN and flags."""
    rng = np.random.default_rng(seed)
    f = channel_grid(fmin, fmax, n_chan)
    base = -25.0 * np.log10(f / 20e6) - 60.0
    power = (base[None, :] + rng.normal(0.0, 0.11, (n_time, n_chan))).astype(np.float32)
    flags = np.zeros((n_time, n_chan), dtype=np.uint8)
    flags[:, n_chan // 3] = FLAG_RFI
    power[:, n_chan // 3] += 20.0
    offsets = np.linspace(0.0, 0.8, n_chan, dtype=np.float32)
    return DynamicSpectrum(power_db=power, t0=t0, cadence_s=cadence, freq_hz=f, flags=flags,
                           chan_offset_s=offsets, segment=segment,
                           meta=dict(meta or {"receiver": "simulated", "gain_db": 29.7, "agc": False}))


def archive_files(root):
    return sorted(p for p in root.rglob("*") if p.is_file() and not p.name.startswith(".rxlog"))
