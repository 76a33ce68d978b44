"""A tone lands in the right channel and its power over noise matches scipy.signal.welch.

Outside reference: scipy.signal.welch (scipy >= 1.11) on the very same samples and the
same frames (Hann window, nperseg = fft_size, no overlap, two-sided), its bins averaged
into the station's channels here in the test, independently of rxlog's channel map.
"""

import numpy as np
import pytest
import scipy.signal

from rxlog.receive.channelizer import Channelizer
from rxlog.spectrum import channel_grid

RATE = 2_400_000
CENTER = 20e6
GRID = channel_grid(16.0, 24.0, 1024)
T0 = 1_796_000_000.0


def tone_and_noise(f_tone, seconds, amp=0.03, sigma=0.02, seed=0):
    rng = np.random.default_rng(seed)
    n = int(seconds * RATE)
    t = np.arange(n) / RATE
    x = amp * np.exp(2j * np.pi * (f_tone - CENTER) * t) + sigma * (rng.normal(size=n) + 1j * rng.normal(size=n))
    return x.astype(np.complex64)


def welch_channels(x, n_frames, fft_size=1024):
    """Per-channel mean of welch's two-sided bins over the given frames (test-side mapping)."""
    f, pxx = scipy.signal.welch(x[: n_frames * fft_size], fs=RATE, window="hann", nperseg=fft_size, noverlap=0,
                                return_onesided=False, detrend=False, scaling="spectrum")
    f_sky = CENTER + f
    df = GRID[1] - GRID[0]
    ch = np.floor((f_sky - (GRID[0] - df / 2)) / df).astype(int)
    keep = (np.abs(f) <= 0.8 * RATE / 2) & (np.abs(f) > 3000.0) & (ch >= 0) & (ch < GRID.size)
    sums = np.bincount(ch[keep], weights=pxx[keep], minlength=GRID.size)
    counts = np.bincount(ch[keep], minlength=GRID.size)
    with np.errstate(invalid="ignore", divide="ignore"):
        return 10 * np.log10(sums / counts)


def quantise(x, fmt):
    """Complex samples -> interleaved components as a receiver would store them."""
    c = np.empty(2 * x.size, dtype=np.float64)
    c[0::2], c[1::2] = x.real, x.imag
    if fmt == "cu8":
        return np.clip(np.round(c * 127.5 + 127.5), 0, 255).astype(np.uint8)
    if fmt == "ci16_le":
        return np.clip(np.round(c * 32768), -32768, 32767).astype("<i2")
    raise ValueError(fmt)


def dequantise(raw, fmt):
    c = raw.astype(np.float64)
    c = (c - 127.5) / 127.5 if fmt == "cu8" else c / 32768
    return (c[0::2] + 1j * c[1::2]).astype(np.complex64)


@pytest.mark.parametrize("f_tone", [20.3127e6, 19.1503e6])
@pytest.mark.parametrize("fmt", ["cf32", "cu8", "ci16_le"])
def test_tone_channel_and_power_over_noise_match_welch(f_tone, fmt):
    x = tone_and_noise(f_tone, 1.05, seed=int(f_tone) % 97)
    ch = Channelizer(freq_hz=GRID, fft_size=1024, window="hann", cadence_s=1.0, kurtosis=False)
    if fmt == "cf32":
        rows = ch.feed_samples(x, T0, CENTER, RATE) + ch.flush()
        ref = x
    else:
        raw = quantise(x, fmt)
        rows = ch.feed_samples(raw, T0, CENTER, RATE, fmt=fmt) + ch.flush()
        ref = dequantise(raw, fmt)
    first = rows[0]
    assert first.t0 == T0
    ours = first.power_db[0]
    # frames of row 0: those starting within [T0, T0 + 1 s)
    n_frames = int(np.ceil(RATE / 1024))
    theirs = welch_channels(ref, n_frames)
    covered = np.isfinite(ours)
    np.testing.assert_array_equal(covered, np.isfinite(theirs))

    expected = int(np.floor((f_tone - 16e6) / (GRID[1] - GRID[0])))
    peak = int(np.nanargmax(ours))
    assert abs(peak - expected) <= 1
    assert int(np.nanargmax(theirs)) == peak

    excess_ours = ours[peak] - np.nanmedian(ours)
    excess_theirs = theirs[peak] - np.nanmedian(theirs)
    assert excess_ours > 10
    assert abs(excess_ours - excess_theirs) < 0.2
    # and channel by channel, the spectral shape is welch's (offset: an arbitrary dB reference)
    d = ours[covered] - theirs[covered]
    assert np.ptp(d) < 0.01
