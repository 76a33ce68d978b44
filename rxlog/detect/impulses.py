"""Impulses, impulse storms and pulse trains: broadband interference one time step long.

Lightning sferics, power-line arcing and electric fences light the whole band for a
millisecond or so; a sweeping receiver catches such a pulse in the one sub-band it is
dwelling on. The impulse test runs on each block of the excess map before smoothing
(smoothing over seconds would weld a bunch of impulses into one "burst"):

* an **anchor** is a whole sub-band lit for one time step with the steps either side
  dark, or lit while the neighbouring sub-bands, sampled a dwell earlier or later, stay
  dark (``Impulses.find``);
* anchors closer than ``impulse_gap_s`` fold into one **storm**, reported as one ``rfi``
  event when it ends (``Impulses.finished``);
* a storm whose last pulses (TRAIN_PULSES) keep a constant period is a **pulse train**
  (an electric fence): its next pulses are masked where they fall, also under a burst
  (``Impulses.train_cells``), so a pulse in a burst's strongest step does not move the
  burst's arrival times.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage

from rxlog.constants import MAD_TO_SIGMA
from rxlog.detect.background import nanmedian
from rxlog.detect.grid import Grid
from rxlog.detect.settings import TRAIN_PULSES, Settings


@dataclass
class Storm:
    """Impulses closer than ``impulse_gap_s`` to the one before, as running totals. Rows
    count from the segment's first; sub-bands by index."""

    first: int
    first_sb: int
    last: int
    last_sb: int
    sb_lo: int
    sb_hi: int
    peak_row: int
    peak_sb: int
    n: int = 0
    rows: set = field(default_factory=set)
    peak: float = -1.0                                  # significance of the strongest impulse
    peak_db: float = 0.0                                # its mean excess, dB
    mids: list = field(default_factory=list)            # mid-times of the dwells that caught the last pulses


def group_significance(z: np.ndarray, w: np.ndarray, starts: np.ndarray) -> np.ndarray:
    """Per row and channel group (contiguous, from ``starts``): significance of the mean excess."""
    zw = np.add.reduceat(np.where(w, z, 0.0), starts, axis=1)
    nw = np.add.reduceat(w.astype(np.float32), starts, axis=1)
    return np.where(nw > 0, zw / np.sqrt(np.maximum(nw, 1.0)), 0.0).astype(np.float32)


