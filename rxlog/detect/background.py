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
  rejected rather than absorbed, and negative excess (fadeouts) is kept as such. Longer
  events are *bridged*: blocks the slow path found in an event leave the fit, the window
  reaches back (up to BRIDGE_S) for quiet blocks before it, the first fit starts from a
  line through those, and later blocks join once the event is over, so the baseline runs
  under a two-hour continuum from the quiet before it to the quiet after it.

Everything here is a pure function of whole blocks, so feeding rows in chunks of any
size gives the same numbers as one pass over the segment; ``Background`` keeps one
segment's block values and windows. Robust noise from the median absolute deviation:
sigma = 1.4826 MAD for Gaussian noise (e.g. Rousseeuw & Croux 1993).
"""

from __future__ import annotations

import numpy as np

from rxlog.constants import MAD_TO_SIGMA
from rxlog.detect.grid import Grid
from rxlog.detect.settings import BRIDGE_S, Settings


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
                     reject_sigma: float, iterations: int = 4,
                     w0: np.ndarray | None = None,
                     scatter: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Slow baseline at ``t_eval`` from a window of coarse block levels.

    t: (n,) block centres (any unit); y: (n, G) levels in dB, NaN where missing.
    Fits y = a + b t + c t^2 per column by weighted least squares, leaving out cells
    whose residual exceeds max(reject_db, reject_sigma x robust scatter) and refitting;
    ``w0`` (n, G), when given, are the cells of the first fit (``seeded_weights``).
    ``scatter`` (G,): ``level_scatter(y)``, when the caller has it.
    A column whose kept cells all lie on one side of ``t_eval`` (the middle of a long
    event, bridged from before it) gets a line: a parabola extrapolated over an hour
    would follow its own curvature, not the sky's.
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
    scatter = level_scatter(y) if scatter is None else scatter
    degree = 2 if n >= 9 else (1 if n >= 4 else 0)
    d1 = degree + 1
    powers = np.stack([tc ** k for k in range(2 * degree + 1)], axis=0)     # (2d+1, n)
    A = powers[:d1].T                                                     # (n, d+1)
    kl = np.add.outer(np.arange(d1), np.arange(d1))
    w = ok.astype(np.float64) if w0 is None else (w0 & ok).astype(np.float64)
    thresh = np.maximum(reject_db, reject_sigma * scatter)[None, :]
    n_ok = ok.sum(axis=0)
    keep_min = np.maximum(3, n_ok // 3)
    before, after = tc < 0, tc > 0
    coef = np.zeros((d1, g))
    for _ in range(iterations):
        moments = powers @ w                                              # (2d+1, g)
        M = np.moveaxis(moments[kl], -1, 0) + 1e-9 * np.eye(d1)[None]     # (g, d+1, d+1)
        if degree == 2:
            # one-sided columns: pin the curvature to zero
            kept = w.sum(axis=0)
            one_sided = np.minimum(before @ w, after @ w) < 0.1 * np.maximum(kept, 1.0)
            M[:, 2, 2] += np.where(one_sided, 1e6 * np.maximum(kept, 1.0), 0.0)
        v = (A.T @ (w * yy)).T                                            # (g, d+1)
        coef = np.linalg.solve(M, v[..., None])[..., 0].T                 # (d+1, g)
        resid = yy - A @ coef
        w_new = (ok & (np.abs(resid) <= thresh)).astype(np.float64)
        # Keep at least a third of the points: a window dominated by an event falls back
        # to its quietest cells rather than to nothing.
        few = w_new.sum(axis=0) < np.minimum(keep_min, n_ok)
        if np.any(few):
            r = np.where(ok, np.abs(resid), np.inf)[:, few]
            k = np.clip(keep_min[few], 1, n - 1)
            cut = np.take_along_axis(np.sort(r, axis=0), k[None, :], axis=0)[0]
            w_new[:, few] = (r <= cut).astype(np.float64)
        if np.array_equal(w_new, w):
            break
        w = w_new
    base = coef[0]                                   # value at t_eval (tc = 0)
    base = np.where(ok.any(axis=0), base, np.nan)
    return base.astype(np.float32), scatter.astype(np.float32)


def level_scatter(y: np.ndarray) -> np.ndarray:
    """Robust noise of block levels (n, G) from their first differences (G,), 0 where unknown."""
    ok = ~np.isnan(y)
    if y.shape[0] < 2:
        return np.zeros(y.shape[1])
    diff = np.abs(np.diff(np.where(ok, y, np.nan), axis=0))
    scatter = MAD_TO_SIGMA / np.sqrt(2.0) * nanmedian(diff, axis=0).astype(np.float64)
    return np.where(np.isfinite(scatter), scatter, 0.0)


def seeded_weights(t: np.ndarray, y: np.ndarray, past: np.ndarray, thresh: np.ndarray,
                   min_past: int, side: np.ndarray) -> np.ndarray:
    """The cells a slow fit starts from: a line through the ``past`` cells (n, G) of each
    column (quiet blocks before the one evaluated), and every cell near it. A long event
    under way, or starting within the window, then cannot pull the first fit up (or down)
    to meet it. ``side`` (G,): the sign of the event under way in each column (0: none);
    where +1, every later cell not above the line by more than ``thresh`` counts (the
    background after the event ends may have drifted either way during it, but the event
    only ever adds), where -1 every cell not below it, else those within ``thresh``.
    Columns with fewer than ``min_past`` past cells start from all their cells."""
    ok = ~np.isnan(y)
    w = (past & ok).astype(np.float64)
    tc = (t - t.mean()) / max(np.ptp(t), 1e-9)
    yy = np.where(ok, y, 0.0)
    s0, s1, s2 = w.sum(axis=0), tc @ w, (tc * tc) @ w
    b0, b1 = (w * yy).sum(axis=0), tc @ (w * yy)
    det = s0 * s2 - s1 * s1
    enough = (s0 >= min_past) & (det > 1e-12 * np.maximum(s0, 1.0) ** 2)
    with np.errstate(invalid="ignore", divide="ignore"):
        a = np.where(enough, (s2 * b0 - s1 * b1) / det, 0.0)
        b = np.where(enough, (s0 * b1 - s1 * b0) / det, 0.0)
    r = yy - a[None, :] - b[None, :] * tc[:, None]
    near = np.where(side > 0, r <= thresh, np.where(side < 0, r >= -thresh, np.abs(r) <= thresh))
    return np.where(enough[None, :], ok & (near | past), ok)


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


class Background:
    """One segment's background, block by block: the block levels and noise per channel
    (with the channels the mask took out of the block left out), the fast background of
    each block, and the slow baseline and texture on coarse channels.

    The fast background of block j needs the blocks up to j + W (``fast_window_s`` / 2
    after it); the slow baseline of block k those up to k + ``half_slow``.
    """

    def __init__(self, grid: Grid, s: Settings):
        self.R = grid.rows_per_block
        self.groups, self.n_groups = grid.groups, grid.n_groups
        self.W = max(1, int(round(s.fast_window_s / grid.block_s / 2)))
        self.half_slow = max(2, int(round(s.slow_window_s / grid.block_s / 2)))
        self.reject_db, self.reject_sigma = s.slow_grow_db, s.slow_grow_sigma
        self.level: dict[int, np.ndarray] = {}
        self.sigma: dict[int, np.ndarray] = {}
        self.fast: dict[int, tuple] = {}
        self.coarse: dict[int, np.ndarray] = {}
        self.coarse_sig: dict[int, np.ndarray] = {}    # coarse second-to-second noise of each block
        # how far back the slow baseline may reach for quiet blocks across a long event
        self.back = self.half_slow + max(0, int(round(BRIDGE_S / grid.block_s)))
        self.busy: dict[int, np.ndarray] = {}          # per block: +1 / -1 where above / below the baseline
        self._idle = np.zeros(self.n_groups, dtype=np.int8)
        self.last_busy = -(10 ** 9)                    # the last block with any
        self.next_fast = 0

    def add_block(self, j: int, level: np.ndarray, sigma: np.ndarray, chan_mask: np.ndarray):
        """Block j's level and noise per channel (``block_stats``), ``chan_mask`` the
        channels masked for the whole block (carriers, persistent kurtosis)."""
        self.level[j] = np.where(chan_mask, np.nan, level).astype(np.float32)
        self.sigma[j] = sigma
        self.coarse[j] = coarse_levels(self.level[j], self.groups, self.n_groups)
        self.coarse_sig[j] = coarse_levels(np.where(chan_mask, np.nan, sigma), self.groups, self.n_groups)

    def advance_fast(self, n_blocks: int, final: bool):
        """Fast levels of every block whose window is complete (all of them at the end)."""
        nb = n_blocks
        while self.next_fast < nb and (final or self.next_fast + self.W < nb):
            j = self.next_fast
            lo, hi = max(0, j - self.W), min(nb, j + self.W + 1)
            self.fast[j] = (fast_level(np.stack([self.level[k] for k in range(lo, hi)])),
                            nanmedian(np.stack([self.sigma[k] for k in range(lo, hi)]), axis=0))
            self.next_fast += 1

    def fast_rows(self, j: int, n_rows: int) -> tuple[np.ndarray, np.ndarray]:
        """Fast background of the first ``n_rows`` rows of block j (interpolated between
        block centres), and the channels' noise there (C,)."""
        here, sig_c = self.fast[j]
        prev = self.fast[j - 1][0] if j - 1 in self.fast else here
        nxt = self.fast[j + 1][0] if (j + 1) in self.fast else here
        prev = np.where(np.isfinite(prev), prev, here)
        nxt = np.where(np.isfinite(nxt), nxt, here)
        return interpolate_blocks(prev, here, nxt, n_rows, self.R), sig_c

    def slow_excess(self, k: int, n_blocks: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Block k on coarse channels against the slow baseline, each (1, G): excess in dB,
        in noise units of the block levels, and texture.

        The baseline is fitted to the window's future half and to the last half window
        of *quiet* blocks before k: blocks the slow path found in an event (``busy``) are
        left out and the window reaches back past them, up to ``back`` blocks, so the
        baseline is carried across a long event (bridged) instead of rising into it.

        Texture: this block's second-to-second noise against the quiet quarter of the
        window's. Multiplicative noise keeps its width in dB under a steady rise (a
        continuum, arcing); the seconds-long L-bursts of a Jovian storm widen it.
        """
        # reach back beyond half a window only while a long event keeps blocks out
        recent_busy = self.last_busy >= k - self.half_slow
        lo = max(0, k - (self.back if recent_busy else self.half_slow))
        hi = min(n_blocks, k + self.half_slow + 1)
        ks = np.arange(lo, hi)
        y = np.stack([self.coarse[i] for i in ks])
        past = ks < k
        keep_past = past[:, None] & ~np.isnan(y)
        if recent_busy:
            busy = np.stack([self.busy.get(i, self._idle) for i in ks]) != 0
            keep_past &= ~busy
            # the last half window of quiet blocks before k, per coarse channel
            keep_past &= np.cumsum(keep_past[::-1], axis=0)[::-1] <= self.half_slow
            y = np.where(past[:, None] & ~keep_past, np.nan, y)
        scatter = level_scatter(y)
        thresh = np.maximum(self.reject_db, self.reject_sigma * scatter)
        side = self.busy.get(k - 1, self._idle)
        w0 = seeded_weights(ks.astype(np.float64), y, keep_past, thresh, max(3, self.half_slow // 4), side)
        base, scatter = robust_quadratic(ks.astype(np.float64), y, float(k), self.reject_db, self.reject_sigma,
                                         w0=w0, scatter=scatter)
        e = self.coarse[k] - base
        with np.errstate(invalid="ignore", divide="ignore"):
            sg = np.where(scatter > 0, e / scatter, 0.0)
        e = np.nan_to_num(e).astype(np.float32)
        sg = np.nan_to_num(sg).astype(np.float32)
        self.busy[k] = (np.sign(e) * ((np.abs(e) >= self.reject_db) & (np.abs(sg) >= self.reject_sigma))).astype(np.int8)
        if self.busy[k].any():
            self.last_busy = k
        sw = np.stack([self.coarse_sig[i] for i in range(max(0, k - self.half_slow), hi)])
        srt = np.sort(sw, axis=0)                                    # NaN sort last
        n_ok = np.count_nonzero(~np.isnan(sw), axis=0)
        ref = np.take_along_axis(srt, np.clip((n_ok - 1) // 4, 0, None)[None, :], axis=0)[0]
        with np.errstate(invalid="ignore", divide="ignore"):
            tx = np.nan_to_num(self.coarse_sig[k] / ref, nan=1.0, posinf=1.0).astype(np.float32)[None, :]
        return e[None, :], sg[None, :], tx

    def forget(self, next_m: int, next_slow: int):
        """Drop what no later block needs: fast levels before the block the mask stage
        works on next (less one), levels before the oldest fast window still open, coarse
        levels before the oldest slow window."""
        for d, keep_from in ((self.fast, next_m - 1),
                             (self.sigma, self.next_fast - self.W), (self.level, self.next_fast - self.W),
                             (self.coarse, next_slow - self.back), (self.busy, next_slow - self.back),
                             (self.coarse_sig, next_slow - self.half_slow)):
            for k in [k for k in d if k < keep_from]:
                del d[k]
