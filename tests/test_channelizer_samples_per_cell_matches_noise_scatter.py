"""Invariant: ``samples_per_cell`` predicts the scatter of noise cells.

For Gaussian noise a cell's linear power is mean x Gamma(K)/K, so its relative variance
is 1/K. Measured over many rows of channelized noise, var/mean^2 x K must be 1 for each
window and overlap (K from window bin correlation and Welch's overlap formula).
"""

import numpy as np
import pytest

from rxlog.receive.channelizer import (
    Channelizer,
    bin_correlation,
    get_window,
    independent_bins,
)
from rxlog.spectrum import channel_grid
from rxlog.station.config import config_from_text

RATE = 2_400_000
CENTER = 20e6
GRID = channel_grid(16.0, 24.0, 1024)
T0 = 1_796_000_000.0


@pytest.mark.parametrize("window,overlap", [("hann", 0.0), ("hann", 0.5), ("boxcar", 0.0), ("blackmanharris", 0.0)])
def test_relative_variance_of_noise_cells_is_one_over_k(window, overlap):
    rng = np.random.default_rng(2)
    n = int(2.0 * RATE)
    x = (rng.normal(size=n) + 1j * rng.normal(size=n)).astype(np.complex64)
    cadence = 0.02                                   # 100 rows of ~47 frames
    ch = Channelizer(freq_hz=GRID, fft_size=1024, window=window, overlap=overlap, cadence_s=cadence,
                     kurtosis=False)
    rows = ch.feed_samples(x, T0, CENTER, RATE)
    p = 10 ** (np.concatenate([r.power_db for r in rows]) / 10)
    cols = np.isfinite(p).all(axis=0)
    p = p[:, cols]
    rel_var = p.var(axis=0, ddof=1) / p.mean(axis=0) ** 2
    k = ch.samples_per_cell(CENTER, RATE)[cols]
    ratio = rel_var * k
    # 100 rows: each channel's variance is known to ~14 %; the mean over ~300 channels to ~2 %
    assert abs(ratio.mean() - 1) < 0.06, ratio.mean()


def test_hann_bins_correlate_as_published():
    # Harris 1978 (Proc. IEEE 66, 51): adjacent Hann bins overlap with power correlation
    # (1/4 / 3/8)^2 = 4/9 for white noise; two apart (1/16 / 3/8)^2 = 1/36 (from the window's
    # squared coefficients 3/8, -1/4, 1/16: worked out here, not looked up)
    rho = bin_correlation(get_window("hann", 1024))
    assert rho[0] == pytest.approx(1.0)
    assert rho[1] == pytest.approx(4 / 9, rel=1e-9)
    assert rho[2] == pytest.approx(1 / 36, rel=1e-9)
    assert rho[3] == pytest.approx(0.0, abs=1e-12)
    # a long run of Hann bins carries 18/35 of their number in independent values
    assert independent_bins(rho, np.arange(400)) / 400 == pytest.approx(18 / 35, rel=0.01)


def test_sweep_duty_cycle_enters_samples_per_cell(tmp_path):
    from rxlog.receive.sweep import SweepPlan, samples_per_cell

    base = "[station]\nname='t'\nlatitude_deg=47\nlongitude_deg=8\n"
    single = config_from_text(base + "[sweep]\nmode='single'\n", tmp_path / "a.toml")
    swept = config_from_text(base, tmp_path / "b.toml")
    k_single = samples_per_cell(single)
    k_sweep = samples_per_cell(swept)
    plan = SweepPlan.from_config(swept)
    both = (k_single > 0) & (k_sweep > 0)
    # same channels, same bins: the ratio is the fraction of each second spent dwelling there
    ratio = np.median(k_sweep[both] / k_single[both])
    assert ratio == pytest.approx(plan.dwell_s / 1.0, rel=0.01)
    assert (k_sweep > 0).all()                    # the sweep covers the whole band
