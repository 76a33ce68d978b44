"""The morning report: one night's summary, plots and a self-contained review page.

A night runs from local noon to the next local noon at the station (the station's
``timezone``), so an evening and the morning after are one night; it is named by the
local date on which it begins. ``build_report`` writes ``<reports_dir>/<night>/``:

- ``index.html``: the summary, the plots and one card per event with its label
  control. Styles and script are inline, images sit beside it and are linked by
  relative paths, nothing is fetched from the network, so the folder can be copied or
  mailed and still opens from disk. Labelling needs ``rxlog review --serve``
  (``review_server.py``); from disk the page is read-only.
- ``overview.png``: the night's dynamic spectrum (excess over a running background)
  with event boxes, the Sun-up and Jupiter-up bands and the hourly masked fraction on
  one local-time axis.
- ``cml_io.png``: the night's Jovian candidates on the CML III–Io-phase plane over the
  source regions.
- ``events/<event_id>.png``: per event, a zoom of the dynamic spectrum and its light
  curve (from the kept full-resolution cutout when there is one, else the archive).

The archive is read once, in chunks of an hour, so memory stays flat however long the
night or however many events it has.
"""

from __future__ import annotations

import datetime as dt
import html
import json
import math
import time
import urllib.parse
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from zoneinfo import ZoneInfo

import numpy as np

from rxlog.errors import RxlogError
from rxlog.fileio import write_atomic
from rxlog.palette import CLASS_COLOURS, CLASS_NAMES, colour, css_rules, outline
from rxlog.spectrum import FLAG_GAP, FLAG_RFI, FLAG_UNCOVERED
from rxlog.store import CLASSES, LABELS, EventStore
from rxlog.timeutil import iso, parse_iso

# Human names of classes and labels, in the order the page shows them (keys 1..9, 0).
# Class colours and names come from rxlog.palette, shared by every plot and the page.
LABEL_NAMES = {**CLASS_NAMES, "noise": "Nothing there", "unsure": "Not sure"}
LABEL_KEYS = {lab: str((i + 1) % 10) for i, lab in enumerate(LABELS)}
JOVIAN = ("jovian_l", "jovian_s")

# Colours of what is not a class (bands, light curves, region boxes, the selection):
# greys and ink, so that a palette colour always means a class.
INK = "#1d2327"
BAND_GREY = "#6b757d"

CHUNK_S = 3600.0             # archive read granularity
OVERVIEW_TIME_BINS = 1440    # one minute per bin for a 24-h night
MAX_FREQ_BINS = 256          # display channels
ZOOM_TIME_BINS = 360         # at most this many columns in an event zoom
BACKGROUND_BLOCK_BINS = 60   # overview bins per running-background block (an hour)
DISPLAY_FLAGS = FLAG_GAP | FLAG_UNCOVERED | FLAG_RFI   # cells left out of the displayed power


# -- nights -----------------------------------------------------------------------------

@dataclass(frozen=True)
class Night:
    """One observing night: [t0, t1) from local noon on ``date`` to local noon the day after."""
    date: dt.date
    t0: float
    t1: float
    tz: ZoneInfo

    @property
    def name(self) -> str:
        return self.date.isoformat()

    def local(self, t: float) -> dt.datetime:
        return dt.datetime.fromtimestamp(t, self.tz)

    def zone(self, t: float) -> str:
        """The station zone's name at ``t`` as clocks show it ('EST', 'CEST'; 'UTC+05:30' where it has none)."""
        return zone_name(self.local(t))

    def stamp(self, t: float, seconds: bool = True) -> str:
        """Local date and time with the zone: '2027-02-03 21:04:05 EST'."""
        return f"{self.local(t):%Y-%m-%d %H:%M{':%S' if seconds else ''}} {self.zone(t)}"


def zone_name(d: dt.datetime) -> str:
    """An aware datetime's zone abbreviation; 'UTC+hh:mm' where the zone has only a numeric one."""
    name = d.tzname() or ""
    if not name or name[0] in "+-" or name[0].isdigit():
        off = d.strftime("%z") or "+0000"
        return f"UTC{off[:3]}:{off[3:5]}"
    return name


def utc_stamp(t: float, seconds: bool = True) -> str:
    """'2027-02-04 02:04:05 UTC'."""
    return iso(t)[:19 if seconds else 16].replace("T", " ") + " UTC"


def night_starting(cfg, date: dt.date) -> Night:
    """The night that begins at local noon of ``date`` (23 or 25 h long across a clock change)."""
    tz = ZoneInfo(cfg["station"]["timezone"])
    start = dt.datetime.combine(date, dt.time(12), tzinfo=tz)
    end = dt.datetime.combine(date + dt.timedelta(days=1), dt.time(12), tzinfo=tz)
    return Night(date, start.timestamp(), end.timestamp(), tz)


def night_of(cfg, t_unix: float) -> Night:
    """The night containing the instant ``t_unix``."""
    tz = ZoneInfo(cfg["station"]["timezone"])
    local = dt.datetime.fromtimestamp(t_unix, tz)
    date = local.date() if local.hour >= 12 else local.date() - dt.timedelta(days=1)
    return night_starting(cfg, date)


def parse_night(cfg, text: str) -> Night:
    """'YYYY-MM-DD' (the local date on which the night begins) -> Night."""
    try:
        date = dt.date.fromisoformat(str(text).strip())
    except ValueError:
        raise RxlogError(f"night {text!r}: expected a date YYYY-MM-DD, the local date on which "
                         f"the night begins (it runs noon to noon)") from None
    return night_starting(cfg, date)


def data_extent(cfg) -> tuple[float, float] | None:
    """First and last instant with data: archived spectra or stored events, whichever reach further."""
    from rxlog.archive.read import archive_extent

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


def report_dir(cfg, night: Night) -> Path:
    return Path(cfg.reports_dir) / night.name


# -- reading the night ------------------------------------------------------------------

@dataclass
class _Zoom:
    """Accumulator of one event's zoom: sums and counts on its own time grid."""
    index: int
    event: dict
    a: float
    b: float
    t_edges: np.ndarray
    sums: np.ndarray
    counts: np.ndarray


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


def _freq_bins(cfg) -> np.ndarray:
    sp = cfg["spectra"]
    n = min(int(sp["channels"]), MAX_FREQ_BINS)
    return np.linspace(sp["fmin_mhz"], sp["fmax_mhz"], n + 1)


def display_channels(power, valid, chan_bin, n_fb):
    """Sum valid cells into display channels: (sums, counts), each (n_rows, n_fb).

    ``chan_bin[c]`` is channel c's display bin (-1: outside the band). One product with
    a sparse 0/1 matrix does it for any channel order.
    """
    from scipy.sparse import csr_matrix

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


def _merge(intervals):
    out = []
    for a, b in sorted(intervals):
        if out and a <= out[-1][1] + 1e-6:
            out[-1][1] = max(out[-1][1], b)
        else:
            out.append([a, b])
    return [(a, b) for a, b in out]


# Zoom window lengths (s): a window snaps to the shortest that holds the event with some
# room either side, so zooms of similar events share one time axis (and one drawn frame).
ZOOM_LENGTHS_S = (40, 60, 120, 300, 600, 1200, 1800, 3600, 7200, 14400, 28800)


def zoom_window(ev: dict, cadence_s: float) -> tuple[float, float]:
    """The (start, end) of an event's zoom: centred on the event, a length from ZOOM_LENGTHS_S."""
    a, b = parse_iso(ev["start_utc"]), parse_iso(ev["end_utc"])
    need = (b - a) + 2 * max(0.25 * (b - a), 10.0 * cadence_s, 8.0)
    length = next((L for L in ZOOM_LENGTHS_S if L >= need), math.ceil(need / 3600.0) * 3600.0)
    mid = round(0.5 * (a + b))
    return mid - 0.5 * length, mid + 0.5 * length


