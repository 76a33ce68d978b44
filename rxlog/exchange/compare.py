"""Cross-station comparison: which events partner stations saw too, and how far their clocks are off.

An event seen at two stations hundreds of kilometres apart is real; local interference
is not. ``compare_stations`` reads event lists from any number of stations and

1. matches events one-to-one across stations: two events are candidates when their time
   intervals, widened by the window, overlap and their frequency ranges overlap; the
   candidates are taken cheapest first (time difference after the clock offsets known
   so far, plus penalties for differing classes and poor frequency overlap), and two
   groups merge only if they hold no station twice. Each event is marked by how many
   stations saw it (rxlog.exchange.matching; each event's clock reading and its noise
   by class: rxlog.exchange.timing).
2. estimates each station's clock offset (station time minus true time) from the
   matched events by robust weighted least squares: every event time is modelled as
   t = T_group + offset_station + noise, the group times are eliminated exactly (a
   Schur complement), and Huber weights with scales measured per class keep a few
   mismatches from pulling the answer. Solar Type III onsets are the best clocks (the
   emission arrives at all ground stations within milliseconds, and the onset is sharp);
   the fine structure of Jovian L-bursts comes mostly from interplanetary
   scintillation, so stations hundreds of km apart see the pattern shifted by
   ~0.3-1 s (common practice), alike for a whole night: they weigh much less. The
   offsets are only defined relative to each other: they are quoted against the mean of
   the stations that agree with each other (a station whose offset stands out is left
   out of that mean). (rxlog.exchange.clocks)
3. when partners share dynamic spectra, refines the offsets by cross-correlating Type III
   light curves channel by channel on a fine time grid, each channel at its true
   sampling time (row time plus the per-channel sweep offset). (rxlog.exchange.lightcurves)
4. when episode lists are given beside the event lists (``rxlog export --level
   episodes``), confirms episodes across stations: put on the common clock with the
   offsets from step 2 or 3, episodes that overlap in time and band at two or more
   stations are one phenomenon seen twice (rxlog.exchange.episodes). Clock offsets come
   from bursts only: an episode's edges are minutes wide, no clock.
5. writes a matched-events table (CSV), a matched-episodes table when there are
   episodes, a per-station summary (CSV and text) and a timeline plot
   (rxlog.exchange.outputs, rxlog.exchange.timeline).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from rxlog.errors import RxlogError
from rxlog.exchange.clocks import (
    FLAG_OFFSET_S,
    FLAG_SIGMAS,
    Solution,
    clock_fit,
    reference_stations,
    relative_to,
)
from rxlog.exchange.episodes import confirm_episodes
from rxlog.exchange.importer import EventList, read_event_list
from rxlog.exchange.lightcurves import load_spectra, refine_lags
from rxlog.exchange.matching import candidates, group_events, pair_offsets
from rxlog.exchange.outputs import match_rows, write_outputs
from rxlog.exchange.timing import CLS, Events, event_arrays


@dataclass
class StationResult:
    """One station's part in a comparison."""

    name: str
    header: dict
    n_events: int
    n_confirmed: int = 0            # events seen by at least one other station
    n_clock: int = 0                # events that went into the clock fit with weight
    n_type3: int = 0                # of which solar Type III
    n_lightcurves: int = 0          # Type III light-curve lags used in the refinement
    offset_s: float | None = None   # best estimate (light curves and events together)
    offset_err_s: float | None = None
    event_offset_s: float | None = None      # from matched events alone
    event_offset_err_s: float | None = None
    in_reference: bool = False      # part of the group of agreeing clocks the offsets refer to
    flagged: bool = False
    n_episodes: int = 0             # episodes in its episode lists
    n_episodes_confirmed: int = 0   # of which seen by at least one other station

    @property
    def clock_sync(self) -> str:
        return self.header.get("clock_sync") or "unknown"


