"""Events as connected regions: the tracker, and the three paths that feed it.

``Tracker`` labels the cells above threshold as rows arrive, keeps the regions that hold
a seed, merges regions close in time and overlapping in frequency into one event, and
hands each event out as a ``Component`` once no later row can change it. Three paths
threshold their own maps into trackers:

* the **fine path** (bursts): the excess map in noise units, smoothed with a box of
  ``smooth_time_s`` x ``smooth_freq_mhz`` matched to Type III / L-burst scales, and
  thresholded with hysteresis (seeds at ``seed_sigma``, growing down to ``grow_sigma``);
* the **line path**: narrowband cells SumThreshold masked, joined across neighbouring
  channels (a swept transmitter becomes one line);
* the **slow path** (long events): coarse block levels against the slow baseline, a
  positive and a negative branch, thresholded in dB and in noise units.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from rxlog.constants import MAD_TO_SIGMA
from rxlog.detect.drift import PROFILE_MAX_ROWS
from rxlog.detect.grid import Grid
from rxlog.detect.settings import FOLLOW_FRACTION, LONG_EDGE_FRACTION, Settings


@dataclass
class Component:
    """Pixels of one finished event: absolute rows and columns, and field values there."""

    rows: np.ndarray
    cols: np.ndarray
    values: dict
    forced: bool = False
    # cells just before and after the event at its channels (one step either side, where
    # the buffer still held them), with the same fields: the samples a light-curve fit
    # needs around the peak of a burst that rises within one step
    around: tuple | None = None


class Tracker:
    """Connected components of a growing mask, emitted once no later row can change them.

    Rows are pushed in order. Components of the ``grow`` mask that contain a ``seed``
    cell are kept; kept components within ``gap_rows`` in time whose column ranges
    overlap (within ``merge_cols``) form one event. A group is finished when its last
    row is more than ``gap_rows`` before the newest row, or forced out once it spans
    ``max_rows``. Finished pixels leave the buffer, so memory holds only open events.
    """

    def __init__(self, n_cols: int, gap_rows: int, merge_cols: int, max_rows: int, fields: tuple,
                 col_map: np.ndarray | None = None, around_rows: int = 0):
        self.n_cols = n_cols
        # events up to this many rows also get the cells one row either side (Component.around)
        self.around_rows = around_rows
        # column coordinate used for the frequency overlap test: always-masked columns
        # collapse, so fragments of one burst either side of a masked range still merge
        self.col_map = np.arange(n_cols) if col_map is None else np.asarray(col_map)
        self.gap = max(0, int(gap_rows))
        self.merge_cols = max(0, int(merge_cols))
        self.max_rows = max(1, int(max_rows))
        self.names = fields
        self.row0 = 0
        self.grow = np.zeros((0, n_cols), dtype=bool)
        self.seed = np.zeros((0, n_cols), dtype=bool)
        self.vals = {k: np.zeros((0, n_cols), dtype=np.float32) for k in fields}

    def push(self, grow: np.ndarray, seed: np.ndarray, values: dict, final: bool = False) -> list[Component]:
        self.grow = np.concatenate([self.grow, grow & (True)], axis=0)
        self.seed = np.concatenate([self.seed, seed & grow], axis=0)
        for k in self.names:
            self.vals[k] = np.concatenate([self.vals[k], values[k].astype(np.float32)], axis=0)
        return self._collect(final)

    def finish(self) -> list[Component]:
        return self._collect(final=True)

    def _collect(self, final: bool) -> list[Component]:
        n = self.grow.shape[0]
        if n == 0:
            return []
        lab, nl = ndimage.label(self.grow, structure=np.ones((3, 3), dtype=bool))
        out: list[Component] = []
        if nl == 0:
            self._trim(n if final else n - 1)
            return out
        objs = ndimage.find_objects(lab)
        r0 = np.array([o[0].start for o in objs]); r1 = np.array([o[0].stop for o in objs])
        c0 = np.array([o[1].start for o in objs]); c1 = np.array([o[1].stop for o in objs])
        seeded = np.zeros(nl, dtype=bool)
        seeded[np.unique(lab[self.seed]) - 1] = True
        touching = r1 >= n   # may still grow into the next row
        drop = ~seeded & (~touching | final)
        keep_idx = np.flatnonzero(seeded)
        groups = self._groups(r0[keep_idx], r1[keep_idx], c0[keep_idx], c1[keep_idx])
        remove = list(np.flatnonzero(drop))
        for g in groups:
            members = keep_idx[g]
            g_start, g_end = r0[members].min(), r1[members].max() - 1
            done = final or g_end < n - 1 - self.gap
            forced = not done and (n - g_start) >= self.max_rows
            if not (done or forced):
                continue
            rows, cols = [], []
            for m in members:
                sl = objs[m]
                rr, cc = np.nonzero(lab[sl] == m + 1)
                rows.append(rr + sl[0].start); cols.append(cc + sl[1].start)
            rows = np.concatenate(rows); cols = np.concatenate(cols)
            order = np.lexsort((cols, rows))
            rows, cols = rows[order], cols[order]
            vals = {k: self.vals[k][rows, cols] for k in self.names}
            around = None
            if g_end - g_start + 1 <= self.around_rows:
                around = self._around(rows, cols, lab, members)
            out.append(Component(rows + self.row0, cols, vals, forced=forced, around=around))
            remove.extend(members)
        for m in remove:
            sl = objs[m]
            sub = lab[sl] == m + 1
            self.grow[sl][sub] = False
            self.seed[sl][sub] = False
        if final:
            self._trim(n)
        else:
            still = self.grow.any(axis=1)
            first = int(np.argmax(still)) if still.any() else n - 1
            self._trim(min(first, n - 1) - int(self.around_rows > 0))
        out.sort(key=lambda c: (int(c.rows.min()), int(c.cols.min())))
        return out

    def _around(self, rows, cols, lab, members) -> tuple:
        """(rows, cols, values) of the cells one row before or after a cell of the event,
        at the same channel, that are not part of it and are still in the buffer."""
        n = self.grow.shape[0]
        rr = np.concatenate([rows - 1, rows + 1])
        cc = np.concatenate([cols, cols])
        ok = (rr >= 0) & (rr < n)
        rr, cc = rr[ok], cc[ok]
        own = np.isin(lab[rr, cc], members + 1)
        rr, cc = rr[~own], cc[~own]
        if len(rr):
            u = np.unique(rr * self.n_cols + cc)
            rr, cc = u // self.n_cols, u % self.n_cols
        return rr + self.row0, cc, {k: self.vals[k][rr, cc] for k in self.names}

    def _groups(self, r0, r1, c0, c1) -> list[np.ndarray]:
        k = len(r0)
        if k == 0:
            return []
        if k == 1:
            return [np.array([0])]
        gap_t = np.maximum(r0[:, None] - r1[None, :], r0[None, :] - r1[:, None])   # rows between
        a, b = self.col_map[c0], self.col_map[c1 - 1]
        ov_f = (a[:, None] <= b[None, :] + self.merge_cols) & (a[None, :] <= b[:, None] + self.merge_cols)
        adj = (gap_t <= self.gap) & ov_f
        ii, jj = np.nonzero(np.triu(adj, 1))
        graph = coo_matrix((np.ones(len(ii)), (ii, jj)), shape=(k, k))
        ncomp, labels = connected_components(graph, directed=False)
        return [np.flatnonzero(labels == i) for i in range(ncomp)]

    def _trim(self, start: int):
        if start <= 0:
            return
        self.grow = self.grow[start:]
        self.seed = self.seed[start:]
        for k in self.names:
            self.vals[k] = self.vals[k][start:]
        self.row0 += start


def unmasked_before(always: np.ndarray) -> np.ndarray:
    """Column coordinate for the tracker's frequency overlap test: the number of columns
    not ``always`` masked before each, so fragments of one burst either side of a masked
    range still merge."""
    return np.cumsum(~always) - (~always).astype(np.int64)


# ------------------------------------------------------------------------------------
# The fine path
# ------------------------------------------------------------------------------------

@dataclass
class ExcessBlock:
    """One block of the masked excess map, as the fine path thresholds it."""

    z: np.ndarray           # excess in noise units, 0 where masked
    w: np.ndarray           # float32: 1 where the cell counts
    ex: np.ndarray          # excess in dB, 0 where masked
    sk: np.ndarray          # bool: spectral kurtosis departs from 1 there
    unseen: np.ndarray      # bool: masked as an impulse, or no data

    @property
    def n(self) -> int:
        return self.z.shape[0]


def smoothing_box(grid: Grid, s: Settings) -> tuple[int, int]:
    """Rows and channels of the fine path's smoothing box (never longer than a block)."""
    T = min(grid.rows_per_block, max(1, int(round(s.smooth_time_s / grid.cadence))))
    F = max(1, int(round(s.smooth_freq_mhz / grid.chan_mhz)))
    return T, F


