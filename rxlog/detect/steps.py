"""Switched broadband noise: steps of the band's median level from one time step to the next.

An appliance, a switching power supply, a plasma or LED driver switched on raises the
whole band by a fraction of a dB to several dB *within one time step*, and it drops as
suddenly when switched off, minutes or hours later, at any hour (../shared/domain.md,
common practice). Natural continua do not: a Type IV rises over minutes, a fadeout sets
in over minutes (it follows the flare's X-ray rise), a Type III passes each frequency in
seconds. So the level that tells them apart is the median over the band of each row's
power (dB): robust to anything narrower than half the band, and with a noise of about
1.25 sigma_cell / sqrt(channels), a few thousandths of a dB.

``BandSteps`` keeps that median per row (bounded: three hold windows) and finds the
steps in it: the median of the next ``hold`` rows differs from the median of the
``hold`` rows before by STEP_MIN_DB and STEP_SIGMA row-noise units or more, and the
change happens within two rows (a sweeping receiver samples its sub-bands at different
moments of a row, so a switch can light part of one row). Each step is kept (time,
jump in dB) for a day at most, so features can ask for the steps near an event's edges.
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage

from rxlog.constants import MAD_TO_SIGMA
from rxlog.detect.grid import Grid
from rxlog.detect.settings import STEP_ABRUPT, STEP_HOLD_S, STEP_MIN_DB, STEP_SIGMA

KEEP_S = 86400.0        # steps older than this are forgotten (a long event lasts hours)


def _upper_median(x: np.ndarray) -> np.ndarray:
    """The median along the last axis, the upper of the two middle values for an even
    count (a partition, without np.median's overheads: this runs once per block)."""
    k = x.shape[-1] // 2
    return np.partition(x, k, axis=-1)[..., k]


class BandSteps:
    """Steps of the per-row band median of one segment, found as the rows arrive."""

    def __init__(self, g: Grid):
        self.t0, self.cad = g.t0, g.cadence
        # rows either side of a step (odd, so a window's median is one of its rows); at
        # most 255 however fine the cadence
        self.hold = int(min(max(3, round(STEP_HOLD_S / g.cadence)), 255)) | 1
        self.m = np.zeros(0, dtype=np.float64)     # band median (dB) of rows row0 ..
        self.row0 = 0
        self.next_r = 0                             # the next row a step may sit at
        self.steps: list[tuple[float, float]] = []  # (time of the first row after the step, jump dB)

    def add(self, power: np.ndarray, use: np.ndarray):
        """The next rows: ``power`` (dB) and the cells ``use`` to take the median over
        (data, not masked). Every channel counts: a comb of switching harmonics
        lifts some channels and not others, and a subsample can fall between its teeth."""
        # the channels usable in every row of the block (a plain median is many times
        # faster than one that skips NaNs); too few of them: no level for these rows
        cols = use.all(axis=0)
        med = np.full(power.shape[0], np.nan)
        if cols.sum() >= max(8, 0.25 * use.shape[1]):
            med = _upper_median(power[:, cols]).astype(np.float64)
        self.m = np.concatenate([self.m, med])
        self._scan()

    def _scan(self):
        """Steps at the rows whose hold windows either side have arrived."""
        h, m = self.hold, self.m
        end = self.row0 + len(m) - h                 # last row whose post window is complete + 1
        lo = max(self.next_r, self.row0 + h + 1)
        if end > lo:
            # win[i]: median of rows row0+i .. +h-1 (NaN where a row without a level is among them)
            gap = np.isnan(m)
            win = ndimage.median_filter(np.where(gap, 0.0, m), size=h, origin=-(h // 2), mode="nearest")
            if gap.any():
                win[ndimage.maximum_filter1d(gap.view(np.uint8), h, origin=-(h // 2), mode="nearest") > 0] = np.nan
            d = np.diff(m)
            d = d[np.isfinite(d)]
            if len(d) >= 8:
                sigma = MAD_TO_SIGMA * float(_upper_median(np.abs(d - _upper_median(d)))) / np.sqrt(2.0)
                r = np.arange(lo, end)
                i = r - self.row0
                pre, post = win[i - 1 - h], win[i]                   # rows r-1-h .. r-2, and r .. r+h-1
                jump = post - pre
                # the change happens between rows r-2 and r (two rows: the one the switch
                # fell in may be lit in part)
                fast = m[i] - m[i - 2]
                big = np.abs(jump) >= np.maximum(STEP_MIN_DB, STEP_SIGMA * sigma)
                abrupt = np.sign(fast) == np.sign(jump)
                abrupt &= np.abs(fast) >= STEP_ABRUPT * np.abs(jump)
                hit = np.flatnonzero(big & abrupt & np.isfinite(jump))
                self._keep(r[hit], jump[hit])
            self.next_r = end
        keep_from = max(0, len(m) - 3 * h - 2)
        self.m = m[keep_from:]
        self.row0 += keep_from

    def _keep(self, rows: np.ndarray, jumps: np.ndarray):
        """One step per run of neighbouring candidate rows: the largest jump among them."""
        for r, j in zip(rows, jumps):
            t = self.t0 + float(r) * self.cad
            if self.steps and t - self.steps[-1][0] <= 2 * self.cad and np.sign(j) == np.sign(self.steps[-1][1]):
                if abs(j) > abs(self.steps[-1][1]):
                    self.steps[-1] = (t, float(j))
                continue
            self.steps.append((t, float(j)))
        if self.steps:
            newest = self.steps[-1][0]
            self.steps = [s for s in self.steps if s[0] >= newest - KEEP_S]

    def between(self, t0: float, t1: float, sign: int) -> float:
        """The largest jump (dB, > 0) of a step of this sign from ``t0`` to ``t1``; 0 if none."""
        best = 0.0
        for ts, j in self.steps:
            if t0 <= ts <= t1 and sign * j > best:
                best = sign * j
        return best
