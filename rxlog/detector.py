"""Burst detection: background, RFI mask, events with measured features, classes, episodes.

The detector runs on one segment at a time (a segment never mixes tunings or gains) in
fixed *blocks* of ``block_s`` seconds counted from the segment's first row. Every
stage is a function of whole blocks and a fixed neighbourhood of blocks, so feeding
rows one at a time, in chunks of any size, or all at once gives the same events
(``OnlineDetector`` is what ``detect_spectrum`` uses underneath).

Two paths find the two kinds of events:

* **Bursts** (seconds to minutes): excess above the fast background (rxlog.background),
  divided by each channel's noise, smoothed with a box of ``smooth_time_s`` x
  ``smooth_freq_mhz`` matched to Type III / L-burst scales, and thresholded with
  hysteresis (seeds at ``seed_sigma``, growing down to ``grow_sigma``). Connected
  regions (8-connectivity over time and frequency) close in time and overlapping in
  frequency merge into one event. Latency: (fast window / 2 + 3 blocks), a few minutes.
* **Long events** (minutes to hours: Type IV continua, storms, fadeouts): block levels on
  coarse channels against the slow baseline, with a positive and a *negative* branch,
  thresholded in dB and in noise units. Reported half a slow window after they happen.

Interference that looks like an event is reported as an ``rfi`` event rather than
masked silently: impulses and trains of them (one storm per train, also when a sweep
catches each pulse in a different dwell), and narrowband cells masked by SumThreshold
that line up across the band (an ionosonde sweep).

Each event gets start, end and peak time; fmin, fmax; peak excess (dB) and SNR;
integrated excess; a drift rate from a weighted fit of arrival time against frequency
using the true sampling time of each channel (``chan_offset_s``), with its error;
duration at fixed frequency; bandwidth; a class with a confidence and a one-line
reason; and ephemeris tags at peak, start and end.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
from scipy import ndimage
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from rxlog.detect import background as bg
from rxlog.detect import mask as rfi
from rxlog.detect.classify import classify
from rxlog.detect.drift import PROFILE_MAX_ROWS, fit_drift, profile_arrivals
from rxlog.detect.settings import LINE_MIN_MHZ, SBURST_MAX_CADENCE_S, TRAIN_PULSES, Settings
from rxlog.spectrum import FLAG_GAP, FLAG_RETUNE, FLAG_RFI, FLAG_UNCOVERED, DynamicSpectrum
from rxlog.timeutil import iso

# Long events whose short pieces, found first by the burst path, take their class.
LONG_NAMES = {"solar_iv": "Type IV continuum", "jovian_l": "Jovian storm"}

EVENT_FIELDS = ("station", "event_id", "episode_id", "start_utc", "end_utc", "peak_utc",
                "fmin_mhz", "fmax_mhz", "peak_excess_db", "snr", "integrated_excess",
                "drift_mhz_s", "drift_err_mhz_s", "duration_s", "bandwidth_mhz", "class",
                "confidence", "reason", "cml3_deg", "io_phase_deg", "cml3_start_deg",
                "cml3_end_deg", "io_phase_start_deg", "io_phase_end_deg", "source_region",
                "jupiter_alt_deg", "sun_alt_deg", "cutout_path")

BAD_FLAGS = FLAG_GAP | FLAG_UNCOVERED | FLAG_RETUNE


# ------------------------------------------------------------------------------------
# Incremental connected components
# ------------------------------------------------------------------------------------

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


class _Tracker:
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


# ------------------------------------------------------------------------------------
# Features
# ------------------------------------------------------------------------------------

def _row_runs_median(rows: np.ndarray, cols: np.ndarray) -> float:
    """Median over channels of the longest run of consecutive rows of the event there."""
    order = np.lexsort((rows, cols))
    r, c = rows[order], cols[order]
    new = np.ones(len(r), dtype=bool)
    new[1:] = (c[1:] != c[:-1]) | (r[1:] != r[:-1] + 1)
    run_id = np.cumsum(new) - 1
    run_len = np.bincount(run_id)
    run_col = c[new]
    longest = np.zeros(int(c.max()) + 1, dtype=np.int64)
    np.maximum.at(longest, run_col, run_len)
    return float(np.median(longest[np.unique(c)]))


# ------------------------------------------------------------------------------------
# One segment
# ------------------------------------------------------------------------------------

@dataclass
class _Block:
    power: np.ndarray
    flags: np.ndarray
    sk: np.ndarray | None
    t0: float


class _Segment:
    """The detector's state for one segment; see the module docstring for the stages."""

    def __init__(self, s: Settings, spec: DynamicSpectrum, mask_sink=None):
        self.s = s
        self.name = spec.segment
        self.t0 = float(spec.t0)
        self.cadence = float(spec.cadence_s)
        self.freq = np.asarray(spec.freq_hz, dtype=np.float64)
        self.f_mhz = self.freq / 1e6
        self.offsets = np.asarray(spec.chan_offset_s, dtype=np.float64)
        self.n_chan = len(self.freq)
        self.chan_mhz = float(np.median(np.abs(np.diff(self.f_mhz)))) if self.n_chan > 1 else 1.0
        self.mask_sink = mask_sink
        cad = self.cadence
        self.R = max(1, int(round(s.block_s / cad)))
        self.block_s = self.R * cad
        self.W = max(1, int(round(s.fast_window_s / self.block_s / 2)))
        self.half_slow = max(2, int(round(s.slow_window_s / self.block_s / 2)))
        self.T = min(self.R, max(1, int(round(s.smooth_time_s / cad))))
        self.F = max(1, int(round(s.smooth_freq_mhz / self.chan_mhz)))
        self.cw = max(1, int(round(s.carrier_width_mhz / self.chan_mhz)))
        self.st_f = max(1, int(s.sumthreshold_max_mhz / self.chan_mhz))
        self.st_t = max(1, int(s.sumthreshold_max_s / cad))
        # Sub-bands: runs of channels sampled at the same moment of the sweep (one run
        # when the receiver does not sweep). A millisecond impulse lands in one of them.
        change = np.flatnonzero(np.diff(self.offsets) != 0) + 1
        self.sb_start = np.concatenate([[0], change]).astype(np.int64)
        self.sb_stop = np.concatenate([change, [self.n_chan]]).astype(np.int64)
        self.storm: dict | None = None          # the impulse storm still open
        self.storms_done: list[dict] = []
        self.carry_anchor = None
        self.sb_id = np.repeat(np.arange(len(self.sb_start)), self.sb_stop - self.sb_start)
        # time from one dwell to the next (the whole step when the receiver does not sweep)
        starts = np.unique(self.offsets)
        self.slot = float(np.median(np.diff(starts))) if len(starts) > 1 else cad
        # Each sub-band in eighths (sub-bands of 16 channels or more), to tell a dwell lit
        # evenly from edge to edge (a pulse) from a lane crossing part of it.
        parts, owner = [], []
        for b, (a, z) in enumerate(zip(self.sb_start, self.sb_stop)):
            cuts = np.unique(np.linspace(a, z, 9).astype(np.int64)[:-1]) if z - a >= 16 else np.array([a])
            parts.append(cuts)
            owner.append(np.full(len(cuts), b))
        self.q_start = np.concatenate(parts).astype(np.int64)
        self.q_owner = np.concatenate(owner).astype(np.int64)
        # Channels the static mask always covers (ranges without hours).
        always = np.zeros(self.n_chan, dtype=bool)
        for r in s.static_ranges:
            if r.get("hours_utc") is None:
                always |= rfi.static_mask([r], self.freq, np.zeros(1))[0]
        # Beside each sub-band: the first 0.15 MHz of channels outside the static mask,
        # starting 0.1 MHz past each edge (clear of channels that straddle two dwells) and
        # at most 0.6 MHz away; none at the band's edges.
        k1, k2 = max(1, int(round(0.1 / self.chan_mhz))), max(1, int(round(0.6 / self.chan_mhz)))
        m = max(4, int(round(0.15 / self.chan_mhz)))
        self.sb_beside = []
        for a, z in zip(self.sb_start, self.sb_stop):
            sides = []
            for cand in (np.arange(a - k1 - 1, a - k2 - 1, -1), np.arange(z + k1, z + k2)):
                cand = cand[(cand >= 0) & (cand < self.n_chan)]
                cand = cand[~always[cand]][:m]
                if len(cand) >= 4:
                    sides.append(cand)
            self.sb_beside.append(sides)
        self.groups = bg.coarse_groups(self.freq, s.slow_freq_mhz)
        self.n_groups = int(self.groups.max()) + 1
        gchange = np.flatnonzero(np.diff(self.groups) != 0) + 1
        self.g_start = np.concatenate([[0], gchange]).astype(np.int64)
        self.g_stop = np.concatenate([gchange, [self.n_chan]]).astype(np.int64)
        self.carriers = rfi.CarrierMemory(self.n_chan, self.block_s, s.carrier_memory_s, s.carrier_fraction)
        self.next_t = self.t0
        self.pending: list[DynamicSpectrum] = []
        self.pending_rows = 0
        self.blocks: dict[int, _Block] = {}
        self.level: dict[int, np.ndarray] = {}
        self.sigma: dict[int, np.ndarray] = {}
        self.chan_mask: dict[int, np.ndarray] = {}
        self.fast: dict[int, tuple] = {}
        self.stage_m: dict[int, dict] = {}
        self.coarse: dict[int, np.ndarray] = {}
        self.coarse_sig: dict[int, np.ndarray] = {}    # coarse second-to-second noise of each block
        self.n_blocks = 0          # blocks cut so far
        self.next_fast = 0
        self.next_m = 0
        self.next_s = 0
        self.next_slow = 0
        self.has_sk = spec.kurtosis is not None
        fields = ("ex", "sig", "raw", "sk", "unseen")
        col_map = np.cumsum(~always) - (~always).astype(np.int64)     # unmasked channels before each
        self.fine = _Tracker(self.n_chan, round(s.merge_gap_s / cad), round(s.merge_freq_mhz / self.chan_mhz),
                             round(s.max_event_s / cad), fields, col_map=col_map,
                             around_rows=PROFILE_MAX_ROWS - 2)     # with its 2 extra steps
        # Narrowband cells SumThreshold took out, joined into lines: a sweep across the
        # band (an ionosonde) is reported as an rfi event; a line that stays put is not.
        self.lines = _Tracker(self.n_chan, round(s.merge_gap_s / cad), round(s.merge_freq_mhz / self.chan_mhz),
                              round(s.max_event_s / cad), fields, col_map=col_map)
        self.line_join = max(1, int(round(0.1 / self.chan_mhz)))
        self.lines_done: list[Component] = []
        slow_fields = ("ex", "sig", "tx")
        gap_b = max(1, int(round(s.merge_gap_s / self.block_s)))
        g_always = np.bincount(self.groups, weights=always.astype(float), minlength=self.n_groups) \
            >= np.bincount(self.groups, minlength=self.n_groups)
        g_map = np.cumsum(~g_always) - (~g_always).astype(np.int64)
        self.slow_pos = _Tracker(self.n_groups, gap_b, 1, 10 ** 9, slow_fields, col_map=g_map)
        self.slow_neg = _Tracker(self.n_groups, gap_b, 1, 10 ** 9, slow_fields, col_map=g_map)
        self.always = always
        self.quality: dict[float, list[float]] = {}
        # covered band from channels that ever carry data
        self.covered = np.zeros(self.n_chan, dtype=bool)

    # -- input -----------------------------------------------------------------------
    def accepts(self, spec: DynamicSpectrum) -> bool:
        return (spec.segment == self.name and spec.n_chan == self.n_chan
                and abs(spec.cadence_s - self.cadence) < 1e-9 * max(1.0, self.cadence)
                and np.array_equal(spec.freq_hz, self.freq)
                and abs(spec.t0 - self.next_t) <= 0.25 * self.cadence)

    def add(self, spec: DynamicSpectrum) -> list:
        self.pending.append(spec)
        self.pending_rows += spec.n_time
        self.next_t = spec.t_end
        out = []
        while self.pending_rows >= self.R:
            self._cut_block(self.R)
            out += self._advance(final=False)
        return out

    def finish(self) -> list:
        out = []
        if self.pending_rows > 0:
            self._cut_block(self.pending_rows)
        out += self._advance(final=True)
        out += [("fine", c) for c in self.fine.finish()]
        out += [("line", c) for c in self.lines.finish()]
        out += [("slow+", c) for c in self.slow_pos.finish()]
        out += [("slow-", c) for c in self.slow_neg.finish()]
        return out

    def _cut_block(self, n: int):
        parts, need = [], n
        while need > 0:
            sp = self.pending[0]
            take = min(need, sp.n_time)
            parts.append((sp.power_db[:take], sp.flags[:take], None if sp.kurtosis is None else sp.kurtosis[:take]))
            if take == sp.n_time:
                self.pending.pop(0)
            else:
                self.pending[0] = sp.slice_rows(take, sp.n_time)
            need -= take
        self.pending_rows -= n
        power = np.concatenate([p[0] for p in parts]).astype(np.float32)
        flags = np.concatenate([p[1] for p in parts])
        sk = None
        if self.has_sk and all(p[2] is not None for p in parts):
            sk = np.concatenate([p[2] for p in parts]).astype(np.float32)
        j = self.n_blocks
        self.blocks[j] = _Block(power, flags, sk, self.t0 + j * self.block_s)
        self._block_stats(j)
        self.n_blocks += 1

    # -- stage A: block statistics and per-block channel masks ------------------------
    def _static(self, j: int, n: int) -> np.ndarray:
        """The static mask over block ``j``'s rows (read-only when it does not change with
        the hour: then it is the always-masked channels on every row)."""
        timed = [r for r in self.s.static_ranges if r.get("hours_utc") is not None]
        if not timed:
            return np.broadcast_to(self.always, (n, self.n_chan))
        times = self.blocks[j].t0 + self.cadence * np.arange(n)
        return self.always[None, :] | rfi.static_mask(timed, self.freq, times)

    def _block_stats(self, j: int):
        b = self.blocks[j]
        n = b.power.shape[0]
        good = ((b.flags & BAD_FLAGS) == 0) & np.isfinite(b.power)
        self.covered |= good.any(axis=0)
        base = good & ~self._static(j, n)
        level, sigma = bg.block_stats(b.power, base)
        # Carriers: block level against its neighbours, in units of the level's own noise
        # (the median of n cells has sigma ~ 1.2533 sigma_cell / sqrt(n) for Gaussian noise).
        nvalid = np.maximum(base.sum(axis=0), 1)
        lvl_sigma = 1.2533 * sigma / np.sqrt(nvalid)
        car = rfi.carrier_channels(level, lvl_sigma, self.cw, self.s.carrier_sigma)
        cmask = self.carriers.update(car)
        if b.sk is not None:
            skf = rfi.kurtosis_flags(b.sk, base, self.s.kurtosis_sigma)
            persistent = skf.sum(axis=0) > 0.5 * np.maximum(base.sum(axis=0), 1)
            cmask = cmask | persistent
        self.chan_mask[j] = cmask
        self.level[j] = np.where(cmask, np.nan, level).astype(np.float32)
        self.sigma[j] = sigma
        self.coarse[j] = bg.coarse_levels(self.level[j], self.groups, self.n_groups)
        self.coarse_sig[j] = bg.coarse_levels(np.where(cmask, np.nan, sigma), self.groups, self.n_groups)

    # -- scheduling ------------------------------------------------------------------
    def _advance(self, final: bool) -> list:
        out = []
        nb = self.n_blocks
        # fast background of block j needs blocks up to j + W
        while self.next_fast < nb and (final or self.next_fast + self.W < nb):
            j = self.next_fast
            lo, hi = max(0, j - self.W), min(nb, j + self.W + 1)
            self.fast[j] = (bg.fast_level(np.stack([self.level[k] for k in range(lo, hi)])),
                            bg.nanmedian(np.stack([self.sigma[k] for k in range(lo, hi)]), axis=0))
            self.next_fast += 1
        # stage M(j) needs the fast level of j + 1 (or the end)
        while self.next_m < self.next_fast and (final or self.next_m + 1 < self.next_fast):
            self._stage_m(self.next_m, last=(final and self.next_m + 1 >= nb))
            self.next_m += 1
        out += [("impulse", c) for c in self._impulse_storms(final)]
        out += [("line", c) for c in self.lines_done]
        self.lines_done = []
        # stage S(j) needs M(j + 1)
        while self.next_s < self.next_m and (final or self.next_s + 1 < self.next_m):
            out += [("fine", c) for c in self._stage_s(self.next_s)]
            self.next_s += 1
        # slow path of block k needs coarse levels up to k + half window
        while self.next_slow < nb and (final or self.next_slow + self.half_slow < nb):
            out += self._slow(self.next_slow, nb)
            self.next_slow += 1
        self._forget()
        return out

    def _add_impulses(self, rows, sbs, sig, db):
        """Fold this block's impulses (in time order) into storms: impulses closer than
        ``impulse_gap_s`` belong to one storm, kept as running totals."""
        gap = self.s.impulse_gap_s / self.cadence
        order = np.lexsort((sbs, rows))
        for r, b, g, d in zip(rows[order], sbs[order], sig[order], db[order]):
            st = self.storm
            if st is not None and r - st["last"] > gap:
                self.storms_done.append(st)
                st = None
            if st is None:
                st = self.storm = {"first": r, "first_sb": b, "last": r, "last_sb": b, "n": 0, "rows": set(),
                                   "sb_lo": b, "sb_hi": b, "peak": -1.0, "peak_row": r, "peak_sb": b, "peak_db": 0.0,
                                   "mids": []}
            if len(self.sb_start) > 1:        # mid-time of the dwell that caught it, from the segment start
                st["mids"].append(r * self.cadence + float(self.offsets[self.sb_start[b]]) + self.slot / 2)
                del st["mids"][:-TRAIN_PULSES]
            st["last"], st["last_sb"], st["n"] = r, b, st["n"] + 1
            st["sb_lo"], st["sb_hi"] = min(st["sb_lo"], b), max(st["sb_hi"], b)
            if len(st["rows"]) < 100000:
                st["rows"].add(int(r))
            if g > st["peak"]:
                st.update(peak=float(g), peak_row=r, peak_sb=b, peak_db=float(d))

    def _train_cells(self, j: int, n: int) -> np.ndarray:
        """Cells of block ``j`` where the open impulse storm's pulse train, if it is
        periodic, puts its next pulses (see TRAIN_PULSES): one dwell per pulse, both dwells
        when the pulse falls near their boundary. Empty when there is no such train."""
        cells = np.zeros((n, self.n_chan), dtype=bool)
        st = self.storm
        if st is None or len(self.sb_start) < 2 or len(st["mids"]) < TRAIN_PULSES // 2:
            return cells
        # in time order, one entry per pulse (one caught by two dwells near their
        # boundary counts once)
        m = np.unique(np.round(np.asarray(st["mids"]), 6))
        t_lo = j * self.R * self.cadence
        if t_lo - m[-1] > self.s.impulse_gap_s:
            return cells
        gaps = np.diff(m)
        d = gaps[(gaps > 0.25) & (gaps < 2.5)]
        if len(d) < 5:
            return cells
        p0 = float(np.median(d))
        near = d[np.abs(d - p0) < 0.3 * p0]
        if len(near) < 5:
            return cells
        p0 = float(np.mean(near))                  # the dwell grid quantises each gap
        # pulse numbers step by step (each gap is a whole number of periods), then a line;
        # twice more with the numbers from the line and without the impulses off it (a
        # sferic, a burst's step taken for a pulse)
        k = np.concatenate([[0.0], np.cumsum(np.round(gaps / p0))])
        inl = np.ones(len(m), dtype=bool)
        period = phase = 0.0
        for _ in range(3):
            kc, mc = k[inl] - k[inl].mean(), m[inl] - m[inl].mean()
            if not np.any(kc):
                return cells
            period = float(np.sum(kc * mc) / np.sum(kc * kc))
            if not 0.25 < period < 2.5:
                return cells
            phase = float(m[inl].mean() - period * k[inl].mean())
            k = np.round((m - phase) / period)
            inl = np.abs(m - (phase + period * k)) <= 0.6 * self.slot
            if inl.sum() < 5:
                return cells
        # each caught pulse is known to within its dwell (+- half a dwell): three in four
        # must sit that close to the train
        if np.mean(inl) < 0.75:
            return cells
        t_hi = t_lo + n * self.cadence
        ks = np.arange(math.ceil((t_lo - self.cadence - phase) / period), math.floor((t_hi + self.cadence - phase) / period) + 1)
        starts = self.offsets[self.sb_start]
        edge = self.slot / 8
        for t in phase + period * ks:
            # the dwells (of this step or a neighbour: a sweep need not start at the step's
            # start) whose window holds the pulse, give or take an eighth of a dwell
            r = int(math.floor(t / self.cadence))
            for rr in (r - 1, r, r + 1):
                pos = t - rr * self.cadence
                if not 0 <= rr - j * self.R < n:
                    continue
                for b in np.flatnonzero((pos >= starts - edge) & (pos < starts + self.slot + edge)):
                    cells[rr - j * self.R, self.sb_start[b]:self.sb_stop[b]] = True
        return cells

    def _impulse_storms(self, final: bool) -> list[dict]:
        """Storms whose gap has passed (all of them at the end of the segment)."""
        gap = self.s.impulse_gap_s / self.cadence
        if self.storm is not None and (final or self.next_m * self.R - self.storm["last"] > gap):
            self.storms_done.append(self.storm)
            self.storm = None
        out, self.storms_done = self.storms_done, []
        return out

    def _forget(self):
        for d, keep_from in ((self.blocks, self.next_m), (self.stage_m, self.next_s - 1),
                             (self.fast, self.next_m - 1), (self.chan_mask, self.next_m),
                             (self.sigma, self.next_fast - self.W), (self.level, self.next_fast - self.W),
                             (self.coarse, self.next_slow - self.half_slow),
                             (self.coarse_sig, self.next_slow - self.half_slow)):
            for k in [k for k in d if k < keep_from]:
                del d[k]

    # -- stage M: excess, noise units and the cell mask for one block ------------------
    def _stage_m(self, j: int, last: bool):
        s = self.s
        b = self.blocks[j]
        n = b.power.shape[0]
        here, sig_c = self.fast[j]
        prev = self.fast[j - 1][0] if j - 1 in self.fast else here
        nxt = self.fast[j + 1][0] if (j + 1) in self.fast else here
        prev = np.where(np.isfinite(prev), prev, here)
        nxt = np.where(np.isfinite(nxt), nxt, here)
        base = bg.interpolate_blocks(prev, here, nxt, n, self.R)
        data = ((b.flags & BAD_FLAGS) == 0) & np.isfinite(b.power)
        good = data & np.isfinite(base)
        static = self._static(j, n)
        masked = static | self.chan_mask[j][None, :]
        excess = (b.power - base).astype(np.float32)
        sigma = np.where(np.isfinite(sig_c) & (sig_c > 0), sig_c, np.inf).astype(np.float32)
        z = np.where(good, excess / sigma, 0.0).astype(np.float32)
        w = good & ~masked
        # SumThreshold on the narrowband residual where the neighbourhood is quiet.
        mean, count = rfi.neighbour_mean(z, w, self.cw)
        quiet = mean * np.sqrt(np.maximum(count, 1.0)) < s.grow_sigma
        hp = np.where(w & quiet, z - mean, 0.0)
        st = rfi.sum_threshold(hp, np.zeros_like(w), 1, s.sumthreshold_chi1, self.st_f)
        st = rfi.sum_threshold(hp, st, 0, s.sumthreshold_chi1, self.st_t)
        st &= w
        w &= ~st
        join = ndimage.maximum_filter1d(st.view(np.uint8), 2 * self.line_join + 1, axis=1).view(bool)
        zero = np.zeros_like(excess)
        self.lines_done += self.lines.push(join, st, {"ex": np.where(st, excess, 0.0), "sig": np.where(st, z, 0.0),
                                                      "raw": np.where(st, excess, 0.0), "sk": zero, "unseen": zero})
        imp, sub = self._impulses(j, z, w, n, excess, good)
        # Where a periodic pulse train (an electric fence) puts its next pulses, also under
        # a burst: its neighbours lit by the burst hide the pulse from the test above, and
        # a pulse in a burst's strongest step would move the burst's arrival times there.
        imp |= self._train_cells(j, n) & w
        w &= ~imp
        st |= imp
        sk_anom = np.zeros_like(w)
        if b.sk is not None:
            sk_anom = rfi.kurtosis_flags(b.sk, good, s.kurtosis_sigma)
        rfi_cells = data & (masked | st)
        flags = b.flags | np.where(rfi_cells, FLAG_RFI, 0).astype(np.uint8)
        if self.mask_sink is not None:
            self.mask_sink(self.name, b.t0, flags)
        times = b.t0 + self.cadence * np.arange(n)
        for h, v in rfi.hour_quality(times, flags, self.cadence).items():
            acc = self.quality.setdefault(h, [0.0, 0.0, 0.0, 0.0])
            for i in range(4):
                acc[i] += v[i]
        self.stage_m[j] = {"z": np.where(w, z, 0.0).astype(np.float32), "w": w.astype(np.float32),
                           "ex": np.where(w, excess, 0.0).astype(np.float32), "sk": sk_anom, "n": n,
                           "sub": sub, "unseen": imp | ~data}

    def _group_significance(self, z: np.ndarray, w: np.ndarray, starts: np.ndarray) -> np.ndarray:
        """Per row and channel group (contiguous, from ``starts``): significance of the mean excess."""
        zw = np.add.reduceat(np.where(w, z, 0.0), starts, axis=1)
        nw = np.add.reduceat(w.astype(np.float32), starts, axis=1)
        return np.where(nw > 0, zw / np.sqrt(np.maximum(nw, 1.0)), 0.0).astype(np.float32)

    def _impulses(self, j: int, z: np.ndarray, w: np.ndarray, n: int, excess: np.ndarray, good: np.ndarray):
        """Cells of impulses. An anchor is a whole sub-band lit for one time step with the
        steps either side dark (below 0.3 of it), or lit with the neighbouring sub-bands dark
        (below 0.3 of it) in the same step; for the first kind, in the anchor's step and the next, any
        0.25-MHz group within 0.3 MHz of its sub-band lit for at most two steps is part of the same impulse (channels near
        a sub-band edge can straddle two dwells). A Type III lasts longer than that at every
        frequency (its decay is ~2 s at 20 MHz), so it is not taken. Returns (cell mask,
        per-row group significances of this block before removal)."""
        S = self._group_significance(z, w, self.sb_start)
        G = self._group_significance(z, w, self.g_start)
        prev_s, prev_g = (self.stage_m[j - 1]["sub"] if (j - 1) in self.stage_m else
                          (np.zeros((1, S.shape[1]), np.float32), np.zeros((1, G.shape[1]), np.float32)))
        nxt_s, nxt_g = self._next_rows(j + 1)
        # Robust widths about the median (a pulse train lifts the fast background a little,
        # so dark sub-bands sit slightly below zero: the spread, not the offset, is the noise).
        scale_s = min(max(bg.MAD_TO_SIGMA * float(np.median(np.abs(S - np.median(S)))), 1.0), 4.0)
        scale_g = min(max(bg.MAD_TO_SIGMA * float(np.median(np.abs(G - np.median(G)))), 1.0), 4.0)
        es = np.concatenate([prev_s[-1:], S, nxt_s[:1]], axis=0) / scale_s
        Sn = es[1:-1]
        lit_t = Sn >= self.s.impulse_sigma
        anchor = lit_t & (es[:-2] <= 0.3 * Sn) & (es[2:] <= 0.3 * Sn)
        # A short signal caught by a sweep lights one sub-band while its neighbours, sampled
        # a dwell earlier or later, stay dark, however many steps the pattern lasts; a
        # natural burst is continuous across the sub-band edge (a Type III reaches the next
        # sub-band within its decay time), so it lights the neighbours too.
        side = np.zeros_like(anchor)
        nsb = S.shape[1]
        if nsb > 1:
            nw = np.add.reduceat(w.astype(np.float32), self.sb_start, axis=1)
            has = nw >= np.maximum(4, 0.1 * (self.sb_stop - self.sb_start))[None, :]
            dark_or_none = np.ones_like(anchor)
            seen = np.zeros_like(anchor)
            for d in (-1, 1):                  # the two neighbours
                nb = np.clip(np.arange(nsb) + d, 0, nsb - 1)
                valid = has[:, nb] & (np.arange(nsb) + d >= 0)[None, :] & (np.arange(nsb) + d < nsb)[None, :]
                dark_or_none &= ~valid | (Sn[:, nb] <= 0.3 * Sn)
                seen |= valid
            p2 = prev_s[-2:] if prev_s.shape[0] >= 2 else np.concatenate([np.zeros_like(prev_s[:1]), prev_s[-1:]])
            e2 = np.concatenate([p2, S, nxt_s[:2]], axis=0) / scale_s            # rows -2 .. n+1
            lit = e2 >= self.s.impulse_sigma

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
            nb_ok = np.zeros_like(anchor)
            nb_ok[:, 1:-1] = has[:, :-2] & has[:, 2:]
            side = lit_t & seen & dark_or_none & nb_ok & interior[None, :] & short_run
            # An edge sub-band lit evenly with its only neighbour dark in this step, and in
            # the step after either the neighbour still dark or this sub-band dark again: a
            # burst drifting in across the band's top edge reaches the neighbour within a
            # step and stays in both for its decay time; a train of pulses moves on from one
            # dwell to the next. Natural bursts drift down, so at the bottom edge one comes
            # from the neighbour: there it must also have been dark the step before.
            top = int(np.argmax([self.f_mhz[a] for a in self.sb_start]))
            for b, nb in ((0, 1), (nsb - 1, nsb - 2)):
                dark = lambda k, c: e2[2 + k:2 + k + n, c] <= 0.3 * Sn[:, b]
                quiet = dark(0, nb) & (dark(1, nb) | dark(1, b))
                if b != top:
                    quiet &= dark(-1, nb)
                side[:, b] |= lit_t[:, b] & filled[:, b] & has[:, nb] & quiet
            edge = side[:, self.sb_id]
            # with the channels either side of the sub-band edges (they can straddle two dwells)
            grow = max(1, int(round(0.1 / self.chan_mhz)))
            edge = ndimage.maximum_filter1d(edge.view(np.uint8), 2 * grow + 1, axis=1).view(bool)
            anchor_side = side
        else:
            edge = np.zeros((n, self.n_chan), dtype=bool)
            anchor_side = side
        cells = edge.copy()
        if anchor_side.any():
            rr, bb = np.nonzero(anchor_side & ~anchor)
            if len(rr):
                lit = np.add.reduceat(w.astype(np.float32), self.sb_start, axis=1)[rr, bb]
                exs = np.add.reduceat(np.where(w, excess, 0.0), self.sb_start, axis=1)[rr, bb]
                self._add_impulses(j * self.R + rr, bb, Sn[rr, bb], np.where(lit > 0, exs / np.maximum(lit, 1), 0.0))
        rows = list(np.flatnonzero(anchor.any(axis=1)))
        # Where an anchor's groups may join it: its own sub-band and 0.3 MHz either side.
        reach = max(1, int(round(0.3 / self.chan_mhz)))
        zone = ndimage.maximum_filter1d(anchor[:, self.sb_id].view(np.uint8), 2 * reach + 1, axis=1).view(bool)
        carry = self.carry_anchor            # the zone of anchors in the last step of the previous block
        self.carry_anchor = zone[-1].copy() if (rows and rows[-1] == n - 1) else None
        if rows or carry is not None:
            pg = prev_g[-2:] if prev_g.shape[0] >= 2 else np.concatenate([np.zeros_like(prev_g[:1]), prev_g[-1:]])
            eg = np.concatenate([pg, G, nxt_g[:2]], axis=0) / scale_g            # rows -2 .. n+1
            rr, bb = np.nonzero(anchor)
            cells |= anchor[:, self.sb_id]
            if len(rr):
                lit = np.add.reduceat(w.astype(np.float32), self.sb_start, axis=1)[rr, bb]
                exs = np.add.reduceat(np.where(w, excess, 0.0), self.sb_start, axis=1)[rr, bb]
                self._add_impulses(j * self.R + rr, bb, Sn[rr, bb], np.where(lit > 0, exs / np.maximum(lit, 1), 0.0))
            # anchors at rows r = -1 (carried) .. n-1; eg row index of step r is r + 2
            pk = np.maximum(eg[1:n + 2], eg[2:n + 3])          # the anchor's step and the next
            short = (pk >= 0.5 * self.s.impulse_sigma) & (eg[0:n + 1] <= 0.3 * pk) & (eg[3:n + 4] <= 0.3 * pk)
            is_anchor = np.zeros(n + 1, dtype=bool)
            is_anchor[0] = carry is not None
            is_anchor[np.asarray(rows, dtype=np.int64) + 1] = True
            short &= is_anchor[:, None]
            gcells = short[:, self.groups]                                     # (n + 1, C): rows -1 .. n-1
            gcells &= np.concatenate([(carry if carry is not None else np.zeros(self.n_chan, bool))[None, :], zone])
            cells |= gcells[1:] | gcells[:-1]                                # the anchor's step and the next
        return cells & w, (S, G)

    def _filled(self, z: np.ndarray, w: np.ndarray, good: np.ndarray) -> np.ndarray:
        """Per row and sub-band: lit evenly from edge to edge. Every eighth of the sub-band
        that has data (4 channels or more; two such eighths at least) has a mean excess of 0.7
        of their mean or more. A pulse's spectrum is nearly flat across one dwell (its
        f^-1.5 slope changes it by under 20 % over 2 MHz); a lane or a burst's edge is not."""
        nq = np.add.reduceat(w.astype(np.float32), self.q_start, axis=1)
        Q = np.add.reduceat(np.where(w, z, 0.0), self.q_start, axis=1) / np.maximum(nq, 1.0)   # mean excess / noise
        has = nq >= 4
        nsb = len(self.sb_start)
        k = np.zeros((Q.shape[0], nsb), np.float32)
        tot = np.zeros_like(k)
        np.add.at(k.T, self.q_owner, has.T.astype(np.float32))
        np.add.at(tot.T, self.q_owner, np.where(has, Q, 0.0).T)
        mean = tot / np.maximum(k, 1.0)
        weak = has & (Q < 0.7 * mean[:, self.q_owner])
        any_weak = np.zeros_like(k, dtype=bool)
        np.logical_or.at(any_weak.T, self.q_owner, weak.T)
        # ... and it stops at the sub-band's edges: just past an edge (``sb_beside``) the
        # neighbour's median is under a quarter of it. A lane as wide as a sub-band is
        # still half as bright there.
        spills = np.zeros_like(k, dtype=bool)
        checked = np.zeros_like(k, dtype=bool)
        for b, side in enumerate(self.sb_beside):
            for cols in side:
                ww = good[:, cols]
                ok = ww.sum(axis=1) >= 4
                with np.errstate(all="ignore"):
                    out = np.nan_to_num(bg.nanmedian(np.where(ww, z[:, cols], np.nan), axis=1))
                checked[:, b] |= ok
                spills[:, b] |= ok & (out > 0.25 * mean[:, b])
        return (k >= 2) & ~any_weak & (mean > 0) & checked & ~spills

    def _next_rows(self, k: int) -> tuple[np.ndarray, np.ndarray]:
        """Group significances of the first two rows of block k from its raw power (the
        rows after this block, for the impulse test); zeros at the end of the segment."""
        zs = (np.zeros((2, len(self.sb_start)), np.float32), np.zeros((2, len(self.g_start)), np.float32))
        if k not in self.blocks or k not in self.fast:
            return zs
        b = self.blocks[k]
        m = min(2, b.power.shape[0])
        here, sig_c = self.fast[k]
        prev = self.fast[k - 1][0] if (k - 1) in self.fast else here
        prev = np.where(np.isfinite(prev), prev, here)
        nxt = self.fast[k + 1][0] if (k + 1) in self.fast else here
        nxt = np.where(np.isfinite(nxt), nxt, here)
        base = bg.interpolate_blocks(prev, here, nxt, self.R, self.R)[:m]
        good = ((b.flags[:m] & BAD_FLAGS) == 0) & np.isfinite(b.power[:m]) & np.isfinite(base)
        good &= ~(self._static(k, m) | self.chan_mask[k][None, :])
        sigma = np.where(np.isfinite(sig_c) & (sig_c > 0), sig_c, np.inf)
        z = np.where(good, (b.power[:m] - base) / sigma, 0.0)
        out_s = self._group_significance(z, good, self.sb_start)
        out_g = self._group_significance(z, good, self.g_start)
        if m < 2:
            out_s = np.concatenate([out_s, zs[0][:1]]); out_g = np.concatenate([out_g, zs[1][:1]])
        return out_s, out_g

    # -- stage S: smoothing, hysteresis, components for one block -------------------
    def _stage_s(self, j: int) -> list[Component]:
        s = self.s
        m = self.stage_m[j]
        n = m["n"]
        before = self.T // 2
        after = self.T - 1 - before

        def ctx(key):
            parts = []
            p = self.stage_m.get(j - 1)
            if before:
                if p is not None and p["n"] >= before:
                    parts.append(p[key][-before:])
                else:
                    parts.append(np.zeros((before, self.n_chan), dtype=np.float32))
            parts.append(m[key])
            q = self.stage_m.get(j + 1)
            if after:
                if q is not None and q["n"] >= after:
                    parts.append(q[key][:after])
                else:
                    parts.append(np.zeros((after, self.n_chan), dtype=np.float32))
            return np.concatenate(parts, axis=0)

        zw, w, ew = ctx("z"), ctx("w"), ctx("ex")

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
        wc = m["w"][:, ::4] > 0
        if wc.sum() > 100:
            scale = bg.MAD_TO_SIGMA * float(np.median(np.abs(sig[:, ::4][wc])))
            sig /= min(max(scale, 1.0), 4.0)
        enough = den * nbox >= 0.25 * nbox
        grow = (sig >= s.grow_sigma) & enough
        seed = grow & (sig >= s.seed_sigma) & (ex_s >= s.min_peak_db)
        comps = self.fine.push(grow, seed, {"ex": ex_s, "sig": sig, "raw": m["ex"],
                                            "sk": m["sk"].astype(np.float32), "unseen": m["unseen"]})
        # rows were appended at absolute offset j * R; the tracker counts from 0 in order
        return comps

    # -- slow path -------------------------------------------------------------------
    def _slow(self, k: int, nb: int) -> list:
        s = self.s
        lo, hi = max(0, k - self.half_slow), min(nb, k + self.half_slow + 1)
        ks = np.arange(lo, hi)
        y = np.stack([self.coarse[i] for i in ks])
        base, scatter = bg.robust_quadratic(ks.astype(np.float64), y, float(k), s.slow_grow_db, s.slow_grow_sigma)
        e = self.coarse[k] - base
        with np.errstate(invalid="ignore", divide="ignore"):
            sg = np.where(scatter > 0, e / scatter, 0.0)
        e = np.nan_to_num(e).astype(np.float32)[None, :]
        sg = np.nan_to_num(sg).astype(np.float32)[None, :]
        # Texture: this block's second-to-second noise against the quiet quarter of the
        # window's. Multiplicative noise keeps its width in dB under a steady rise (a
        # continuum, arcing); the seconds-long L-bursts of a Jovian storm widen it.
        sw = np.stack([self.coarse_sig[i] for i in ks])
        srt = np.sort(sw, axis=0)                                    # NaN sort last
        n_ok = np.count_nonzero(~np.isnan(sw), axis=0)
        ref = np.take_along_axis(srt, np.clip((n_ok - 1) // 4, 0, None)[None, :], axis=0)[0]
        with np.errstate(invalid="ignore", divide="ignore"):
            tx = np.nan_to_num(self.coarse_sig[k] / ref, nan=1.0, posinf=1.0).astype(np.float32)[None, :]
        out = []
        for sign, tracker, tag in ((1, self.slow_pos, "slow+"), (-1, self.slow_neg, "slow-")):
            es, ss = sign * e, sign * sg
            grow = (es >= s.slow_grow_db) & (ss >= s.slow_grow_sigma)
            seed = grow & (es >= s.slow_seed_db) & (ss >= s.slow_seed_sigma)
            out += [(tag, c) for c in tracker.push(grow, seed, {"ex": e, "sig": sg, "tx": tx})]
        return out

    # -- features ----------------------------------------------------------------------
    def features(self, kind: str, c) -> dict | None:
        if kind == "fine":
            f = self._fine_features(c)
            if f is not None and self._absorbed(f):
                return None
            return f
        if kind == "impulse":
            return self._impulse_features(c)
        if kind == "line":
            f = self._fine_features(c)
            if f is None or f["bandwidth_mhz"] < LINE_MIN_MHZ:
                return None
            f["path"] = "line"
            return f
        return self._slow_features(c, 1 if kind == "slow+" else -1)

    def _absorbed(self, f: dict) -> bool:
        """A pulse left over in one dwell (one sub-band, a step or two) while an impulse
        storm is open joins that storm instead of becoming an event of its own."""
        st, cad = self.storm, self.cadence
        if st is None or not (f.get("one_subband") and f["span_s"] <= 3 * cad and f["run_s"] <= 2 * cad):
            return False
        first = self.t0 + st["first"] * cad
        last = self.t0 + st["last"] * cad
        if not first - self.s.impulse_gap_s <= f["start"] <= last + self.s.impulse_gap_s:
            return False
        st["n"] += 1
        return True

    def band_mhz(self) -> float:
        cov = np.flatnonzero(self.covered)
        if len(cov) == 0:
            return 0.0
        return float(self.f_mhz[cov[-1]] - self.f_mhz[cov[0]] + self.chan_mhz)

    def _fine_features(self, c: Component) -> dict | None:
        cad = self.cadence
        rows, cols = c.rows, c.cols
        t = self.t0 + rows * cad + self.offsets[cols]
        ex, raw = c.values["ex"], c.values["raw"]
        ipk = int(np.argmax(ex))
        fmin = float(self.f_mhz[cols.min()] - self.chan_mhz / 2)
        fmax = float(self.f_mhz[cols.max()] + self.chan_mhz / 2)
        # Morphology from the half-maximum core: per row (instantaneous width, and whether
        # the row spans nearly the whole event band at once, as an impulse does) and per
        # channel (duration at fixed frequency).
        bw = fmax - fmin
        lo_c, hi_c = int(cols.min()), int(cols.max())
        truncated = ((lo_c == 0 or self.always[lo_c - 1]) and (hi_c == self.n_chan - 1 or self.always[hi_c + 1]))
        urows, inv = np.unique(rows, return_inverse=True)
        row_pk = np.zeros(len(urows)); np.maximum.at(row_pk, inv, ex)
        core = ex >= 0.5 * row_pk[inv]
        rmin = np.full(len(urows), np.iinfo(np.int64).max); rmax = np.full(len(urows), -1)
        np.minimum.at(rmin, inv[core], cols[core]); np.maximum.at(rmax, inv[core], cols[core])
        width = (rmax - rmin + 1) * self.chan_mhz
        rw = np.clip(row_pk, 0, None)
        full_rows = float(np.sum(rw * (width >= 0.8 * bw)) / max(rw.sum(), 1e-12))
        ucols, cinv = np.unique(cols, return_inverse=True)
        col_pk = np.zeros(len(ucols)); np.maximum.at(col_pk, cinv, ex)
        ccore = ex >= 0.5 * col_pk[cinv]
        run = _row_runs_median(rows[ccore], cols[ccore])
        lin = np.power(10.0, raw.astype(np.float64) / 10.0) - 1.0
        # Only cells actually observed count: the smoothing carries values into masked cells
        # (a pulse's dwell) from channels sampled at another moment.
        observed = c.values["unseen"] == 0
        bin_mhz = max(self.s.smooth_freq_mhz / 2, self.chan_mhz)
        sweep = len(self.sb_start) > 1
        # Short events: arrival times from the light curve per bin (see profile_arrivals),
        # which takes masked steps as missing samples; longer ones from the peak step.
        # The steps just before and after the event count too: the quiet sample before a
        # burst that rises within one step pins its peak as well as any inside it.
        pr, pc, pl, po = rows, cols, lin, observed
        if c.around is not None and len(c.around[0]):
            ar, ac, av = c.around
            pr, pc = np.concatenate([rows, ar]), np.concatenate([cols, ac])
            pl = np.concatenate([lin, np.power(10.0, av["raw"].astype(np.float64) / 10.0) - 1.0])
            po = np.concatenate([observed, av["unseen"] == 0])
        pa = profile_arrivals(pr, pc, pl, po, self.t0 + pr * cad + self.offsets[pc] + cad / 2,
                              self.f_mhz, self.sb_id, bin_mhz, cad)
        # The slope is taken at the event's centre frequency, where the drift is reported.
        if pa is not None and len(pa[0]) >= 3:
            d = fit_drift(pa[0], pa[1], pa[2], bin_mhz, cad, fc_mhz=0.5 * (fmin + fmax),
                          dwell=pa[3] if sweep else None)
        else:
            t_arr, w_arr = self._peak_arrivals(rows, ex, observed, ucols, cinv, col_pk)
            d = fit_drift(t_arr, self.f_mhz[ucols], w_arr, bin_mhz, cad, fc_mhz=0.5 * (fmin + fmax),
                          dwell=self.sb_id[ucols] if sweep else None)
        return {
            "path": "fine", "sign": 1,
            "start": float(t.min()), "end": float(t.max() + cad), "peak": float(t[ipk] + cad / 2),
            "fmin": fmin, "fmax": fmax, "fc_mhz": 0.5 * (fmin + fmax),
            "peak_excess_db": float(ex[ipk]), "snr": float(c.values["sig"].max()),
            "integrated_excess": float(lin.sum() * cad * self.chan_mhz),
            "run_s": run * cad,
            "span_s": float(t.max() + cad - t.min()),
            "bandwidth_mhz": bw, "inst_bw_mhz": float(np.median(width[rw >= 0.5 * rw.max()])),
            "full_rows": full_rows, "n_rows": int(len(urows)),
            "sk_fraction": float(np.mean(c.values["sk"] > 0)) if self.has_sk else None,
            "bursty": False, "truncated": bool(truncated),
            "one_subband": self._fills_one_subband(lo_c, hi_c),
            "n_dwells": int(len(np.unique(self.sb_id[ucols]))) if len(self.sb_start) > 1 else 2,
            "subband_rows": len(urows) <= 10 and all(self._fills_one_subband(int(a), int(b)) for a, b in zip(rmin, rmax)),
            **d,
        }

    def _peak_arrivals(self, rows, ex, observed, ucols, cinv, col_pk):
        """Arrival time and weight per channel of the event: the time of its (smoothed)
        peak among observed cells, interpolated between time steps by the parabola through
        the peak step and its neighbours. (A centroid would be pulled late by the decay,
        which is longer at lower frequency for a Type III, and a leading edge is quantised
        to whole steps wherever a sweep samples many channels at once.)"""
        cad = self.cadence
        key = cinv.astype(np.int64) * (int(rows.max()) + 3) + (rows - int(rows.min()) + 1)
        order = np.argsort(key)
        skey, sex = key[order], ex[order]
        ex_obs = np.where(observed, ex, -np.inf)
        obs_pk = np.full(len(ucols), -np.inf)
        np.maximum.at(obs_pk, cinv, ex_obs)
        has_obs = np.isfinite(obs_pk)
        pk_idx = np.full(len(ucols), -1)
        is_pk = observed & (ex_obs >= obs_pk[cinv])
        pk_idx[cinv[is_pk]] = np.flatnonzero(is_pk)
        is_any = ex >= col_pk[cinv]                      # channels seen nowhere: their peak
        fallback = np.full(len(ucols), -1)
        fallback[cinv[is_any]] = np.flatnonzero(is_any)
        pk_idx = np.where(has_obs, pk_idx, fallback)
        kp = key[pk_idx]

        def at(k):
            i = np.searchsorted(skey, k)
            i = np.clip(i, 0, len(skey) - 1)
            return np.where(skey[i] == k, sex[i], np.nan)

        e0, em, ep = ex[pk_idx], at(kp - 1), at(kp + 1)
        em = np.where(np.isfinite(em), em, 0.0)
        ep = np.where(np.isfinite(ep), ep, 0.0)
        den = em - 2 * e0 + ep
        delta = np.where(den < 0, np.clip(0.5 * (em - ep) / np.where(den < 0, den, -1.0), -0.5, 0.5), 0.0)
        t_arr = self.t0 + (rows[pk_idx] + delta) * cad + self.offsets[ucols] + cad / 2
        return t_arr, np.clip(np.where(has_obs, obs_pk, 0.0), 0, None) ** 2

    def _fills_one_subband(self, lo_c: int, hi_c: int) -> bool:
        """The event spans the whole usable part of one sweep sub-band and nothing else,
        as a short signal caught by one dwell does (edges within 50 kHz, plus the half
        width of the frequency smoothing, which spreads a lit dwell past its edges)."""
        if len(self.sb_start) < 2:
            return False
        b = self.sb_id[(lo_c + hi_c) // 2]
        usable = np.flatnonzero(~self.always[self.sb_start[b]:self.sb_stop[b]]) + self.sb_start[b]
        if len(usable) == 0:
            return False
        tol = max(2, int(round(0.05 / self.chan_mhz)))
        spread = tol + self.F // 2
        return (usable[0] - spread <= lo_c <= usable[0] + tol) and (usable[-1] - tol <= hi_c <= usable[-1] + spread)

    def _impulse_features(self, st: dict) -> dict:
        def t_of(row, sb):
            return self.t0 + row * self.cadence + float(self.offsets[self.sb_start[sb]])

        start, end = t_of(st["first"], st["first_sb"]), t_of(st["last"], st["last_sb"]) + self.cadence
        fmin = float(self.f_mhz[self.sb_start[st["sb_lo"]]] - self.chan_mhz / 2)
        fmax = float(self.f_mhz[self.sb_stop[st["sb_hi"]] - 1] + self.chan_mhz / 2)
        db = st["peak_db"]
        return {"path": "impulse", "sign": 1, "start": start, "end": end,
                "peak": t_of(st["peak_row"], st["peak_sb"]) + self.cadence / 2, "fmin": fmin, "fmax": fmax,
                "fc_mhz": 0.5 * (fmin + fmax), "peak_excess_db": db, "snr": st["peak"],
                "integrated_excess": float((10 ** (db / 10) - 1) * self.cadence * (fmax - fmin)),
                "run_s": self.cadence, "span_s": end - start, "bandwidth_mhz": fmax - fmin,
                "inst_bw_mhz": fmax - fmin, "full_rows": 1.0, "n_rows": len(st["rows"]),
                "n_impulses": st["n"], "sk_fraction": None, "bursty": False, "drift": None, "drift_err": None,
                "dtdf": 0.0, "dtdf_err": math.inf, "resolved": False, "spread_s": 0.0, "n_bins": 0}

    def _slow_features(self, c: Component, sign: int) -> dict | None:
        rows, cols = c.rows, c.cols
        span_blocks = int(rows.max() - rows.min() + 1)
        if span_blocks * self.block_s < self.s.slow_min_s:
            return None
        if sign < 0:
            # The negative branch looks for fadeouts, which darken the whole band; a drop
            # over a few coarse channels is the slow baseline's own wobble beside a strong
            # event, not a phenomenon, and is not reported.
            g_ok = ~np.isin(np.arange(self.n_groups), np.flatnonzero(np.bincount(
                self.groups, weights=self.always.astype(float), minlength=self.n_groups)
                >= np.bincount(self.groups, minlength=self.n_groups)))
            if len(np.unique(cols)) < 0.5 * g_ok.sum():
                return None
        edges = np.flatnonzero(np.isin(self.groups, np.unique(cols)))
        fmin = float(self.f_mhz[edges.min()] - self.chan_mhz / 2)
        fmax = float(self.f_mhz[edges.max()] + self.chan_mhz / 2)
        ex = c.values["ex"]
        ipk = int(np.argmax(sign * ex))
        start = self.t0 + rows.min() * self.block_s
        end = self.t0 + (rows.max() + 1) * self.block_s
        # "bursty": the excess changes a lot from block to block (L-burst storms) rather
        # than rising and falling smoothly (continua).
        prof = np.bincount(rows - rows.min(), weights=sign * ex) / np.maximum(np.bincount(rows - rows.min()), 1)
        rough = float(np.median(np.abs(np.diff(prof))) / max(np.median(prof), 1e-6)) if len(prof) > 3 else 0.0
        gmhz = self.s.slow_freq_mhz
        # Drift on the coarse grid: the block of peak excess in each coarse channel (a slow
        # Type II lane crosses the band in minutes; a continuum or fadeout shows none).
        ucols, cinv = np.unique(cols, return_inverse=True)
        pk = np.full(len(ucols), -np.inf); np.maximum.at(pk, cinv, sign * ex)
        at_pk = (sign * ex) >= pk[cinv]
        first = np.full(len(ucols), np.iinfo(np.int64).max); np.minimum.at(first, cinv[at_pk], rows[at_pk])
        g_f = np.array([self.f_mhz[self.groups == g].mean() for g in ucols])   # a few dozen groups
        d = fit_drift(self.t0 + (first + 0.5) * self.block_s, g_f, np.clip(pk, 0, None) ** 2,
                      gmhz, self.block_s)
        lin = np.power(10.0, ex.astype(np.float64) / 10.0) - 1.0
        return {
            "path": "slow", "sign": sign,
            "start": float(start), "end": float(end), "peak": float(self.t0 + (rows[ipk] + 0.5) * self.block_s),
            "fmin": fmin, "fmax": fmax, "fc_mhz": 0.5 * (fmin + fmax),
            "peak_excess_db": float(ex[ipk]), "snr": float(np.abs(c.values["sig"]).max()),
            "integrated_excess": float(lin.sum() * self.block_s * gmhz),
            "run_s": float(np.median(np.bincount(cols)[np.unique(cols)]) * self.block_s),
            "span_s": float(end - start), "bandwidth_mhz": fmax - fmin, "inst_bw_mhz": fmax - fmin,
            "full_rows": 1.0, "n_rows": span_blocks, "sk_fraction": None,
            "bursty": rough > 0.3, "texture": float(np.median(c.values["tx"])), **d,
        }

    def hours_before(self, t: float) -> list[tuple[float, list[float]]]:
        done = [(h, v) for h, v in self.quality.items() if h + 3600.0 <= t]
        for h, _ in done:
            del self.quality[h]
        return done


# ------------------------------------------------------------------------------------
# The public detector
# ------------------------------------------------------------------------------------

TagsFn = Callable[[np.ndarray], dict]


def default_tags_fn(cfg) -> TagsFn | None:
    """Ephemeris tags for this station, or None when the ephemeris module is missing."""
    try:
        from rxlog.ephemeris import station_tags
    except ImportError:
        return None
    return lambda times: station_tags(cfg, np.asarray(times, dtype=np.float64))


def _event_id(station: str, peak: float, fmin: float, fmax: float) -> str:
    from rxlog.store import make_event_id
    return make_event_id(station, peak, fmin, fmax)


class OnlineDetector:
    """Chunk-by-chunk detector with bounded memory.

    ``feed(spec_chunk)`` takes the next rows (any number, in time order; a new segment
    id, channel grid, cadence or a jump in time starts a new segment) and returns the
    events finished so far; ``flush()`` ends the current segment and returns the rest.
    ``pop_episodes()`` and ``pop_quality()`` return the episodes updated and the hourly
    quality rows finished since the last call. Fine bursts come out a few minutes after
    they end; long events half a slow window (``slow_window_s`` / 2) after, together with
    updated versions (same event_id) of the "unknown" bursts that turned out to be pieces
    of them: keep the last version of each event (``latest``; the event store upserts).
    """

    def __init__(self, cfg, tags_fn: TagsFn | None = None, settings: Settings | None = None,
                 mask_sink: Callable | None = None):
        self.cfg = cfg
        self.s = settings or Settings.from_config(cfg)
        self.tags_fn = tags_fn if tags_fn is not None else default_tags_fn(cfg)
        self.mask_sink = mask_sink
        self.seg: _Segment | None = None
        self._episodes: dict[str, dict] = {}
        self._open: list[dict] = []   # open episodes
        self._touched: set[str] = set()
        self._quality: list[dict] = []
        self._hours: dict[float, list[float]] = {}
        self._pieces: list[dict] = []   # recent "unknown" bursts a long event may still claim

    # -- feeding -----------------------------------------------------------------------
    def feed(self, spec: DynamicSpectrum) -> list[dict]:
        out = []
        if spec.n_time == 0:
            return out
        if self.seg is not None and not self.seg.accepts(spec):
            out += self._end_segment()
        if self.seg is None:
            self.seg = _Segment(self.s, spec, self.mask_sink)
        out += self._events(self.seg.add(spec))
        self._collect_quality(final=False)
        return out

    def flush(self) -> list[dict]:
        out = self._end_segment()
        self._collect_quality(final=True)
        for ep in self._open:
            self._touched.add(ep["episode_id"])
        self._open = []
        return out

    def _end_segment(self) -> list[dict]:
        if self.seg is None:
            return []
        out = self._events(self.seg.finish())
        seg_hours = self.seg.hours_before(math.inf)
        for h, v in seg_hours:
            acc = self._hours.setdefault(h, [0.0, 0.0, 0.0, 0.0])
            for i in range(4):
                acc[i] += v[i]
        self.seg = None
        return out

    def pop_episodes(self) -> list[dict]:
        eps = [dict(self._episodes[i]) for i in sorted(self._touched)]
        self._touched.clear()
        still = {ep["episode_id"] for ep in self._open}
        for k in [k for k in self._episodes if k not in still]:     # closed and handed out: forget
            del self._episodes[k]
        return eps

    def pop_quality(self) -> list[dict]:
        q, self._quality = self._quality, []
        return q

    def _collect_quality(self, final: bool):
        """Move the segment's finished hours into the detector's sums; emit hours no
        later row can touch (all of them when ``final``: the end of the data)."""
        seg = self.seg
        now = -math.inf
        if seg is not None:
            now = seg.t0 + seg.next_m * seg.block_s
            for h, v in seg.hours_before(math.inf if final else now):
                acc = self._hours.setdefault(h, [0.0, 0.0, 0.0, 0.0])
                for i in range(4):
                    acc[i] += v[i]
        for h in sorted(self._hours):
            if final or h + 3600.0 <= now:
                masked, cov, gap, covs = self._hours.pop(h)
                self._quality.append({"station": self.s.station, "hour_utc": iso(h),
                                      "masked_fraction": masked / cov if cov > 0 else None,
                                      "gap_s": gap, "covered_s": covs})

    # -- events ----------------------------------------------------------------------------
    def _events(self, comps: list) -> list[dict]:
        seg = self.seg
        feats = []
        for kind, c in comps:
            f = seg.features(kind, c)
            if f is not None:
                feats.append(f)
        if not feats:
            return []
        tags = self._tags(feats)
        events = []
        for i, f in enumerate(feats):
            ctx = {k: tags[k][i] for k in tags} if tags else {}
            region = ctx.get("source_region")
            region = None if region is None or str(region).lower() in ("", "none") else str(region)
            for k in ("sun_alt_deg", "jupiter_alt_deg"):
                if k in ctx and (ctx[k] is None or not np.isfinite(ctx[k])):
                    ctx[k] = None
            f.update(sun_alt=ctx.get("sun_alt_deg"), jupiter_alt=ctx.get("jupiter_alt_deg"),
                     source_region=region, band_mhz=seg.band_mhz(),
                     cadence_s=seg.cadence, chan_mhz=seg.chan_mhz)
            cls, conf, reason = classify(f, self.s)
            events.append((f, self._event_dict(f, ctx, cls, conf, reason)))
        events.sort(key=lambda fe: fe[1]["peak_utc"])
        for _, e in events:
            self._assign_episode(e)
        updates = self._fragments(events)
        return [e for _, e in events] + updates

    def _fragments(self, events: list[tuple[dict, dict]]) -> list[dict]:
        """Short pieces of a long event found by the burst path before the long event was
        known (the fluctuations of a Type IV continuum or a storm, left "unknown") take the
        long event's class once it is reported: their updated versions (same event_id)
        come out with it. Pieces are remembered for two slow windows."""
        updates = []
        for f, e in events:
            if f["path"] == "fine" and e["class"] == "unknown":
                self._pieces.append(e)
        for f, e in events:
            if f["path"] != "slow" or f["sign"] < 0 or e["class"] not in LONG_NAMES:
                continue
            a, b = _unix(e["start_utc"]) - self.s.block_s, _unix(e["end_utc"]) + self.s.block_s
            keep = []
            for x in self._pieces:
                inside = (a <= _unix(x["start_utc"]) and _unix(x["end_utc"]) <= b
                          and x["fmin_mhz"] < e["fmax_mhz"] and x["fmax_mhz"] > e["fmin_mhz"])
                if not inside:
                    keep.append(x)
                    continue
                updates.append(dict(x, **{"class": e["class"], "confidence": round(0.9 * e["confidence"], 2),
                                          "reason": f"within the {LONG_NAMES[e['class']]} {e['event_id']}; "
                                                    f"{x['reason']}"}))
            self._pieces = keep
        if events:
            newest = max(_unix(e["end_utc"]) for _, e in events)
            self._pieces = [x for x in self._pieces if _unix(x["end_utc"]) >= newest - 2 * self.s.slow_window_s]
        return updates

    def _tags(self, feats: list[dict]) -> dict | None:
        if self.tags_fn is None:
            return None
        n = len(feats)
        times = np.array([f["peak"] for f in feats] + [f["start"] for f in feats] + [f["end"] for f in feats])
        raw = self.tags_fn(times)
        out = {}
        for k in ("sun_alt_deg", "jupiter_alt_deg", "source_region"):
            if k in raw:
                out[k] = list(np.asarray(raw[k])[:n])
        for k in ("cml3_deg", "io_phase_deg"):
            if k in raw:
                v = np.asarray(raw[k], dtype=np.float64)
                out[k], out[k.replace("_deg", "_start_deg")], out[k.replace("_deg", "_end_deg")] = \
                    list(v[:n]), list(v[n:2 * n]), list(v[2 * n:])
        return out

    def _event_dict(self, f: dict, ctx: dict, cls: str, conf: float, reason: str) -> dict:
        def num(x, nd=3):
            return None if x is None or not np.isfinite(x) else round(float(x), nd)

        e = {k: None for k in EVENT_FIELDS}
        e.update(station=self.s.station,
                 event_id=_event_id(self.s.station, f["peak"], f["fmin"], f["fmax"]),
                 start_utc=iso(f["start"]), end_utc=iso(f["end"]), peak_utc=iso(f["peak"]),
                 fmin_mhz=num(f["fmin"], 4), fmax_mhz=num(f["fmax"], 4),
                 peak_excess_db=num(f["peak_excess_db"]), snr=num(f["snr"], 1),
                 integrated_excess=num(f["integrated_excess"], 4),
                 drift_mhz_s=num(f["drift"], 4), drift_err_mhz_s=num(f["drift_err"], 4),
                 duration_s=num(f["run_s"], 2), bandwidth_mhz=num(f["bandwidth_mhz"], 4),
                 confidence=round(float(min(max(conf, 0.0), 1.0)), 2), reason=reason)
        e["class"] = cls
        for k in ("cml3_deg", "io_phase_deg", "cml3_start_deg", "cml3_end_deg", "io_phase_start_deg",
                  "io_phase_end_deg", "jupiter_alt_deg", "sun_alt_deg"):
            if k in ctx and ctx[k] is not None:
                e[k] = num(ctx[k], 2)
        if ctx.get("source_region"):
            e["source_region"] = str(ctx["source_region"])
        return e

    # -- episodes ---------------------------------------------------------------------------
    def _assign_episode(self, e: dict):
        from rxlog.timeutil import parse_iso
        t0, t1 = parse_iso(e["start_utc"]), parse_iso(e["end_utc"])
        gap = self.s.episode_gap_s
        # episodes are closed once nothing later can join them (allowing for the slow path's delay)
        horizon = t0 - gap - self.s.slow_window_s
        still = []
        for ep in self._open:
            if ep["_t1"] < horizon:
                self._touched.add(ep["episode_id"])
            else:
                still.append(ep)
        self._open = still
        for ep in self._open:
            if ep["class"] == e["class"] and ep["_t0"] - gap <= t1 and t0 <= ep["_t1"] + gap:
                break
        else:
            ep = {"episode_id": "ep-" + e["event_id"], "station": e["station"], "class": e["class"],
                  "_t0": t0, "_t1": t1, "n_events": 0, "fmin_mhz": e["fmin_mhz"], "fmax_mhz": e["fmax_mhz"],
                  "peak_excess_db": e["peak_excess_db"]}
            self._open.append(ep)
        ep["_t0"], ep["_t1"] = min(ep["_t0"], t0), max(ep["_t1"], t1)
        ep["n_events"] += 1
        ep["fmin_mhz"] = min(ep["fmin_mhz"], e["fmin_mhz"])
        ep["fmax_mhz"] = max(ep["fmax_mhz"], e["fmax_mhz"])
        if abs(e["peak_excess_db"] or 0) > abs(ep["peak_excess_db"] or 0):
            ep["peak_excess_db"] = e["peak_excess_db"]
        ep["start_utc"], ep["end_utc"] = iso(ep["_t0"]), iso(ep["_t1"])
        self._episodes[ep["episode_id"]] = {k: v for k, v in ep.items() if not k.startswith("_")}
        self._touched.add(ep["episode_id"])
        e["episode_id"] = ep["episode_id"]


@dataclass
class DetectionResult:
    events: list = field(default_factory=list)
    episodes: list = field(default_factory=list)
    quality_rows: list = field(default_factory=list)
    mask: np.ndarray | None = None


def latest(events: list[dict]) -> list[dict]:
    """The final state of a stream of events from ``OnlineDetector``: the last version of
    each event_id (a piece of a long event comes out again once that event is known), in
    peak order."""
    last = {}
    for e in events:
        last[e["event_id"]] = e
    return sorted(last.values(), key=lambda e: e["peak_utc"])


def detect_spectrum(cfg, spec: DynamicSpectrum, tags_fn: TagsFn | None = None,
                    settings: Settings | None = None, chunk_s: float = 900.0) -> DetectionResult:
    """Detect events in one dynamic spectrum (one segment) in one call.

    Runs the online detector over the spectrum in chunks of ``chunk_s`` seconds (the
    result does not depend on the chunk size) and returns the events, episodes, hourly
    quality rows and the flags with FLAG_RFI set where the mask removed cells.
    """
    mask = spec.flags.copy()
    row_of = {}

    def sink(segment, t_block, flags):
        i0 = int(round((t_block - spec.t0) / spec.cadence_s))
        mask[i0:i0 + flags.shape[0]] = flags
        row_of[i0] = True

    det = OnlineDetector(cfg, tags_fn=tags_fn, settings=settings, mask_sink=sink)
    step = max(1, int(round(chunk_s / spec.cadence_s)))
    events = []
    for i in range(0, spec.n_time, step):
        events += det.feed(spec.slice_rows(i, min(i + step, spec.n_time)))
    events = latest(events + det.flush())
    return DetectionResult(events=events, episodes=det.pop_episodes(), quality_rows=det.pop_quality(), mask=mask)


def detect_range(cfg, t0: float | None = None, t1: float | None = None,
                 progress: Callable[[float, float], None] | None = None, tags_fn: TagsFn | None = None,
                 hours_per_read: float = 1.0) -> dict:
    """Re-run detection over the archive between t0 and t1 (default: all of it) into the store.

    Reads the archive an hour at a time (bounded memory) from a little before t0, so the
    background is settled when t0 arrives, to a little after t1, so events near t1
    finish; then replaces the station's detections peaking in [t0, t1) in one
    transaction (labels are kept apart and re-attach by overlap), the episodes starting
    there, and the hourly quality rows. Running it twice gives the same store.
    ``progress(done_s, total_s)`` is called with the seconds of archive read so far.
    Returns a summary: t0, t1, events, by_class, episodes, hours, segments, and the
    labels that moved to a new event (labels_moved: (label_id, from, to)) or found none
    (labels_orphaned: label rows, kept in the store).
    """
    from rxlog.archive import archive_extent, read_archive
    from rxlog.errors import RxlogError
    from rxlog.store import EventStore

    extent = archive_extent(cfg.archive_dir)
    if extent is None:
        raise RxlogError(f"{cfg.archive_dir}: the archive holds no spectra yet; record some first "
                         "(rxlog run) or ingest FITS dynamic spectra (rxlog ingest)")
    t0 = extent[0] if t0 is None else float(t0)
    t1 = extent[1] if t1 is None else float(t1)
    if not t1 > t0:
        raise RxlogError(f"--end ({iso(t1)}) must be after --start ({iso(t0)})")
    s = Settings.from_config(cfg)
    margin = s.slow_window_s / 2 + s.fast_window_s + 3 * s.block_s
    a = max(extent[0], t0 - margin)
    b = min(extent[1], t1 + margin)
    det = OnlineDetector(cfg, tags_fn=tags_fn, settings=s)
    events, segments = [], set()
    step = 3600.0 * hours_per_read
    cursor = math.floor(a / step) * step
    gaps: list[tuple[float, float]] = []
    while cursor < b:
        lo, hi = max(cursor, a), min(cursor + step, b)
        got = read_archive(cfg.archive_dir, lo, hi)
        gaps += got.gaps
        for spec in got.segments:
            segments.add(spec.segment)
            events += det.feed(spec)
        if progress is not None:
            progress(min(max(hi - a, 0.0), b - a), b - a)
        cursor += step
    events = latest(events + det.flush())
    keep = [e for e in events if t0 <= _unix(e["peak_utc"]) < t1]
    episodes = [ep for ep in det.pop_episodes() if t0 <= _unix(ep["start_utc"]) < t1]
    quality = _with_gaps([q for q in det.pop_quality() if t0 - 3600.0 < _unix(q["hour_utc"]) < t1],
                         gaps, s.station, t0, t1)
    store = EventStore(cfg.store_path)
    try:
        labels = store.replace_events(s.station, t0, t1, keep, episodes)
        store.record_quality(quality)
    finally:
        store.close()
    by_class: dict[str, int] = {}
    for e in keep:
        by_class[e["class"]] = by_class.get(e["class"], 0) + 1
    return {"t0": t0, "t1": t1, "events": len(keep), "by_class": dict(sorted(by_class.items())),
            "episodes": len(episodes), "hours": len(quality), "segments": len(segments),
            "labels_moved": labels["reattached"], "labels_orphaned": labels["orphans"]}


def _unix(text: str) -> float:
    from rxlog.timeutil import parse_iso
    return parse_iso(text)


def _with_gaps(rows: list[dict], gaps: list[tuple[float, float]], station: str, t0: float, t1: float) -> list[dict]:
    """Add the archive's gaps (stretches without any segment) to the hourly gap seconds."""
    by_hour = {r["hour_utc"]: dict(r) for r in rows}
    for a, b in gaps:
        a, b = max(a, t0), min(b, t1)
        h = math.floor(a / 3600.0) * 3600.0
        while h < b:
            part = min(b, h + 3600.0) - max(a, h)
            if part > 0:
                r = by_hour.setdefault(iso(h), {"station": station, "hour_utc": iso(h), "masked_fraction": None,
                                                "gap_s": 0.0, "covered_s": 0.0})
                r["gap_s"] = float(r["gap_s"] or 0.0) + part
            h += 3600.0
    return [by_hour[k] for k in sorted(by_hour)]


def refine_with_cutout(cfg, event: dict, cutout: DynamicSpectrum, path: str | None = None) -> dict:
    """Look at an event again in a high-time-resolution cutout from the channelizer's ring.

    Jovian S-bursts last milliseconds and drift at -5 to -30 MHz/s: they can only be seen
    in spectra a few milliseconds apart, never in 1-s spectra. The cutout is searched with
    the burst path scaled to its own resolution (smoothing over three time steps and
    50 kHz); when at least three S-burst-like bursts are found (resolved drift in
    SBURST_DRIFT, under 50 ms at fixed frequency) and Jupiter is up, the event becomes
    ``jovian_s``. A cutout coarser than SBURST_MAX_CADENCE_S leaves the class alone.
    Returns a new event dict (with ``cutout_path`` when given).
    """
    out = dict(event)
    if path is not None:
        out["cutout_path"] = str(path)
    if cutout.cadence_s > SBURST_MAX_CADENCE_S or cutout.n_time < 8:
        return out
    jup = event.get("jupiter_alt_deg")
    s = Settings.from_config(cfg)
    span = cutout.n_time * cutout.cadence_s
    block = max(cutout.cadence_s * 4, min(s.block_s, span / 8))
    fine = s.replace(block_s=block, fast_window_s=max(10 * block, 4 * block), slow_window_s=max(1e6, 10 * span),
                     smooth_time_s=3 * cutout.cadence_s, smooth_freq_mhz=0.05, merge_gap_s=cutout.cadence_s,
                     max_event_s=max(1.0, span), static_ranges=())

    def tags(times):
        n = len(times)
        return {"jupiter_alt_deg": np.full(n, np.nan if jup is None else float(jup)),
                "sun_alt_deg": np.full(n, np.nan if event.get("sun_alt_deg") is None else float(event["sun_alt_deg"]))}

    res = detect_spectrum(cfg, cutout, tags_fn=tags, settings=fine)
    sb = [e for e in res.events if e["class"] == "jovian_s"]
    if len(sb) >= 3 and (jup is None or jup > s.jupiter_up_deg):
        drift = float(np.median([e["drift_mhz_s"] for e in sb]))
        out["class"] = "jovian_s"
        out["confidence"] = 0.8 if jup is not None else 0.5
        out["reason"] = (f"{len(sb)} millisecond bursts drifting {drift:.1f} MHz/s in the "
                         f"{1000 * cutout.cadence_s:.0f}-ms cutout (S-bursts)"
                         + (f"; Jupiter up ({jup:.0f}°)" if jup is not None else ""))
    return out