def read_night(cfg, night: Night, events: list[dict], on_zoom=None, progress=None) -> NightData:
    """One pass over the night's archive: overview grid, coverage, masked cells, event zooms.

    ``on_zoom(index, event, t_edges, f_edges_mhz, power, background)`` is called for each
    event as soon as the data past its window (and the background around it) are read.
    """
    from rxlog.archive.read import read_archive

    cadence = float(cfg["spectra"]["cadence_s"])
    f_edges = _freq_bins(cfg)
    n_fb = len(f_edges) - 1
    width = max((night.t1 - night.t0) / OVERVIEW_TIME_BINS, cadence)
    n_tb = int(math.ceil((night.t1 - night.t0) / width))
    t_edges = night.t0 + width * np.arange(n_tb + 1)
    sums = np.zeros((n_tb, n_fb)); counts = np.zeros((n_tb, n_fb))
    data = NightData(night, t_edges, f_edges, np.full((n_tb, n_fb), np.nan))
    covered = []

    pending = []   # zooms not yet started, by window start
    for i, ev in enumerate(events):
        a, b = zoom_window(ev, cadence)
        n = int(min(ZOOM_TIME_BINS, max(8, math.ceil((b - a) / cadence))))
        pending.append(_Zoom(i, ev, a, b, np.linspace(a, b, n + 1), None, None))
    pending.sort(key=lambda z: z.a)
    active: list[_Zoom] = []

    def finish(z: _Zoom, read_to: float):
        # Background: the per-channel median of the overview minutes from an hour
        # before the event to half an hour after it (all read by now).
        lo = np.searchsorted(t_edges, z.a - 3600.0)
        hi = max(np.searchsorted(t_edges, min(z.b + 1800.0, read_to)), lo + 1)
        with np.errstate(invalid="ignore", divide="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            power = z.sums / z.counts
            bg = np.nanmedian(sums[lo:hi] / counts[lo:hi], axis=0)
        on_zoom(z.index, z.event, z.t_edges, f_edges, power, bg)

    # Chunks on whole UTC hours: the archive keeps one file per UTC hour.
    edges = np.arange(math.floor(night.t0 / CHUNK_S) * CHUNK_S, night.t1, CHUNK_S)[1:]
    chunk_starts = np.concatenate(([night.t0], edges))
    for k, c0 in enumerate(chunk_starts):
        c1 = min(chunk_starts[k + 1] if k + 1 < len(chunk_starts) else night.t1, night.t1)
        while pending and pending[0].a < c1:
            z = pending.pop(0)
            z.sums = np.zeros((len(z.t_edges) - 1, n_fb)); z.counts = np.zeros_like(z.sums)
            active.append(z)
        for seg in read_archive(cfg.archive_dir, c0, c1).segments:
            times = seg.times
            keep = (times >= c0) & (times < c1)
            if not keep.any():
                continue
            rows = np.flatnonzero(keep)
            times = times[rows]
            power = seg.power_db[rows[0]:rows[-1] + 1]
            flags = seg.flags[rows[0]:rows[-1] + 1]
            finite = np.isfinite(power)
            have = finite & ((flags & (FLAG_GAP | FLAG_UNCOVERED)) == 0)
            valid = have & ((flags & FLAG_RFI) == 0)
            chan_bin = np.searchsorted(f_edges, seg.freq_hz / 1e6, side="right") - 1
            chan_bin[(chan_bin < 0) | (chan_bin >= n_fb)] = -1
            row_bin = np.floor((times - night.t0) / width).astype(np.int64)
            xs, ns = display_channels(power, valid, chan_bin, n_fb)
            add_rows(sums, counts, row_bin, xs, ns)
            # Coverage: runs of rows with any data, each row lasting one cadence.
            row_has = have.any(axis=1)
            if row_has.any():
                step = np.diff(np.concatenate(([0], row_has.astype(np.int8), [0])))
                starts, ends = np.flatnonzero(step == 1), np.flatnonzero(step == -1)
                covered.extend(zip(times[starts], times[ends - 1] + seg.cadence_s))
            n_have = have.sum(axis=1)
            n_masked = (have & ((flags & FLAG_RFI) != 0)).sum(axis=1)
            data.cells_valid += float(n_have.sum()); data.cells_masked += float(n_masked.sum())
            hours = np.floor(times / 3600.0) * 3600.0
            for h in np.unique(hours):
                sel = hours == h
                acc = data.hourly_masked.setdefault(float(h), [0.0, 0.0])
                acc[0] += float(n_masked[sel].sum()); acc[1] += float(n_have[sel].sum())
            for z in active:
                r0, r1 = np.searchsorted(times, [z.a, z.b])
                if r1 <= r0:
                    continue
                zb = np.floor((times[r0:r1] - z.a) / (z.t_edges[1] - z.t_edges[0])).astype(np.int64)
                add_rows(z.sums, z.counts, zb, xs[r0:r1], ns[r0:r1])
        if on_zoom is not None:
            for z in [z for z in active if z.b + 1800.0 <= c1]:
                finish(z, c1)
            active = [z for z in active if z.b + 1800.0 > c1]
        if progress is not None:
            progress(k + 1, len(chunk_starts))
    if on_zoom is not None:
        for z in active + pending:
            if z.sums is None:
                z.sums = np.zeros((len(z.t_edges) - 1, n_fb)); z.counts = np.zeros_like(z.sums)
            finish(z, night.t1)
    with np.errstate(invalid="ignore", divide="ignore"):
        data.power = (sums / counts).astype(np.float32)
    data.covered = _merge(covered)
    return data


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


# -- summary ----------------------------------------------------------------------------

def _overlap(a0, a1, b0, b1) -> float:
    return max(0.0, min(a1, b1) - max(a0, b0))


def night_summary(cfg, night: Night, events: list[dict], data: NightData, quality: list[dict],
                  jupiter_up, sun_up, forecast) -> dict:
    """The numbers the page and the terminal show, as plain values."""
    length = night.t1 - night.t0
    per_class = {c: 0 for c in CLASSES}
    for e in events:
        per_class[e["class"]] = per_class.get(e["class"], 0) + 1
    masked_total, hourly, masked_source = _masked(night, data, quality)
    windows = []
    for w in forecast:
        a, b = float(w["start"]), float(w["end"])
        seen = [e for e in events if e["class"] in JOVIAN
                and _overlap(parse_iso(e["start_utc"]), parse_iso(e["end_utc"]), a, b) > 0]
        rec = sum(_overlap(c0, c1, a, b) for c0, c1 in data.covered)
        windows.append({"start": a, "end": b, "region": w.get("region", ""),
                        "max_jupiter_alt_deg": w.get("max_jupiter_alt_deg"),
                        "recorded_fraction": rec / (b - a) if b > a else 0.0,
                        "seen": [e["event_id"] for e in seen]})
    in_windows = {eid for w in windows for eid in w["seen"]}
    outside = [e["event_id"] for e in events if e["class"] in JOVIAN and e["event_id"] not in in_windows]
    return {
        "station": cfg["station"]["name"], "night": night.name, "timezone": str(night.tz),
        "start": night.t0, "end": night.t1, "length_s": length,
        "recorded_s": data.covered_s, "uptime": data.covered_s / length if length else 0.0,
        "gaps": data.gaps(min_s=max(2.0 * float(cfg["spectra"]["cadence_s"]), 10.0)),
        "masked_fraction": masked_total, "masked_source": masked_source,
        "hourly_masked": hourly,
        "n_events": len(events), "per_class": per_class,
        "n_labelled": sum(1 for e in events if e.get("label")),
        "jupiter_up": jupiter_up, "sun_up": sun_up,
        "forecast": windows, "jovian_outside_forecast": outside,
        "generated_utc": iso(time.time()),
    }


def _masked(night: Night, data: NightData, quality: list[dict]):
    """(night's masked fraction, [(hour start, fraction)], source), or (None, [], None) if unknown.

    The detector records, per UTC hour, the fraction of cells its RFI mask removed; that
    record is used when there is one. Otherwise flags stored in the archive (spectra
    ingested with their mask) are counted. Without either, nothing is known yet.
    """
    rows = []
    for q in quality:
        h = parse_iso(q["hour_utc"])
        if q["masked_fraction"] is not None and night.t0 - 3600 < h < night.t1:
            rows.append((h, float(q["masked_fraction"]), float(q["covered_s"] or 0.0)))
    if rows:
        rows.sort()
        w = np.array([r[2] for r in rows])
        m = np.array([r[1] for r in rows])
        total = float((m * w).sum() / w.sum()) if w.sum() > 0 else float(m.mean())
        return total, [(h, f) for h, f, _ in rows], "detection"
    if data.cells_masked > 0:
        hourly = sorted((h, mv[0] / mv[1]) for h, mv in data.hourly_masked.items() if mv[1] > 0)
        return data.cells_masked / data.cells_valid, hourly, "archive flags"
    return None, [], None


def _clock(night: Night, t: float, seconds=False) -> str:
    return night.local(t).strftime("%H:%M:%S" if seconds else "%H:%M")


def _fmt_span(night: Night, a: float, b: float) -> str:
    """'17:41–07:46 EST' (the zone named once, or at both ends when a clock change falls inside)."""
    za, zb = night.zone(a), night.zone(b)
    if za == zb:
        return f"{_clock(night, a)}–{_clock(night, b)} {za}"
    return f"{_clock(night, a)} {za}–{_clock(night, b)} {zb}"


def _fmt_hours(s: float) -> str:
    return f"{s / 3600:.1f} h"


def format_summary(summary: dict, night: Night) -> str:
    """The terminal summary: a few lines a person reads over coffee."""
    s = summary
    lines = [f"{s['station']} — night of {s['night']} (local noon to noon, {s['timezone']})"]
    gaps = s["gaps"]
    gap_text = ", ".join(_fmt_span(night, a, b) for a, b in gaps[:6]) + (" …" if len(gaps) > 6 else "")
    lines.append(f"  recorded {_fmt_hours(s['recorded_s'])} of {_fmt_hours(s['length_s'])} "
                 f"({100 * s['uptime']:.0f} %); {len(gaps)} gap{'s' if len(gaps) != 1 else ''}"
                 + (f": {gap_text}" if gaps else ""))
    if s["masked_fraction"] is not None:
        lines.append(f"  masked as interference: {100 * s['masked_fraction']:.1f} % (from {s['masked_source']})")
    else:
        lines.append("  masked as interference: not measured yet (run rxlog detect over this night)")
    counts = ", ".join(f"{c} {n}" for c, n in s["per_class"].items() if n)
    lines.append(f"  events: {s['n_events']}" + (f" ({counts})" if counts else "")
                 + f"; labelled {s['n_labelled']}")
    for body, key in (("Jupiter", "jupiter_up"), ("Sun", "sun_up")):
        spans = ", ".join(_fmt_span(night, a, b) for a, b in s[key]) or "not up"
        lines.append(f"  {body} up: {spans}")
    if s["forecast"]:
        for w in s["forecast"]:
            seen = f"seen {len(w['seen'])} Jovian event{'s' if len(w['seen']) != 1 else ''}" if w["seen"] \
                else "nothing seen"
            lines.append(f"  forecast {w['region']} {_fmt_span(night, w['start'], w['end'])}: {seen} "
                         f"(recorded {100 * w['recorded_fraction']:.0f} %)")
    else:
        lines.append("  forecast: no windows this night")
    if s["jovian_outside_forecast"]:
        lines.append(f"  Jovian candidates outside forecast windows: {len(s['jovian_outside_forecast'])}")
    return "\n".join(lines)


# -- plots ------------------------------------------------------------------------------

def _mpl():
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot  # noqa: F401  (registers colormaps)
    return matplotlib


_EPOCH_DAYS = None


def _dnum(t):
    """POSIX seconds -> matplotlib date numbers."""
    global _EPOCH_DAYS
    if _EPOCH_DAYS is None:
        import matplotlib.dates as mdates
        _EPOCH_DAYS = mdates.date2num(dt.datetime(1970, 1, 1, tzinfo=dt.timezone.utc))
    return np.asarray(t, dtype=np.float64) / 86400.0 + _EPOCH_DAYS


def _tz_label(night: Night) -> str:
    off = night.local(night.t0).strftime("%z")
    return f"local time, {night.zone(night.t0)} ({night.tz}, UTC{off[:3]}:{off[3:]} at the start)"


def _excess_limits(excess: np.ndarray) -> tuple[float, float]:
    finite = excess[np.isfinite(excess)]
    if finite.size == 0:
        return -1.0, 3.0
    lo, hi = np.percentile(finite, [1.0, 99.7])
    return float(min(lo, -0.5)), float(max(hi, 3.0))


def _zoom_limits(excess, t_edges, start, end, inside_f) -> tuple[float, float]:
    """Colour limits of a zoom from the event's own box, so a strong carrier elsewhere in
    the window saturates instead of washing the event out."""
    tc = 0.5 * (t_edges[:-1] + t_edges[1:])
    inside_t = (tc >= start) & (tc <= end)
    if not inside_t.any():
        inside_t[np.argmin(np.abs(tc - 0.5 * (start + end)))] = True
    box = excess[np.ix_(inside_t, inside_f)]
    box = box[np.isfinite(box)]
    everywhere = excess[np.isfinite(excess)]
    lo = float(np.percentile(everywhere, 1.0)) if everywhere.size else -1.0
    hi = float(np.percentile(box, 99.0)) if box.size else 3.0
    return min(lo, -0.5), max(hi, 3.0)


def plot_overview(path: Path, night: Night, data: NightData, events: list[dict], summary: dict,
                  dpi: int = 100) -> Path:
    """The night at a glance (``overview_figure``) as a PNG."""
    overview_figure(night, data, events, summary, dpi).savefig(path, dpi=dpi, pil_kwargs={"compress_level": 3})
    return path


def overview_figure(night: Night, data: NightData, events: list[dict], summary: dict, dpi: int = 100):
    """Sun/Jupiter/forecast bands, the dynamic spectrum with event boxes, hourly masking (a matplotlib Figure)."""
    mpl = _mpl()
    import matplotlib.dates as mdates
    from matplotlib.collections import PatchCollection
    from matplotlib.figure import Figure
    from matplotlib.patches import Rectangle
    import matplotlib.patheffects as pe

    fig = Figure(figsize=(13.0, 7.0), dpi=dpi)
    left, width = 0.07, 0.83
    ax_band = fig.add_axes((left, 0.81, width, 0.10))
    ax = fig.add_axes((left, 0.31, width, 0.48), sharex=ax_band)
    ax_q = fig.add_axes((left, 0.135, width, 0.13), sharex=ax_band)
    cax = fig.add_axes((left + width + 0.012, 0.31, 0.015, 0.48))
    x0, x1 = _dnum([night.t0, night.t1])

    # Bands: when the Sun and Jupiter were above the horizon, and the forecast windows
    # (grey, each row named: colours are kept for the classes).
    rows = [("Sun up", summary["sun_up"]), ("Jupiter up", summary["jupiter_up"]),
            ("forecast", [(w["start"], w["end"]) for w in summary["forecast"]])]
    for k, (name, spans) in enumerate(rows):
        y = len(rows) - 1 - k
        xs = [(_dnum(a), _dnum(b) - _dnum(a)) for a, b in spans]
        if xs:
            ax_band.broken_barh(xs, (y + 0.15, 0.7), facecolors=BAND_GREY)
    ax_band.set_yticks([len(rows) - 1 - k + 0.5 for k in range(len(rows))], [r[0] for r in rows])
    ax_band.set_ylim(0, len(rows))
    ax_band.tick_params(axis="x", labelbottom=False)
    ax_band.set_title(f"{summary['station']} — night of {night.name}: dynamic spectrum, "
                      f"{summary['n_events']} events", loc="left", fontsize=12)
    utc = ax_band.secondary_xaxis("top")
    utc.xaxis.set_major_locator(mdates.HourLocator(interval=2, tz=dt.timezone.utc))
    utc.xaxis.set_major_formatter(mdates.DateFormatter("%H:%M", tz=dt.timezone.utc))
    utc.set_xlabel("UTC", fontsize=9, labelpad=2)

    excess = data.power - running_background(data.power)
    vmin, vmax = _excess_limits(excess)
    cmap = mpl.colormaps["viridis"].with_extremes(bad="#d0d0d0")
    f0, f1 = data.f_edges_mhz[0], data.f_edges_mhz[-1]
    im = ax.imshow(excess.T, origin="lower", aspect="auto", interpolation="nearest", cmap=cmap,
                   vmin=vmin, vmax=vmax, extent=(x0, _dnum(data.t_edges[-1]), f0, f1))
    cb = fig.colorbar(im, cax=cax)
    cb.set_label("excess over background (dB)")
    # Boxes sit one bin outside each event so the burst itself stays visible, each over a
    # light halo and a dark edge so it shows on every colour of the map.
    # Interference boxes are drawn thin and faint underneath, so a day of ionosonde sweeps
    # and pulse storms does not hide the bursts.
    boxes, colours, faint = [], [], []
    bin_t = _dnum(data.t_edges[1]) - _dnum(data.t_edges[0])
    bin_f = data.f_edges_mhz[1] - data.f_edges_mhz[0]
    for e in events:
        a, b = _dnum(parse_iso(e["start_utc"])) - bin_t, _dnum(parse_iso(e["end_utc"])) + bin_t
        lo, hi = max(e["fmin_mhz"] - bin_f, f0), min(e["fmax_mhz"] + bin_f, f1)
        if e["class"] == "rfi":
            faint.append(Rectangle((a, lo), b - a, hi - lo))
            continue
        boxes.append(Rectangle((a, lo), b - a, hi - lo))
        colours.append(colour(e["class"]))
    if faint:
        ax.add_collection(PatchCollection(faint, facecolors="none", edgecolors=CLASS_COLOURS["rfi"],
                                          linewidths=0.5, alpha=0.45))
    if boxes:
        pc = PatchCollection(boxes, facecolors="none", edgecolors=colours, linewidths=1.0)
        pc.set_path_effects(outline(1.0))
        ax.add_collection(pc)
    # Event numbers (as on the page) where they do not crowd each other; interference unnumbered.
    last = -np.inf
    for i, e in enumerate(events):
        if e["class"] == "rfi":
            continue
        a = _dnum(parse_iso(e["start_utc"])) - bin_t
        if a - last >= 0.012 * (x1 - x0):
            ax.annotate(str(i + 1), (a, min(e["fmax_mhz"] + bin_f, f1)), fontsize=7, color="white",
                        xytext=(1, 1), textcoords="offset points", annotation_clip=False,
                        path_effects=[pe.withStroke(linewidth=2, foreground="black")])
            last = a
    present = sorted({e["class"] for e in events}, key=CLASSES.index)
    if present:
        handles = [Rectangle((0, 0), 1, 1, facecolor="none", edgecolor=colour(c), linewidth=1.5,
                             path_effects=outline(1.5)) for c in present]
        fig.legend(handles, [f"{LABEL_NAMES[c]} ({c})" for c in present], loc="lower center",
                   bbox_to_anchor=(left + width / 2, 0.0), fontsize=8, ncol=min(len(present), 4), frameon=False)
    ax.set_ylabel("frequency (MHz)")
    ax.set_ylim(f0, f1)
    ax.tick_params(axis="x", labelbottom=False)

    # Hourly masked fraction.
    hm = summary["hourly_masked"]
    if hm:
        hx = _dnum([h for h, _ in hm])
        ax_q.bar(hx, [100 * m for _, m in hm], width=1 / 24, align="edge", color="#35608D",
                 edgecolor="white", linewidth=0.5)
    else:
        ax_q.text(0.5, 0.5, "masked fraction not measured yet (rxlog detect)", transform=ax_q.transAxes,
                  ha="center", va="center", fontsize=9, color="#555555")
    for a, b in summary["gaps"]:
        ax_q.axvspan(_dnum(a), _dnum(b), color="#888888", alpha=0.35, linewidth=0)
    ax_q.set_ylabel("masked (%)")
    top = max([5.0] + [100 * m * 1.15 for _, m in hm])
    ax_q.set_ylim(0, min(100.0, top))
    ax_q.xaxis.set_major_locator(mdates.HourLocator(interval=2, tz=night.tz))
    ax_q.xaxis.set_major_formatter(mdates.DateFormatter("%H:%M", tz=night.tz))
    ax_q.xaxis.set_minor_locator(mdates.HourLocator(tz=night.tz))
    ax_q.set_xlabel(_tz_label(night) + "; grey: no recording", labelpad=2)
    ax_band.set_xlim(x0, x1)
    return fig


def _spans(lo: float, hi: float) -> list[tuple[float, float]]:
    """An angle range on a 0..360 axis; a start above the end wraps through 0° into two spans."""
    return [(lo, hi)] if lo <= hi else [(lo, 360.0), (0.0, hi)]


def _region_boxes(region) -> list[tuple[float, float, float, float]]:
    """A Region's (cml0, cml1, io0, io1) rectangles on 0..360 axes (Io range None: any phase)."""
    io = [(0.0, 360.0)] if region.io_from is None else _spans(region.io_from, region.io_to)
    return [(c0, c1, i0, i1) for c0, c1 in _spans(region.cml_from, region.cml_to) for i0, i1 in io]


def plot_cml_io(path: Path, cfg, night: Night, events: list[dict], track=None, dpi: int = 100) -> Path:
    """``cml_io_figure`` as a PNG."""
    cml_io_figure(cfg, night, events, track, dpi).savefig(path, dpi=dpi, pil_kwargs={"compress_level": 3})
    return path


def cml_io_figure(cfg, night: Night, events: list[dict], track=None, dpi: int = 100):
    """The night's Jovian candidates (and Jupiter-up track) on the CML III–Io-phase plane over the source regions."""
    _mpl()
    from matplotlib.figure import Figure
    from matplotlib.patches import Rectangle
    from rxlog.sky.regions import regions_from_config

    fig = Figure(figsize=(7.0, 6.2), dpi=dpi)
    ax = fig.add_axes((0.11, 0.09, 0.62, 0.84))
    # Regions in grey, each named in its corner (overlaps show darker): colours are kept
    # for the classes of the candidates drawn over them.
    handles = []
    for reg in regions_from_config(cfg):
        for c0, c1, i0, i1 in _region_boxes(reg):
            ax.add_patch(Rectangle((c0, i0), c1 - c0, i1 - i0, facecolor=BAND_GREY, alpha=0.12,
                                   edgecolor=BAND_GREY, linewidth=1.0))
            ax.text(c0 + 3, i1 - 3, reg.name, fontsize=7, va="top", color="#333333")
    handles.append(Rectangle((0, 0), 1, 1, facecolor=BAND_GREY, alpha=0.25, edgecolor=BAND_GREY,
                             label="source regions"))
    if track is not None and len(track[0]):
        cml, io = np.asarray(track[0], float), np.asarray(track[1], float)
        # Break the line where either angle wraps through 360°.
        jump = np.flatnonzero((np.abs(np.diff(cml)) > 180) | (np.abs(np.diff(io)) > 180)) + 1
        for seg_c, seg_i in zip(np.split(cml, jump), np.split(io, jump)):
            ax.plot(seg_c, seg_i, color="#444444", linewidth=1.0, linestyle=(0, (4, 3)))
        handles.append(ax.plot([], [], color="#444444", linewidth=1.0, linestyle=(0, (4, 3)),
                               label="this night, Jupiter up")[0])
    # One scatter call per class, the start-to-end motion as one line collection.
    from matplotlib.collections import LineCollection
    pts = [(i, e) for i, e in events if e.get("cml3_deg") is not None and e.get("io_phase_deg") is not None]
    segs, seg_colours = [], []
    for i, e in pts:
        cs, ce = e.get("cml3_start_deg"), e.get("cml3_end_deg")
        ps, pe_ = e.get("io_phase_start_deg"), e.get("io_phase_end_deg")
        if None not in (cs, ce, ps, pe_) and abs(ce - cs) < 180 and abs(pe_ - ps) < 180:
            segs.append([(cs, ps), (ce, pe_)])
            seg_colours.append(colour(e["class"]))
    if segs:
        ax.add_collection(LineCollection(segs, colors=seg_colours, linewidths=2.5, capstyle="round",
                                         path_effects=outline(2.5)))
    shown = sorted({e["class"] for _, e in pts}, key=CLASSES.index)
    for cls in shown:
        xy = np.array([(e["cml3_deg"], e["io_phase_deg"]) for _, e in pts if e["class"] == cls])
        ax.scatter(xy[:, 0], xy[:, 1], s=36, color=colour(cls), edgecolors="black", linewidths=0.8,
                   zorder=3)
    # Numbers as on the page, where they do not pile up on each other.
    labelled = []
    for i, e in pts:
        c, p = e["cml3_deg"], e["io_phase_deg"]
        if all(abs(c - c2) > 6 or abs(p - p2) > 6 for c2, p2 in labelled):
            ax.annotate(str(i + 1), (c, p), xytext=(4, 3), textcoords="offset points", fontsize=7)
            labelled.append((c, p))
    for cls in shown:
        handles.append(ax.scatter([], [], s=36, color=colour(cls), edgecolors="black",
                                  linewidths=0.8, label=LABEL_NAMES[cls]))
    ax.set_xlim(0, 360); ax.set_ylim(0, 360)
    ax.set_xticks(range(0, 361, 60)); ax.set_yticks(range(0, 361, 60))
    ax.set_xlabel("central meridian longitude, System III (deg)")
    ax.set_ylabel("Io phase, geocentric (deg)")
    ax.grid(True, color="#cccccc", linewidth=0.5)
    ax.set_title(f"Jovian candidates, night of {night.name}: {len(pts)}", loc="left", fontsize=11)
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0), fontsize=8, frameon=False)
    return fig


