"""Reading a night's spectra for the report: the overview grid, coverage, masked cells,
event zoom windows, and the running background the overview is shown against; and which
night has data to review by default.

The archive is read once, in chunks of an hour, so memory stays flat however long the
night or however many events it has.
"""

from __future__ import annotations

import datetime as dt
import math
import time
import warnings
from dataclasses import dataclass, field

import numpy as np
from scipy.sparse import csr_matrix

from rxlog.archive.read import archive_extent, read_archive
from rxlog.errors import RxlogError
from rxlog.review.night import Night, night_of, night_starting
from rxlog.spectrum import FLAG_GAP, FLAG_RFI, FLAG_UNCOVERED
from rxlog.store import EventStore
from rxlog.timeutil import parse_iso

CHUNK_S = 3600.0             # archive read granularity
OVERVIEW_TIME_BINS = 1440    # one minute per bin for a 24-h night
MAX_FREQ_BINS = 256          # display channels
ZOOM_TIME_BINS = 360         # at most this many columns in an event zoom
BACKGROUND_BLOCK_BINS = 60   # overview bins per running-background block (an hour)
DISPLAY_FLAGS = FLAG_GAP | FLAG_UNCOVERED | FLAG_RFI   # cells left out of the displayed power
ZOOM_BACKGROUND_S = (3600.0, 1800.0)   # a zoom's background: overview minutes this long before and after it

# Zoom window lengths (s): a window snaps to the shortest that holds the event with some
# room either side, so zooms of similar events share one time axis (and one drawn frame).
ZOOM_LENGTHS_S = (40, 60, 120, 300, 600, 1200, 1800, 3600, 7200, 14400, 28800)


@dataclass
class _Zoom:
    """Accumulator of one event's zoom: sums and counts on its own time grid."""
    index: int
    event: dict
    a: float
    b: float
    t_edges: np.ndarray
    sums: np.ndarray | None = None
    counts: np.ndarray | None = None

    def start(self, n_fb: int):
        self.sums = np.zeros((len(self.t_edges) - 1, n_fb))
        self.counts = np.zeros_like(self.sums)


@dataclass
class NightData:
    """What the archive pass learns about a night."""
    night: Night
    t_edges: np.ndarray              # overview time bin edges (POSIX s)
    f_edges_mhz: np.ndarray          # display frequency bin edges (MHz)
    power: np.ndarray                # (n_tb, n_fb) mean power dB, NaN where nothing usable
    covered: list = field(default_factory=list)     # merged [(start, end)] with data
    cells_valid: float = 0.0         # cells with data
    cells_masked: float = 0.0        # of those, flagged as interference
    hourly_masked: dict = field(default_factory=dict)   # hour start (POSIX) -> [masked, valid]

    @property
    def covered_s(self) -> float:
        return sum(b - a for a, b in self.covered)

    def gaps(self, min_s: float = 0.0) -> list[tuple[float, float]]:
        out, t = [], self.night.t0
        for a, b in self.covered:
            if a - t > min_s:
                out.append((t, a))
            t = max(t, b)
        if self.night.t1 - t > min_s:
            out.append((t, self.night.t1))
        return out


def freq_bins(cfg) -> np.ndarray:
    """Edges (MHz) of the display channels: the band in at most MAX_FREQ_BINS bins."""
    sp = cfg["spectra"]
    n = min(int(sp["channels"]), MAX_FREQ_BINS)
    return np.linspace(sp["fmin_mhz"], sp["fmax_mhz"], n + 1)


def display_channels(power, valid, chan_bin, n_fb):
    """Sum valid cells into display channels: (sums, counts), each (n_rows, n_fb).

    ``chan_bin[c]`` is channel c's display bin (-1: outside the band). One product with
    a sparse 0/1 matrix does it for any channel order.
    """
    ok = chan_bin >= 0
    m = csr_matrix((np.ones(int(ok.sum()), np.float32), (np.flatnonzero(ok), chan_bin[ok])),
                   shape=(len(chan_bin), n_fb))
    x = np.where(valid, power, np.float32(0))
    return np.asarray(x @ m), np.asarray(valid.astype(np.float32) @ m)


