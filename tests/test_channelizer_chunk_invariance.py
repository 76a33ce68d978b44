"""Invariant: feeding the same samples in blocks of any size gives the same spectra.

Also across a gap (dropped samples) placed at the same sample, across the cu8 and
complex64 paths' own block splits, and for the full-resolution ring.
"""

import numpy as np
import pytest

from rxlog.receive.blocks import SampleBlock, to_complex64
from rxlog.receive.channelizer import Channelizer
from rxlog.spectrum import FLAG_GAP, channel_grid

RATE = 2_400_000
CENTER = 20e6
GRID = channel_grid(16.0, 24.0, 1024)
T0 = 1_796_000_000.0 + 0.37      # not on the cadence grid: the first row is partial


def samples(seconds, seed=1):
    rng = np.random.default_rng(seed)
    n = int(seconds * RATE)
    t = np.arange(n) / RATE
    x = 0.02 * (rng.normal(size=n) + 1j * rng.normal(size=n)) + 0.05 * np.exp(2j * np.pi * 311e3 * t)
    return x.astype(np.complex64)


def run(x, sizes, fmt=None, gap_at=None, gap=0, **kw):
    """Feed x in blocks of the given sizes (cycled); a gap of ``gap`` samples before sample ``gap_at``."""
    ch = Channelizer(freq_hz=GRID, cadence_s=0.25, **kw)
    out, i, k = [], 0, 0
    n = x.size // 2 if fmt else x.size
    while i < n:
        step = sizes[k % len(sizes)]
        k += 1
        if gap_at is not None and i < gap_at < i + step:
            step = gap_at - i
        j = min(n, i + step)
        t0 = T0 + (i + (gap if gap_at is not None and i >= gap_at else 0)) / RATE
        dropped = gap if i == gap_at else 0
        chunk = x[2 * i:2 * j] if fmt else x[i:j]
        if fmt:
            out += ch.feed_samples(chunk, t0, CENTER, RATE, segment="s", dropped_before=dropped, fmt=fmt)
        else:
            out += ch.feed(SampleBlock(chunk, t0, CENTER, RATE, 20.0, "s", dropped))
        i = j
    ring = ch.ring
    out += ch.flush()
    return out, ring


def stack(pieces):
    t0 = pieces[0].t0
    cad = pieces[0].cadence_s
    rows = []
    for p in pieces:
        for r in range(p.n_time):
            rows.append((round((p.t0 - t0) / cad) + r, p.power_db[r], p.flags[r], p.kurtosis[r]))
    idx = [r[0] for r in rows]
    assert idx == sorted(idx) and len(set(idx)) == len(idx)
    return t0, np.array(idx), np.array([r[1] for r in rows]), np.array([r[2] for r in rows]), \
        np.array([r[3] for r in rows])


def assert_same(a, b):
    ta, ia, pa, fa, ka = stack(a)
    tb, ib, pb, fb, kb = stack(b)
    assert ta == tb
    np.testing.assert_array_equal(ia, ib)
    np.testing.assert_array_equal(fa, fb)
    np.testing.assert_allclose(pa, pb, atol=1e-4, equal_nan=True)
    np.testing.assert_allclose(ka, kb, atol=1e-5, equal_nan=True)


X = samples(1.6)


@pytest.mark.parametrize("overlap", [0.0, 0.5])
def test_block_size_does_not_change_spectra(overlap):
    whole, _ = run(X, [X.size], overlap=overlap)
    assert sum(p.n_time for p in whole) >= 5
    for sizes in ([16384], [1000, 37, 70001, 5], [262144, 511]):
        assert_same(whole, run(X, sizes, overlap=overlap)[0])


def test_cu8_bytes_in_any_split_match_their_complex_samples():
    raw = np.clip(np.round(np.stack([X.real, X.imag], 1).ravel() * 127.5 + 127.5), 0, 255).astype(np.uint8)
    ref, _ = run(to_complex64(raw, "cu8"), [X.size])
    for sizes in ([raw.size // 2], [4097, 123, 50000]):
        assert_same(ref, run(raw, sizes, fmt="cu8")[0])


def test_gap_is_the_same_whatever_the_blocks_and_flagged():
    gap_at, gap = 600_000, int(0.6 * RATE)      # more than a whole 0.25-s row lost
    whole, _ = run(X, [X.size], gap_at=gap_at, gap=gap)
    assert_same(whole, run(X, [9999, 100000], gap_at=gap_at, gap=gap)[0])
    _, idx, p, f, _ = stack(whole)
    gap_rows = np.flatnonzero((f & FLAG_GAP).all(axis=1) | ((f & FLAG_GAP) > 0).any(axis=1))
    assert gap_rows.size >= 1
    assert np.isnan(p[gap_rows][:, np.isfinite(p[0])]).all()


def test_ring_is_the_same_whatever_the_blocks():
    _, ring_a = run(X, [X.size], ring_s=5.0)
    _, ring_b = run(X, [3000, 77777], ring_s=5.0)
    a = ring_a.cutout(T0, T0 + 2)
    b = ring_b.cutout(T0, T0 + 2)
    assert a.cadence_s <= 0.002
    assert a.t0 == b.t0 and a.n_time == b.n_time > 500
    np.testing.assert_allclose(a.power_db, b.power_db, atol=0.02, equal_nan=True)   # float16 storage


def test_times_stepping_back_never_repeat_a_row():
    """A host clock stepped back by NTP makes block times jump back: no row is handed out twice."""
    ch = Channelizer(freq_hz=GRID, cadence_s=0.25)
    out = []
    n = 120_000
    for k in range(X.size // n):
        t = T0 + k * n / RATE - (0.6 if k >= 16 else 0.0)      # a 0.6-s step back at block 16
        out += ch.feed(SampleBlock(X[k * n:(k + 1) * n], t, CENTER, RATE, 20.0, "s"))
    out += ch.flush()
    starts = [round(p.t0 / 0.25) + r for p in out for r in range(p.n_time)]
    assert starts == sorted(set(starts))
