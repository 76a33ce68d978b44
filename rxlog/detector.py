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

from rxlog.detect.classify import classify
from rxlog.detect.mask import add_hours
from rxlog.detect.segment import Segment
from rxlog.detect.settings import SBURST_MAX_CADENCE_S, Settings
from rxlog.spectrum import DynamicSpectrum
from rxlog.timeutil import iso

# Long events whose short pieces, found first by the burst path, take their class.
LONG_NAMES = {"solar_iv": "Type IV continuum", "jovian_l": "Jovian storm"}

EVENT_FIELDS = ("station", "event_id", "episode_id", "start_utc", "end_utc", "peak_utc",
                "fmin_mhz", "fmax_mhz", "peak_excess_db", "snr", "integrated_excess",
                "drift_mhz_s", "drift_err_mhz_s", "duration_s", "bandwidth_mhz", "class",
                "confidence", "reason", "cml3_deg", "io_phase_deg", "cml3_start_deg",
                "cml3_end_deg", "io_phase_start_deg", "io_phase_end_deg", "source_region",
                "jupiter_alt_deg", "sun_alt_deg", "cutout_path")


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
        self.seg: Segment | None = None
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
            self.seg = Segment(self.s, spec, self.mask_sink)
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
        add_hours(self._hours, self.seg.mask.hours_before(math.inf))
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
            now = seg.masked_until()
            add_hours(self._hours, seg.mask.hours_before(math.inf if final else now))
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
                     cadence_s=seg.grid.cadence, chan_mhz=seg.grid.chan_mhz)
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