def add_rows(sums, counts, row_bin, x, n):
    """Add rows of display-channel sums ``x`` and counts ``n`` into time bins ``row_bin``
    (rising with the row; bins outside 0..len(sums)-1 are dropped), one block sum per bin."""
    r0, r1 = np.searchsorted(row_bin, [0, sums.shape[0]])
    if r1 <= r0:
        return
    rb = row_bin[r0:r1]
    starts = np.flatnonzero(np.r_[True, rb[1:] != rb[:-1]])
    sums[rb[starts]] += np.add.reduceat(x[r0:r1], starts, axis=0)
    counts[rb[starts]] += np.add.reduceat(n[r0:r1], starts, axis=0)


def merge_intervals(intervals) -> list[tuple[float, float]]:
    """Sorted union of (start, end) intervals; ones that touch (within a microsecond) join."""
    out = []
    for a, b in sorted(intervals):
        if out and a <= out[-1][1] + 1e-6:
            out[-1][1] = max(out[-1][1], b)
        else:
            out.append([a, b])
    return [(a, b) for a, b in out]


def data_extent(cfg) -> tuple[float, float] | None:
    """First and last instant with data: archived spectra or stored events, whichever reach further."""
    lo, hi = [], []
    ext = archive_extent(cfg.archive_dir)
    if ext is not None:
        lo.append(float(ext[0])); hi.append(float(ext[1]))
    store = EventStore(cfg.store_path)
    try:
        row = store.db.execute("select min(start_utc), max(end_utc) from events "
                               "where station = ?", [cfg["station"]["name"]]).fetchone()
    finally:
        store.close()
    if row and row[0]:
        lo.append(parse_iso(row[0])); hi.append(parse_iso(row[1]))
    return (min(lo), max(hi)) if lo else None


def default_night(cfg, now: float | None = None) -> Night:
    """The latest complete night that has data.

    A night is complete once the wall clock or the data have passed its closing noon.
    Demo data may lie in the future, so when no night with data is complete, the night
    holding the latest data is taken (its report says how much of it was recorded).
    """
    ext = data_extent(cfg)
    if ext is None:
        raise RxlogError(f"no data yet: no archived spectra under {cfg.archive_dir} and no events in "
                         f"{cfg.store_path}; record or simulate a night first, or pass --night")
    first, last = ext
    now = time.time() if now is None else now
    latest = night_of(cfg, max(first, last - 1e-3))
    if latest.t1 <= max(now, last):
        return latest
    before = night_starting(cfg, latest.date - dt.timedelta(days=1))
    return before if before.t1 > first else latest


def zoom_window(ev: dict, cadence_s: float) -> tuple[float, float]:
    """The (start, end) of an event's zoom: centred on the event, a length from ZOOM_LENGTHS_S."""
    a, b = parse_iso(ev["start_utc"]), parse_iso(ev["end_utc"])
    need = (b - a) + 2 * max(0.25 * (b - a), 10.0 * cadence_s, 8.0)
    length = next((L for L in ZOOM_LENGTHS_S if L >= need), math.ceil(need / 3600.0) * 3600.0)
    mid = round(0.5 * (a + b))
    return mid - 0.5 * length, mid + 0.5 * length


def chunk_bounds(night: Night) -> list[tuple[float, float]]:
    """The night cut on whole UTC hours (the archive keeps one file per UTC hour)."""
    edges = np.arange(math.floor(night.t0 / CHUNK_S) * CHUNK_S, night.t1, CHUNK_S)[1:]
    starts = np.concatenate(([night.t0], edges))
    ends = np.append(starts[1:], night.t1)
    return [(float(c0), float(min(c1, night.t1))) for c0, c1 in zip(starts, ends)]


