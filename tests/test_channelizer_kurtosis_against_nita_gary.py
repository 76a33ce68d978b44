"""Spectral kurtosis against Nita & Gary 2010 (PASP 122, 595).

For Gaussian noise the SK estimator from M single-frame powers has expectation 1 and
variance 4 M^2 / ((M - 1)(M + 2)(M + 3)) (their eq. for N = 1; from memory, confirmed by
a Monte Carlo of exponential powers before writing this test). A pulsed carrier gives
SK well above 1, a steady carrier SK near 0.

Here each station channel is exactly one FFT bin (a channel grid on the bin centres),
so the per-channel SK is the published single-bin estimator.
"""

import numpy as np
import pytest

from rxlog.receive.channelizer import Channelizer
from rxlog.receive.kurtosis import sk_sigma, spectral_kurtosis

RATE = 2_400_000
CENTER = 20e6
N = 1024
T0 = 1_796_000_000.0
BIN_GRID = CENTER + (np.arange(N) - N // 2) * RATE / N          # one channel per FFT bin


def noise(n, seed, sigma=0.02):
    rng = np.random.default_rng(seed)
    return (sigma * (rng.normal(size=n) + 1j * rng.normal(size=n))).astype(np.complex64)


def channelize(x, cadence=1.0, overlap=0.0):
    ch = Channelizer(freq_hz=BIN_GRID, fft_size=N, cadence_s=cadence, overlap=overlap, usable_fraction=0.8,
                     dc_cut_hz=3000.0)
    rows = ch.feed_samples(x, T0, CENTER, RATE)
    return rows[0], ch


@pytest.mark.parametrize("overlap", [0.0, 0.5])
def test_gaussian_noise_gives_sk_consistent_with_one(overlap):
    x = noise(int(1.02 * RATE), seed=3)
    ds, ch = channelize(x, overlap=overlap)
    sk = ds.kurtosis[0]
    sk = sk[np.isfinite(sk)]
    assert sk.size > 700
    # frames used for SK in the row: non-overlapping ones only
    m = int(np.ceil(RATE / ch.hop)) // ch.sk_every
    sigma = float(sk_sigma(m))
    assert abs(sk.mean() - 1) < 4 * sigma / np.sqrt(sk.size / 2)   # /2: Hann makes neighbouring bins correlated
    assert 0.85 < sk.std() / sigma < 1.15
    assert np.abs(sk - 1).max() < 5.5 * sigma


def test_pulsed_and_steady_carriers_are_not_gaussian():
    n = int(1.02 * RATE)
    x = noise(n, seed=5)
    t = np.arange(n) / RATE
    frame = np.arange(n) // N
    pulsed_on = (frame % 100) < 8                                  # on for 8 % of the frames
    f_pulsed = CENTER + 200 * RATE / N                             # on bin centres
    f_steady = CENTER - 150 * RATE / N
    x += (0.2 * pulsed_on * np.exp(2j * np.pi * (f_pulsed - CENTER) * t)).astype(np.complex64)
    x += (0.2 * np.exp(2j * np.pi * (f_steady - CENTER) * t)).astype(np.complex64)
    ds, ch = channelize(x)
    sk = ds.kurtosis[0]
    sigma = float(sk_sigma(int(np.ceil(RATE / N))))
    i_p = int(np.argmin(np.abs(BIN_GRID - f_pulsed)))
    i_s = int(np.argmin(np.abs(BIN_GRID - f_steady)))
    assert sk[i_p] > 1 + 20 * sigma
    assert sk[i_s] < 1 - 20 * sigma
    quiet = np.isfinite(sk)
    quiet[[i_p - 1, i_p, i_p + 1, i_s - 1, i_s, i_s + 1]] = False
    assert np.abs(sk[quiet] - 1).max() < 5.5 * sigma


def test_generalised_estimator_reduces_to_the_single_frame_form():
    # Nita & Gary 2010, MNRAS 406, L60: (MNd + 1)/(M - 1) (M S2/S1^2 - 1); N = d = 1 gives PASP 122, 595
    rng = np.random.default_rng(0)
    p = rng.exponential(size=(5000, 64))
    s1, s2 = p.sum(1), (p * p).sum(1)
    direct = (64 + 1) / (64 - 1) * (64 * s2 / s1 ** 2 - 1)
    np.testing.assert_allclose(spectral_kurtosis(s1, s2, 64), direct)
    # averages of N = 4 exponential powers (gamma of shape 4), generalised form: expectation 1
    q = rng.gamma(4.0, size=(20000, 64))
    sk = spectral_kurtosis(q.sum(1), (q * q).sum(1), 64, n=4)
    assert abs(sk.mean() - 1) < 0.01
