"""The online detector: dynamic spectra in, chunk by chunk, events out, with bounded memory.

The detector runs on one segment at a time (a segment never mixes tunings or gains;
rxlog.detect.segment) in fixed blocks, so feeding rows one at a time, in chunks of any
size, or all at once gives the same events (``detect_spectrum`` runs the online
detector over one spectrum). Two paths find the two kinds of events:

* **Bursts** (seconds to minutes): excess above the fast background, divided by each
  channel's noise, smoothed and thresholded with hysteresis; connected regions close in
  time and overlapping in frequency merge into one event. Latency: (fast window / 2 + 3
  blocks), a few minutes.
* **Long events** (minutes to hours: Type IV continua, storms, fadeouts): block levels on
  coarse channels against the slow baseline, with a positive and a *negative* branch.
  Reported half a slow window after they happen.

Interference that looks like an event is reported as an ``rfi`` event rather than
masked silently: impulses and trains of them (one storm per train), and narrowband cells
masked by SumThreshold that line up across the band (an ionosonde sweep). Each event
gets its features (rxlog.detect.features), a class with a confidence and a one-line
reason (rxlog.detect.classify), ephemeris tags at peak, start and end, and an episode.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from rxlog.detect.classify import classify, rfi_kind
from rxlog.detect.episodes import Episodes
from rxlog.detect.events import (
    LongEventPieces,
    TagsFn,
    event_record,
    feature_tags,
    sky_context,
)
from rxlog.detect.mask import Occupancy, add_hours, group_fractions, new_occupancy
from rxlog.detect.segment import Segment
from rxlog.detect.settings import BRIDGE_S, Settings
from rxlog.sky.tags import station_tags
from rxlog.spectrum import DynamicSpectrum
from rxlog.timeutil import iso


def grid_key(freq_hz) -> tuple[int, float, float]:
    """A channel grid's identity: channel count and its first and last centre (1 Hz)."""
    f = np.asarray(freq_hz, dtype=np.float64)
    return len(f), round(float(f[0]), 0), round(float(f[-1]), 0)


def default_tags_fn(cfg) -> TagsFn:
    """Ephemeris tags for this station."""
    return lambda times: station_tags(cfg, np.asarray(times, dtype=np.float64))