FINE_FIELDS = ("ex", "sig", "raw", "sk", "unseen")


class FinePath:
    """Smoothing, hysteresis and components of the excess map, one block at a time
    (block j needs blocks j - 1 and j + 1 for the smoothing box)."""

    def __init__(self, grid: Grid, s: Settings):
        self.s = s
        self.n_chan = grid.n_chan
        self.T, self.F = smoothing_box(grid, s)
        cad = grid.cadence
        self.blocks: dict[int, ExcessBlock] = {}
        self.tracker = Tracker(grid.n_chan, round(s.merge_gap_s / cad), round(s.merge_freq_mhz / grid.chan_mhz),
                               round(s.max_event_s / cad), FINE_FIELDS, col_map=unmasked_before(grid.always),
                               around_rows=PROFILE_MAX_ROWS - 2)     # with its 2 extra steps

    def add(self, j: int, block: ExcessBlock):
        self.blocks[j] = block

    def components(self, j: int) -> list[Component]:
        """Threshold block ``j`` (blocks j - 1 and j + 1 added, where they exist) and
        return the events that finished."""
        s = self.s
        m = self.blocks[j]
        n = m.n
        before = self.T // 2
        zw, w, ew = self._with_context(j, "z"), self._with_context(j, "w"), self._with_context(j, "ex")

        def box(x):
            y = ndimage.uniform_filter1d(x, self.F, axis=1, mode="constant")
            if self.T > 1:
                y = ndimage.uniform_filter1d(y, self.T, axis=0, mode="constant", origin=0)
            return y[before:before + n]

        nbox = self.F * self.T
        num, den, exs = box(zw), box(w), box(ew)

        with np.errstate(invalid="ignore", divide="ignore"):
            sig = np.where(den > 0, num * math.sqrt(nbox) / np.sqrt(den), 0.0).astype(np.float32)
            ex_s = np.where(den > 0, exs / den, 0.0).astype(np.float32)
        # Correlated noise (overlapping windows, resampled grids) widens the smoothed
        # distribution: rescale by its robust width, never below the independent case.
        wc = m.w[:, ::4] > 0
        if wc.sum() > 100:
            scale = MAD_TO_SIGMA * float(np.median(np.abs(sig[:, ::4][wc])))
            sig /= min(max(scale, 1.0), 4.0)
        enough = den * nbox >= 0.25 * nbox
        grow = (sig >= s.grow_sigma) & enough
        seed = grow & (sig >= s.seed_sigma) & (ex_s >= s.min_peak_db)
        return self.tracker.push(grow, seed, {"ex": ex_s, "sig": sig, "raw": m.ex,
                                              "sk": m.sk.astype(np.float32), "unseen": m.unseen})

    def _with_context(self, j: int, key: str) -> np.ndarray:
        """Field ``key`` of block j with the rows the smoothing box reaches into from the
        blocks either side (zeros where there is none)."""
        before = self.T // 2
        after = self.T - 1 - before
        parts = []
        p = self.blocks.get(j - 1)
        if before:
            if p is not None and p.n >= before:
                parts.append(getattr(p, key)[-before:])
            else:
                parts.append(np.zeros((before, self.n_chan), dtype=np.float32))
        parts.append(getattr(self.blocks[j], key))
        q = self.blocks.get(j + 1)
        if after:
            if q is not None and q.n >= after:
                parts.append(getattr(q, key)[:after])
            else:
                parts.append(np.zeros((after, self.n_chan), dtype=np.float32))
        return np.concatenate(parts, axis=0)

    def finish(self) -> list[Component]:
        return self.tracker.finish()

    def forget(self, keep_from: int):
        for k in [k for k in self.blocks if k < keep_from]:
            del self.blocks[k]


