"""One segment through the detector's stages, block by block.

A segment never mixes tunings, gains or channel grids. Its rows arrive in chunks of any
size and are cut into blocks of ``block_s`` seconds counted from the segment's first
row; each stage runs on a block once the blocks it looks at exist, so feeding rows one
at a time, in chunks, or all at once gives the same events
(tests/test_detector_chunking_invariance.py). For block j:

* when it is cut: robust level and noise per channel (rxlog.detect.background), the
  channels the mask takes out for the whole block (rxlog.detect.mask: carriers,
  persistent kurtosis);
* once blocks up to j + W exist: its fast background;
* once the fast background of j + 1 exists, the *mask stage*: the excess map in noise
  units, the band's level per row and its steps (rxlog.detect.steps), SumThreshold lines
  (rxlog.detect.components), impulses and pulse trains (rxlog.detect.impulses), the
  flags handed to ``mask_sink`` and the hourly counts;
* once the mask stage of j + 1 has run: smoothing, hysteresis and components (the fine
  path);
* once half a slow window of blocks after it exists: the slow baseline and the slow
  path's long events.

Stages hand each other arrays and small dataclasses; each keeps its own state, and
forgets what no later block needs, so memory holds a fast window of blocks, half a slow
window of coarse levels and the open events.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rxlog.detect.background import Background, block_stats, coarse_groups
from rxlog.detect.components import ExcessBlock, FinePath, LinePath, SlowPath
from rxlog.detect.features import fine_features, impulse_features, slow_features
from rxlog.detect.grid import segment_grid
from rxlog.detect.impulses import Impulses
from rxlog.detect.mask import SegmentMask, always_masked, kurtosis_flags
from rxlog.detect.settings import LINE_MIN_MHZ, STEP_NEAR_S, Settings
from rxlog.detect.steps import BandSteps
from rxlog.spectrum import (
    FLAG_GAP,
    FLAG_RETUNE,
    FLAG_RFI,
    FLAG_UNCOVERED,
    DynamicSpectrum,
)

BAD_FLAGS = FLAG_GAP | FLAG_UNCOVERED | FLAG_RETUNE


@dataclass
class Block:
    """The rows of one block as they arrived."""

    power: np.ndarray
    flags: np.ndarray
    sk: np.ndarray | None
    t0: float


@dataclass
class BlockExcess:
    """The first rows of a block against the fast background."""

    data: np.ndarray        # cells with data
    good: np.ndarray        # ... and a background
    masked: np.ndarray      # static ranges and the block's masked channels
    excess: np.ndarray      # dB above the fast background
    z: np.ndarray           # excess in noise units where good, else 0
    w: np.ndarray           # good and not masked


class Segment:
    """The detector's state for one segment; see the module docstring for the stages."""

    def __init__(self, s: Settings, spec: DynamicSpectrum, mask_sink=None, occupancy=None):
        self.s = s
        self.name = spec.segment
        freq = np.asarray(spec.freq_hz, dtype=np.float64)
        self.grid = g = segment_grid(spec, s.block_s, always_masked(s.static_ranges, freq),
                                     coarse_groups(freq, s.slow_freq_mhz))
        self.background = Background(g, s)
        self.mask = SegmentMask(g, s, occupancy)
        self.impulses = Impulses(g, s)
        self.steps = BandSteps(g)
        self.fine = FinePath(g, s)
        self.lines = LinePath(g, s)
        self.slow = SlowPath(g, s)
        self.mask_sink = mask_sink
        self.has_sk = spec.kurtosis is not None
        self.covered = np.zeros(g.n_chan, dtype=bool)     # channels that ever carried data
        self.next_t = g.t0
        self.pending: list[DynamicSpectrum] = []
        self.pending_rows = 0
        self.blocks: dict[int, Block] = {}
        self.n_blocks = 0          # blocks cut so far
        self.next_m = 0            # the next block for the mask stage
        self.next_s = 0            # ... for the fine path
        self.next_slow = 0         # ... for the slow path

    # -- input -----------------------------------------------------------------------
    def accepts(self, spec: DynamicSpectrum) -> bool:
        g = self.grid
        return (spec.segment == self.name and spec.n_chan == g.n_chan
                and abs(spec.cadence_s - g.cadence) < 1e-9 * max(1.0, g.cadence)
                and np.array_equal(spec.freq_hz, g.freq)
                and abs(spec.t0 - self.next_t) <= 0.25 * g.cadence)

    def add(self, spec: DynamicSpectrum) -> list:
        """Take the next rows; return the (kind, component) pairs finished."""
        self.pending.append(spec)
        self.pending_rows += spec.n_time
        self.next_t = spec.t_end
        out = []
        while self.pending_rows >= self.grid.rows_per_block:
            self._cut_block(self.grid.rows_per_block)
            out += self._advance(final=False)
        return out

    def finish(self) -> list:
        out = []
        if self.pending_rows > 0:
            self._cut_block(self.pending_rows)
        out += self._advance(final=True)
        out += [("fine", c) for c in self.fine.finish()]
        out += [("line", c) for c in self.lines.finish()]
        out += self.slow.finish()
        return out

    def masked_until(self) -> float:
        """Time up to which rows have been through the mask stage."""
        return self.grid.t0 + self.next_m * self.grid.block_s

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
        self.blocks[j] = Block(power, flags, sk, self.grid.t0 + j * self.grid.block_s)
        self._block_stats(j)
        self.n_blocks += 1

    # -- scheduling ------------------------------------------------------------------
    def _advance(self, final: bool) -> list:
        out = []
        nb = self.n_blocks
        bgr = self.background
        bgr.advance_fast(nb, final)
        # the mask stage of block j needs the fast level of j + 1 (or the end)
        while self.next_m < bgr.next_fast and (final or self.next_m + 1 < bgr.next_fast):
            self._mask_stage(self.next_m)
            self.next_m += 1
        out += [("impulse", st) for st in self.impulses.finished(final, self.next_m * self.grid.rows_per_block)]
        out += [("line", c) for c in self.lines.take()]
        # the fine path of block j needs the mask stage of j + 1
        while self.next_s < self.next_m and (final or self.next_s + 1 < self.next_m):
            out += [("fine", c) for c in self.fine.components(self.next_s)]
            self.next_s += 1
        # the slow path of block k needs coarse levels up to k + half window
        while self.next_slow < nb and (final or self.next_slow + bgr.half_slow < nb):
            out += self.slow.add(*bgr.slow_excess(self.next_slow, nb))
            self.next_slow += 1
        self._forget()
        return out

    def _forget(self):
        for k in [k for k in self.blocks if k < self.next_m]:
            del self.blocks[k]
        self.fine.forget(self.next_s - 1)
        self.mask.forget(self.next_m)
        self.background.forget(self.next_m, self.next_slow)

    # -- the stages ------------------------------------------------------------------
    def _block_stats(self, j: int):
        """Block statistics and the channels masked for the whole block."""
        b = self.blocks[j]
        n = b.power.shape[0]
        good = ((b.flags & BAD_FLAGS) == 0) & np.isfinite(b.power)
        self.covered |= good.any(axis=0)
        valid = good & ~self.mask.static(b.t0, n)
        level, sigma = block_stats(b.power, valid)
        cmask = self.mask.block_channels(j, b.t0, level, sigma, valid, b.sk)
        self.background.add_block(j, level, sigma, cmask)

    def _excess(self, j: int, n: int) -> BlockExcess:
        """The first ``n`` rows of block j against the fast background."""
        b = self.blocks[j]
        base, sig_c = self.background.fast_rows(j, n)
        power = b.power[:n]
        data = ((b.flags[:n] & BAD_FLAGS) == 0) & np.isfinite(power)
        good = data & np.isfinite(base)
        masked = self.mask.static(b.t0, n) | self.mask.chan_mask[j][None, :]
        excess = (power - base).astype(np.float32)
        sigma = np.where(np.isfinite(sig_c) & (sig_c > 0), sig_c, np.inf).astype(np.float32)
        z = np.where(good, excess / sigma, 0.0).astype(np.float32)
        return BlockExcess(data, good, masked, excess, z, good & ~masked)

    def _mask_stage(self, j: int):
        """Excess, noise units and the cell mask for block j; hands the masked excess to
        the fine path and SumThreshold's cells to the line path."""
        b = self.blocks[j]
        n = b.power.shape[0]
        x = self._excess(j, n)
        w = x.w
        self.steps.add(b.power, x.data & ~x.masked)
        st = self.mask.narrowband(x.z, w)
        w &= ~st
        self.lines.add(st, x.excess, x.z)
        imp = self.impulses.find(j, x.z, w, x.excess, x.good, self._next_rows(j + 1))
        # Where a periodic pulse train (an electric fence) puts its next pulses, also under
        # a burst: its neighbours lit by the burst hide the pulse from the test above, and
        # a pulse in a burst's strongest step would move the burst's arrival times there.
        imp |= self.impulses.train_cells(j, n) & w
        w &= ~imp
        st |= imp
        sk_anom = np.zeros_like(w)
        if b.sk is not None:
            sk_anom = kurtosis_flags(b.sk, x.good, self.s.kurtosis_sigma)
        rfi_cells = x.data & (x.masked | st)
        flags = b.flags | np.where(rfi_cells, FLAG_RFI, 0).astype(np.uint8)
        if self.mask_sink is not None:
            self.mask_sink(self.name, b.t0, flags)
        self.mask.count_hours(b.t0, flags)
        self.fine.add(j, ExcessBlock(z=np.where(w, x.z, 0.0).astype(np.float32), w=w.astype(np.float32),
                                     ex=np.where(w, x.excess, 0.0).astype(np.float32), sk=sk_anom,
                                     unseen=imp | ~x.data))

    def _next_rows(self, k: int) -> tuple | None:
        """(z, w) of the first two rows of block k for the impulse test, None when the
        block or its fast background is not there (the end of the segment)."""
        if k not in self.blocks or k not in self.background.fast:
            return None
        x = self._excess(k, min(2, self.blocks[k].power.shape[0]))
        return x.z, x.w

    # -- features ----------------------------------------------------------------------
    def features(self, kind: str, c) -> dict | None:
        """Features of a finished event of the given kind (None: not reported)."""
        g, s = self.grid, self.s
        if kind == "fine":
            f = fine_features(g, s, c, self.has_sk, self.fine.F)
            # an impulse just before a switch-on can start a burst a few seconds early
            tol = max(STEP_NEAR_S, 3 * g.cadence)
            return None if self.impulses.absorb(f) else self._with_steps(f, tol, min(0.25 * f["span_s"], 10.0))
        if kind == "impulse":
            return impulse_features(g, c)
        if kind == "line":
            f = fine_features(g, s, c, self.has_sk, self.fine.F)
            if f["bandwidth_mhz"] < LINE_MIN_MHZ:
                return None
            f["path"] = "line"
            return f
        f = slow_features(g, s, c, 1 if kind == "slow+" else -1)
        # a long event's edges are known to a block (or two: the slow threshold is
        # crossed in the block after a step that falls late in one)
        return None if f is None else self._with_steps(f, 2 * g.block_s + STEP_NEAR_S, 0.0)

    def _with_steps(self, f: dict, tol_s: float, inside_s: float) -> dict:
        """The event with the band-level steps at its edges: ``step_on`` (dB) of the
        event's own sign near its start, ``step_off`` of the other sign near its end
        (within ``tol_s`` of the edge, and ``inside_s`` more inside the event)."""
        a, b, inner = f["start"], f["end"], tol_s + inside_s
        f["step_on"] = self.steps.between(a - tol_s, a + inner, f["sign"])
        f["step_off"] = self.steps.between(b - inner, b + tol_s, -f["sign"])
        return f

    def band_mhz(self) -> float:
        """Width of the band covered so far (channels that ever carried data)."""
        g = self.grid
        cov = np.flatnonzero(self.covered)
        if len(cov) == 0:
            return 0.0
        return float(g.f_mhz[cov[-1]] - g.f_mhz[cov[0]] + g.chan_mhz)