class Impulses:
    """The impulse test of one segment and its open storm."""

    def __init__(self, grid: Grid, s: Settings):
        self.g = grid
        self.sigma = s.impulse_sigma
        self.gap_s = s.impulse_gap_s
        self.storm: Storm | None = None          # the impulse storm still open
        self.storms_done: list[Storm] = []
        self.carry_anchor = None                 # the zone of anchors in the last step of the previous block
        self.prev = None                         # (sub-band, group) significances of the previous block

    # -- finding impulses ----------------------------------------------------------------
    def find(self, j: int, z: np.ndarray, w: np.ndarray, excess: np.ndarray, good: np.ndarray,
             next_rows: tuple | None) -> np.ndarray:
        """Cells of impulses in block j (excess ``z`` in noise units where ``w``; ``good``:
        cells with data and a background; ``next_rows``: (z, w) of the first rows of the
        next block, None at the end of the segment).

        An anchor is a whole sub-band lit for one time step with the steps either side
        dark (below 0.3 of it), or lit with the neighbouring sub-bands dark (below 0.3 of
        it) in the same step (``_side_anchors``); for the first kind, in the anchor's step
        and the next, any 0.25-MHz group within 0.3 MHz of its sub-band lit for at most
        two steps is part of the same impulse (channels near a sub-band edge can straddle
        two dwells). A Type III lasts longer than that at every frequency (its decay is
        ~2 s at 20 MHz), so it is not taken. Anchors are added to the open storm.
        """
        g = self.g
        S = group_significance(z, w, g.sb_start)
        G = group_significance(z, w, g.g_start)
        prev_s, prev_g = (self.prev if self.prev is not None else
                          (np.zeros((1, S.shape[1]), np.float32), np.zeros((1, G.shape[1]), np.float32)))
        self.prev = (S, G)
        nxt_s, nxt_g = self._next_significance(next_rows)
        # Robust widths about the median (a pulse train lifts the fast background a little,
        # so dark sub-bands sit slightly below zero: the spread, not the offset, is the noise).
        scale_s = min(max(MAD_TO_SIGMA * float(np.median(np.abs(S - np.median(S)))), 1.0), 4.0)
        scale_g = min(max(MAD_TO_SIGMA * float(np.median(np.abs(G - np.median(G)))), 1.0), 4.0)
        es = np.concatenate([prev_s[-1:], S, nxt_s[:1]], axis=0) / scale_s
        Sn = es[1:-1]
        lit_t = Sn >= self.sigma
        anchor = lit_t & (es[:-2] <= 0.3 * Sn) & (es[2:] <= 0.3 * Sn)
        if g.n_sub > 1:
            p2 = prev_s[-2:] if prev_s.shape[0] >= 2 else np.concatenate([np.zeros_like(prev_s[:1]), prev_s[-1:]])
            e2 = np.concatenate([p2, S, nxt_s[:2]], axis=0) / scale_s            # rows -2 .. n+1
            side, cells = self._side_anchors(e2, Sn, lit_t, z, w, good)
        else:
            side, cells = np.zeros_like(anchor), np.zeros((z.shape[0], g.n_chan), dtype=bool)
        if side.any():
            self._record(j, side & ~anchor, w, excess, Sn)
        cells |= self._anchor_cells(j, anchor, G, prev_g, nxt_g, scale_g, w, excess, Sn)
        return cells & w

    def _next_significance(self, next_rows: tuple | None) -> tuple[np.ndarray, np.ndarray]:
        """Group significances of the first two rows of the next block; zeros at the end
        of the segment."""
        g = self.g
        zs = (np.zeros((2, g.n_sub), np.float32), np.zeros((2, len(g.g_start)), np.float32))
        if next_rows is None:
            return zs
        z, w = next_rows
        out_s = group_significance(z, w, g.sb_start)
        out_g = group_significance(z, w, g.g_start)
        if z.shape[0] < 2:
            out_s = np.concatenate([out_s, zs[0][:1]]); out_g = np.concatenate([out_g, zs[1][:1]])
        return out_s, out_g

    def _side_anchors(self, e2: np.ndarray, Sn: np.ndarray, lit_t: np.ndarray, z: np.ndarray, w: np.ndarray,
                      good: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Sub-bands lit in a step while their neighbours stay dark ((n, sub-bands)), and
        their cells with the channels either side of the sub-band edges (they can
        straddle two dwells). ``e2``: sub-band significances of rows -2 .. n+1.

        A short signal caught by a sweep lights one sub-band while its neighbours, sampled
        a dwell earlier or later, stay dark, however many steps the pattern lasts; a
        natural burst is continuous across the sub-band edge (a Type III reaches the next
        sub-band within its decay time), so it lights the neighbours too.
        """
        g = self.g
        n, nsb = Sn.shape
        nw = np.add.reduceat(w.astype(np.float32), g.sb_start, axis=1)
        has = nw >= np.maximum(4, 0.1 * (g.sb_stop - g.sb_start))[None, :]
        dark_or_none = np.ones_like(lit_t)
        seen = np.zeros_like(lit_t)
        for d in (-1, 1):                  # the two neighbours
            nb = np.clip(np.arange(nsb) + d, 0, nsb - 1)
            valid = has[:, nb] & (np.arange(nsb) + d >= 0)[None, :] & (np.arange(nsb) + d < nsb)[None, :]
            dark_or_none &= ~valid | (Sn[:, nb] <= 0.3 * Sn)
            seen |= valid
        lit = e2 >= self.sigma

        def lit_at(k):                      # lit k steps from each row of the block
            return lit[2 + k:2 + k + n]

        # the lit run through the step is at most two steps long (a slow Type II lane
        # stays in a sub-band for many steps)
        short_run = ~(lit_at(-1) & lit_at(1)) & ~(lit_at(-1) & lit_at(-2)) & ~(lit_at(1) & lit_at(2))
        # ... unless the sub-band is lit evenly from edge to edge with its neighbours dark:
        # a train of pulses a little slower than the sweep (an electric fence) lands in
        # the same dwell for several steps; a slow lane fills only part of a sub-band.
        filled = self._filled(z, w, good)
        short_run |= filled
        # Only between two neighbours: at the band's edge sub-bands a drifting burst can
        # light one sub-band before it reaches the only neighbour.
        interior = np.zeros(nsb, dtype=bool)
        interior[1:-1] = True
        nb_ok = np.zeros_like(lit_t)
        nb_ok[:, 1:-1] = has[:, :-2] & has[:, 2:]
        side = lit_t & seen & dark_or_none & nb_ok & interior[None, :] & short_run
        side |= self._band_edges(e2, Sn, lit_t, filled, has)
        edge = side[:, g.sb_id]
        grow = max(1, int(round(0.1 / g.chan_mhz)))
        edge = ndimage.maximum_filter1d(edge.view(np.uint8), 2 * grow + 1, axis=1).view(bool)
        return side, edge

    def _band_edges(self, e2: np.ndarray, Sn: np.ndarray, lit_t: np.ndarray, filled: np.ndarray,
                    has: np.ndarray) -> np.ndarray:
        """Side anchors in the two sub-bands at the band's edges.

        An edge sub-band lit evenly with its only neighbour dark in this step, and in
        the step after either the neighbour still dark or this sub-band dark again: a
        burst drifting in across the band's top edge reaches the neighbour within a
        step and stays in both for its decay time; a train of pulses moves on from one
        dwell to the next. Natural bursts drift down, so at the bottom edge one comes
        from the neighbour: there it must also have been dark the step before.
        """
        g = self.g
        n, nsb = Sn.shape
        out = np.zeros_like(lit_t)
        top = int(np.argmax([g.f_mhz[a] for a in g.sb_start]))
        for b, nb in ((0, 1), (nsb - 1, nsb - 2)):
            def dark(k, c):
                return e2[2 + k:2 + k + n, c] <= 0.3 * Sn[:, b]

            quiet = dark(0, nb) & (dark(1, nb) | dark(1, b))
            if b != top:
                quiet &= dark(-1, nb)
            out[:, b] |= lit_t[:, b] & filled[:, b] & has[:, nb] & quiet
        return out

    def _anchor_cells(self, j: int, anchor: np.ndarray, G: np.ndarray, prev_g: np.ndarray, nxt_g: np.ndarray,
                      scale_g: float, w: np.ndarray, excess: np.ndarray, Sn: np.ndarray) -> np.ndarray:
        """Cells of the anchors lit in one step with the steps either side dark: their
        sub-bands, and in the anchor's step and the next the coarse groups within 0.3 MHz
        lit for at most two steps (an anchor in the block's last step carries over)."""
        g = self.g
        n = anchor.shape[0]
        cells = np.zeros((n, g.n_chan), dtype=bool)
        rows = list(np.flatnonzero(anchor.any(axis=1)))
        # Where an anchor's groups may join it: its own sub-band and 0.3 MHz either side.
        reach = max(1, int(round(0.3 / g.chan_mhz)))
        zone = ndimage.maximum_filter1d(anchor[:, g.sb_id].view(np.uint8), 2 * reach + 1, axis=1).view(bool)
        carry = self.carry_anchor            # the zone of anchors in the last step of the previous block
        self.carry_anchor = zone[-1].copy() if (rows and rows[-1] == n - 1) else None
        if not (rows or carry is not None):
            return cells
        pg = prev_g[-2:] if prev_g.shape[0] >= 2 else np.concatenate([np.zeros_like(prev_g[:1]), prev_g[-1:]])
        eg = np.concatenate([pg, G, nxt_g[:2]], axis=0) / scale_g            # rows -2 .. n+1
        cells |= anchor[:, g.sb_id]
        self._record(j, anchor, w, excess, Sn)
        # anchors at rows r = -1 (carried) .. n-1; eg row index of step r is r + 2
        pk = np.maximum(eg[1:n + 2], eg[2:n + 3])          # the anchor's step and the next
        short = (pk >= 0.5 * self.sigma) & (eg[0:n + 1] <= 0.3 * pk) & (eg[3:n + 4] <= 0.3 * pk)
        is_anchor = np.zeros(n + 1, dtype=bool)
        is_anchor[0] = carry is not None
        is_anchor[np.asarray(rows, dtype=np.int64) + 1] = True
        short &= is_anchor[:, None]
        gcells = short[:, g.groups]                                     # (n + 1, C): rows -1 .. n-1
        gcells &= np.concatenate([(carry if carry is not None else np.zeros(g.n_chan, bool))[None, :], zone])
        cells |= gcells[1:] | gcells[:-1]                                # the anchor's step and the next
        return cells

    def _filled(self, z: np.ndarray, w: np.ndarray, good: np.ndarray) -> np.ndarray:
        """Per row and sub-band: lit evenly from edge to edge. Every eighth of the sub-band
        that has data (4 channels or more; two such eighths at least) has a mean excess of 0.7
        of their mean or more. A pulse's spectrum is nearly flat across one dwell (its
        f^-1.5 slope changes it by under 20 % over 2 MHz); a lane or a burst's edge is not."""
        g = self.g
        nq = np.add.reduceat(w.astype(np.float32), g.q_start, axis=1)
        Q = np.add.reduceat(np.where(w, z, 0.0), g.q_start, axis=1) / np.maximum(nq, 1.0)   # mean excess / noise
        has = nq >= 4
        nsb = g.n_sub
        k = np.zeros((Q.shape[0], nsb), np.float32)
        tot = np.zeros_like(k)
        np.add.at(k.T, g.q_owner, has.T.astype(np.float32))
        np.add.at(tot.T, g.q_owner, np.where(has, Q, 0.0).T)
        mean = tot / np.maximum(k, 1.0)
        weak = has & (Q < 0.7 * mean[:, g.q_owner])
        any_weak = np.zeros_like(k, dtype=bool)
        np.logical_or.at(any_weak.T, g.q_owner, weak.T)
        # ... and it stops at the sub-band's edges: just past an edge (``sb_beside``) the
        # neighbour's median is under a quarter of it. A lane as wide as a sub-band is
        # still half as bright there.
        spills = np.zeros_like(k, dtype=bool)
        checked = np.zeros_like(k, dtype=bool)
        for b, side in enumerate(g.sb_beside):
            for cols in side:
                ww = good[:, cols]
                ok = ww.sum(axis=1) >= 4
                with np.errstate(all="ignore"):
                    out = np.nan_to_num(nanmedian(np.where(ww, z[:, cols], np.nan), axis=1))
                checked[:, b] |= ok
                spills[:, b] |= ok & (out > 0.25 * mean[:, b])
        return (k >= 2) & ~any_weak & (mean > 0) & checked & ~spills

    # -- storms --------------------------------------------------------------------------
    def _record(self, j: int, at: np.ndarray, w: np.ndarray, excess: np.ndarray, Sn: np.ndarray):
        """Add the impulses ``at`` (rows of block j x sub-bands) to the storms, with their
        significance and mean excess (dB)."""
        rr, bb = np.nonzero(at)
        if not len(rr):
            return
        g = self.g
        lit = np.add.reduceat(w.astype(np.float32), g.sb_start, axis=1)[rr, bb]
        exs = np.add.reduceat(np.where(w, excess, 0.0), g.sb_start, axis=1)[rr, bb]
        self._add(j * g.rows_per_block + rr, bb, Sn[rr, bb], np.where(lit > 0, exs / np.maximum(lit, 1), 0.0))

    def _add(self, rows, sbs, sig, db):
        """Fold impulses (in time order) into storms: impulses closer than
        ``impulse_gap_s`` belong to one storm, kept as running totals."""
        g = self.g
        gap = self.gap_s / g.cadence
        order = np.lexsort((sbs, rows))
        for r, b, s, d in zip(rows[order], sbs[order], sig[order], db[order]):
            st = self.storm
            if st is not None and r - st.last > gap:
                self.storms_done.append(st)
                st = None
            if st is None:
                st = self.storm = Storm(first=r, first_sb=b, last=r, last_sb=b, sb_lo=b, sb_hi=b,
                                        peak_row=r, peak_sb=b)
            if g.n_sub > 1:        # mid-time of the dwell that caught it, from the segment start
                st.mids.append(r * g.cadence + float(g.offsets[g.sb_start[b]]) + g.slot / 2)
                del st.mids[:-TRAIN_PULSES]
            st.last, st.last_sb, st.n = r, b, st.n + 1
            st.sb_lo, st.sb_hi = min(st.sb_lo, b), max(st.sb_hi, b)
            if len(st.rows) < 100000:
                st.rows.add(int(r))
            if s > st.peak:
                st.peak, st.peak_row, st.peak_sb, st.peak_db = float(s), r, b, float(d)

    def finished(self, final: bool, next_row: int) -> list[Storm]:
        """Storms whose gap has passed before row ``next_row`` (all of them at the end of
        the segment)."""
        gap = self.gap_s / self.g.cadence
        if self.storm is not None and (final or next_row - self.storm.last > gap):
            self.storms_done.append(self.storm)
            self.storm = None
        out, self.storms_done = self.storms_done, []
        return out

    def absorb(self, f: dict) -> bool:
        """A pulse left over in one dwell (one sub-band, a step or two) while an impulse
        storm is open joins that storm instead of becoming an event of its own."""
        st, cad = self.storm, self.g.cadence
        if st is None or not (f.get("one_subband") and f["span_s"] <= 3 * cad and f["run_s"] <= 2 * cad):
            return False
        first = self.g.t0 + st.first * cad
        last = self.g.t0 + st.last * cad
        if not first - self.gap_s <= f["start"] <= last + self.gap_s:
            return False
        st.n += 1
        return True

    # -- pulse trains --------------------------------------------------------------------
    def train_cells(self, j: int, n: int) -> np.ndarray:
        """Cells of block ``j`` (``n`` rows) where the open impulse storm's pulse train, if
        it is periodic, puts its next pulses (see TRAIN_PULSES): one dwell per pulse, both
        dwells when the pulse falls near their boundary. Empty when there is no such train."""
        g = self.g
        cells = np.zeros((n, g.n_chan), dtype=bool)
        st = self.storm
        if st is None or g.n_sub < 2 or len(st.mids) < TRAIN_PULSES // 2:
            return cells
        # in time order, one entry per pulse (one caught by two dwells near their
        # boundary counts once)
        m = np.unique(np.round(np.asarray(st.mids), 6))
        t_lo = j * g.rows_per_block * g.cadence
        if t_lo - m[-1] > self.gap_s:
            return cells
        train = pulse_period(m, g.slot)
        if train is None:
            return cells
        period, phase = train
        t_hi = t_lo + n * g.cadence
        ks = np.arange(math.ceil((t_lo - g.cadence - phase) / period), math.floor((t_hi + g.cadence - phase) / period) + 1)
        starts = g.offsets[g.sb_start]
        edge = g.slot / 8
        for t in phase + period * ks:
            # the dwells (of this step or a neighbour: a sweep need not start at the step's
            # start) whose window holds the pulse, give or take an eighth of a dwell
            r = int(math.floor(t / g.cadence))
            for rr in (r - 1, r, r + 1):
                pos = t - rr * g.cadence
                if not 0 <= rr - j * g.rows_per_block < n:
                    continue
                for b in np.flatnonzero((pos >= starts - edge) & (pos < starts + g.slot + edge)):
                    cells[rr - j * g.rows_per_block, g.sb_start[b]:g.sb_stop[b]] = True
        return cells


def pulse_period(m: np.ndarray, slot: float) -> tuple[float, float] | None:
    """(period, phase) of a train of pulses caught at the dwell mid-times ``m`` (seconds
    from the segment start, in order), or None when they do not keep a period of 0.25-2.5 s.

    Pulse numbers step by step (each gap is a whole number of periods), then a line;
    twice more with the numbers from the line and without the impulses off it (a sferic,
    a burst's step taken for a pulse). Each caught pulse is known to within its dwell
    (+- half a dwell, ``slot``): three in four must sit that close to the train.
    """
    gaps = np.diff(m)
    d = gaps[(gaps > 0.25) & (gaps < 2.5)]
    if len(d) < 5:
        return None
    p0 = float(np.median(d))
    near = d[np.abs(d - p0) < 0.3 * p0]
    if len(near) < 5:
        return None
    p0 = float(np.mean(near))                  # the dwell grid quantises each gap
    k = np.concatenate([[0.0], np.cumsum(np.round(gaps / p0))])
    inl = np.ones(len(m), dtype=bool)
    period = phase = 0.0
    for _ in range(3):
        kc, mc = k[inl] - k[inl].mean(), m[inl] - m[inl].mean()
        if not np.any(kc):
            return None
        period = float(np.sum(kc * mc) / np.sum(kc * kc))
        if not 0.25 < period < 2.5:
            return None
        phase = float(m[inl].mean() - period * k[inl].mean())
        k = np.round((m - phase) / period)
        inl = np.abs(m - (phase + period * k)) <= 0.6 * slot
        if inl.sum() < 5:
            return None
    if np.mean(inl) < 0.75:
        return None
    return period, phase