class OnlineDetector:
    """Chunk-by-chunk detector with bounded memory.

    ``feed(spec_chunk)`` takes the next rows (any number, in time order; a new segment
    id, channel grid, cadence or a jump in time starts a new segment) and returns the
    events finished so far; ``flush()`` ends the current segment and returns the rest.
    ``pop_episodes()`` and ``pop_quality()`` return the episodes decided and the hourly
    quality rows finished since the last call (an episode is decided once no path can
    add to it: after the slow path has passed it, half a slow window or more later).
    Fine bursts come out a few minutes after they end; long events half a slow window (``slow_window_s`` / 2) after, together with
    updated versions (same event_id) of the "unknown" bursts that turned out to be pieces
    of them, and of events whose episode was joined to an earlier one: keep the last
    version of each event (``latest``; the event store upserts).
    """

    def __init__(self, cfg, tags_fn: TagsFn | None = None, settings: Settings | None = None,
                 mask_sink: Callable | None = None):
        self.cfg = cfg
        self.s = settings or Settings.from_config(cfg)
        self.tags_fn = tags_fn if tags_fn is not None else default_tags_fn(cfg)
        self.mask_sink = mask_sink
        self.seg: Segment | None = None
        self.episodes = Episodes(self.s.episode_gap_s, BRIDGE_S + self.s.slow_window_s)
        self.pieces = LongEventPieces(self.s.block_s, self.s.slow_window_s)
        self._quality: list[dict] = []
        self._hours: dict[float, list] = {}
        self.occupancy: dict[tuple, Occupancy] = {}    # what the mask learned, per channel grid

    # -- feeding -----------------------------------------------------------------------
    def feed(self, spec: DynamicSpectrum) -> list[dict]:
        out = []
        if spec.n_time == 0:
            return out
        if self.seg is not None and not self.seg.accepts(spec):
            out += self._end_segment()
        if self.seg is None:
            self.seg = Segment(self.s, spec, self.mask_sink, self._occupancy(spec))
        out += self._events(self.seg.add(spec))
        self.episodes.close_before(self._frontier())
        self._collect_quality(final=False)
        return out

    def flush(self) -> list[dict]:
        out = self._end_segment()
        self._collect_quality(final=True)
        self.episodes.close_all()
        return out

    def _end_segment(self) -> list[dict]:
        if self.seg is None:
            return []
        out = self._events(self.seg.finish())
        add_hours(self._hours, self.seg.mask.hours_before(math.inf))
        self.seg = None
        return out

    def _occupancy(self, spec: DynamicSpectrum) -> Occupancy:
        """The learned carriers of this channel grid, kept across segments (a retune or a
        gap does not make the mask forget the station's broadcasters)."""
        key = grid_key(spec.freq_hz)
        if key not in self.occupancy:
            self.occupancy[key] = new_occupancy(len(spec.freq_hz), self.s.block_s, self.s)
        return self.occupancy[key]

    def occupancy_state(self) -> list[dict]:
        """What the mask has learned, per channel grid, to hand to ``load_occupancy`` after
        a restart: dicts of channels, fmin_hz, fmax_hz, recent (C,) and by_hour (24, C)."""
        return [{"channels": k[0], "fmin_hz": k[1], "fmax_hz": k[2], **o.state()} for k, o in self.occupancy.items()]

    def load_occupancy(self, states: list[dict]) -> None:
        for st in states:
            key = (int(st["channels"]), float(st["fmin_hz"]), float(st["fmax_hz"]))
            occ = new_occupancy(key[0], self.s.block_s, self.s)
            occ.load(st)
            self.occupancy[key] = occ

    def _frontier(self) -> float:
        """The time before which no path can report another event: where the slow path
        (half a slow window behind) and the fine path (an event's longest span behind)
        have got to, and the start of any long event still open."""
        seg = self.seg
        g = seg.grid
        t = min(g.t0 + seg.next_slow * g.block_s, g.t0 + seg.next_s * g.block_s - self.s.max_event_s)
        since = seg.slow.open_since()
        return t if since is None else min(t, g.t0 + since * g.block_s)

    def pop_episodes(self) -> list[dict]:
        """The episodes closed (decided) since the last call, and closed ones handed out
        again because a later episode of the same flare linked to them."""
        return self.episodes.pop()

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
                acc = self._hours.pop(h)
                masked, cov, gap, covs = acc[:4]
                self._quality.append({"station": self.s.station, "hour_utc": iso(h),
                                      "masked_fraction": masked / cov if cov > 0 else None,
                                      "gap_s": gap, "covered_s": covs,
                                      **group_fractions(acc, self.s.slow_freq_mhz)})

    # -- events ----------------------------------------------------------------------------
    def _events(self, comps: list) -> list[dict]:
        """Features, tags, class and episode of each finished component; with the updated
        versions of earlier pieces a long event among them claims."""
        seg = self.seg
        feats = []
        for kind, c in comps:
            f = seg.features(kind, c)
            if f is not None:
                feats.append(f)
        if not feats:
            return []
        tags = feature_tags(self.tags_fn, feats)
        events = []
        for i, f in enumerate(feats):
            ctx, region = sky_context(tags, i)
            f.update(sun_alt=ctx.get("sun_alt_deg"), jupiter_alt=ctx.get("jupiter_alt_deg"),
                     source_region=region, band_mhz=seg.band_mhz(),
                     cadence_s=seg.grid.cadence, chan_mhz=seg.grid.chan_mhz)
            verdict = classify(f, self.s)
            e = event_record(self.s.station, f, ctx, *verdict)
            e["rfi_kind"] = rfi_kind(f, verdict)
            events.append((f, e))
        events.sort(key=lambda fe: fe[1]["peak_utc"])
        moved = []
        for f, e in events:
            moved += self.episodes.assign(e, f["path"])
        updates = self.pieces.updates(events)
        for u in updates:
            moved += self.episodes.reassign(u, "fine")
        return [e for _, e in events] + updates + moved


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

    def sink(segment, t_block, flags):
        i0 = int(round((t_block - spec.t0) / spec.cadence_s))
        mask[i0:i0 + flags.shape[0]] = flags

    det = OnlineDetector(cfg, tags_fn=tags_fn, settings=settings, mask_sink=sink)
    step = max(1, int(round(chunk_s / spec.cadence_s)))
    events = []
    for i in range(0, spec.n_time, step):
        events += det.feed(spec.slice_rows(i, min(i + step, spec.n_time)))
    events = latest(events + det.flush())
    return DetectionResult(events=events, episodes=det.pop_episodes(), quality_rows=det.pop_quality(), mask=mask)