# ------------------------------------------------------------------------------------
# The line path
# ------------------------------------------------------------------------------------

class LinePath:
    """Narrowband cells SumThreshold took out, joined into lines: a sweep across the band
    (an ionosonde) is reported as an rfi event; a line that stays put is not (see
    LINE_MIN_MHZ)."""

    def __init__(self, grid: Grid, s: Settings):
        cad = grid.cadence
        self.tracker = Tracker(grid.n_chan, round(s.merge_gap_s / cad), round(s.merge_freq_mhz / grid.chan_mhz),
                               round(s.max_event_s / cad), FINE_FIELDS, col_map=unmasked_before(grid.always))
        self.join = max(1, int(round(0.1 / grid.chan_mhz)))
        self.done: list[Component] = []

    def add(self, st: np.ndarray, excess: np.ndarray, z: np.ndarray):
        """One block's SumThreshold cells ``st``, with the excess (dB and noise units) there."""
        join = ndimage.maximum_filter1d(st.view(np.uint8), 2 * self.join + 1, axis=1).view(bool)
        zero = np.zeros_like(excess)
        self.done += self.tracker.push(join, st, {"ex": np.where(st, excess, 0.0), "sig": np.where(st, z, 0.0),
                                                  "raw": np.where(st, excess, 0.0), "sk": zero, "unseen": zero})

    def take(self) -> list[Component]:
        """The lines finished since the last call."""
        out, self.done = self.done, []
        return out

    def finish(self) -> list[Component]:
        return self.tracker.finish()