ZOOM_SPECTRUM_AXES = (0.10, 0.42, 0.76, 0.49)   # figure fraction: left, bottom, width, height
ZOOM_CURVE_AXES = (0.10, 0.155, 0.76, 0.225)

# Clock steps of a zoom's time axis (s): each divides a minute, an hour or a day, so ticks
# fall on round clock times; every zone's offset from UTC is a whole number of 15 minutes
# (tz database, current rules), so steps up to 15 min are round in UTC and local time at once.
CLOCK_STEPS_S = (1, 2, 5, 10, 15, 20, 30, 60, 120, 300, 600, 900, 1200, 1800, 3600, 7200, 10800)
MAX_CLOCK_TICKS = 7
CLOCK_ROW_PT = (5.0, 14.0)   # label rows below the light curve, points from its bottom edge


def clock_ticks(a: float, b: float, offset_s: float = 0.0) -> tuple[np.ndarray, int]:
    """Round clock times inside [a, b] (POSIX s), at most MAX_CLOCK_TICKS of them: (ticks, step).

    Rounded on the local clock, ``offset_s`` east of UTC (steps of an hour or more then
    fall on local hours).
    """
    step = next((s for s in CLOCK_STEPS_S if (b - a) / s <= MAX_CLOCK_TICKS - 1), CLOCK_STEPS_S[-1])
    first = math.ceil((a + offset_s) / step) * step - offset_s
    return np.arange(first, b + 1e-6, step)[:MAX_CLOCK_TICKS], step


