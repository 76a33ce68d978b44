"""Per-channel background of a dynamic spectrum, on two time scales, from block statistics.

A sliding percentile filter over every row is far too slow for a day of spectra, so the
background is built from *blocks* (``block_s`` seconds of rows): each block gives one
robust level per channel (the median of its unflagged cells) and one robust noise
scale (the median absolute first difference, which ignores slow trends).

Two scales follow from those block values:

* The **fast background** is the median of the block levels over a centred window of
  ``fast_window_s`` (a few minutes), linearly interpolated between block centres. It
  follows everything slower than a few minutes -- sidereal drift, ionospheric changes,
  long continua -- so the excess above it isolates bursts of seconds to a minute. A
  centred median has no lag on a linear trend, which a trailing one would have.
* The **slow baseline** works on coarse channels (``slow_freq_mhz`` wide) and follows
  hours: at each block a robust quadratic in time is fitted to the coarse block levels
  over a centred window of ``slow_window_s``, with cells that stand out by more than the
  rejection threshold (in dB and in noise units) left out and the fit repeated. A
  Type IV continuum, a Jovian storm or a fadeout lasting well under half the window is
  rejected rather than absorbed, and negative excess (fadeouts) is kept as such.

Everything here is a pure function of whole blocks, so feeding rows in chunks of any
size gives the same numbers as one pass over the segment. Robust noise from the median
absolute deviation: sigma = 1.4826 MAD for Gaussian noise (e.g. Rousseeuw & Croux 1993).
"""

from __future__ import annotations

import numpy as np

MAD_TO_SIGMA = 1.4826  # Gaussian consistency factor of the median absolute deviation