def read_night(cfg, night: Night, events: list[dict], on_zoom=None, progress=None) -> NightData:
    """One pass over the night's archive: overview grid, coverage, masked cells, event zooms.

    ``on_zoom(index, event, t_edges, f_edges_mhz, power, background)`` is called for each
    event as soon as the data past its window (and the background around it) are read.
    ``progress(done, total)`` is called after each chunk.
    """
    reader = _NightPass(cfg, night, events)
    chunks = chunk_bounds(night)
    for k, (c0, c1) in enumerate(chunks):
        reader.open_zooms(c1)
        for seg in read_archive(cfg.archive_dir, c0, c1).segments:
            reader.add_segment(seg, c0, c1)
        if on_zoom is not None:
            reader.finish_zooms(on_zoom, c1)
        if progress is not None:
            progress(k + 1, len(chunks))
    if on_zoom is not None:
        reader.finish_zooms(on_zoom, night.t1, last=True)
    return reader.result()


class _NightPass:
    """What ``read_night`` keeps while it reads: the overview sums, the coverage, the
    masked-cell counts, and the zooms waiting for their window, being filled, or done."""

    def __init__(self, cfg, night: Night, events: list[dict]):
        cadence = float(cfg["spectra"]["cadence_s"])
        self.night, self.f_edges = night, freq_bins(cfg)
        self.n_fb = len(self.f_edges) - 1
        self.width = max((night.t1 - night.t0) / OVERVIEW_TIME_BINS, cadence)
        n_tb = int(math.ceil((night.t1 - night.t0) / self.width))
        self.t_edges = night.t0 + self.width * np.arange(n_tb + 1)
        self.sums, self.counts = np.zeros((n_tb, self.n_fb)), np.zeros((n_tb, self.n_fb))
        self.data = NightData(night, self.t_edges, self.f_edges, np.full((n_tb, self.n_fb), np.nan))
        self.covered: list[tuple[float, float]] = []
        self.pending: list[_Zoom] = []    # zooms not yet started, by window start
        for i, ev in enumerate(events):
            a, b = zoom_window(ev, cadence)
            n = int(min(ZOOM_TIME_BINS, max(8, math.ceil((b - a) / cadence))))
            self.pending.append(_Zoom(i, ev, a, b, np.linspace(a, b, n + 1)))
        self.pending.sort(key=lambda z: z.a)
        self.active: list[_Zoom] = []

    def open_zooms(self, c1: float):
        """Start filling the zooms whose window begins before ``c1``."""
        while self.pending and self.pending[0].a < c1:
            z = self.pending.pop(0)
            z.start(self.n_fb)
            self.active.append(z)

    def add_segment(self, seg, c0: float, c1: float):
        """Add one archive segment's rows inside [c0, c1) to the overview, the counts and the zooms."""
        keep = (seg.times >= c0) & (seg.times < c1)
        if not keep.any():
            return
        rows = np.flatnonzero(keep)
        times = seg.times[rows]
        power = seg.power_db[rows[0]:rows[-1] + 1]
        flags = seg.flags[rows[0]:rows[-1] + 1]
        have = np.isfinite(power) & ((flags & (FLAG_GAP | FLAG_UNCOVERED)) == 0)
        valid = have & ((flags & FLAG_RFI) == 0)
        chan_bin = np.searchsorted(self.f_edges, seg.freq_hz / 1e6, side="right") - 1
        chan_bin[(chan_bin < 0) | (chan_bin >= self.n_fb)] = -1
        row_bin = np.floor((times - self.night.t0) / self.width).astype(np.int64)
        xs, ns = display_channels(power, valid, chan_bin, self.n_fb)
        add_rows(self.sums, self.counts, row_bin, xs, ns)
        self._add_coverage(times, have, seg.cadence_s)
        self._add_masked(times, have, flags)
        for z in self.active:
            r0, r1 = np.searchsorted(times, [z.a, z.b])
            if r1 <= r0:
                continue
            zb = np.floor((times[r0:r1] - z.a) / (z.t_edges[1] - z.t_edges[0])).astype(np.int64)
            add_rows(z.sums, z.counts, zb, xs[r0:r1], ns[r0:r1])

    def _add_coverage(self, times, have, cadence_s: float):
        """Runs of rows with any data, each row lasting one cadence."""
        row_has = have.any(axis=1)
        if row_has.any():
            step = np.diff(np.concatenate(([0], row_has.astype(np.int8), [0])))
            starts, ends = np.flatnonzero(step == 1), np.flatnonzero(step == -1)
            self.covered.extend(zip(times[starts], times[ends - 1] + cadence_s))

    def _add_masked(self, times, have, flags):
        """Cells with data and, of those, cells flagged as interference: the night's and each UTC hour's."""
        data = self.data
        n_have = have.sum(axis=1)
        n_masked = (have & ((flags & FLAG_RFI) != 0)).sum(axis=1)
        data.cells_valid += float(n_have.sum()); data.cells_masked += float(n_masked.sum())
        hours = np.floor(times / 3600.0) * 3600.0
        for h in np.unique(hours):
            sel = hours == h
            acc = data.hourly_masked.setdefault(float(h), [0.0, 0.0])
            acc[0] += float(n_masked[sel].sum()); acc[1] += float(n_have[sel].sum())

    def finish_zooms(self, on_zoom, read_to: float, last: bool = False):
        """Hand over the zooms whose background has been read up to ``read_to`` (``last``: all)."""
        if last:
            done, self.active = self.active + self.pending, []
            self.pending = []
        else:
            done = [z for z in self.active if z.b + ZOOM_BACKGROUND_S[1] <= read_to]
            self.active = [z for z in self.active if z.b + ZOOM_BACKGROUND_S[1] > read_to]
        for z in done:
            if z.sums is None:
                z.start(self.n_fb)
            self._finish(z, on_zoom, read_to)

    def _finish(self, z: _Zoom, on_zoom, read_to: float):
        # Background: the per-channel median of the overview minutes from an hour
        # before the event to half an hour after it (all read by now).
        lo = np.searchsorted(self.t_edges, z.a - ZOOM_BACKGROUND_S[0])
        hi = max(np.searchsorted(self.t_edges, min(z.b + ZOOM_BACKGROUND_S[1], read_to)), lo + 1)
        with np.errstate(invalid="ignore", divide="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            power = z.sums / z.counts
            bg = np.nanmedian(self.sums[lo:hi] / self.counts[lo:hi], axis=0)
        on_zoom(z.index, z.event, z.t_edges, self.f_edges, power, bg)

    def result(self) -> NightData:
        with np.errstate(invalid="ignore", divide="ignore"):
            self.data.power = (self.sums / self.counts).astype(np.float32)
        self.data.covered = merge_intervals(self.covered)
        return self.data


def running_background(power: np.ndarray, block: int = BACKGROUND_BLOCK_BINS) -> np.ndarray:
    """Per-channel background following slow drifts: medians of hour blocks, linearly interpolated in time."""
    n_t, n_f = power.shape
    n_blocks = max(1, int(math.ceil(n_t / block)))
    padded = np.full((n_blocks * block, n_f), np.nan, dtype=np.float64)
    padded[:n_t] = power
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        med = np.nanmedian(padded.reshape(n_blocks, block, n_f), axis=1)
        overall = np.nanmedian(power, axis=0)
    med = np.where(np.isfinite(med), med, overall[None, :])
    centres = (np.arange(n_blocks) + 0.5) * block
    x = np.arange(n_t) + 0.5
    out = np.empty((n_t, n_f))
    for c in range(n_f):   # one interpolation per display channel (<= 256), not per sample
        out[:, c] = np.interp(x, centres, med[:, c])
    return out