@dataclass
class CompareResult:
    """What a comparison found: per station, per event, and the groups' sizes."""

    stations: list[StationResult]
    rows: list[dict]                # one per event: match_id, n_stations, ..., residual
    group_sizes: dict[int, int]     # n_stations -> number of groups of that size
    reference: list[str]
    window_s: float
    notices: list[str] = field(default_factory=list)
    files: dict[str, Path] = field(default_factory=dict)
    episode_rows: list[dict] = field(default_factory=list)        # one per episode (rxlog.exchange.episodes)
    episode_group_sizes: dict[int, int] = field(default_factory=dict)

    def summary_lines(self) -> list[str]:
        """The comparison for a person: counts, then one line per station with its clock offset."""
        n_events = sum(s.n_events for s in self.stations)
        multi = [(k, v) for k, v in sorted(self.group_sizes.items()) if k >= 2]
        seen = ", ".join(f"{v} at {k} stations" for k, v in multi) or "none at two or more stations"
        lines = [f"{len(self.stations)} stations, {n_events} events; seen within {self.window_s:g} s: {seen}"]
        if self.episode_rows:
            n_groups = sum(self.episode_group_sizes.values())
            multi = sum(v for k, v in self.episode_group_sizes.items() if k >= 2)
            lines.append(f"{len(self.episode_rows)} episodes, {n_groups} phenomena; "
                         f"{multi} confirmed (seen at two or more stations)")
        if self.reference:
            lines.append(f"Clock offsets against the mean of {', '.join(self.reference)} "
                         "(positive: the station's clock is ahead):")
        for s in self.stations:
            head = f"  {s.name}: "
            if s.offset_s is None:
                lines.append(head + f"offset unknown (no events matched with the other stations); "
                             f"{s.n_events} events; clock sync {s.clock_sync}")
                continue
            nd = 3 if s.offset_err_s < 0.01 else 2
            how = f"{s.n_clock} matched events ({s.n_type3} Type III)"
            if s.n_lightcurves:
                how += f" and {s.n_lightcurves} Type III light curves"
            line = (head + f"offset {s.offset_s:+.{nd}f} ± {s.offset_err_s:.{nd}f} s from {how}; "
                    f"{s.n_confirmed}/{s.n_events} events confirmed; "
                    + (f"{s.n_episodes_confirmed}/{s.n_episodes} episodes confirmed; " if s.n_episodes else "")
                    + f"clock sync {s.clock_sync}")
            if s.flagged:
                line += " -- LARGE OFFSET: check this station's time sync"
            lines.append(line)
        ref = [s for s in self.stations if s.in_reference]
        if len(ref) == 2 and all(s.flagged for s in ref):
            lines.append(f"  {ref[0].name} and {ref[1].name} disagree, and two clocks alone cannot tell "
                         "which one is off: compare with a third station, or check both time syncs")
        return lines


# -- reading --------------------------------------------------------------------------------

def _load(paths) -> tuple[list[EventList], list[EventList], list[str]]:
    """The event lists of ``paths`` (files or EventLists), one per station (lists of one
    station merged), the episode lists among them, and the notices of reading them."""
    lists: dict[str, EventList] = {}
    episode_lists: list[EventList] = []
    notices: list[str] = []
    for p in paths:
        el = p if isinstance(p, EventList) else read_event_list(p)
        if not el.events:
            raise RxlogError(f"{el.path or el.name}: no events to compare")
        notices.extend(el.notices)
        if el.level == "episodes":
            episode_lists.append(el)
            continue
        if el.name in lists:
            have = lists[el.name]
            ids = {e["event_id"] for e in have.events}
            new = [e for e in el.events if e["event_id"] not in ids]
            notices.append(f"{el.path}: another list of station {el.name}; merged "
                           f"({len(el.events) - len(new)} events already there)")
            have.events.extend(new)
        else:
            lists[el.name] = EventList(dict(el.station), list(el.events), [], el.path, el.format)
    if len(lists) < 2:
        raise RxlogError("need event lists (of bursts: they set the clocks) from at least two stations "
                         "to compare; got " + (", ".join(lists) or "none"))
    return list(lists.values()), episode_lists, notices


# -- the comparison ------------------------------------------------------------------------

def compare_stations(paths, window_s: float = 10.0, outdir=None, spectra=None, progress=None) -> CompareResult:
    """Match events across stations, count confirmations, estimate clock offsets.

    ``paths``: event-list files (CSV, JSON, VOTable) or ``EventList`` objects, one or more
    per station, and optionally their episode lists (confirmed across stations on the
    clocks the events give). ``spectra``: optional {station name: [DynamicSpectrum or FITS path or
    folder, ...]} for the Type III light-curve refinement. With ``outdir``, writes
    matched_events.csv, matched_episodes.csv (with episode lists), stations.csv, summary.txt
    and timeline.png there. ``progress``,
    if given, is called with the name of each stage as it starts.
    """
    step = progress or (lambda stage: None)
    if not (isinstance(window_s, (int, float)) and 0 < window_s <= 3600):
        raise RxlogError(f"window {window_s!r}: expected seconds between 0 and 3600")
    step(f"reading {len(paths)} event lists")
    lists, episode_lists, notices = _load(paths)
    names = [el.name for el in lists]
    n_st = len(lists)
    E = event_arrays(lists)
    n = len(E.ev)

    step(f"matching {n} events across {n_st} stations")
    grp, event_sol, members = _match(E, n_st, window_s)
    sol, n_lc = event_sol, np.zeros(n_st, dtype=int)
    spectra_by = load_spectra(spectra, names, notices) if spectra else {}
    if len(spectra_by) >= 2:
        step("cross-correlating Type III light curves")
        sol, n_lc = _with_light_curves(E, grp, event_sol, spectra_by, names, window_s, notices)

    ref = reference_stations(sol, names)
    off, err = relative_to(sol, ref)
    sizes = np.bincount(grp, weights=None, minlength=int(grp.max()) + 1 if n else 0)
    n_at = sizes[grp]
    _, m_ev, m_w, m_r = members
    used = np.zeros(n, dtype=bool)
    resid = np.full(n, np.nan)
    used[m_ev] = m_w > 0
    resid[m_ev] = np.where(m_w > 0, m_r, np.nan)
    stations = _station_results(lists, E, n_at, used, n_lc, ref, (off, err), relative_to(event_sol, ref))
    for k in range(n_st):
        if not np.isfinite(off[k]) and np.isfinite(sol.offset[k]):
            notices.append(f"{names[k]}: its matches do not link it to {', '.join(names[r] for r in ref)}; "
                           "offset not given")

    rows = match_rows(E, grp, n_at, names, used, resid)
    size_count = {int(k): int(v) for k, v in zip(*np.unique(sizes[sizes > 0], return_counts=True))}
    result = CompareResult(stations=stations, rows=rows, group_sizes=size_count,
                           reference=[names[r] for r in ref], window_s=float(window_s), notices=notices)
    if episode_lists:
        step("confirming episodes across stations")
        _episodes(result, episode_lists, {names[k]: float(off[k]) for k in range(n_st) if np.isfinite(off[k])})
    if outdir is not None:
        step(f"writing tables and the timeline plot to {outdir}")
        result.files = write_outputs(result, E, grp, n_at, names, Path(outdir))
    return result


