"""Covering 16-24 MHz with a receiver that sees ~2 MHz at a time: the sweep plan.

A 2.4 MS/s receiver sees 2.4 MHz, of which the middle ``usable_fraction`` is flat
enough to use (the RTL2832's decimation filter rolls off toward the edges) and a few kHz
around the centre carry the DC spike. The plan steps through tunings, one dwell each per
sweep cycle, and stitches the usable middle of every window into one row on the
station's channel grid. Each channel is taken from one tuning only: the nearest window
centre among those that give the channel its full share of FFT bins (so overlaps split
at the midpoint, and a channel that a window's DC cut thins out comes from a neighbour
when one reaches it), so a tone anywhere in the band lands in one channel of one window.

Timing. A cycle of ``cycle_s`` starts on the UTC grid of multiples of ``cycle_s`` and is
split into equal slices, one per tuning. In its slice a tuning is set, whole buffers are
thrown away (``discard_s``, rounded up to buffers: after a retune the stale data are
the buffers already queued in the dongle and the USB stack, not the tuner settling),
and the rest of the slice less one buffer of slack (retune latency) is the dwell.
Channels of tuning j were sampled from ``chan_offset_s = j * cycle_s / n + discard`` after
the row's time, for ``dwell_s``. Reads are paced by the samples' own disciplined times,
so a dwell never starts before its planned offset (it may start up to one buffer after).

``mode = "single"``: one fixed window (``center_hz``), rows straight from the channelizer
at the highest time resolution, for S-burst work.

``samples_per_cell(cfg)``: the independent power samples behind each archived cell, the
sweep's duty cycle included.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np

from rxlog.errors import RxlogError
from rxlog.receive.blocks import EndOfStream, segment_id
from rxlog.receive.channelizer import MIN_ROW_FILL, Channelizer, Dwell, header_safe
from rxlog.receive.ring import Ring
from rxlog.spectrum import FLAG_GAP, FLAG_UNCOVERED, DynamicSpectrum, channel_grid


@dataclass
class SweepPlan:
    mode: str                      # "sweep" or "single"
    tunings_hz: np.ndarray         # sky centre of each window
    rate_hz: float
    cycle_s: float
    cadence_s: float
    buffer_samples: int
    discard_buffers: int
    dwell_samples: int             # samples kept per tuning per cycle (whole buffers)
    freq_hz: np.ndarray            # the station's channel grid
    assignment: np.ndarray         # tuning index per channel, -1: no tuning covers it

    @property
    def n_tunings(self) -> int:
        return int(self.tunings_hz.size)

    @property
    def slice_s(self) -> float:
        return self.cycle_s / self.n_tunings

    @property
    def discard_s(self) -> float:
        return self.discard_buffers * self.buffer_samples / self.rate_hz

    @property
    def dwell_s(self) -> float:
        return self.dwell_samples / self.rate_hz

    @property
    def dwell_offsets_s(self) -> np.ndarray:
        """Planned start of each tuning's dwell after the start of its cycle."""
        return np.arange(self.n_tunings) * self.slice_s + self.discard_s

    @property
    def chan_offset_s(self) -> np.ndarray:
        if self.mode == "single":
            return np.zeros(self.freq_hz.size, dtype=np.float32)
        off = np.zeros(self.freq_hz.size, dtype=np.float32)
        ok = self.assignment >= 0
        off[ok] = self.dwell_offsets_s[self.assignment[ok]]
        return off

    @property
    def cycles_per_row(self) -> int:
        return max(1, int(round(self.cadence_s / self.cycle_s)))

    def allowed(self, j: int) -> np.ndarray:
        return self.assignment == j

    def samples_per_cell(self, ch: Channelizer) -> np.ndarray:
        """Independent power samples per archived cell and channel (0 where not covered)."""
        if self.mode == "single":
            return ch.samples_per_cell(float(self.tunings_hz[0]), self.rate_hz)
        frames = (self.dwell_samples - ch.fft_size) // ch.hop + 1
        out = np.zeros(self.freq_hz.size)
        for j, f in enumerate(self.tunings_hz):
            k = ch.samples_per_cell(float(f), self.rate_hz, frames=frames, allowed=self.allowed(j))
            out += k
        # cycles in one archived row are separate dwells: independent, they add
        return out * self.cycles_per_row

    def describe(self) -> str:
        if self.mode == "single":
            return f"single window at {self.tunings_hz[0] / 1e6:.3f} MHz"
        return (f"{self.n_tunings} tunings " + ", ".join(f"{f / 1e6:.3f}" for f in self.tunings_hz)
                + f" MHz; dwell {self.dwell_s * 1e3:.0f} ms each, discard {self.discard_s * 1e3:.1f} ms, "
                f"cycle {self.cycle_s:g} s")

    @classmethod
    def from_config(cls, cfg, rate_hz: float | None = None) -> "SweepPlan":
        sp, sw = cfg["spectra"], cfg["sweep"]
        rate = float(cfg["receiver"]["sample_rate_hz"] if rate_hz is None else rate_hz)
        grid = channel_grid(sp["fmin_mhz"], sp["fmax_mhz"], sp["channels"])
        ch = Channelizer(cfg, ring_s=0)
        return plan_for(grid, rate, ch, mode=sw["mode"], tunings_hz=sw["tunings_hz"], step_hz=sw["step_hz"],
                        center_hz=sw["center_hz"], cycle_s=sw["cycle_s"], cadence_s=sp["cadence_s"],
                        discard_s=sw["discard_s"], buffer_samples=sw["buffer_samples"])