class ZoomPlotter:
    """Draws event zooms on one reused figure.

    The frame (axes, ticks, legend, colour bar) is rendered once per zoom length and
    kept; each event restores its frame and redraws only what changes: the image, the
    box, the light curves and a few texts. The light-curve and colour scales always
    have five evenly spaced ticks, with limits chosen so those ticks fall on round
    values; the tick marks are part of the frame and only their labels are drawn per
    event. The time axis is the event's own clock: round local and UTC times, their
    tick marks drawn per event and their labels written onto the finished image with
    Pillow in matplotlib's own font (a dozen short labels cost 1 ms there, 25 ms as
    matplotlib texts). That is several times faster than a full redraw, which is what
    makes 500 zooms a minute's work.
    """

    N_TICKS = 5

    def __init__(self, night: Night, f_edges_mhz: np.ndarray, dpi: int = 80):
        mpl = _mpl()
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.cm import ScalarMappable
        from matplotlib.colors import Normalize
        from matplotlib.figure import Figure
        from matplotlib.lines import TICKDOWN
        from matplotlib.patches import Rectangle
        from matplotlib.font_manager import FontProperties, findfont
        from matplotlib.ticker import LinearLocator, NullFormatter, NullLocator
        from PIL import ImageFont

        self.night, self.dpi = night, dpi
        self.fig = Figure(figsize=(7.0, 4.4), dpi=dpi)
        self.canvas = FigureCanvasAgg(self.fig)
        self.ax = self.fig.add_axes(ZOOM_SPECTRUM_AXES)
        self.lc = self.fig.add_axes(ZOOM_CURVE_AXES, sharex=self.ax)
        self.cax = self.fig.add_axes((0.875, 0.42, 0.02, 0.49))
        cmap = mpl.colormaps["viridis"].with_extremes(bad="#d0d0d0")
        f0, f1 = float(f_edges_mhz[0]), float(f_edges_mhz[-1])
        self.im = self.ax.imshow(np.zeros((2, 2)), origin="lower", aspect="auto", interpolation="nearest",
                                 cmap=cmap, extent=(0, 1, f0, f1))
        # The colour bar shows the map on 0..1; its tick labels carry each event's dB values.
        cb = self.fig.colorbar(ScalarMappable(Normalize(0, 1), cmap), cax=self.cax)
        cb.set_ticks(np.linspace(0, 1, self.N_TICKS))
        self.cax.yaxis.set_major_formatter(NullFormatter())
        self.cax.set_ylabel("excess (dB)", fontsize=8, labelpad=18)
        self.box = Rectangle((0, 0), 1, 1, facecolor="none", linewidth=1.4, path_effects=outline(1.4))
        self.ax.add_patch(self.box)
        self.ax.set_ylim(f0, f1)
        self.ax.set_ylabel("frequency (MHz)", fontsize=8)
        self.ax.tick_params(labelbottom=False, labelsize=7)
        self.title = self.fig.text(0.10, 0.935, "", fontsize=9)
        self.when = ""          # the window centre's date and time, written under the clock rows
        self.span = Rectangle((0, 0), 1, 1, transform=self.lc.get_xaxis_transform(), alpha=0.25, linewidth=0)
        self.lc.add_patch(self.span)
        (self.line_out,) = self.lc.plot([], [], color="#a3abb1", linewidth=1.0, label="rest of band")
        (self.line_in,) = self.lc.plot([], [], color=INK, linewidth=1.3, label="event band")
        self.lc.set_ylabel("excess (dB)", fontsize=8, labelpad=16)
        self.lc.tick_params(labelsize=7)
        self.lc.yaxis.set_major_locator(LinearLocator(self.N_TICKS))
        self.lc.yaxis.set_major_formatter(NullFormatter())
        self.lc.grid(True, color="#dddddd", linewidth=0.5)
        self.lc.legend(loc="upper right", fontsize=7, frameon=False, ncol=2)
        frac = np.linspace(0, 1, self.N_TICKS)
        self.lc_labels = [self.lc.text(-0.012, y, "", transform=self.lc.transAxes, ha="right", va="center",
                                       fontsize=7) for y in frac]
        self.cb_labels = [self.cax.text(1.6, y, "", transform=self.cax.transAxes, ha="left", va="center",
                                        fontsize=7) for y in frac]
        # The time axis, per event: grid lines and tick marks at round clock times, one row
        # of labels in local time and one in UTC (one row when the station keeps UTC).
        self.lc.xaxis.set_major_locator(NullLocator())
        self.lc.xaxis.set_minor_locator(NullLocator())
        (self.time_grid,) = self.lc.plot([], [], color="#dddddd", linewidth=0.5,
                                         transform=self.lc.get_xaxis_transform())
        self.time_marks = [a.plot([], [], linestyle="", marker=TICKDOWN, markersize=3.5, color="black",
                                  clip_on=False, transform=a.get_xaxis_transform())[0] for a in (self.ax, self.lc)]
        self.clock_rows: list[tuple[str, list[tuple[float, str]]]] = []   # (zone, [(x, label)]) per row
        self.fonts = [ImageFont.truetype(findfont(FontProperties(weight=w)), size=pt * dpi / 72.0,
                                         layout_engine=ImageFont.Layout.BASIC)
                      for w, pt in (("normal", 7.0), ("bold", 7.0), ("normal", 8.0))]
        # Drawn per event, in this order (the box over the image, the curves over the grid).
        self.dynamic = [self.im, self.box, self.span, self.time_grid, self.line_out, self.line_in,
                        *self.time_marks, self.title, *self.lc_labels, *self.cb_labels]
        for a in self.dynamic:
            a.set_animated(True)
        self.frames: dict[float, object] = {}

    def _frame(self, half: float):
        """The drawn frame for a window of [-half, half] seconds (rendered on first use)."""
        self.ax.set_xlim(-half, half)
        if half not in self.frames:
            self.canvas.draw()
            self.frames[half] = self.canvas.copy_from_bbox(self.fig.bbox)
        return self.frames[half]

    def _scale(self, labels, lo: float, hi: float) -> tuple[float, float]:
        """Round limits covering lo..hi with N_TICKS evenly spaced round ticks; label them."""
        start, step = _round_ticks(lo, hi, self.N_TICKS - 1)
        digits = 0 if step >= 1 else (1 if step >= 0.1 else 2)
        for k, t in enumerate(labels):
            t.set_text(f"{start + k * step:.{digits}f}")
        return start, start + (self.N_TICKS - 1) * step

    def _clock_axis(self, a: float, b: float, mid: float):
        """Tick marks, grid lines and labels at round clock times of the window [a, b]."""
        offset = self.night.local(mid).utcoffset().total_seconds()
        ticks, step = clock_ticks(a, b, offset)
        x = ticks - mid
        for marks in self.time_marks:
            marks.set_data(x, np.zeros_like(x))
        self.time_grid.set_data(np.repeat(x, 3), np.tile([0.0, 1.0, np.nan], len(x)))
        fmt = "%H:%M:%S" if step < 60 else "%H:%M"
        # No label right at the left edge, where it would run into the row names.
        ticks, x = ticks[ticks - a >= 0.045 * (b - a)], x[ticks - a >= 0.045 * (b - a)]
        local = self.night.zone(mid)
        zones = [(local, self.night.tz), ("UTC", dt.timezone.utc)] if local != "UTC" else [("UTC", dt.timezone.utc)]
        self.clock_rows = [(name, [(float(xj), dt.datetime.fromtimestamp(t, tz).strftime(fmt))
                                   for xj, t in zip(x, ticks)]) for name, tz in zones]

    def _write_clock_labels(self, img):
        """Write the rows of clock labels (and their zone names) under the light curve, and
        the window centre's date and time at the foot, onto ``img``."""
        from PIL import ImageDraw

        draw = ImageDraw.Draw(img)
        h = img.height
        bottom = h - self.lc.bbox.y0
        name_x = self.lc.bbox.x0 - 0.012 * self.lc.bbox.width
        for (name, labels), pt in zip(self.clock_rows, CLOCK_ROW_PT):
            y = bottom + pt * self.dpi / 72.0
            draw.text((name_x, y), name, font=self.fonts[1], fill="black", anchor="ra")
            for xj, text in labels:
                px = self.lc.transData.transform((xj, 0.0))[0]
                draw.text((px, y), text, font=self.fonts[0], fill="black", anchor="ma")
        draw.text((0.48 * img.width, h - 0.02 * h), self.when, font=self.fonts[2], fill="black", anchor="md")

    def draw(self, path: Path, number: int, ev: dict, t_edges: np.ndarray, excess: np.ndarray,
             source: str) -> Path:
        """Render one event: ``excess`` is (n_time, n_freq) dB over background on the display channels."""
        from PIL import Image

        mid = 0.5 * (t_edges[0] + t_edges[-1])
        frame = self._frame(round(0.5 * (t_edges[-1] - t_edges[0]), 3))
        start, end = parse_iso(ev["start_utc"]), parse_iso(ev["end_utc"])
        x = t_edges - mid
        f0, f1 = self.ax.get_ylim()
        n_f = excess.shape[1]
        fc = f0 + (f1 - f0) * (np.arange(n_f) + 0.5) / n_f
        inside = (fc >= ev["fmin_mhz"]) & (fc <= ev["fmax_mhz"])
        if not inside.any():
            inside[np.argmin(np.abs(fc - 0.5 * (ev["fmin_mhz"] + ev["fmax_mhz"])))] = True
        self.im.set_data(np.ma.masked_invalid(excess.T))
        self.im.set_extent((x[0], x[-1], f0, f1))
        self.im.set_clim(*self._scale(self.cb_labels, *_zoom_limits(excess, t_edges, start, end, inside)))
        self.box.set_bounds(start - mid, ev["fmin_mhz"], max(end - start, 1e-3),
                            max(ev["fmax_mhz"] - ev["fmin_mhz"], 0.02))
        self.box.set_edgecolor(colour(ev["class"]))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            lc_in = np.nanmean(excess[:, inside], axis=1)
            lc_out = np.nanmean(excess[:, ~inside], axis=1) if (~inside).any() else np.full(len(x) - 1, np.nan)
        xc = 0.5 * (x[:-1] + x[1:])
        self.line_in.set_data(xc, lc_in)
        self.line_out.set_data(xc, lc_out)
        self.span.set_bounds(start - mid, 0, max(end - start, 1e-3), 1)
        self.span.set_facecolor(colour(ev["class"]))
        both = np.concatenate([lc_in, lc_out])
        both = both[np.isfinite(both)]
        lo, hi = (float(both.min()), float(both.max())) if both.size else (-1.0, 1.0)
        head = max(0.35 * (hi - lo), 0.3)            # room for the legend
        self.lc.set_ylim(*self._scale(self.lc_labels, lo, hi + head))
        self._clock_axis(float(t_edges[0]), float(t_edges[-1]), mid)
        self.when = f"window centre {self.night.stamp(mid)} = {utc_stamp(mid)}"
        self.title.set_text(f"#{number}  {LABEL_NAMES.get(ev['class'], ev['class'])}  ({source})")
        self.canvas.restore_region(frame)
        for a in self.dynamic:
            self.fig.draw_artist(a)
        # A 256-colour palette (viridis itself has 256 entries) keeps a noisy zoom near 60 kB
        # instead of 250 kB in full colour, and is quicker to write.
        w, h = self.canvas.get_width_height()
        img = Image.frombuffer("RGBA", (w, h), self.canvas.buffer_rgba(), "raw", "RGBA", 0, 1).convert("RGB")
        self._write_clock_labels(img)
        img.quantize(colors=256, method=Image.Quantize.FASTOCTREE).save(path, format="PNG", compress_level=6)
        return path