def _episodes(result: CompareResult, episode_lists: list[EventList], offsets: dict[str, float]):
    """Confirm the episodes across stations on the clocks of ``offsets``; fill ``result``."""
    rows, per_station, sizes = confirm_episodes(episode_lists, offsets)
    result.episode_rows, result.episode_group_sizes = rows, sizes
    for s in result.stations:
        s.n_episodes, s.n_episodes_confirmed = per_station.get(s.name, (0, 0))
    for name in sorted(set(per_station) - set(offsets)):
        result.notices.append(f"{name}: no clock offset from bursts (no matched event list); its episodes "
                              "are compared as if its clock were right")


def _match(E: Events, n_st: int, window_s: float):
    """Events grouped one-to-one across stations, and the clock fit to the groups.

    Matching needs the clock offsets, and the offsets need the matches: the first grouping
    takes each station pair's most common time difference, the second the offsets fitted
    to the first (consistent across all pairs). Returns (group of each event, the fit,
    the fit's members as clock_fit gives them).
    """
    n = len(E.ev)
    sa, sb, ia, ib, dt, penalty, pcls = candidates(E, n_st, window_s)
    delta = pair_offsets(sa, sb, dt, pcls, n_st, window_s)
    grp = group_events(n, E.station, ia, ib, np.abs(dt - delta[sa, sb]) + penalty)
    sol, members = clock_fit(E, grp, n_st)
    o = sol.offset_filled()
    grp = group_events(n, E.station, ia, ib, np.abs(dt - (o[sb] - o[sa])) + penalty)
    sol, members = clock_fit(E, grp, n_st)
    return grp, sol, members


def _with_light_curves(E: Events, grp, event_sol: Solution, spectra_by: dict[int, list], names: list[str],
                       window_s: float, notices: list[str]):
    """The clock fit with Type III light-curve lags added to the events, and how many lags
    each station took part in. Without any lag: the events' fit, and a notice."""
    n_lc = np.zeros(len(names), dtype=int)
    ref0 = reference_stations(event_sol, names)
    off0, err0 = relative_to(event_sol, ref0)
    la, lb, lag = refine_lags(E, grp, spectra_by, off0, err0, window_s)
    if not len(lag):
        notices.append("spectra given, but no Type III burst seen by two stations could be "
                       "cross-correlated; offsets are from events alone")
        return event_sol, n_lc
    np.add.at(n_lc, la, 1)
    np.add.at(n_lc, lb, 1)
    return clock_fit(E, grp, len(names), extra=(la, lb, lag))[0], n_lc


def _station_results(lists: list[EventList], E: Events, n_at, used, n_lc, ref: list[int], fit,
                     event_fit) -> list[StationResult]:
    """Each station's counts and offsets; ``fit`` and ``event_fit``: (offsets, sigmas) against
    the reference, from everything and from the matched events alone."""
    (off, err), (ev_off, ev_err) = fit, event_fit
    stations = []
    for k, el in enumerate(lists):
        mine = E.station == k
        sr = StationResult(name=el.name, header=el.station, n_events=int(mine.sum()),
                           n_confirmed=int((mine & (n_at >= 2)).sum()),
                           n_clock=int((mine & used).sum()),
                           n_type3=int((mine & used & (E.cls == CLS["solar_iii"])).sum()),
                           n_lightcurves=int(n_lc[k]), in_reference=k in ref)
        if np.isfinite(off[k]):
            sr.offset_s, sr.offset_err_s = float(off[k]), float(err[k])
            sr.flagged = abs(sr.offset_s) > FLAG_OFFSET_S and abs(sr.offset_s) > FLAG_SIGMAS * sr.offset_err_s
        if np.isfinite(ev_off[k]):
            sr.event_offset_s, sr.event_offset_err_s = float(ev_off[k]), float(ev_err[k])
        stations.append(sr)
    return stations
