"""The RFI mask: which cells of a dynamic spectrum are man-made interference.

Four sources of flags, each cheap and local so a block of rows is masked the same way
however the rows arrive:

* **Static ranges** from ``[rfi] static_ranges``: frequency ranges, optionally only
  between two UTC hours (the defaults and their source are in rxlog.detect.settings).
* **Carriers** found per block: a channel whose block median stands above the running
  median of its neighbours (``carrier_width_mhz`` either side) by more than
  ``carrier_sigma`` noise units. A channel that has been a carrier in more than
  ``carrier_fraction`` of recent blocks (exponential memory of ``carrier_memory_s``) is
  masked even while it fades: the mask *learns* the station's carriers.
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

Impulsive broadband noise and swept ionosonde chirps are not masked here: they are
found as events and classified ``rfi`` by the detector, so a reviewer sees what was
thrown away.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import ndimage

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


class CarrierMemory:
    """Exponential memory of how often each channel was a carrier, per block.

    ``update(is_carrier)`` ages the memory by one block (weight alpha = block_s /
    memory_s) and returns the channels to mask for this block: carriers now, or
    carriers in more than ``fraction`` of the remembered blocks.
    """

    def __init__(self, n_chan: int, block_s: float, memory_s: float, fraction: float):
        self.alpha = min(1.0, block_s / max(memory_s, block_s))
        self.fraction = fraction
        self.state = np.zeros(n_chan, dtype=np.float64)

    def update(self, is_carrier: np.ndarray) -> np.ndarray:
        self.state += self.alpha * (is_carrier.astype(np.float64) - self.state)
        return is_carrier | (self.state > self.fraction)


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
    scale = 1.4826 * np.nanmedian(np.abs(d)) if np.isfinite(d).any() else np.nan
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


def hour_quality(times: np.ndarray, flags: np.ndarray, cadence_s: float) -> dict[float, list[float]]:
    """Per UTC hour start: [masked cells, covered cells, gap seconds, covered seconds].

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
    return out
