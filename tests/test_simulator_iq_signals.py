"""IQ-mode signals seen through rxlog's channelizer: S-bursts drift at their storm's
rate (millisecond structure, -10 to -25 MHz/s; Zarka's reviews, from memory), and
carrier lines are steady tones, so their spectral kurtosis falls below the Gaussian 1
(Nita & Gary 2010, PASP 122, 595)."""

import numpy as np
import pytest

from rxlog.receive import channelizer
from rxlog.sim.iq import SimulatedReceiver, simulate_iq
from rxlog.sim.spectra import SpectralRun
from rxlog.station.config import config_from_text
from rxlog.timeutil import parse_iso

T = parse_iso("2026-12-02T04:00:00Z")      # Jupiter high over 47.5 N before dawn
FC, RATE = 20.0e6, 2.4e6


def _cfg(tmp_path, cadence):
    return config_from_text(f"""
[station]
name = "iq-signals"
latitude_deg = 47.5
longitude_deg = 8.7
[receiver]
gain_db = 40.0
[spectra]
channels = 1024
cadence_s = {cadence}
[sweep]
mode = "single"
center_hz = {FC}
ring_s = 0
""", tmp_path / "station.toml")


def _channelize(cfg, x):
    ch = channelizer.Channelizer(cfg, ring_s=0)
    return (ch.feed_samples(x, T, FC, RATE, 40.0, "sim") + ch.flush())[0]


def test_s_bursts_drift_at_the_storms_rate(tmp_path):
    cfg = _cfg(tmp_path, 0.004)
    inject = [{"class": "jovian_s", "t": T - 100, "duration_s": 600, "peak_excess_db": 12.0}]
    opts = dict(seed=2, include=(), inject=inject, rfi="quiet-rural")
    x = simulate_iq(cfg, T, 2.0, FC, RATE, **opts)
    sp = _channelize(cfg, x)
    ok = np.isfinite(sp.power_db).all(axis=0)
    e = sp.power_db[:, ok] - np.median(sp.power_db[:, ok], axis=0)
    f = sp.freq_hz[ok] / 1e6
    assert np.percentile(e, 99.9) > 6          # bursts stand out at 4-ms resolution
    # the lag that best matches a channel with one 1 MHz lower gives the drift
    k = int(round(1.0 / (f[1] - f[0])))
    lags = np.arange(1, 60)
    cc = [np.mean(e[: e.shape[0] - lag, k:] * e[lag:, :-k]) for lag in lags]
    measured = -1.0 / (lags[int(np.argmax(cc))] * sp.cadence_s)
    rx = SimulatedReceiver(cfg, start_unix=T, realtime=False, hours=2.0 / 3600, **opts)
    (row,) = [r for r in SpectralRun(cfg, T, 2.0 / 3600, noise=False, **opts).truth_rows()
              if r["class"] == "jovian_s"]
    assert rx.seed == 2 and -25 <= row["drift_mhz_s"] <= -10
    assert measured == pytest.approx(row["drift_mhz_s"], rel=0.2)


def test_carrier_lines_are_steady_tones(tmp_path):
    cfg = _cfg(tmp_path, 1.0)
    inject = [{"class": "rfi", "kind": "carrier", "t": T, "duration_s": 60, "peak_excess_db": 20.0,
               "fmin_mhz": 20.3}]
    x = simulate_iq(cfg, T + 1, 4.0, FC, RATE, seed=4, include=(), inject=inject, rfi="quiet-rural")
    sp = _channelize(cfg, x)
    covered = np.isfinite(sp.power_db).all(axis=0)
    c = int(np.argmax(np.where(covered, sp.power_db.mean(axis=0), -np.inf)))
    assert abs(sp.freq_hz[c] - 20.3e6) < 8e3
    assert np.nanmedian(sp.kurtosis) == pytest.approx(1.0, abs=0.05)
    assert np.nanmean(sp.kurtosis[:, c]) < 0.85