def nanmedian(x: np.ndarray, axis: int = 0) -> np.ndarray:
    """Median along ``axis`` ignoring NaN (NaN where no value), by one sort.

    numpy's nanmedian is several times slower for the small axes used here.
    """
    x = np.asarray(x)
    nan = np.isnan(x)
    if not nan.any():
        # no gaps: the two middle values at fixed places (numpy's partition is slower
        # than its sort for these short axes)
        n = x.shape[axis]
        if n == 0:
            return np.full(np.delete(x.shape, axis), np.nan, dtype=x.dtype)
        lo, hi = (n - 1) // 2, n // 2
        p = np.sort(x, axis=axis)
        m = 0.5 * (np.take(p, lo, axis=axis) + np.take(p, hi, axis=axis))
        return m.astype(x.dtype, copy=False)
    x = np.moveaxis(x, axis, -1)
    s = np.sort(x, axis=-1)                      # NaN sort to the end
    n = np.count_nonzero(~np.isnan(x), axis=-1)
    lo = np.clip((n - 1) // 2, 0, None)[..., None]
    hi = np.clip(n // 2, 0, None)[..., None]
    m = 0.5 * (np.take_along_axis(s, lo, -1)[..., 0] + np.take_along_axis(s, hi, -1)[..., 0])
    return np.where(n > 0, m, np.nan).astype(x.dtype, copy=False)


def block_stats(power_db: np.ndarray, valid: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Robust level and noise of one block of rows (R, C) -> (level (C,), sigma (C,)).

    level: median of the valid cells of each channel. sigma: 1.4826 x median |first
    difference in time| / sqrt(2), i.e. the per-cell noise with trends and steps
    ignored. NaN where a channel has no valid cells (sigma also needs two in a row).
    """
    x = np.where(valid, power_db, np.nan).astype(np.float32, copy=False)
    level = nanmedian(x, axis=0)
    if x.shape[0] >= 2:
        d = np.abs(x[1:] - x[:-1])
        sigma = MAD_TO_SIGMA / np.sqrt(2.0) * nanmedian(d, axis=0)
    else:
        sigma = np.full(x.shape[1], np.nan, dtype=np.float32)
    return level, sigma.astype(np.float32)


def fast_level(levels: np.ndarray) -> np.ndarray:
    """Fast background of the centre block of a window of block levels (n_blocks, C) -> (C,)."""
    return nanmedian(levels, axis=0)


def interpolate_blocks(b_prev: np.ndarray, b_here: np.ndarray, b_next: np.ndarray,
                       n_rows: int, rows_per_block: int) -> np.ndarray:
    """Per-row background for one block from the fast levels at the previous, this and
    the next block centre (linear in time, each row at its own centre).

    Row i of the block sits at (i + 0.5) / R of the block; the block's level belongs to
    its centre 0.5. Missing neighbours (segment edges) are passed as ``b_here``.
    """
    u = (np.arange(n_rows, dtype=np.float32) + 0.5) / rows_per_block - 0.5   # -0.5 .. +0.5
    u = u[:, None]
    before = b_here + (b_here - b_prev) * u           # u < 0: towards the previous centre
    after = b_here + (b_next - b_here) * u
    return np.where(u < 0, before, after).astype(np.float32)


def robust_quadratic(t: np.ndarray, y: np.ndarray, t_eval: float, reject_db: float,
                     reject_sigma: float, iterations: int = 4) -> tuple[np.ndarray, np.ndarray]:
    """Slow baseline at ``t_eval`` from a window of coarse block levels.

    t: (n,) block centres (any unit); y: (n, G) levels in dB, NaN where missing.
    Fits y = a + b t + c t^2 per column by weighted least squares, leaving out cells
    whose residual exceeds max(reject_db, reject_sigma x robust scatter) and refitting.
    Returns (baseline at t_eval (G,), scatter (G,)): the scatter is the robust noise of
    the block levels from their first differences (insensitive to the trend).
    Falls back to a line or a constant when too few blocks are present.
    """
    n, g = y.shape
    tc = (t - t_eval).astype(np.float64)
    span = max(np.ptp(tc), 1e-9)
    tc = tc / span                                   # well-conditioned design
    ok = ~np.isnan(y)
    yy = np.where(ok, y, 0.0).astype(np.float64)
    diff = np.abs(np.diff(np.where(ok, y, np.nan), axis=0)) if n >= 2 else np.full((1, g), np.nan)
    scatter = MAD_TO_SIGMA / np.sqrt(2.0) * nanmedian(diff, axis=0).astype(np.float64)
    scatter = np.where(np.isfinite(scatter), scatter, 0.0)
    degree = 2 if n >= 9 else (1 if n >= 4 else 0)
    d1 = degree + 1
    powers = np.stack([tc ** k for k in range(2 * degree + 1)], axis=0)     # (2d+1, n)
    A = powers[:d1].T                                                     # (n, d+1)
    kl = np.add.outer(np.arange(d1), np.arange(d1))
    w = ok.astype(np.float64)
    thresh = np.maximum(reject_db, reject_sigma * scatter)[None, :]
    keep_min = max(3, n // 3)
    coef = np.zeros((d1, g))
    for _ in range(iterations):
        moments = powers @ w                                              # (2d+1, g)
        M = np.moveaxis(moments[kl], -1, 0) + 1e-9 * np.eye(d1)[None]     # (g, d+1, d+1)
        v = (A.T @ (w * yy)).T                                            # (g, d+1)
        coef = np.linalg.solve(M, v[..., None])[..., 0].T                 # (d+1, g)
        resid = yy - A @ coef
        w_new = (ok & (np.abs(resid) <= thresh)).astype(np.float64)
        # Keep at least a third of the points: a window dominated by an event falls back
        # to its quietest cells rather than to nothing.
        few = w_new.sum(axis=0) < keep_min
        if np.any(few):
            r = np.where(ok, np.abs(resid), np.inf)[:, few]
            k = min(keep_min, n - 1)
            cut = np.partition(r, k, axis=0)[k]
            w_new[:, few] = (r <= cut).astype(np.float64)
        if np.array_equal(w_new, w):
            break
        w = w_new
    base = coef[0]                                   # value at t_eval (tc = 0)
    base = np.where(ok.any(axis=0), base, np.nan)
    return base.astype(np.float32), scatter.astype(np.float32)


def coarse_groups(freq_hz: np.ndarray, width_mhz: float) -> np.ndarray:
    """Index of the coarse channel (``width_mhz`` wide, from the lowest channel) of each channel."""
    f = np.asarray(freq_hz, dtype=np.float64) / 1e6
    return np.floor((f - f.min()) / max(width_mhz, 1e-9) + 1e-9).astype(np.int64)


def coarse_levels(levels: np.ndarray, groups: np.ndarray, n_groups: int) -> np.ndarray:
    """Median of the valid channel levels (..., C) within each coarse channel -> (..., n_groups)."""
    lv = np.asarray(levels, dtype=np.float32)
    order = np.argsort(groups, kind="stable")
    counts = np.bincount(groups, minlength=n_groups)
    width = counts.max()
    # Scatter channels into a (..., n_groups, width) array padded with NaN, then one median.
    pos = np.arange(len(groups)) - np.repeat(np.cumsum(counts) - counts, counts)
    out = np.full(lv.shape[:-1] + (n_groups, width), np.nan, dtype=np.float32)
    out[..., groups[order], pos] = lv[..., order]
    return nanmedian(out, axis=-1)
