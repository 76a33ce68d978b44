"""Spectral-mode noise against its exact distribution (scipy.stats.gamma as reference).

A cell's linear power is the mean of K independent exponential powers, so power /
mean follows Gamma(K, 1/K) with K from the channelizer and sweep plan (Nita & Gary
2010 use the same moments). Checked with a Kolmogorov-Smirnov test on noise-only cells.
"""

import numpy as np
import pytest
from scipy import stats

from rxlog.receive import sweep
from rxlog.sim.cells import cell_layout
from rxlog.sim.spectra import simulate_spectra
from rxlog.station.config import config_from_text
from rxlog.timeutil import parse_iso

START = parse_iso("2026-12-01T22:00:00Z")


def station(tmp_path, extra=""):
    return config_from_text(f"""
[station]
name = "gamma-test"
latitude_deg = 47.5
longitude_deg = 8.7
[spectra]
channels = 256
{extra}
""", tmp_path / "station.toml")


@pytest.fixture(scope="module")
def cells(tmp_path_factory):
    cfg = station(tmp_path_factory.mktemp("gamma"))
    noisy, _ = simulate_spectra(cfg, START, 0.2, seed=5, rfi="quiet-rural", include=())
    clean, _ = simulate_spectra(cfg, START, 0.2, seed=5, rfi="quiet-rural", include=(), noise=False)
    ratio = 10 ** ((noisy.power_db.astype(np.float64) - clean.power_db) / 10)
    return cfg, ratio, cell_layout(cfg).samples


def test_gamma_shape_is_the_channelizers_count_of_independent_samples(cells):
    cfg, _, k = cells
    np.testing.assert_allclose(k, sweep.samples_per_cell(cfg))
    assert k.min() > 100     # a 1-s cell of a 2.4 MS/s sweep averages hundreds of samples


def test_noise_only_cells_follow_gamma_k_over_k(cells):
    _, ratio, k = cells
    for kv in np.unique(k):
        x = ratio[:, k == kv].ravel()
        if x.size < 2000:
            continue
        p = stats.kstest(x, stats.gamma(a=kv, scale=1.0 / kv).cdf).pvalue
        assert p > 1e-3, f"K={kv}: KS p={p}"
        # the same test has the power to tell a wrong K apart
        assert stats.kstest(x, stats.gamma(a=kv / 1.5, scale=1.5 / kv).cdf).pvalue < 1e-6


def test_noise_scatter_in_db_matches_radiometer_equation(cells):
    _, ratio, k = cells
    # dB scatter of Gamma(K)/K: 10/ln(10)/sqrt(K) to first order (radiometer equation)
    sd = np.std(10 * np.log10(ratio), axis=0)
    np.testing.assert_allclose(sd, 10 / np.log(10) / np.sqrt(k), rtol=0.12)