def _round_ticks(lo: float, hi: float, n: int) -> tuple[float, float]:
    """(start, step): the smallest round step whose n steps from a multiple of it cover lo..hi."""
    span = max(hi - lo, 1e-6)
    k = math.floor(math.log10(span / n))
    while True:
        for m in (1.0, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0, 6.0, 8.0):
            step = m * 10.0 ** k
            start = math.floor(lo / step) * step
            if start + n * step >= hi:
                return start, step
        k += 1


# -- the page ---------------------------------------------------------------------------

# The class colours come first, generated from rxlog.palette (the plots' own table).
PAGE_CSS = css_rules() + """
:root { --ink:#1d2327; --muted:#5b6770; --line:#d5dbe0; --panel:#f5f7f9; --sel:#3a4750; }
* { box-sizing: border-box; }
body { font: 15px/1.45 system-ui, -apple-system, "Segoe UI", sans-serif; color: var(--ink);
       margin: 0; background: #fff; }
header { padding: 14px 22px 10px; border-bottom: 1px solid var(--line); background: var(--panel); }
header h1 { font-size: 20px; margin: 0 0 4px; }
header .sub { color: var(--muted); }
main { padding: 10px 22px 60px; max-width: 1400px; }
h2 { font-size: 17px; margin: 26px 0 8px; border-bottom: 1px solid var(--line); padding-bottom: 3px; }
.facts-grid { display: grid; grid-template-columns: repeat(auto-fill, minmax(230px, 1fr)); gap: 8px 18px; }
.facts-grid div { background: var(--panel); border-radius: 6px; padding: 6px 10px; }
.facts-grid b { display: block; font-size: 12px; color: var(--muted); font-weight: 600; }
table { border-collapse: collapse; }
td, th { padding: 3px 10px 3px 0; text-align: left; vertical-align: top; }
th { font-size: 12px; color: var(--muted); font-weight: 600; }
table.forecast td:nth-child(-n+4), table.forecast th { white-space: nowrap; }
img.plot { max-width: 100%; height: auto; border: 1px solid var(--line); }
.chip { display: inline-block; padding: 0 7px; border-radius: 9px; font-size: 12px; color: var(--c-ink, #000);
        background: var(--c, #ccc); border: 1px solid rgba(0, 0, 0, .55); margin: 1px 3px 1px 0;
        white-space: nowrap; }
.event { border: 1px solid var(--line); border-left: 7px solid var(--c, var(--line)); border-radius: 8px;
         margin: 10px 0; padding: 8px 12px; scroll-margin-top: 60px; }
.event.current { border-color: var(--sel); border-left-color: var(--c, var(--sel)); box-shadow: 0 0 0 2px var(--sel); }
.event h3 { font-size: 15px; margin: 0 0 6px; font-weight: 600; }
.event .num { display: inline-block; min-width: 2.2em; color: var(--muted); }
.event .body { display: flex; flex-wrap: wrap; gap: 14px; }
.event .body img { width: 560px; max-width: 100%; height: auto; border: 1px solid var(--line); }
.event table.ev td:first-child { color: var(--muted); font-size: 13px; }
.labeller { min-width: 260px; flex: 1; }
.labeller .buttons { display: flex; flex-wrap: wrap; gap: 4px; margin-bottom: 6px; }
.labeller button { font: inherit; font-size: 13px; padding: 2px 8px; border-radius: 5px;
                   border: 1px solid var(--line); background: #fff; cursor: pointer; }
.labeller button kbd { font-size: 11px; color: var(--muted); margin-right: 4px; }
.labeller button[class*="cls-"] { border-left: 5px solid var(--c); }
.labeller button.on { background: var(--sel); color: #fff; border-color: var(--sel); }
.labeller button.on kbd { color: #dde; }
.labeller button:disabled { cursor: not-allowed; opacity: .55; }
.labeller input.note { width: 100%; font: inherit; font-size: 13px; padding: 3px 6px; }
.current-label { font-weight: 600; }
.status { font-size: 12px; color: var(--muted); min-height: 1.2em; }
.status.error { color: #b00020; }
ol.history { font-size: 12px; color: var(--muted); margin: 4px 0 0; padding-left: 18px; }
#toolbar { position: sticky; top: 0; z-index: 2; background: #fff; border-bottom: 1px solid var(--line);
           padding: 6px 22px; display: flex; gap: 16px; align-items: center; flex-wrap: wrap; font-size: 13px; }
#toolbar input { font: inherit; padding: 2px 6px; width: 12em; }
#mode { color: var(--muted); }
kbd { font-family: ui-monospace, monospace; border: 1px solid var(--line); border-radius: 3px; padding: 0 3px; }
.muted { color: var(--muted); }
"""

