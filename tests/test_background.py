"""Background model: robust block statistics, the two time scales, coarse channels.

Noise reference: for power averaged over N independent exponential samples (a gamma
distribution of shape N), the variance of ln P is the trigamma function psi1(N)
(e.g. Abramowitz & Stegun 6.4; scipy.special.polygamma as the reference), so the
standard deviation in dB is 10/ln(10) sqrt(psi1(N)).
"""

import math
import warnings

import numpy as np
from scipy.special import polygamma

from rxlog.detect import background as bg


def test_nanmedian_matches_numpy():
    rng = np.random.default_rng(0)
    x = rng.normal(size=(31, 40)).astype(np.float32)
    x[rng.random(x.shape) < 0.3] = np.nan
    x[:, 5] = np.nan
    ours = bg.nanmedian(x, axis=0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)     # numpy warns on the all-NaN column
        ref = np.nanmedian(x, axis=0)
    assert np.isnan(ours[5]) and np.isnan(ref[5])
    ok = ~np.isnan(ref)
    assert np.allclose(ours[ok], ref[ok], atol=1e-6)
    rows = np.nanmedian(x, axis=1)
    assert np.allclose(bg.nanmedian(x, axis=1), rows, atol=1e-6)


def test_block_noise_matches_gamma_statistics():
    n_avg = 400
    rng = np.random.default_rng(1)
    p = 10 * np.log10(rng.gamma(n_avg, 1 / n_avg, size=(600, 64)))
    level, sigma = bg.block_stats(p, np.ones(p.shape, bool))
    expected = 10 / math.log(10) * math.sqrt(float(polygamma(1, n_avg)))
    assert abs(np.median(sigma) / expected - 1) < 0.05
    # the median of log-gamma power sits just below 0 dB (mean of ln P is psi(N) - ln N)
    assert np.all(np.abs(level) < 0.1)


def test_block_level_ignores_a_short_burst_and_masked_cells():
    rng = np.random.default_rng(2)
    p = rng.normal(0, 0.1, size=(30, 16)).astype(np.float32)
    p[10:13] += 5.0                      # a 3-row burst in every channel
    valid = np.ones(p.shape, bool)
    valid[:, 3] = False                  # a masked channel
    p[:, 3] = 99.0
    level, sigma = bg.block_stats(p, valid)
    assert np.all(np.abs(np.delete(level, 3)) < 0.1)
    assert np.isnan(level[3]) and np.isnan(sigma[3])


def test_interpolation_is_linear_between_block_centres():
    R = 10
    rows = bg.interpolate_blocks(np.array([0.0]), np.array([1.0]), np.array([3.0]), R, R)
    centres = (np.arange(R) + 0.5) / R - 0.5        # position relative to this block's centre
    expected = np.where(centres < 0, 1.0 + centres, 1.0 + 2.0 * centres)
    assert np.allclose(rows[:, 0], expected, atol=1e-6)


def test_slow_baseline_follows_a_quadratic_and_rejects_a_long_event():
    t = np.arange(241, dtype=float)                  # 2 h of 30-s blocks
    rng = np.random.default_rng(3)
    trend = 0.5 + 0.01 * (t - 120) - 2e-5 * (t - 120) ** 2
    y = (trend + rng.normal(0, 0.005, t.size))[:, None].repeat(3, axis=1)
    y[100:160, 1] += 1.0                             # a 30-minute continuum in column 1
    y[100:160, 2] -= 0.8                             # a 30-minute fadeout in column 2
    base, scatter = bg.robust_quadratic(t, y, 130.0, reject_db=0.15, reject_sigma=3.0)
    assert np.allclose(base, trend[130], atol=0.02)
    assert np.all(scatter < 0.02)


def test_coarse_levels_are_medians_of_their_channels():
    f = np.linspace(16e6, 24e6, 64, endpoint=False) + 62.5e3
    groups = bg.coarse_groups(f, 1.0)
    assert groups.max() == 7 and np.bincount(groups).tolist() == [8] * 8
    rng = np.random.default_rng(4)
    lv = rng.normal(size=(5, 64)).astype(np.float32)
    lv[0, :8] = np.nan
    out = bg.coarse_levels(lv, groups, 8)
    for g in range(8):
        ref = np.nanmedian(lv[1:, groups == g], axis=1)
        assert np.allclose(out[1:, g], ref, atol=1e-6)
    assert np.isnan(out[0, 0])