# ------------------------------------------------------------------------------------
# The slow path
# ------------------------------------------------------------------------------------

class SlowPath:
    """Long events on coarse channels, one block at a time: ``slow+`` above the slow
    baseline, ``slow-`` below it (fadeouts). Each event is cut to where its excess
    exceeds LONG_EDGE_FRACTION of its peak (``trim_tails``)."""

    def __init__(self, grid: Grid, s: Settings):
        self.s = s
        gap_b = max(1, int(round(s.merge_gap_s / grid.block_s)))
        g_map = unmasked_before(grid.g_always)
        fields = ("ex", "sig", "tx")
        self.pos = Tracker(grid.n_groups, gap_b, 1, 10 ** 9, fields, col_map=g_map)
        self.neg = Tracker(grid.n_groups, gap_b, 1, 10 ** 9, fields, col_map=g_map)
        # the coarse channels in a long event at the last block, per sign
        self.under_way = {1: np.zeros(grid.n_groups, dtype=bool), -1: np.zeros(grid.n_groups, dtype=bool)}

    def add(self, e: np.ndarray, sg: np.ndarray, tx: np.ndarray) -> list[tuple[str, Component]]:
        """One block's coarse excess (dB), its significance and texture, each (1, G)."""
        s = self.s
        out = []
        for sign, tracker, tag in ((1, self.pos, "slow+"), (-1, self.neg, "slow-")):
            es, ss = sign * e, sign * sg
            # hysteresis in time: an event under way is followed down to FOLLOW_FRACTION of
            # the extent threshold, into the slow end of a decay or a recovery
            floor = np.where(self.under_way[sign], FOLLOW_FRACTION * s.slow_grow_db, s.slow_grow_db)
            grow = (es >= floor) & (ss >= s.slow_grow_sigma)
            self.under_way[sign] = grow[0]
            seed = grow & (es >= s.slow_seed_db) & (ss >= s.slow_seed_sigma)
            out += [(tag, trim_tails(c, sign)) for c in tracker.push(grow, seed, {"ex": e, "sig": sg, "tx": tx})]
        return out

    def open_since(self) -> int | None:
        """The first block of the long events still open (None: none is)."""
        rows = [t.row0 + int(np.argmax(t.grow.any(axis=1))) for t in (self.pos, self.neg) if t.grow.any()]
        return min(rows) if rows else None

    def finish(self) -> list[tuple[str, Component]]:
        return ([("slow+", trim_tails(c, 1)) for c in self.pos.finish()]
                + [("slow-", trim_tails(c, -1)) for c in self.neg.finish()])


EDGE_SMOOTH = 3        # blocks (1.5 min of 30-s blocks): a fadeout's depth at its cusp, not one block's noise


def trim_tails(c: Component, sign: int) -> Component:
    """The event without the blocks before its rise and after its decay where its mean
    excess over its channels stays under LONG_EDGE_FRACTION of its peak: a recovery's slow
    tail, which the thresholds in dB would follow for a long time after the event itself
    has ended. A rise (a continuum, a storm) holds a plateau with swells: its height is the
    median of the blocks above half its highest; a dip (a fadeout) has a sudden onset and
    a slow recovery: its height is its depth, the profile smoothed over EDGE_SMOOTH blocks."""
    r = c.rows - c.rows.min()
    n_cols = len(np.unique(c.cols))
    prof = np.bincount(r, weights=sign * c.values["ex"].astype(np.float64)) / max(n_cols, 1)
    if sign > 0:
        height = float(np.median(prof[prof >= 0.5 * prof.max()]))
    else:
        n = min(EDGE_SMOOTH, len(prof))
        height = float(np.convolve(prof, np.ones(n) / n, mode="valid").max())
    above = np.flatnonzero(prof >= LONG_EDGE_FRACTION * height)
    keep = (r >= above[0]) & (r <= above[-1])
    if keep.all():
        return c
    return Component(c.rows[keep], c.cols[keep], {k: v[keep] for k, v in c.values.items()}, forced=c.forced)
