"""The RFI mask: which cells of a dynamic spectrum are man-made interference.

Four sources of flags, each cheap and local so a block of rows is masked the same way
however the rows arrive:

* **Static ranges** from ``[rfi] static_ranges``: frequency ranges, optionally only
  between two UTC hours (the defaults and their source are in rxlog.detect.settings).
* **Carriers** found per block: a channel whose block median stands above the running
  median of its neighbours (``carrier_width_mhz`` either side) by more than
  ``carrier_sigma`` noise units. A channel that has been a carrier in more than
  ``carrier_fraction`` of recent blocks (exponential memory of ``carrier_memory_s``), or
  of the blocks at this UTC hour of day over the last ``occupancy_days`` (``Occupancy``),
  is masked even while it fades: the mask *learns* the station's carriers and their
  schedules, channel by channel, instead of taking out whole allocations.
* **SumThreshold** (Offringa et al. 2010, MNRAS 405, 155) on the narrowband residual
  (excess minus its running mean over neighbouring channels), along frequency and, within
  a block, along time: runs of M = 1, 2, 4, ... samples are flagged when their sum exceeds
  M chi_M with chi_M = chi_1 / rho^log2(M), flagged samples entering later runs at
  chi_M. Only cells whose neighbourhood is quiet are considered, so the edges and fine
  structure of a bright natural burst are not cut away.
* **Spectral kurtosis** (Nita & Gary 2010, PASP 122, 595) when the channelizer supplies
  it: channels whose SK departs from 1 in most of a block are masked (persistent
  non-Gaussian signals are man-made). Short SK excursions are *not* masked -- bright
  Type III onsets and S-bursts raise SK too -- they are reported on the event instead.

``SegmentMask`` applies them to one segment block by block and counts the masked cells
per UTC hour, in all and per channel group of ``slow_freq_mhz`` (``hour_quality``). Impulses and pulse trains are masked by
rxlog.detect.impulses. What is thrown away is also shown: impulse storms, and
SumThreshold cells that line up across the band (an ionosonde sweep, the line path in
rxlog.detect.components) become ``rfi`` events a reviewer sees.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import ndimage

from rxlog.constants import MAD_TO_SIGMA
from rxlog.detect.grid import Grid
from rxlog.detect.settings import Settings
from rxlog.spectrum import FLAG_GAP, FLAG_RFI, FLAG_UNCOVERED

# SumThreshold falls its threshold by rho per doubling of the run (Offringa et al. 2010 use 1.5).
SUMTHRESHOLD_RHO = 1.5


def static_mask(ranges: list[dict], freq_hz: np.ndarray, times: np.ndarray) -> np.ndarray:
    """(n_rows, n_chan) bool: cells inside a static range at that time of day (UTC).

    A channel is inside when any part of it (centre +- half the channel spacing) overlaps
    the range. ``hours_utc = [a, b]`` applies from hour a up to b, wrapping past midnight
    when b < a.
    """
    f = np.asarray(freq_hz, dtype=np.float64) / 1e6
    half = 0.5 * (np.median(np.diff(f)) if len(f) > 1 else 0.0)
    times = np.asarray(times, dtype=np.float64)
    hour = np.mod(times, 86400.0) / 3600.0
    out = np.zeros((len(times), len(f)), dtype=bool)
    for r in ranges:
        chans = (f + half > r["fmin_mhz"]) & (f - half < r["fmax_mhz"])
        if not chans.any():
            continue
        hours = r.get("hours_utc")
        if hours is None:
            out[:, chans] = True
            continue
        a, b = float(hours[0]), float(hours[1])
        on = (hour >= a) & (hour < b) if a <= b else (hour >= a) | (hour < b)
        out[np.ix_(on, chans)] = True
    return out


def always_masked(ranges: list[dict], freq_hz: np.ndarray) -> np.ndarray:
    """(C,) bool: channels a static range covers at every hour (a range without hours)."""
    always = np.zeros(len(freq_hz), dtype=bool)
    for r in ranges:
        if r.get("hours_utc") is None:
            always |= static_mask([r], freq_hz, np.zeros(1))[0]
    return always


def carrier_channels(level: np.ndarray, level_sigma: np.ndarray, width_ch: int,
                     threshold_sigma: float) -> np.ndarray:
    """(C,) bool: channels whose block level stands above the median of their neighbours.

    level: block median per channel (NaN where masked); level_sigma: its noise (dB).
    The reference is the running median over 2 x width_ch + 1 channels, so slopes and
    bandpass ripple wider than that pass through.
    """
    x = np.asarray(level, dtype=np.float32)
    ok = np.isfinite(x)
    if not ok.any():
        return np.zeros(x.shape, dtype=bool)
    filled = np.where(ok, x, np.interp(np.arange(len(x)), np.flatnonzero(ok), x[ok]))
    ref = ndimage.median_filter(filled, size=2 * width_ch + 1, mode="nearest")
    sig = np.where(np.isfinite(level_sigma) & (level_sigma > 0), level_sigma, np.inf)
    return ok & ((x - ref) > threshold_sigma * sig)


class Occupancy:
    """How often each channel of one channel grid carried a carrier, learned block by block.

    Two memories, both exponential: the last ``memory_s`` seconds (a carrier that fades
    for a few minutes stays masked), and each UTC hour of the day over ``days`` days
    (short-wave broadcasters keep schedules, and the higher bands are open mostly by day,
    so a channel busy every evening need not be masked at night; common practice). A
    channel is masked in a block when it is a carrier now, or was one in more than
    ``fraction`` of the recent blocks or of that hour's blocks. Memory: 25 floats per
    channel, however long the station runs. ``state()`` and ``load()`` carry what was
    learned across restarts of the logger.
    """

    def __init__(self, n_chan: int, block_s: float, memory_s: float, fraction: float, days: float):
        self.alpha = min(1.0, block_s / max(memory_s, block_s))
        # each hour of the day sees 3600 / block_s blocks a day
        self.alpha_hour = min(1.0, block_s / max(days * 3600.0, block_s))
        self.fraction = fraction
        self.recent = np.zeros(n_chan, dtype=np.float64)
        self.by_hour = np.zeros((24, n_chan), dtype=np.float64)

    def update(self, is_carrier: np.ndarray, t_block: float) -> np.ndarray:
        """Age both memories by one block starting at ``t_block`` (POSIX s) and return the
        channels to mask in it."""
        x = is_carrier.astype(np.float64)
        h = int(t_block // 3600.0) % 24
        self.recent += self.alpha * (x - self.recent)
        self.by_hour[h] += self.alpha_hour * (x - self.by_hour[h])
        return is_carrier | (self.recent > self.fraction) | (self.by_hour[h] > self.fraction)

    def state(self) -> dict:
        return {"recent": self.recent.round(4).tolist(), "by_hour": self.by_hour.round(4).tolist()}

    def load(self, state: dict) -> None:
        """Take up a ``state()`` of the same channel grid (ignored when its shape differs)."""
        recent = np.asarray(state.get("recent", ()), dtype=np.float64)
        by_hour = np.asarray(state.get("by_hour", ()), dtype=np.float64)
        if recent.shape == self.recent.shape and by_hour.shape == self.by_hour.shape:
            self.recent, self.by_hour = np.clip(recent, 0, 1), np.clip(by_hour, 0, 1)


def new_occupancy(n_chan: int, block_s: float, s: Settings) -> Occupancy:
    return Occupancy(n_chan, block_s, s.carrier_memory_s, s.carrier_fraction, s.occupancy_days)


def _run_sums(y: np.ndarray, m: int, axis: int) -> np.ndarray:
    """Sums of m consecutive samples along ``axis`` (m a power of two), window starts only.

    Built by pairwise doubling so every sum adds the same cells in the same order,
    whatever array the block sits in.
    """
    s = y
    step = 1
    while step < m:
        n = s.shape[axis] - step
        if n <= 0:
            return np.zeros(s.shape[:axis] + (0,) + s.shape[axis + 1:], dtype=y.dtype)
        s = np.take(s, np.arange(n), axis=axis) + np.take(s, np.arange(step, step + n), axis=axis)
        step *= 2
    return s


def _spread(hit: np.ndarray, m: int, axis: int, length: int) -> np.ndarray:
    """Flag every sample of each window of length m that starts at a hit."""
    out = np.zeros(hit.shape[:axis] + (length,) + hit.shape[axis + 1:], dtype=bool)
    n = hit.shape[axis]
    for k in range(m):   # m <= a few tens: a loop over the run length, not over samples
        idx = [slice(None)] * hit.ndim
        idx[axis] = slice(k, k + n)
        out[tuple(idx)] |= hit
    return out


def sum_threshold(x: np.ndarray, flags: np.ndarray, axis: int, chi1: float, max_run: int,
                  rho: float = SUMTHRESHOLD_RHO) -> np.ndarray:
    """SumThreshold (Offringa et al. 2010) along one axis on values in noise units.

    x: (n_rows, n_chan) positive-going residual in sigma units; flags: cells already
    flagged (they enter runs at the current threshold). Runs of 1, 2, 4, ... up to
    ``max_run`` samples; windows never cross the array edge. Returns the new flags.
    """
    flags = flags.copy()
    x = np.where(np.isfinite(x), x, 0.0).astype(np.float32)
    length = x.shape[axis]
    m = 1
    while m <= max(1, max_run) and m <= length:
        chi = chi1 / rho ** math.log2(m)
        y = np.where(flags, np.float32(chi), x)
        hit = _run_sums(y, m, axis) > m * chi
        flags |= _spread(hit, m, axis, length)
        m *= 2
    return flags


def kurtosis_flags(sk: np.ndarray, valid: np.ndarray, threshold_sigma: float) -> np.ndarray:
    """Cells whose spectral kurtosis departs from 1 by more than threshold x its robust scatter.

    Nita & Gary 2010: SK has expectation 1 for Gaussian noise; its scatter (about
    2/sqrt(M) for M accumulated spectra) is measured here from the block itself, so the
    channelizer's M need not be known.
    """
    d = np.where(valid & np.isfinite(sk), sk - 1.0, np.nan)
    scale = MAD_TO_SIGMA * np.nanmedian(np.abs(d)) if np.isfinite(d).any() else np.nan
    if not np.isfinite(scale) or scale <= 0:
        return np.zeros(sk.shape, dtype=bool)
    return np.abs(np.nan_to_num(d)) > threshold_sigma * scale


def neighbour_mean(z: np.ndarray, w: np.ndarray, width_ch: int, skip_ch: int = 1) -> tuple[np.ndarray, np.ndarray]:
    """Mean of z where w over the channels within ``width_ch`` of each channel but more
    than ``skip_ch`` away from it (the cell and its nearest neighbours, where a narrow
    signal sits, are left out), and the count of cells used."""
    size = 2 * width_ch + 1
    inner = min(2 * skip_ch + 1, size - 2)
    zw = np.where(w, z, 0.0).astype(np.float32)
    wf = w.astype(np.float32)
    num = ndimage.uniform_filter1d(zw, size, axis=1, mode="constant") * size
    den = ndimage.uniform_filter1d(wf, size, axis=1, mode="constant") * size
    if inner >= 1:
        num = num - ndimage.uniform_filter1d(zw, inner, axis=1, mode="constant") * inner
        den = den - ndimage.uniform_filter1d(wf, inner, axis=1, mode="constant") * inner
    den = np.clip(den, 0.0, None)
    mean = np.where(den > 0.5, num / np.maximum(den, 1e-12), 0.0)
    return mean.astype(np.float32), den


def group_index(freq_hz: np.ndarray, group_mhz: float) -> np.ndarray:
    """(C,) the channel group of each channel on a fixed grid of ``group_mhz`` from 0 Hz
    (so hours of different tunings add up group by group)."""
    return np.floor(np.asarray(freq_hz, dtype=np.float64) / 1e6 / group_mhz + 1e-9).astype(np.int64)


def hour_quality(times: np.ndarray, flags: np.ndarray, cadence_s: float,
                 group_of: np.ndarray | None = None) -> dict[float, list]:
    """Per UTC hour start: [masked cells, covered cells, gap seconds, covered seconds],
    and with ``group_of`` (each channel's group, ``group_index``) also [first group,
    masked cells per group, covered cells per group].

    Covered cells are cells with data in channels the receiver covered; a gap row is a
    row where no channel has data.
    """
    hours = np.floor(np.asarray(times) / 3600.0) * 3600.0
    covered = (flags & (FLAG_GAP | FLAG_UNCOVERED)) == 0
    masked = covered & ((flags & FLAG_RFI) != 0)
    row_cov = covered.sum(axis=1)
    row_mask = masked.sum(axis=1)
    gap_row = ((flags & FLAG_GAP) != 0).all(axis=1) if flags.shape[1] else np.ones(len(times), bool)
    out: dict[float, list[float]] = {}
    for h in np.unique(hours):
        sel = hours == h
        out[float(h)] = [float(row_mask[sel].sum()), float(row_cov[sel].sum()),
                         float(gap_row[sel].sum() * cadence_s), float((~gap_row[sel]).sum() * cadence_s)]
        if group_of is not None and len(group_of):
            k0 = int(group_of.min())
            n = int(group_of.max()) - k0 + 1
            out[float(h)] += [k0, np.bincount(group_of - k0, masked[sel].sum(axis=0), n),
                              np.bincount(group_of - k0, covered[sel].sum(axis=0), n)]
    return out


def add_hours(into: dict[float, list], hours) -> None:
    """Add ``hour_quality`` rows (hour, [masked, covered, gap s, covered s] and the groups'
    [first group, masked, covered] where given) into running sums."""
    for h, v in hours:
        acc = into.setdefault(h, [0.0, 0.0, 0.0, 0.0])
        for i in range(4):
            acc[i] += v[i]
        if len(v) > 4:
            _add_groups(acc, *v[4:])


def _add_groups(acc: list, k0: int, masked: np.ndarray, covered: np.ndarray) -> None:
    """Add per-group counts starting at group ``k0`` into ``acc[4:]``, widening its range."""
    if len(acc) == 4:
        acc += [k0, masked.astype(np.float64), covered.astype(np.float64)]
        return
    a0, am, ac = acc[4], acc[5], acc[6]
    lo, hi = min(a0, k0), max(a0 + len(am), k0 + len(masked))
    m, c = np.zeros(hi - lo), np.zeros(hi - lo)
    for k, x, y in ((a0, am, ac), (k0, masked, covered)):
        m[k - lo:k - lo + len(x)] += x
        c[k - lo:k - lo + len(y)] += y
    acc[4:] = [lo, m, c]


def group_fractions(acc: list, group_mhz: float) -> dict:
    """The quality row's per-group fields from an hour's sums: group_fmin_mhz, group_mhz
    and masked_by_group (the masked share of each group's covered cells; None where a
    group had no data)."""
    if len(acc) <= 4:
        return {}
    k0, m, c = acc[4], acc[5], acc[6]
    frac = [None if cc <= 0 else round(float(mm / cc), 4) for mm, cc in zip(m, c)]
    return {"group_fmin_mhz": round(k0 * group_mhz, 6), "group_mhz": group_mhz, "masked_by_group": frac}


class SegmentMask:
    """The RFI mask of one segment, block by block: static ranges, the channels masked
    for a whole block (carriers, persistent kurtosis), SumThreshold on the narrowband
    residual, and the hourly count of masked cells."""

    def __init__(self, grid: Grid, s: Settings, occupancy: Occupancy | None = None):
        self.s = s
        self.freq, self.always, self.cadence = grid.freq, grid.always, grid.cadence
        self.timed = [r for r in s.static_ranges if r.get("hours_utc") is not None]
        self.cw = max(1, int(round(s.carrier_width_mhz / grid.chan_mhz)))
        self.st_f = max(1, int(s.sumthreshold_max_mhz / grid.chan_mhz))
        self.st_t = max(1, int(s.sumthreshold_max_s / grid.cadence))
        self.carriers = occupancy if occupancy is not None else new_occupancy(grid.n_chan, grid.block_s, s)
        self.group_of = group_index(grid.freq, s.slow_freq_mhz)
        self.chan_mask: dict[int, np.ndarray] = {}
        self.quality: dict[float, list[float]] = {}

    def static(self, t0: float, n: int) -> np.ndarray:
        """The static mask over ``n`` rows from ``t0`` (read-only when it does not change with
        the hour: then it is the always-masked channels on every row)."""
        if not self.timed:
            return np.broadcast_to(self.always, (n, len(self.always)))
        times = t0 + self.cadence * np.arange(n)
        return self.always[None, :] | static_mask(self.timed, self.freq, times)

    def block_channels(self, j: int, t_block: float, level: np.ndarray, sigma: np.ndarray, valid: np.ndarray,
                       sk: np.ndarray | None) -> np.ndarray:
        """(C,) channels masked for all of block j: carriers (from the block's ``level`` and
        ``sigma`` over its ``valid`` cells) and channels whose spectral kurtosis departs
        from 1 in most of the block."""
        # Carriers: block level against its neighbours, in units of the level's own noise
        # (the median of n cells has sigma ~ 1.2533 sigma_cell / sqrt(n) for Gaussian noise).
        nvalid = np.maximum(valid.sum(axis=0), 1)
        lvl_sigma = 1.2533 * sigma / np.sqrt(nvalid)
        car = carrier_channels(level, lvl_sigma, self.cw, self.s.carrier_sigma)
        cmask = self.carriers.update(car, t_block)
        if sk is not None:
            skf = kurtosis_flags(sk, valid, self.s.kurtosis_sigma)
            persistent = skf.sum(axis=0) > 0.5 * np.maximum(valid.sum(axis=0), 1)
            cmask = cmask | persistent
        self.chan_mask[j] = cmask
        return cmask

    def narrowband(self, z: np.ndarray, w: np.ndarray) -> np.ndarray:
        """Cells SumThreshold flags in the narrowband residual (z, in noise units, minus
        its mean over neighbouring channels), among the cells ``w`` whose neighbourhood is
        quiet."""
        s = self.s
        mean, count = neighbour_mean(z, w, self.cw)
        quiet = mean * np.sqrt(np.maximum(count, 1.0)) < s.grow_sigma
        hp = np.where(w & quiet, z - mean, 0.0)
        st = sum_threshold(hp, np.zeros_like(w), 1, s.sumthreshold_chi1, self.st_f)
        st = sum_threshold(hp, st, 0, s.sumthreshold_chi1, self.st_t)
        return st & w

    def count_hours(self, t0: float, flags: np.ndarray):
        """Add a block's flags (rows from ``t0``) to the hourly counts."""
        times = t0 + self.cadence * np.arange(flags.shape[0])
        add_hours(self.quality, hour_quality(times, flags, self.cadence, self.group_of).items())

    def hours_before(self, t: float) -> list[tuple[float, list[float]]]:
        """Hand out (and forget) the hours that end by ``t``."""
        done = [(h, v) for h, v in self.quality.items() if h + 3600.0 <= t]
        for h, _ in done:
            del self.quality[h]
        return done

    def forget(self, keep_from: int):
        for k in [k for k in self.chan_mask if k < keep_from]:
            del self.chan_mask[k]