# More tunings than any sweep cycle could dwell on: a smaller step is a slip of units
# (kHz or MHz written as Hz), refused before a tuning x channel table is built for it.
MAX_TUNINGS = 1024


def plan_for(grid: np.ndarray, rate_hz: float, ch: Channelizer, *, mode: str = "sweep", tunings_hz=(),
             step_hz: float = 0.0, center_hz: float = 0.0, cycle_s: float = 1.0, cadence_s: float = 1.0,
             discard_s: float = 0.01, buffer_samples: int = 16384) -> SweepPlan:
    """Work out tunings, channel assignment and dwell for a band ``grid`` at ``rate_hz``."""
    df = float(grid[1] - grid[0]) if grid.size > 1 else rate_hz
    lo, hi = grid[0] - df / 2, grid[-1] + df / 2
    if mode == "single":
        tunings = np.array([float(center_hz) if center_hz else (lo + hi) / 2])
    elif len(tunings_hz):
        tunings = np.array(sorted(float(f) for f in tunings_hz))
    elif step_hz:
        n = max(1, int(math.ceil((hi - lo) / step_hz - 1e-9)))
        if n > MAX_TUNINGS:
            raise RxlogError(f"step_hz = {step_hz:g} Hz gives {n} tunings across {(hi - lo) / 1e6:g} MHz; "
                             f"expected at most {MAX_TUNINGS} (the step is in Hz, e.g. 2e6)")
        tunings = lo + step_hz / 2 + step_hz * np.arange(n)
    else:
        # as few evenly spaced windows as cover every channel
        usable = ch.usable_fraction * rate_hz
        n = max(1, int(math.ceil((hi - lo) / usable)))
        while True:
            tunings = lo + (hi - lo) / n * (np.arange(n) + 0.5)
            # centre each window on a channel edge: the DC cut then takes a little from two
            # channels instead of perhaps all bins of one
            tunings = lo + np.round((tunings - lo) / df) * df
            if (_assign(grid, tunings, rate_hz, ch) >= 0).all() or n > 64:
                break
            n += 1
    assignment = _assign(grid, tunings, rate_hz, ch)
    if mode == "single":
        return SweepPlan("single", tunings, rate_hz, cadence_s, cadence_s, int(buffer_samples), 0, 0, grid,
                         assignment)
    discard_buffers = int(math.ceil(discard_s * rate_hz / buffer_samples - 1e-9))
    slice_samples = cycle_s / tunings.size * rate_hz
    dwell_buffers = int((slice_samples - (discard_buffers + 1) * buffer_samples) // buffer_samples)
    return SweepPlan("sweep", tunings, rate_hz, float(cycle_s), float(cadence_s), int(buffer_samples),
                     discard_buffers, max(0, dwell_buffers) * int(buffer_samples), grid, assignment)


def _assign(grid, tunings, rate_hz, ch: Channelizer) -> np.ndarray:
    """Tuning index per channel: the nearest window centre among those giving the channel its
    full share of FFT bins; where none does (DC cut, window edge), the one giving most bins."""
    counts = np.zeros((tunings.size, grid.size))
    for j, f in enumerate(tunings):
        m = ch.channel_map(float(f), rate_hz)
        counts[j, m.chans] = m.counts
    df = float(grid[1] - grid[0]) if grid.size > 1 else rate_hz
    full = counts >= max(1, math.floor(df / (rate_hz / ch.fft_size) + 1e-9))
    dist = np.abs(grid[None, :] - tunings[:, None])
    near_full = np.argmin(np.where(full, dist, np.inf), axis=0)
    most = np.argmax(counts - dist / (dist.max() + 1.0), axis=0)     # bins first, distance breaks ties
    best = np.where(full.any(axis=0), near_full, most)
    best[counts.max(axis=0) == 0] = -1
    return best


def samples_per_cell(cfg, center_hz: float | None = None, rate_hz: float | None = None) -> np.ndarray:
    """Independent power samples behind each archived cell, per channel (0: not covered).

    Accounts for the window (correlation of neighbouring FFT bins, which sets the
    equivalent noise bandwidth), frame overlap (Welch 1967), how many bins fall in a
    channel, and in sweep mode the duty cycle: only the dwell of a channel's tuning,
    once per sweep cycle, contributes. For Gaussian noise a cell's linear power is
    mean × Gamma(K)/K with K this number.
    """
    rate = float(cfg["receiver"]["sample_rate_hz"] if rate_hz is None else rate_hz)
    plan = SweepPlan.from_config(cfg, rate)
    ch = Channelizer(cfg, ring_s=0)
    if plan.mode == "single" or center_hz is not None:
        c = plan.tunings_hz[0] if center_hz is None else float(center_hz)
        return ch.samples_per_cell(c, rate)
    return plan.samples_per_cell(ch)


class Sweeper:
    """Runs a sweep plan on a source: stitched rows on the channel grid with ``chan_offset_s``.

    ``step()`` runs one sweep cycle (single mode: one buffer) and returns the rows it
    completed; ``spectra()`` iterates until the source ends. ``ring`` holds the last
    ``ring_s`` of native-resolution rows (single mode: the channelizer's ~2 ms spectra;
    sweep mode: one row per cycle) for cutouts.
    """

    def __init__(self, source, plan: SweepPlan, channelizer: Channelizer, meta: dict | None = None):
        if plan.mode == "sweep" and plan.dwell_samples < 2 * channelizer.fft_size:
            raise RxlogError(f"[sweep]: no time left to dwell ({plan.describe()}); use fewer tunings, "
                             "a longer cycle_s or a shorter discard_s")
        self.source, self.plan, self.ch = source, plan, channelizer
        self.meta = dict(meta or {})
        self.ring: Ring | None = None
        self._slot = None
        self._row = None            # cadence row being averaged: [row, sum power, n, sum sk, n sk, uncovered, cycles]
        self._n_segments = 0
        self.segment = ""
        self.late_s = 0.0           # largest delay of a dwell start past its plan seen so far
        self._last_row = None

    # -- life cycle
    def open(self) -> None:
        self.source.open()
        p = self.plan
        if p.mode == "single":
            if getattr(self.source, "kind", "") != "recording" and self.source.center_hz != p.tunings_hz[0]:
                self.source.tune(float(p.tunings_hz[0]))
            self.ring = self.ch.ring
        else:
            self._new_segment()
            if self.ch.ring_s > 0:
                self.ring = Ring(self.ch.ring_s, p.cycle_s, p.freq_hz, np.flatnonzero(p.assignment >= 0),
                                 self.segment, {"mode": "sweep"})

    def close(self) -> None:
        self.source.close()

    def __enter__(self):
        self.open()
        return self

    def __exit__(self, *exc):
        self.close()

    @property
    def samples_received(self) -> int:
        return int(getattr(self.source, "samples_received", 0))

    @property
    def samples_dropped(self) -> int:
        return int(getattr(self.source, "samples_dropped", 0))

    def _new_segment(self) -> None:
        """Each opening of the source starts a segment (gain and rate are set at open)."""
        self._n_segments += 1
        self.segment = segment_id("sweep", getattr(self.source, "realtime", time.time)(), self._n_segments)

    # -- running
    def spectra(self, max_rows: int | None = None):
        """Rows until the source ends (or ``max_rows`` rows)."""
        rows = 0
        try:
            while max_rows is None or rows < max_rows:
                for ds in self.step():
                    rows += ds.n_time
                    yield ds
        except EndOfStream:
            yield from self.finish()

    def finish(self) -> list[DynamicSpectrum]:
        """Whatever is still being averaged (single mode: the row in progress)."""
        if self.plan.mode == "single":
            return self.ch.flush()
        return self._finish_row()

    def step(self) -> list[DynamicSpectrum]:
        if self.plan.mode == "single":
            self.ring = self.ch.ring
            return self.ch.feed(self.source.read(self.plan.buffer_samples))
        return self._cycle()

    def _cycle(self) -> list[DynamicSpectrum]:
        p, src = self.plan, self.source
        power = np.full(p.freq_hz.size, np.nan)
        sk = np.full(p.freq_hz.size, np.nan)
        flags = np.where(p.assignment >= 0, 0, FLAG_UNCOVERED).astype(np.uint8)
        slot_t0 = None
        for j, f in enumerate(p.tunings_hz):
            src.tune(float(f))
            seg = src.segment
            block = self._discard(seg, j, slot_t0)
            if slot_t0 is None:
                # the cycle starts on the next slot whose first dwell this block can still make
                # (up to one buffer late)
                late_ok = p.buffer_samples / p.rate_hz
                slot = math.ceil((block.t0 - p.dwell_offsets_s[0] - late_ok) / p.cycle_s)
                if self._slot is not None:
                    slot = max(slot, self._slot + 1)
                self._slot = slot
                slot_t0 = slot * p.cycle_s
                block = self._pace(block, seg, slot_t0 + p.dwell_offsets_s[0])
            self.late_s = max(self.late_s, block.t0 - (slot_t0 + p.dwell_offsets_s[j]))
            dwell = Dwell(self.ch, float(f), p.rate_hz, p.allowed(j))
            got = 0
            while True:
                dwell.add(block)
                got += block.n
                if got + getattr(src, "pending_samples", 0) >= p.dwell_samples:
                    break
                block = src.read(p.buffer_samples)
            for block in getattr(src, "drain", list)():    # reads still in the clock's look-ahead
                dwell.add(block)
            pw, k, frames = dwell.result()
            mine = p.allowed(j)
            planned = (p.dwell_samples - self.ch.fft_size) // self.ch.hop + 1
            if frames >= MIN_ROW_FILL * planned:
                power[mine] = pw[mine]
                if k is not None:
                    sk[mine] = k[mine]
            else:
                flags[mine] |= FLAG_GAP
        db = np.full(p.freq_hz.size, np.nan, dtype=np.float32)
        with np.errstate(divide="ignore", invalid="ignore"):
            db[:] = 10 * np.log10(power)
        if self.ring is not None:
            self.ring.push(np.array([slot_t0]), db[None, self.ring.chans])
        return self._add_to_row(slot_t0, power, sk, flags)

    def _discard(self, seg: str, j: int, slot_t0: float | None):
        """Throw away stale buffers after a retune; return the first block worth keeping."""
        p, src = self.plan, self.source
        kept = 0
        while True:
            block = src.read(p.buffer_samples)
            if block.segment != seg:           # look-ahead reads from before the retune
                continue
            kept += 1
            if kept <= p.discard_buffers:
                continue
            if slot_t0 is not None:
                return self._pace(block, seg, slot_t0 + p.dwell_offsets_s[j])
            return block

    def _pace(self, block, seg, t_start):
        """Skip buffers that start before ``t_start`` (the source is ahead of the plan)."""
        half = 0.5 / block.rate_hz
        while block.t0 + half < t_start and block.t_end <= t_start + half:
            block = self.source.read(self.plan.buffer_samples)
            while block.segment != seg:
                block = self.source.read(self.plan.buffer_samples)
        return block

    # -- averaging cycles into archived rows
    def _add_to_row(self, slot_t0, power, sk, flags) -> list[DynamicSpectrum]:
        p = self.plan
        row = int(math.floor(slot_t0 / p.cadence_s + 1e-9))
        out = []
        if self._row is not None and self._row[0] != row:
            out = self._finish_row()
        if self._row is None:
            self._row = [row, np.zeros_like(power), np.zeros(power.size), np.zeros_like(sk),
                         np.zeros(sk.size), np.zeros(power.size, dtype=np.uint8), 0]
        r = self._row
        ok = np.isfinite(power)
        r[1][ok] += power[ok]
        r[2][ok] += 1
        okk = np.isfinite(sk)
        r[3][okk] += sk[okk]
        r[4][okk] += 1
        r[5] |= flags & FLAG_UNCOVERED
        r[6] += 1
        if r[6] >= p.cycles_per_row:
            out += self._finish_row()
        return out

    def _finish_row(self) -> list[DynamicSpectrum]:
        if self._row is None:
            return []
        p = self.plan
        row, s, n, ks, kn, unc, _ = self._row
        self._row = None
        n_chan = p.freq_hz.size
        power = np.full(n_chan, np.nan, dtype=np.float32)
        sk = np.full(n_chan, np.nan, dtype=np.float32)
        enough = n >= MIN_ROW_FILL * p.cycles_per_row
        with np.errstate(divide="ignore", invalid="ignore"):
            power[enough] = 10 * np.log10(s[enough] / n[enough])
            sk[kn > 0] = ks[kn > 0] / kn[kn > 0]
        flags = np.where(unc > 0, FLAG_UNCOVERED, np.where(enough, 0, FLAG_GAP)).astype(np.uint8)
        sk[~enough] = np.nan
        if not enough.any():
            return []
        # rows missed since the last one (a receiver gap) come out as flagged gap rows
        n_gap = 0
        if self._last_row is not None and self._last_row[0] == self.segment:
            n_gap = row - self._last_row[1] - 1
            if n_gap > 600:
                n_gap = 0
        self._last_row = (self.segment, row)
        P = np.full((n_gap + 1, n_chan), np.nan, dtype=np.float32)
        F = np.tile(np.where(p.assignment >= 0, FLAG_GAP, FLAG_UNCOVERED).astype(np.uint8), (n_gap + 1, 1))
        K = np.full((n_gap + 1, n_chan), np.nan, dtype=np.float32)
        P[-1], F[-1], K[-1] = power, flags, sk
        meta = header_safe(dict(self.meta, mode="sweep", rate_hz=p.rate_hz,
                                gain_db=float(getattr(self.source, "gain_db", math.nan)), fft_size=self.ch.fft_size,
                                window=self.ch.window_name, cycle_s=p.cycle_s, dwell_s=p.dwell_s,
                                tunings_mhz=",".join(f"{f / 1e6:.4f}" for f in p.tunings_hz)))
        return [DynamicSpectrum(P, (row - n_gap) * p.cadence_s, p.cadence_s, p.freq_hz, F,
                                chan_offset_s=p.chan_offset_s, segment=self.segment, meta=meta,
                                kurtosis=K if self.ch.kurtosis else None)]


def config_problems(cfg: dict, at) -> list[str]:
    """Cross-key checks of ``[sweep]`` against ``[receiver]`` and ``[spectra]``."""
    sw, sp, rx = cfg.get("sweep", {}), cfg.get("spectra", {}), cfg.get("receiver", {})
    need = {"mode", "fft_size", "cycle_s", "discard_s", "buffer_samples", "usable_fraction", "dc_cut_hz",
            "window", "overlap", "tunings_hz", "step_hz", "center_hz"}
    if not need <= sw.keys() or not {"fmin_mhz", "fmax_mhz", "channels", "cadence_s"} <= sp.keys() \
            or "sample_rate_hz" not in rx or sp["fmin_mhz"] >= sp["fmax_mhz"]:
        return []                        # a key is already reported as invalid
    problems = []
    rate = float(rx["sample_rate_hz"])
    df = (sp["fmax_mhz"] - sp["fmin_mhz"]) * 1e6 / sp["channels"]
    if rate / sw["fft_size"] > df:
        need_n = 2 ** math.ceil(math.log2(rate / df))
        problems.append(f"{at('sweep', 'fft_size')}: FFT bins of {rate / sw['fft_size'] / 1e3:.2f} kHz are wider "
                        f"than the {df / 1e3:.2f}-kHz channels of [spectra]; expected fft_size >= {need_n}")
        return problems
    if sw["mode"] == "sweep":
        ratio = sp["cadence_s"] / sw["cycle_s"]
        if abs(ratio - round(ratio)) > 1e-6 or round(ratio) < 1:
            problems.append(f"{at('sweep', 'cycle_s')}: [spectra] cadence_s ({sp['cadence_s']}) must be a whole "
                            f"number of sweep cycles (cycle_s = {sw['cycle_s']})")
        if rx.get("kind") == "recording":
            problems.append(f"{at('sweep', 'mode')}: a recording cannot be swept; expected mode = \"single\"")
        if rx.get("kind") == "rtltcp" and sw["discard_s"] < 1.0 and (len(sw["tunings_hz"]) != 1):
            problems.append(f"{at('sweep', 'discard_s')}: rtl_tcp queues about 0.8 s of samples in the server, "
                            "so a retune shows only after that; expected discard_s >= 1.0 (and a long "
                            "cycle_s) or mode = \"single\"")
        if not problems:
            try:
                plan = SweepPlan.from_config(cfg, rate)
            except RxlogError as e:
                return [f"{at('sweep')}: {e}"]
            if plan.dwell_samples < 2 * sw["fft_size"]:
                problems.append(f"{at('sweep', 'cycle_s')}: {plan.n_tunings} tunings in {sw['cycle_s']} s leave "
                                f"no time to dwell after discarding {plan.discard_s * 1e3:.1f} ms per retune; "
                                "expected a longer cycle_s, fewer tunings or a shorter discard_s")
            elif not (plan.assignment >= 0).all():
                miss = plan.freq_hz[plan.assignment < 0]
                problems.append(f"{at('sweep', 'tunings_hz')}: channels from {miss[0] / 1e6:.4f} to "
                                f"{miss[-1] / 1e6:.4f} MHz are in no tuning's usable window; add tunings "
                                "or leave tunings_hz empty for an automatic plan")
    return problems


__all__ = ["SweepPlan", "Sweeper", "plan_for", "samples_per_cell", "config_problems"]