PAGE_JS = r"""
(function () {
  const data = JSON.parse(document.getElementById('rxlog-data').textContent);
  const token = document.querySelector('meta[name="rxlog-session"]').content;
  const live = token !== '' && location.protocol.startsWith('http');
  const cards = Array.from(document.querySelectorAll('section.event'));
  const byKey = {};
  data.labels.forEach(function (l) { byKey[l.key] = l.label; });
  const who = document.getElementById('who');
  const mode = document.getElementById('mode');
  let cur = -1;

  who.value = localStorage.getItem('rxlog-who') || '';
  who.addEventListener('change', function () { localStorage.setItem('rxlog-who', who.value.trim()); });
  if (live) {
    mode.textContent = 'Labels save to the event store as you choose them.';
  } else {
    mode.textContent = 'Read-only copy: run "rxlog review --serve" to label.';
    document.querySelectorAll('.labeller button, .labeller input').forEach(function (b) { b.disabled = true; });
    who.disabled = true;
  }

  function card(id) { return cards.find(function (c) { return c.dataset.eventId === id; }); }

  function showLabel(c, row) {
    const text = c.querySelector('.current-label');
    text.textContent = row && row.label ? data.names[row.label] + (row.label_who ? ' (' + row.label_who + ')' : '') : 'not labelled';
    c.dataset.label = row && row.label ? row.label : '';
    c.querySelectorAll('.labeller button').forEach(function (b) {
      b.classList.toggle('on', !!row && b.dataset.label === row.label);
    });
    if (row && row.label_note !== undefined && row.label_note !== null && document.activeElement !== c.querySelector('.note')) {
      c.querySelector('.note').value = row.label_note;
    }
  }

  function showHistory(c, rows) {
    const ol = c.querySelector('ol.history');
    ol.textContent = '';
    rows.forEach(function (h) {
      const li = document.createElement('li');
      li.textContent = h.created_shown + ': ' + data.names[h.label] +
        (h.who ? ' by ' + h.who : '') + (h.note ? ' — ' + h.note : '');
      ol.appendChild(li);
    });
  }

  function status(c, text, bad) {
    const s = c.querySelector('.status');
    s.textContent = text;
    s.classList.toggle('error', !!bad);
  }

  function api(path, body) {
    const opts = body === undefined ? {} : {
      method: 'POST', body: JSON.stringify(body),
      headers: {'Content-Type': 'application/json', 'X-Rxlog-Token': token}
    };
    return fetch(path, opts).then(function (r) {
      return r.json().then(function (j) { if (!r.ok) throw new Error(j.error || r.statusText); return j; });
    });
  }

  function loadHistory(c) {
    if (!live) return;
    api('api/history?event=' + encodeURIComponent(c.dataset.eventId))
      .then(function (j) { showHistory(c, j.history); })
      .catch(function (e) { status(c, e.message, true); });
  }

  function select(i, scroll) {
    if (!cards.length) return;
    cur = Math.max(0, Math.min(cards.length - 1, i));
    cards.forEach(function (c, k) { c.classList.toggle('current', k === cur); });
    const c = cards[cur];
    if (scroll !== false) c.scrollIntoView({block: 'start'});
    history.replaceState(null, '', '#' + c.id);
    loadHistory(c);
  }

  function save(c, label) {
    if (!live) { status(c, 'Read-only copy: run "rxlog review --serve" to label.', true); return; }
    status(c, 'saving…');
    api('api/label', {event_id: c.dataset.eventId, label: label, note: c.querySelector('.note').value,
                      who: who.value.trim()})
      .then(function (j) {
        showLabel(c, j.event); showHistory(c, j.history);
        // The store's time of the label, in the style of the history beneath.
        const last = j.history[j.history.length - 1];
        status(c, 'saved ' + data.names[label] + (last ? ' at ' + last.created_shown : ''));
      })
      .catch(function (e) { status(c, 'not saved: ' + e.message, true); });
  }

  cards.forEach(function (c, k) {
    c.addEventListener('click', function () { if (cur !== k) select(k, false); });
    c.querySelectorAll('.labeller button').forEach(function (b) {
      b.addEventListener('click', function (ev) { ev.stopPropagation(); select(k, false); save(c, b.dataset.label); });
    });
    c.querySelector('.note').addEventListener('keydown', function (ev) {
      if (ev.key === 'Enter') { ev.preventDefault(); this.blur(); }
    });
  });

  document.addEventListener('keydown', function (ev) {
    const t = ev.target;
    if (t && (t.tagName === 'INPUT' || t.tagName === 'TEXTAREA' || t.tagName === 'SELECT')) {
      if (ev.key === 'Escape') t.blur();
      return;
    }
    if (ev.ctrlKey || ev.metaKey || ev.altKey) return;
    const k = ev.key;
    if (k === 'j' || k === 'ArrowDown') { select(cur + 1); }
    else if (k === 'k' || k === 'ArrowUp') { select(cur < 0 ? 0 : cur - 1); }
    else if (k === 'u') {
      for (let i = cur + 1; i < cards.length; i++) { if (!cards[i].dataset.label) { select(i); break; } }
    }
    else if (k === 'n' && cur >= 0) { cards[cur].querySelector('.note').focus(); }
    else if (k === '?') { document.getElementById('keys').scrollIntoView(); }
    else if (byKey[k] && cur >= 0) { save(cards[cur], byKey[k]); }
    else return;
    ev.preventDefault();
  });

  if (live) {
    api('api/events').then(function (j) {
      j.events.forEach(function (row) { const c = card(row.event_id); if (c) showLabel(c, row); });
    }).catch(function (e) { mode.textContent = 'Could not read current labels: ' + e.message; });
  }
  const start = cards.findIndex(function (c) { return '#' + c.id === location.hash; });
  if (start >= 0) select(start);
})();
"""


