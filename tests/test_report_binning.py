"""Display binning invariants: block sums equal cell-by-cell sums, whatever the channel
order, and leave out flagged cells, NaN and channels outside the band."""

import numpy as np

from rxlog.review.data import add_rows, display_channels
from rxlog.review.zoom import _round_ticks


def naive(row_bin, chan_bin, power, valid, shape):
    sums, counts = np.zeros(shape), np.zeros(shape)
    for i in range(power.shape[0]):
        for j in range(power.shape[1]):
            r, c = row_bin[i], chan_bin[j]
            if 0 <= r < shape[0] and c >= 0 and valid[i, j]:
                sums[r, c] += power[i, j]
                counts[r, c] += 1
    return sums, counts


def case(seed, shuffle):
    rng = np.random.default_rng(seed)
    n_t, n_c = 97, 40
    power = rng.normal(0, 1, (n_t, n_c)).astype(np.float32)
    valid = rng.random((n_t, n_c)) > 0.2
    power[~valid & (rng.random((n_t, n_c)) > 0.5)] = np.nan
    row_bin = (np.arange(n_t) // 7 - 2).astype(np.int64)       # first rows fall before the grid
    chan_bin = np.arange(n_c) // 3
    chan_bin[:2] = -1                                          # below the band
    chan_bin[-1] = -1                                          # above the band
    if shuffle:
        order = rng.permutation(n_c)
        power, valid, chan_bin = power[:, order], valid[:, order], chan_bin[order]
    return row_bin, chan_bin, power, valid


def test_block_sums_equal_cell_sums_for_ordered_and_shuffled_channels():
    shape = (12, 13)
    for seed in range(3):
        for shuffle in (False, True):
            rb, cb, p, v = case(seed, shuffle)
            v = v & np.isfinite(p)
            sums, counts = np.zeros(shape), np.zeros(shape)
            add_rows(sums, counts, rb, *display_channels(p, v, cb, shape[1]))
            s_ref, c_ref = naive(rb, cb, p, v, shape)
            np.testing.assert_allclose(sums, s_ref, atol=1e-4)
            np.testing.assert_array_equal(counts, c_ref)


def test_accumulating_in_pieces_equals_one_pass():
    shape = (12, 13)
    rb, cb, p, v = case(5, False)
    v = v & np.isfinite(p)
    whole = np.zeros(shape), np.zeros(shape)
    add_rows(*whole, rb, *display_channels(p, v, cb, shape[1]))
    parts = np.zeros(shape), np.zeros(shape)
    for a, b in ((0, 30), (30, 31), (31, 97)):
        add_rows(*parts, rb[a:b], *display_channels(p[a:b], v[a:b], cb, shape[1]))
    np.testing.assert_allclose(parts[0], whole[0], atol=1e-4)
    np.testing.assert_array_equal(parts[1], whole[1])


def test_round_ticks_cover_the_range_with_round_steps():
    for lo, hi in ((-0.7, 3.1), (-1.57, 7.3), (0.01, 0.05), (-12.0, 41.0), (2.0, 2.0)):
        start, step = _round_ticks(lo, hi, 4)
        assert start <= lo and start + 4 * step >= hi
        mant = step / 10 ** np.floor(np.log10(step))
        assert round(mant, 6) in (1.0, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0, 6.0, 8.0)
        assert abs(start / step - round(start / step)) < 1e-9