def _e(x) -> str:
    return html.escape("" if x is None else str(x), quote=True)


def _num(x, fmt="{:.1f}", unit=""):
    return "—" if x is None else fmt.format(x) + unit


def event_image_name(ev: dict) -> str:
    return f"events/{ev['event_id']}.png"


def _button_class(lab: str, current: str | None) -> str:
    return " ".join(([f"cls-{lab}"] if lab in CLASS_COLOURS else []) + (["on"] if lab == current else []))


def _event_card(i: int, ev: dict, night: Night, zoom_source: str | None) -> str:
    peak = parse_iso(ev["peak_utc"])
    cls = ev["class"]
    rel = urllib.parse.quote(event_image_name(ev))
    img = (f'<a href="{rel}"><img src="{rel}" loading="lazy" width="560" height="352" '
           f'alt="dynamic spectrum and light curve of event {i + 1}"></a>' if zoom_source
           else '<p class="muted">No spectra for this event in the archive.</p>')
    rows = [
        ("peak", f"{night.stamp(peak)} · {utc_stamp(peak)}"),
        ("band", f"{ev['fmin_mhz']:.3f}–{ev['fmax_mhz']:.3f} MHz"),
        ("duration", _num(ev.get("duration_s"), "{:.1f}", " s")),
        ("peak excess · S/N", f"{_num(ev.get('peak_excess_db'), '{:.1f}', ' dB')} · {_num(ev.get('snr'), '{:.1f}')}"),
        ("drift", _num(ev.get("drift_mhz_s"), "{:+.3f}", " MHz/s")
         + (f" ± {ev['drift_err_mhz_s']:.3f}" if ev.get("drift_err_mhz_s") is not None else "")),
        ("CML III · Io phase", f"{_num(ev.get('cml3_deg'), '{:.0f}', '°')} · {_num(ev.get('io_phase_deg'), '{:.0f}', '°')}"
         + (f" · {ev['source_region']}" if ev.get("source_region") else "")),
        ("Jupiter · Sun altitude", f"{_num(ev.get('jupiter_alt_deg'), '{:.0f}', '°')} · {_num(ev.get('sun_alt_deg'), '{:.0f}', '°')}"),
        ("why", ev.get("reason") or "—"),
        ("zoom from", zoom_source or "—"),
        ("event id", ev["event_id"]),
    ]
    facts = "".join(f"<tr><td>{_e(k)}</td><td>{_e(v)}</td></tr>" for k, v in rows)
    buttons = "".join(f'<button type="button" data-label="{lab}" class="{_button_class(lab, ev.get("label"))}">'
                      f'<kbd>{LABEL_KEYS[lab]}</kbd>{_e(LABEL_NAMES[lab])}</button>' for lab in LABELS)
    label = (f"{LABEL_NAMES[ev['label']]}" + (f" ({ev['label_who']})" if ev.get("label_who") else "")
             if ev.get("label") else "not labelled")
    return f"""
<section class="event cls-{_e(cls)}" id="ev-{i + 1}" data-event-id="{_e(ev['event_id'])}" data-class="{_e(cls)}" data-label="{_e(ev.get('label') or '')}">
<h3><span class="num">#{i + 1}</span> <span class="when">{_clock(night, peak, True)} {night.zone(peak)}</span> · <span class="chip cls-{_e(cls)}">{_e(LABEL_NAMES.get(cls, cls))} · confidence {_num(ev.get('confidence'), '{:.2f}')}</span>
label: <span class="current-label">{_e(label)}</span></h3>
<div class="body">{img}
<table class="ev">{facts}</table>
<div class="labeller"><div class="buttons">{buttons}</div>
<input class="note" type="text" maxlength="2000" placeholder="note (optional), saved with the label" value="{_e(ev.get('label_note') or '')}">
<div class="status"></div><ol class="history"></ol></div>
</div></section>"""


def render_page(cfg, night: Night, summary: dict, events: list[dict], images: dict[str, str]) -> str:
    """The review page as one HTML string (inline CSS and script, relative image links)."""
    s = summary
    st = cfg["station"]
    gaps = s["gaps"]
    facts = [
        ("recording", f"{_fmt_hours(s['recorded_s'])} of {_fmt_hours(s['length_s'])} ({100 * s['uptime']:.0f} %)"),
        ("gaps", (", ".join(_fmt_span(night, a, b) for a, b in gaps[:8]) + (" …" if len(gaps) > 8 else ""))
         if gaps else "none"),
        ("masked as interference", "not measured yet (rxlog detect)" if s["masked_fraction"] is None
         else f"{100 * s['masked_fraction']:.1f} % (from {s['masked_source']})"),
        ("events", f"{s['n_events']} ({s['n_labelled']} labelled when this page was made)"),
        ("Jupiter up", ", ".join(_fmt_span(night, a, b) for a, b in s["jupiter_up"]) or "not up"),
        ("Sun up", ", ".join(_fmt_span(night, a, b) for a, b in s["sun_up"]) or "not up"),
    ]
    facts_html = "".join(f"<div><b>{_e(k)}</b>{_e(v)}</div>" for k, v in facts)
    chips = "".join(f'<span class="chip cls-{_e(c)}">{_e(LABEL_NAMES.get(c, c))}: {n}</span>'
                    for c, n in s["per_class"].items() if n) or '<span class="muted">no events</span>'
    index = {e["event_id"]: i + 1 for i, e in enumerate(events)}
    if s["forecast"]:
        frows = "".join(
            f"<tr><td>{_e(w['region'])}</td><td>{_e(_fmt_span(night, w['start'], w['end']))}</td>"
            f"<td>{_num(w.get('max_jupiter_alt_deg'), '{:.0f}', '°')}</td>"
            f"<td>{100 * w['recorded_fraction']:.0f} %</td><td>"
            + (", ".join(f'<a href="#ev-{index[x]}">#{index[x]}</a>' for x in w["seen"]) or "nothing seen")
            + "</td></tr>" for w in s["forecast"])
        forecast = ("<table class=\"forecast\"><tr><th>region</th><th>window</th><th>Jupiter max alt</th>"
                    f"<th>recorded</th><th>Jovian events seen</th></tr>{frows}</table>")
    else:
        forecast = '<p class="muted">No forecast windows fell in this night.</p>'
    if s["jovian_outside_forecast"]:
        forecast += ("<p>Jovian candidates outside the forecast windows: "
                     + ", ".join(f'<a href="#ev-{index[x]}">#{index[x]}</a>' for x in s["jovian_outside_forecast"])
                     + "</p>")
    cards = "".join(_event_card(i, e, night, images.get(event_image_name(e))) for i, e in enumerate(events))
    keys = "".join(f"<tr><td><kbd>{LABEL_KEYS[lab]}</kbd></td><td>{_e(LABEL_NAMES[lab])} "
                   f"<span class='muted'>({lab})</span></td></tr>" for lab in LABELS)
    payload = {"night": night.name, "station": st["name"],
               "events": [e["event_id"] for e in events],
               "labels": [{"key": LABEL_KEYS[lab], "label": lab} for lab in LABELS],
               "names": LABEL_NAMES}
    data_json = json.dumps(payload).replace("<", "\\u003c")
    overview = '<img class="plot" src="overview.png" alt="dynamic spectrum of the night with event boxes">' \
        if "overview.png" in images else '<p class="muted">No archived spectra for this night.</p>'
    cml = '<img class="plot" src="cml_io.png" alt="Jovian candidates on the CML III and Io phase plane">' \
        if "cml_io.png" in images else ""
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<meta name="rxlog-session" content="">
<title>{_e(st['name'])} — night of {night.name}</title>
<style>{PAGE_CSS}</style></head>
<body>
<header><h1>{_e(st['name'])} — night of {night.name}</h1>
<div class="sub">{_clock(night, night.t0)} {night.zone(night.t0)} {night.local(night.t0):%d %b} to
{_clock(night, night.t1)} {night.zone(night.t1)} {night.local(night.t1):%d %b} ({_e(night.tz)}) ·
{st['latitude_deg']:.3f}°, {st['longitude_deg']:.3f}° · report made {utc_stamp(parse_iso(s['generated_utc']), seconds=False)}</div></header>
<div id="toolbar"><label>your name <input id="who" type="text" maxlength="100" placeholder="optional"></label>
<span><kbd>j</kbd>/<kbd>k</kbd> next/previous · <kbd>u</kbd> next unlabelled · <kbd>1</kbd>…<kbd>0</kbd> label · <kbd>n</kbd> note · <kbd>?</kbd> keys</span>
<span id="mode"></span></div>
<main>
<h2>Summary</h2>
<div class="facts-grid">{facts_html}</div>
<p>{chips}</p>
<h2>Overview</h2>
{overview}
<h2>Forecast windows and what was seen</h2>
{forecast}
<h2>CML III – Io phase</h2>
{cml}
<h2>Events ({len(events)})</h2>
{cards or '<p class="muted">No events this night.</p>'}
<h2 id="keys">Keys</h2>
<table><tr><td><kbd>j</kbd> <kbd>↓</kbd></td><td>next event</td></tr>
<tr><td><kbd>k</kbd> <kbd>↑</kbd></td><td>previous event</td></tr>
<tr><td><kbd>u</kbd></td><td>next unlabelled event</td></tr>
<tr><td><kbd>n</kbd></td><td>type a note (Enter or Esc to leave it), saved with the next label</td></tr>
{keys}</table>
</main>
<script type="application/json" id="rxlog-data">{data_json}</script>
<script data-rxlog-app>{PAGE_JS}</script>
</body></html>
"""


# -- the report -------------------------------------------------------------------------

def night_events(cfg, night: Night) -> list[dict]:
    store = EventStore(cfg.store_path)
    try:
        return store.events(night.t0, night.t1, station=cfg["station"]["name"])
    finally:
        store.close()


TRACK_STEP_S = 300.0   # sampling of the night's CML–Io-phase track


def _jupiter_track(cfg, jupiter_up: list[tuple[float, float]]):
    """(CML III, Io phase) every TRACK_STEP_S while Jupiter was up, NaN between the up intervals."""
    from rxlog.sky.tags import station_tags

    pieces = [np.append(np.arange(a, b, TRACK_STEP_S), np.nan) for a, b in jupiter_up if b > a]
    if not pieces:
        return None
    t = np.concatenate(pieces)
    ok = np.isfinite(t)
    cml, io = np.full(t.shape, np.nan), np.full(t.shape, np.nan)
    tags = station_tags(cfg, t[ok])
    cml[ok], io[ok] = tags["cml3_deg"], tags["io_phase_deg"]
    return cml, io


CUTOUT_MAX_BINS = (720, 512)   # a cutout is shown at its own resolution up to this many (time, channel) bins


def cutout_file(cfg, ev: dict) -> Path | None:
    """Where an event's kept full-resolution cutout is (relative paths are under the storage root)."""
    if not ev.get("cutout_path"):
        return None
    p = Path(ev["cutout_path"])
    return p if p.is_absolute() else Path(cfg.storage_root) / p


def read_cutout(cfg, ev: dict):
    """An event's cutout as (t_edges, f_edges_mhz, excess) at its own resolution, or None when there is none.

    Cutouts are dynamic spectra in the archive's FITS layout. The background is the
    per-channel median over the cutout (its burst is brief against its length).
    """
    from rxlog.archive.read import read_spectrum_fits

    path = cutout_file(cfg, ev)
    if path is None or not path.is_file():
        return None
    try:
        spec = read_spectrum_fits(path)
    except (RxlogError, OSError, ValueError):
        return None
    n_t = min(spec.n_time, CUTOUT_MAX_BINS[0])
    n_f = min(spec.n_chan, CUTOUT_MAX_BINS[1])
    f = spec.freq_hz / 1e6
    df = float(np.median(np.diff(f))) if f.size > 1 else 0.01
    f_edges = np.linspace(f.min() - df / 2, f.max() + df / 2, n_f + 1)
    t_edges = np.linspace(spec.t0, spec.t_end, n_t + 1)
    chan_bin = np.clip(np.searchsorted(f_edges, f, side="right") - 1, 0, n_f - 1)
    row_bin = np.floor((spec.times - spec.t0) / (t_edges[1] - t_edges[0])).astype(np.int64)
    valid = np.isfinite(spec.power_db) & ((spec.flags & DISPLAY_FLAGS) == 0)
    sums, counts = np.zeros((n_t, n_f)), np.zeros((n_t, n_f))
    add_rows(sums, counts, row_bin, *display_channels(spec.power_db, valid, chan_bin, n_f))
    with np.errstate(invalid="ignore", divide="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        power = sums / counts
        excess = power - np.nanmedian(power, axis=0)[None, :]
    if not np.isfinite(excess).any():
        return None
    return t_edges, f_edges, excess


def build_report(cfg, night: Night | str | dt.date | None = None, progress=None, now: float | None = None) -> Path:
    """Write the report folder of one night (default: the latest complete night with data); return its index.html.

    ``progress(done, total)`` is called as the archive is read.
    """
    if night is None:
        night = default_night(cfg, now=now)
    elif isinstance(night, str):
        night = parse_night(cfg, night)
    elif isinstance(night, dt.date):
        night = night_starting(cfg, night)
    out = report_dir(cfg, night)
    (out / "events").mkdir(parents=True, exist_ok=True)
    events = night_events(cfg, night)
    store = EventStore(cfg.store_path)
    try:
        quality = store.quality(night.t0, night.t1)
    finally:
        store.close()

    from rxlog.sky.tags import body_up_intervals
    from rxlog.forecast import forecast_windows

    jupiter_up = body_up_intervals(cfg, night.t0, night.t1, body="jupiter")
    sun_up = body_up_intervals(cfg, night.t0, night.t1, body="sun")
    forecast = forecast_windows(cfg, night.t0, (night.t1 - night.t0) / 86400.0)

    images: dict[str, str] = {}   # file name -> what it was drawn from
    zoomer = ZoomPlotter(night, _freq_bins(cfg))
    cut_plotters: dict[tuple, ZoomPlotter] = {}

    from_archive = []
    for i, ev in enumerate(events):
        cut = read_cutout(cfg, ev)
        if cut is None:
            from_archive.append(i)
            continue
        t_edges, f_edges, excess = cut
        key = (round(float(f_edges[0]), 4), round(float(f_edges[-1]), 4))
        plotter = cut_plotters.setdefault(key, ZoomPlotter(night, f_edges))
        plotter.draw(out / event_image_name(ev), i + 1, ev, t_edges, excess, "full-resolution cutout")
        images[event_image_name(ev)] = "full-resolution cutout"

    def on_zoom(k, ev, t_edges, f_edges, power, bg):
        if np.isfinite(power).any():
            zoomer.draw(out / event_image_name(ev), from_archive[k] + 1, ev, t_edges, power - bg[None, :], "archive")
            images[event_image_name(ev)] = "archive"

    data = read_night(cfg, night, [events[i] for i in from_archive], on_zoom=on_zoom, progress=progress)
    summary = night_summary(cfg, night, events, data, quality, jupiter_up, sun_up, forecast)
    if data.covered:
        plot_overview(out / "overview.png", night, data, events, summary)
        images["overview.png"] = "archive"
    plot_cml_io(out / "cml_io.png", cfg, night, [(i, e) for i, e in enumerate(events) if e["class"] in JOVIAN],
                track=_jupiter_track(cfg, jupiter_up))
    images["cml_io.png"] = "event store"
    # Drop zooms of events that are no longer in the store (re-detection changed the ids).
    for old in (out / "events").glob("*.png"):
        if f"events/{old.name}" not in images:
            old.unlink()
    page = render_page(cfg, night, summary, events, images)
    write_atomic(out / "summary.txt", format_summary(summary, night) + "\n")
    write_atomic(out / "index.html", page)
    return out / "index.html"


# -- listings ---------------------------------------------------------------------------

def list_events(cfg, night: str | Night | None = None, cls: str | None = None,
                unlabelled: bool = False) -> list[dict]:
    """This station's stored events (oldest first), optionally one night's, one class's, or only unlabelled ones."""
    if isinstance(night, str):
        night = parse_night(cfg, night)
    t0, t1 = (night.t0, night.t1) if night is not None else (None, None)
    store = EventStore(cfg.store_path)
    try:
        return store.events(t0, t1, cls=cls, unlabelled=unlabelled, station=cfg["station"]["name"])
    finally:
        store.close()


def event_table(cfg, night: str | Night | None = None, cls: str | None = None, unlabelled: bool = False) -> str:
    """``list_events`` as a plain-text table with local peak times, each with its zone."""
    rows = list_events(cfg, night, cls, unlabelled)
    if not rows:
        return "no events match"
    tz = ZoneInfo(cfg["station"]["timezone"])
    head = ("event_id", "peak", "class", "confidence", "MHz", "dur s", "S/N", "region", "label")
    body = []
    for r in rows:
        peak = dt.datetime.fromtimestamp(parse_iso(r["peak_utc"]), tz)
        body.append((r["event_id"], f"{peak:%Y-%m-%d %H:%M:%S} {zone_name(peak)}", r["class"],
                     _num(r.get("confidence"), "{:.2f}"),
                     f"{r['fmin_mhz']:.2f}-{r['fmax_mhz']:.2f}", _num(r.get("duration_s"), "{:.1f}"),
                     _num(r.get("snr"), "{:.1f}"), r.get("source_region") or "-",
                     (r["label"] + (f" ({r['label_who']})" if r.get("label_who") else "")) if r.get("label") else "-"))
    widths = [max(len(str(x)) for x in col) for col in zip(head, *body)]
    line = lambda cells: "  ".join(str(c).ljust(w) for c, w in zip(cells, widths)).rstrip()
    return "\n".join([line(head), line(["-" * w for w in widths])] + [line(b) for b in body]
                     + [f"{len(rows)} event{'s' if len(rows) != 1 else ''} ({tz})"])
