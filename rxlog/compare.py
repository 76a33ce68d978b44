"""Cross-station comparison: which events partner stations saw too, and how far their clocks are off.

An event seen at two stations hundreds of kilometres apart is real; local interference
is not. ``compare_stations`` reads event lists from any number of stations and

1. matches events one-to-one across stations: two events are candidates when their time
   intervals, widened by the window, overlap and their frequency ranges overlap; the
   candidates are taken cheapest first (time difference after the clock offsets known
   so far, plus penalties for differing classes and poor frequency overlap), and two
   groups merge only if they hold no station twice. Each event is marked by how many
   stations saw it.
2. estimates each station's clock offset (station time minus true time) from the
   matched events by robust weighted least squares: every event time is modelled as
   t = T_group + offset_station + noise, the group times are eliminated exactly (a
   Schur complement), and Huber weights with scales measured per class keep a few
   mismatches from pulling the answer. Solar Type III onsets are the best clocks (the
   emission arrives at all ground stations within milliseconds, and the onset is sharp);
   the fine structure of Jovian L-bursts comes mostly from interplanetary
   scintillation, so stations hundreds of km apart see the pattern shifted by
   ~0.3-1 s (common practice), alike for a whole night: they weigh much less. The offsets are only defined
   relative to each other: they are quoted against the mean of the stations that agree
   with each other (a station whose offset stands out is left out of that mean).
3. when partners share dynamic spectra, refines the offsets by cross-correlating Type III
   light curves channel by channel on a fine time grid, each channel at its true
   sampling time (row time plus the per-channel sweep offset).
4. writes a matched-events table (CSV), a per-station summary (CSV and text) and a
   timeline plot.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from rxlog.constants import MAD_TO_SIGMA
from rxlog.errors import RxlogError
from rxlog.fileio import write_atomic
from rxlog.exchange import EventList, read_event_list
from rxlog.store import CLASSES
from rxlog.timeutil import parse_iso

CLS = {c: i for i, c in enumerate(CLASSES)}
N_CLS = len(CLASSES)

# Timing noise of one event's clock time, seconds, by class (our own estimates from the
# physics of each kind of burst; common practice would be the same order):
# - solar_iii: onset at a common frequency; the emission reaches all stations within
#   ~10 ms, so the limit is how well the detector finds the onset.
# - jovian_l / jovian_s: peak; scintillation shifts the pattern by ~0.3-1 s between
#   stations hundreds of km apart (solar-wind speed over the station baseline).
# - solar_ii, solar_iv, fadeout: slow rises of seconds to minutes.
# rfi is never used as a clock: it is local by nature. Nor is unknown: an event the
# detector could not class is as likely local interference that happened to coincide
# with something at another station, and such chance pairs pulled simulated three-station
# nights' offsets by seconds; it still counts as a confirmation.
CLOCK_SIGMA_S = {"solar_iii": 0.2, "jovian_l": 1.0, "jovian_s": 1.0, "unknown": math.inf,
                 "solar_ii": 2.0, "solar_iv": 10.0, "fadeout": 20.0, "rfi": math.inf}
SIGMA = np.array([CLOCK_SIGMA_S[c] for c in CLASSES])
# A shared, systematic part of the timing error that does not average out over many events:
# the solar wind carries the scintillation pattern across the baseline in one direction
# for hours, so a night's L-bursts at one station are all shifted alike (~0.3-1 s, see
# above). Modelled as an error common to all of a station's events of the class: each
# member's variance grows by n * SYSTEMATIC^2 (n: the station's members of that class),
# so together they never weigh more than one reading of SYSTEMATIC seconds.
CLOCK_SYSTEMATIC_S = {"jovian_l": 0.5, "jovian_s": 0.5}
SYSTEMATIC = np.array([CLOCK_SYSTEMATIC_S.get(c, 0.0) for c in CLASSES])
# Drifting classes, timed at a common frequency along their drift; the rest by their peak.
ONSET_CLASSES = ("solar_iii", "solar_ii", "fadeout")
FAMILY = {"solar_iii": 0, "solar_ii": 0, "solar_iv": 0, "fadeout": 0, "jovian_l": 1, "jovian_s": 1,
          "unknown": 2, "rfi": 3}

# Matching penalties, seconds of time difference (our choice): a class disagreement
# costs more than any plausible clock residual, so like pairs with like when both exist.
CLASS_MISMATCH_S = 2.0
FAMILY_MISMATCH_S = 5.0
FREQ_MISMATCH_S = 1.0      # times (1 - frequency overlap / narrower bandwidth)

# An offset matters when it is larger than half of a typical 1-s archive cadence and
# significant (3 sigma): beyond that, events and spectra of different stations no
# longer line up sample for sample (our choice).
FLAG_OFFSET_S = 0.5
FLAG_SIGMAS = 3.0

HUBER_K = 1.345            # Huber's tuning constant for 95 % efficiency on Gaussian noise
REJECT_SIGMAS = 6.0        # residuals beyond this many (scaled) sigmas get no weight
MIN_SCALE_DOF = 8          # members of multi-station groups needed to measure a class's scale

# Light-curve refinement (our choices): 50-ms grid, ±10 s around the event, lags up to
# ±2 s beyond the event-based estimate, frequency bins of at least 0.25 MHz.
LC_STEP_S = 0.05
LC_PAD_S = 10.0
LC_MAX_LAG_S = 2.0
LC_BIN_MHZ = 0.25
LC_MIN_CORR = 0.3          # mean normalised correlation at the peak to accept a lag
LC_SIGMA_S = 0.1           # prior timing noise of one light-curve lag (rescaled by the data)
CCF = N_CLS                # group code of light-curve lags in the solver


@dataclass
class StationResult:
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

    @property
    def clock_sync(self) -> str:
        return self.header.get("clock_sync") or "unknown"


@dataclass
class CompareResult:
    stations: list[StationResult]
    rows: list[dict]                # one per event: match_id, n_stations, ..., residual
    group_sizes: dict[int, int]     # n_stations -> number of groups of that size
    reference: list[str]
    window_s: float
    notices: list[str] = field(default_factory=list)
    files: dict[str, Path] = field(default_factory=dict)

    def summary_lines(self) -> list[str]:
        n_events = sum(s.n_events for s in self.stations)
        multi = [(k, v) for k, v in sorted(self.group_sizes.items()) if k >= 2]
        seen = ", ".join(f"{v} at {k} stations" for k, v in multi) or "none at two or more stations"
        lines = [f"{len(self.stations)} stations, {n_events} events; seen within {self.window_s:g} s: {seen}"]
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
                    f"{s.n_confirmed}/{s.n_events} events confirmed; clock sync {s.clock_sync}")
            if s.flagged:
                line += " -- LARGE OFFSET: check this station's time sync"
            lines.append(line)
        ref = [s for s in self.stations if s.in_reference]
        if len(ref) == 2 and all(s.flagged for s in ref):
            lines.append(f"  {ref[0].name} and {ref[1].name} disagree, and two clocks alone cannot tell "
                         "which one is off: compare with a third station, or check both time syncs")
        return lines


# -- reading and arrays --------------------------------------------------------------------

def _load(paths) -> tuple[list[EventList], list[str]]:
    lists: dict[str, EventList] = {}
    notices: list[str] = []
    for p in paths:
        el = p if isinstance(p, EventList) else read_event_list(p)
        if not el.events:
            raise RxlogError(f"{el.path or el.name}: no events to compare")
        notices.extend(el.notices)
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
        raise RxlogError("need event lists from at least two stations to compare; got "
                         + (", ".join(lists) or "none"))
    return list(lists.values()), notices


@dataclass
class _Events:
    """All stations' events as flat arrays (index = global event number)."""

    station: np.ndarray     # int
    start: np.ndarray
    end: np.ndarray
    peak: np.ndarray
    fmin: np.ndarray
    fmax: np.ndarray
    drift: np.ndarray
    cls: np.ndarray         # int code of the effective class (the reviewer's label wins)
    snr: np.ndarray
    cadence: np.ndarray     # of the station, per event
    ev: list[dict]


def _effective_class(e: dict) -> str:
    label = e.get("label")
    if label in CLS:
        return label
    if label == "noise":
        return "rfi"
    return e["class"]


def _arrays(lists: list[EventList]) -> _Events:
    evs, st, cad = [], [], []
    for k, el in enumerate(lists):
        c = el.station.get("cadence_s") or 1.0
        for e in el.events:
            evs.append(e)
            st.append(k)
            cad.append(c)

    def col(name):
        return np.array([np.nan if e.get(name) is None else float(e[name]) for e in evs], dtype=float)

    return _Events(
        station=np.array(st, dtype=np.int64),
        start=_times(evs, "start_utc"), end=_times(evs, "end_utc"), peak=_times(evs, "peak_utc"),
        fmin=col("fmin_mhz"), fmax=col("fmax_mhz"), drift=col("drift_mhz_s"),
        cls=np.array([CLS[_effective_class(e)] for e in evs], dtype=np.int64),
        snr=col("snr"), cadence=np.array(cad, dtype=float), ev=evs)


def _times(evs: list[dict], key: str) -> np.ndarray:
    """ISO 8601 UTC strings as the importer leaves them ('...T..:..:..mmmZ') -> POSIX seconds."""
    text = [e[key] for e in evs]
    if all(len(t) == 24 and t[-1] == "Z" for t in text):
        try:  # numpy's ISO 8601 parser, for the 'YYYY-MM-DDTHH:MM:SS.mmm' rxlog writes
            return np.array([t[:-1] for t in text], dtype="datetime64[ms]").astype(np.int64) / 1000.0
        except ValueError:
            pass
    return np.array([parse_iso(t) for t in text], dtype=float)


def _onset_at(start, fmin, fmax, drift, cls, f_ref):
    """Onset time moved to frequency ``f_ref`` along the burst's drift.

    A drifting burst starts at its top frequency and reaches ``f_ref`` below it later.
    A Type III follows the decametric drift law of Alvarez & Haddock (1973, Solar Phys.
    29, 197), df/dt = -0.01 f^1.84 MHz/s, which integrates to a delay of
    (f_ref^-0.84 - fmax^-0.84) / (0.01 * 0.84) s; a measured drift rescales the law
    (its ratio to the law at the burst's mid frequency, kept within 0.5-2) because the
    drift rate itself changes across the band. Other drifting bursts (Type II) move
    linearly at their measured drift.
    """
    f = np.clip(f_ref, fmin, fmax)
    measured = np.isfinite(drift) & (drift < 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        f_mid = 0.5 * (fmin + fmax)
        ratio = np.where(measured, -drift / (0.01 * f_mid ** 1.84), 1.0)
        ratio = np.clip(np.nan_to_num(ratio, nan=1.0), 0.5, 2.0)
        dt_law = (f ** -0.84 - fmax ** -0.84) / (0.01 * 0.84) / ratio
        dt_lin = np.where(measured, (f - fmax) / drift, 0.0)
    dt = np.where(cls == CLS["solar_iii"], dt_law, dt_lin)
    return start + np.where(np.isfinite(dt), dt, 0.0)


def _clock_time(E: _Events, idx, cls, f_ref):
    """Time of each event (index array ``idx``) that serves as its clock reading.

    Drifting bursts are read at their peak, moved along the drift to the group's common
    frequency like an onset. The listed start is where the detector's threshold was
    crossed, which depends on each station's noise and interference (seen: 3-7 s apart
    between simulated stations for one Type III while the peaks agreed to 0.1 s); the
    peak does not, and the rise from onset to peak is the same burst at every station.
    """
    drifting = np.isin(cls, [CLS[c] for c in ONSET_CLASSES])
    t_on = _onset_at(E.peak[idx], E.fmin[idx], E.fmax[idx], E.drift[idx], cls, f_ref)
    return np.where(drifting, t_on, E.peak[idx])


def _member_sigma(E: _Events, idx, cls):
    # Clock-reading noise: the class's timing noise and the station's cadence
    # (uniform quantisation: cadence / sqrt(12)).
    return np.sqrt(SIGMA[cls] ** 2 + E.cadence[idx] ** 2 / 12.0)


# -- candidates and matching ---------------------------------------------------------------

def _expand(lo, hi):
    """For ranges [lo_i, hi_i): (i repeated, positions) covering every element of every range."""
    cnt = np.maximum(hi - lo, 0)
    total = int(cnt.sum())
    idx = np.repeat(np.arange(len(lo)), cnt)
    first = np.cumsum(cnt) - cnt
    pos = np.arange(total) - np.repeat(first, cnt) + np.repeat(lo, cnt)
    return idx, pos


def overlap_pairs(a0, a1, b0, b1):
    """Index pairs (i, j) whose closed intervals [a0_i, a1_i] and [b0_j, b1_j] overlap.

    Interval sweep with sorted starts: either b_j starts inside a_i, or a_i starts
    inside b_j (strictly after b_j's start, so no pair is found twice). Output-sensitive:
    O((n + m) log(n + m) + pairs).
    """
    ob = np.argsort(b0, kind="stable")
    b0s = b0[ob]
    i1, p1 = _expand(np.searchsorted(b0s, a0, "left"), np.searchsorted(b0s, a1, "right"))
    oa = np.argsort(a0, kind="stable")
    a0s = a0[oa]
    j2, p2 = _expand(np.searchsorted(a0s, b0, "right"), np.searchsorted(a0s, b1, "right"))
    return np.concatenate([i1, oa[p2]]), np.concatenate([ob[p1], j2])


MAX_CANDIDATES = 20_000_000


def _candidates(E: _Events, n_st: int, window_s: float):
    """All candidate pairs (global indices ia < station of ib) with their clock-time difference."""
    parts = []
    total = 0
    for a in range(n_st):
        ia_all = np.flatnonzero(E.station == a)
        for b in range(a + 1, n_st):
            ib_all = np.flatnonzero(E.station == b)
            i, j = overlap_pairs(E.start[ia_all] - window_s, E.end[ia_all] + window_s,
                                 E.start[ib_all], E.end[ib_all])
            ia, ib = ia_all[i], ib_all[j]
            f_lo = np.maximum(E.fmin[ia], E.fmin[ib])
            f_hi = np.minimum(E.fmax[ia], E.fmax[ib])
            rfi = CLS["rfi"]
            ok = (f_hi >= f_lo) & ((E.cls[ia] == rfi) == (E.cls[ib] == rfi))
            ia, ib, f_lo, f_hi = ia[ok], ib[ok], f_lo[ok], f_hi[ok]
            total += len(ia)
            if total > MAX_CANDIDATES:
                raise RxlogError(f"more than {MAX_CANDIDATES} overlapping event pairs within {window_s:g} s; "
                                 "use a smaller --window or shorter lists")
            narrow = np.maximum(np.minimum(E.fmax[ia] - E.fmin[ia], E.fmax[ib] - E.fmin[ib]), 0.01)
            freq_frac = np.clip((f_hi - f_lo) / narrow, 0.0, 1.0)
            # Pair class: the better clock of the two when they differ.
            cls = np.where(SIGMA[E.cls[ia]] <= SIGMA[E.cls[ib]], E.cls[ia], E.cls[ib])
            dt = _clock_time(E, ib, cls, f_hi) - _clock_time(E, ia, cls, f_hi)
            fam_a = np.array([FAMILY[c] for c in CLASSES])[E.cls[ia]]
            fam_b = np.array([FAMILY[c] for c in CLASSES])[E.cls[ib]]
            penalty = (np.where(E.cls[ia] != E.cls[ib], CLASS_MISMATCH_S, 0.0)
                       + np.where((fam_a != fam_b) & (fam_a != 2) & (fam_b != 2), FAMILY_MISMATCH_S, 0.0)
                       + FREQ_MISMATCH_S * (1.0 - freq_frac))
            parts.append((np.full(len(ia), a), np.full(len(ia), b), ia, ib, dt, penalty, cls))
    if not parts:
        return tuple(np.zeros(0, dtype=t) for t in (int, int, int, int, float, float, int))
    return tuple(np.concatenate(x) for x in zip(*parts))


def _pair_offsets(sa, sb, dt, cls, n_st, window_s):
    """First guess of offset(b) - offset(a) per station pair: the mode of candidate time differences.

    Dense lists hold many chance candidates; their differences spread evenly over the
    window, while true pairs pile up at the clock offset, weighted by 1/sigma^2 of their
    class so Type III onsets dominate.
    """
    delta = np.zeros((n_st, n_st))
    w = 1.0 / SIGMA[cls] ** 2
    edges = np.arange(-window_s - 0.25, window_s + 0.5, 0.25)
    for a in range(n_st):
        for b in range(a + 1, n_st):
            m = (sa == a) & (sb == b) & (w > 0) & (np.abs(dt) <= window_s)
            if not m.any():
                continue
            h, _ = np.histogram(dt[m], bins=edges, weights=w[m])
            h = np.convolve(h, [1, 2, 1], mode="same")
            k = int(np.argmax(h))
            centre = 0.5 * (edges[k] + edges[k + 1])
            near = m & (np.abs(dt - centre) <= 1.0)
            d = float(np.median(dt[near])) if near.any() else centre
            delta[a, b], delta[b, a] = d, -d
    return delta


def _group(n_events: int, station, ia, ib, cost):
    """Greedy one-to-one grouping: cheapest candidates first, never two events of one station in a group."""
    parent = list(range(n_events))
    mask = [1 << int(s) for s in station]

    def find(x):
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    order = np.argsort(cost, kind="stable")
    for a, b in zip(ia[order].tolist(), ib[order].tolist()):
        ra, rb = find(a), find(b)
        if ra == rb or mask[ra] & mask[rb]:
            continue
        if rb < ra:
            ra, rb = rb, ra
        parent[rb] = ra
        mask[ra] |= mask[rb]
    roots = np.fromiter((find(i) for i in range(n_events)), dtype=np.int64, count=n_events)
    _, group = np.unique(roots, return_inverse=True)
    return group


# -- clock offsets -------------------------------------------------------------------------

@dataclass
class _Solution:
    offset: np.ndarray      # per station (NaN where no matches)
    cov: np.ndarray         # covariance in the zero-sum gauge of each connected set
    weight: np.ndarray      # final weight of each member (0: not used)
    resid: np.ndarray       # residual of each member, s
    component: np.ndarray   # connected set of each station (-1: unconnected)

    def offset_filled(self) -> np.ndarray:
        return np.nan_to_num(self.offset, nan=0.0)


def _solve(grp, st, t, sig, kind, n_st, iterations=20) -> _Solution:
    """Robust weighted least squares for t = T_grp + offset_st + noise, T eliminated exactly.

    ``kind`` groups members whose noise scale is measured together (the class, or
    light-curve lags). Returns offsets with sum zero within each connected set of stations.
    """
    from scipy.sparse.csgraph import connected_components

    n_grp = int(grp.max()) + 1 if len(grp) else 0
    w0 = np.where(np.isfinite(sig), 1.0 / sig ** 2, 0.0)
    size = np.bincount(grp, weights=(w0 > 0).astype(float), minlength=n_grp)
    w0 = np.where(size[grp] >= 2, w0, 0.0)
    robust = np.ones_like(w0)
    scale = np.ones(CCF + 1)
    o = np.zeros(n_st)
    pinv = np.zeros((n_st, n_st))
    resid = np.zeros_like(t)
    for it in range(iterations):
        w = w0 * robust
        U = np.zeros((n_grp, n_st))
        U[grp, st] = w
        UT = np.zeros((n_grp, n_st))
        UT[grp, st] = w * t
        W = U.sum(axis=1)
        inv_w = np.divide(1.0, W, out=np.zeros_like(W), where=W > 0)
        N = np.diag(U.sum(axis=0)) - (U * inv_w[:, None]).T @ U
        b = UT.sum(axis=0) - U.T @ (UT.sum(axis=1) * inv_w)
        pinv = np.linalg.pinv(N, rcond=1e-12, hermitian=True)
        o_new = pinv @ b
        t_grp = (UT.sum(axis=1) - U @ o_new) * inv_w
        resid = t - o_new[st] - t_grp[grp]
        # Residual variance of a member given its group's weighted mean (prior weights).
        W0 = np.bincount(grp, weights=w0, minlength=n_grp)
        var = np.where(w0 > 0, sig ** 2 - np.divide(1.0, W0, out=np.zeros_like(W0), where=W0 > 0)[grp], np.inf)
        z = resid / np.sqrt(np.maximum(var, 1e-12))
        for g in np.unique(kind[w0 > 0]):
            m = (kind == g) & (w0 > 0)
            if m.sum() >= MIN_SCALE_DOF:
                # The prior noise is a floor: cadence quantisation makes the residuals of
                # a pair take two values a cadence apart, whose MAD can be far smaller
                # than their spread; a scale below the prior would then reject the
                # minority value and bias the offset towards the majority one.
                scale[g] = max(MAD_TO_SIGMA * float(np.median(np.abs(z[m]))), 1.0)
        u = np.abs(z) / scale[kind]
        robust = np.where(u <= HUBER_K, 1.0, HUBER_K / np.maximum(u, 1e-12))
        robust[u > REJECT_SIGMAS] = 0.0
        converged = it > 0 and np.max(np.abs(o_new - o), initial=0.0) < 1e-5
        o = o_new
        if converged:
            break
    # Scales enter the weights: rebuild the normal matrix with measured scales for the covariance.
    w = w0 * robust / scale[kind] ** 2
    U = np.zeros((n_grp, n_st))
    U[grp, st] = w
    W = U.sum(axis=1)
    inv_w = np.divide(1.0, W, out=np.zeros_like(W), where=W > 0)
    N = np.diag(U.sum(axis=0)) - (U * inv_w[:, None]).T @ U
    cov = np.linalg.pinv(N, rcond=1e-12, hermitian=True)
    linked = np.abs(N) > 1e-12 * max(float(np.abs(N).max(initial=0.0)), 1e-300)
    n_comp, comp = connected_components(linked, directed=False)
    has = np.diag(N) > 0
    comp = np.where(has, comp, -1)
    offset = np.where(has, o, np.nan)
    return _Solution(offset=offset, cov=cov, weight=w0 * robust, resid=resid, component=comp)


def _reference(sol: _Solution, names: list[str]) -> list[int]:
    """Stations whose clocks agree: start from all with an offset, drop the most deviant
    while it stands out by more than FLAG_OFFSET_S and FLAG_SIGMAS sigma and more than
    two remain. Works in the largest connected set of stations."""
    comp = sol.component
    if (comp >= 0).sum() == 0:
        return []
    big = np.bincount(comp[comp >= 0]).argmax()
    ref = [int(i) for i in np.flatnonzero(comp == big)]
    while len(ref) > 2:
        worst, worst_u = None, 0.0
        for s in ref:
            others = [r for r in ref if r != s]
            a = np.zeros(len(names))
            a[s] = 1.0
            a[others] -= 1.0 / len(others)
            d = float(a @ sol.offset_filled())
            sd = math.sqrt(max(float(a @ sol.cov @ a), 0.0))
            if abs(d) > FLAG_OFFSET_S and abs(d) > FLAG_SIGMAS * sd and abs(d) / max(sd, 1e-9) > worst_u:
                worst, worst_u = s, abs(d) / max(sd, 1e-9)
        if worst is None:
            break
        ref.remove(worst)
    return sorted(ref, key=lambda i: names[i])


def _relative_to(sol: _Solution, ref: list[int]):
    """Offsets and their sigmas against the mean of the ``ref`` stations (same connected set only)."""
    n = len(sol.offset)
    off = np.full(n, np.nan)
    err = np.full(n, np.nan)
    if not ref:
        return off, err
    comp = sol.component[ref[0]]
    P = np.eye(n)
    P[:, ref] -= 1.0 / len(ref)
    o = P @ sol.offset_filled()
    C = P @ sol.cov @ P.T
    for s in range(n):
        if sol.component[s] == comp and comp >= 0:
            off[s] = o[s]
            err[s] = math.sqrt(max(C[s, s], 0.0))
    return off, err


# -- light-curve refinement ----------------------------------------------------------------

def _load_spectra(spectra, names: list[str], notices: list[str]) -> dict[int, list]:
    """station name -> list of DynamicSpectrum (or FITS paths / folders of them) -> by station index."""
    from rxlog.spectrum import DynamicSpectrum

    out: dict[int, list] = {}
    for name, items in (spectra or {}).items():
        if name not in names:
            notices.append(f"spectra given for {name!r}, which has no event list here; ignored")
            continue
        if isinstance(items, (str, Path, DynamicSpectrum)):
            items = [items]
        got = []
        for item in items:
            if isinstance(item, DynamicSpectrum):
                got.append(item)
                continue
            p = Path(item)
            files = sorted(q for q in p.rglob("*") if q.name.endswith((".fits", ".fits.fz", ".fit"))) \
                if p.is_dir() else [p]
            for f in files:
                from rxlog.archive.read import read_spectrum_fits

                try:
                    got.append(read_spectrum_fits(f))
                except RxlogError as e:
                    notices.append(f"{e}; spectra skipped")
        if got:
            out[names.index(name)] = got
    return out


def _covering(specs: list, t0: float, t1: float):
    for s in specs:
        if s.t0 <= t0 and s.t_end >= t1:
            return s
    return None


def light_curves(spec, t_first: float, n_steps: int, step_s: float, edges_mhz: np.ndarray) -> np.ndarray:
    """Excess power (dB above each channel's median in the span) on a fine time grid, per frequency bin.

    Grid times are ``t_first + k * step_s`` in the station's clock. Each channel is
    interpolated linearly at its true sampling times (row time plus the channel's sweep
    offset), then channels are averaged within each bin of ``edges_mhz``. Flagged cells
    (RFI, gaps) count as no signal. Returns (n_steps, n_bins); NaN-free.
    """
    f_mhz = spec.freq_hz / 1e6
    sel = np.flatnonzero((f_mhz >= edges_mhz[0]) & (f_mhz < edges_mhz[-1]))
    n_bins = len(edges_mhz) - 1
    if len(sel) == 0:
        return np.zeros((n_steps, n_bins))
    off = spec.chan_offset_s[sel].astype(float)
    cad = spec.cadence_s
    t_last = t_first + (n_steps - 1) * step_s
    i0 = max(int(math.floor((t_first - spec.t0 - off.max()) / cad)) - 1, 0)
    i1 = min(int(math.ceil((t_last - spec.t0 - off.min()) / cad)) + 2, spec.n_time)
    if i1 - i0 < 2:
        return np.zeros((n_steps, n_bins))
    P = spec.power_db[i0:i1, sel].astype(float)
    P[spec.flags[i0:i1, sel] != 0] = np.nan
    with np.errstate(all="ignore"):
        import warnings

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            bg = np.nanmedian(P, axis=0)
    x = np.nan_to_num(P - bg, nan=0.0)
    tau = t_first + step_s * np.arange(n_steps)
    u = (tau[:, None] - spec.t0 - off[None, :]) / cad - i0
    j = np.floor(u).astype(np.int64)
    fr = u - j
    n_rows = i1 - i0
    valid = (j >= 0) & (j + 1 < n_rows)
    jc = np.clip(j, 0, n_rows - 2)
    col = np.arange(len(sel))[None, :]
    v = np.where(valid, x[jc, col] * (1.0 - fr) + x[jc + 1, col] * fr, 0.0)
    b = np.searchsorted(edges_mhz, f_mhz[sel], side="right") - 1
    sums = np.zeros((n_steps, n_bins))
    cnts = np.zeros((n_steps, n_bins))
    np.add.at(sums.T, b, v.T)
    np.add.at(cnts.T, b, valid.T.astype(float))
    return np.divide(sums, cnts, out=np.zeros_like(sums), where=cnts > 0)


def lightcurve_lag(spec_a, spec_b, t0_a: float, t1_a: float, delta: float, f_lo: float, f_hi: float,
                   max_lag_s: float = LC_MAX_LAG_S, step_s: float = LC_STEP_S):
    """Clock offset of b minus a from one burst: cross-correlate light curves of [t0_a, t1_a] (a's
    clock) with b's around ``delta`` later. Returns (offset_b_minus_a, peak correlation) or None."""
    ch = max(float(np.median(np.diff(spec_a.freq_hz))) if spec_a.n_chan > 1 else 0.0,
             float(np.median(np.diff(spec_b.freq_hz))) if spec_b.n_chan > 1 else 0.0) / 1e6
    width = max(LC_BIN_MHZ, 2.0 * ch)
    n_bins = int((f_hi - f_lo) // width)
    if n_bins < 2:
        return None
    edges = f_lo + width * np.arange(n_bins + 1)
    n_a = int(round((t1_a - t0_a) / step_s)) + 1
    k = int(round(max_lag_s / step_s))
    a = light_curves(spec_a, t0_a, n_a, step_s, edges)
    b = light_curves(spec_b, t0_a + delta - k * step_s, n_a + 2 * k, step_s, edges)
    a = a - a.mean(axis=0)
    b = b - b.mean(axis=0)
    na = np.sqrt((a ** 2).sum(axis=0))
    nb = np.sqrt((b[k:k + n_a] ** 2).sum(axis=0))
    good = (na > 0) & (nb > 0)
    if good.sum() < 2:
        return None
    n_fft = 1 << int(math.ceil(math.log2(n_a + 2 * k + n_a)))
    fa = np.fft.rfft(a[:, good] / na[good], n=n_fft, axis=0)
    fb = np.fft.rfft(b[:, good] / nb[good], n=n_fft, axis=0)
    # c[l] = sum_tau a[tau] b[tau + l]: b lags a by (l - k) steps beyond delta.
    c = np.fft.irfft(np.conj(fa) * fb, n=n_fft, axis=0)[:2 * k + 1].sum(axis=1) / good.sum()
    m = int(np.argmax(c))
    if c[m] < LC_MIN_CORR:
        return None
    frac = 0.0
    if 0 < m < 2 * k:
        den = c[m - 1] - 2 * c[m] + c[m + 1]
        if den < 0:
            frac = 0.5 * (c[m - 1] - c[m + 1]) / den
    return delta + (m - k + frac) * step_s, float(c[m])


def _refine(E: _Events, grp, spectra_by: dict[int, list], offsets: np.ndarray, err: np.ndarray,
            window_s: float):
    """Light-curve lags for every Type III group seen by two or more stations with spectra.

    Returns arrays (station_a, station_b, lag) with lag ~ offset_b - offset_a.
    """
    sa, sb, lags = [], [], []
    t3 = CLS["solar_iii"]
    order = np.argsort(grp, kind="stable")
    bounds = np.flatnonzero(np.diff(np.r_[-1, grp[order], -2]))
    for g0, g1 in zip(bounds[:-1], bounds[1:]):
        members = order[g0:g1]
        if len(members) < 2 or not np.any(E.cls[members] == t3):
            continue
        members = [int(i) for i in members if int(E.station[i]) in spectra_by]
        if len(members) < 2:
            continue
        members.sort(key=lambda i: -(E.snr[i] if np.isfinite(E.snr[i]) else 0.0))
        ia = members[0]
        a_st = int(E.station[ia])
        t0_a, t1_a = E.start[ia] - LC_PAD_S, E.end[ia] + LC_PAD_S
        spec_a = _covering(spectra_by[a_st], t0_a, t1_a)
        if spec_a is None:
            continue
        for ib in members[1:]:
            b_st = int(E.station[ib])
            d = offsets[b_st] - offsets[a_st]
            if not np.isfinite(d):
                d = E.start[ib] - E.start[ia]
            span = LC_MAX_LAG_S + 3.0 * float(np.nan_to_num(np.hypot(err[a_st], err[b_st]), nan=window_s))
            span = min(span, window_s)
            spec_b = _covering(spectra_by[b_st], t0_a + d - span, t1_a + d + span)
            if spec_b is None:
                continue
            f_lo = max(E.fmin[ia], E.fmin[ib], spec_a.freq_hz[0] / 1e6, spec_b.freq_hz[0] / 1e6)
            f_hi = min(E.fmax[ia], E.fmax[ib], spec_a.freq_hz[-1] / 1e6, spec_b.freq_hz[-1] / 1e6)
            got = lightcurve_lag(spec_a, spec_b, t0_a, t1_a, d, f_lo, f_hi, max_lag_s=span)
            if got is not None:
                sa.append(a_st)
                sb.append(b_st)
                lags.append(got[0])
    return np.array(sa, dtype=np.int64), np.array(sb, dtype=np.int64), np.array(lags, dtype=float)


# -- the comparison ------------------------------------------------------------------------

def compare_stations(paths, window_s: float = 10.0, outdir=None, spectra=None, progress=None) -> CompareResult:
    """Match events across stations, count confirmations, estimate clock offsets.

    ``paths``: event-list files (CSV, JSON, VOTable) or ``EventList`` objects, one or more
    per station. ``spectra``: optional {station name: [DynamicSpectrum or FITS path or
    folder, ...]} for the Type III light-curve refinement. With ``outdir``, writes
    matched_events.csv, stations.csv, summary.txt and timeline.png there. ``progress``,
    if given, is called with the name of each stage as it starts.
    """
    step = progress or (lambda stage: None)
    if not (isinstance(window_s, (int, float)) and 0 < window_s <= 3600):
        raise RxlogError(f"window {window_s!r}: expected seconds between 0 and 3600")
    step(f"reading {len(paths)} event lists")
    lists, notices = _load(paths)
    names = [el.name for el in lists]
    n_st = len(lists)
    E = _arrays(lists)
    n = len(E.ev)

    step(f"matching {n} events across {n_st} stations")
    sa, sb, ia, ib, dt, penalty, pcls = _candidates(E, n_st, window_s)
    delta = _pair_offsets(sa, sb, dt, pcls, n_st, window_s)
    grp = _group(n, E.station, ia, ib, np.abs(dt - delta[sa, sb]) + penalty)
    sol, members = _clock_fit(E, grp, n_st)
    # Match again with the offsets of the fit (consistent across all pairs), then refit.
    o = sol.offset_filled()
    grp = _group(n, E.station, ia, ib, np.abs(dt - (o[sb] - o[sa])) + penalty)
    sol, members = _clock_fit(E, grp, n_st)
    event_sol = sol

    n_lc = np.zeros(n_st, dtype=int)
    spectra_by = _load_spectra(spectra, names, notices) if spectra else {}
    if len(spectra_by) >= 2:
        step("cross-correlating Type III light curves")
        ref0 = _reference(event_sol, names)
        off0, err0 = _relative_to(event_sol, ref0)
        la, lb, lag = _refine(E, grp, spectra_by, off0, err0, window_s)
        if len(lag):
            np.add.at(n_lc, la, 1)
            np.add.at(n_lc, lb, 1)
            sol = _clock_fit(E, grp, n_st, extra=(la, lb, lag))[0]
        else:
            notices.append("spectra given, but no Type III burst seen by two stations could be "
                           "cross-correlated; offsets are from events alone")

    ref = _reference(sol, names)
    off, err = _relative_to(sol, ref)
    ev_off, ev_err = _relative_to(event_sol, ref)

    sizes = np.bincount(grp, weights=None, minlength=int(grp.max()) + 1 if n else 0)
    n_at = sizes[grp]
    _, m_ev, m_w, m_r = members
    used = np.zeros(n, dtype=bool)
    resid = np.full(n, np.nan)
    used[m_ev] = m_w > 0
    resid[m_ev] = np.where(m_w > 0, m_r, np.nan)
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
    for k in range(n_st):
        if not np.isfinite(off[k]) and np.isfinite(sol.offset[k]):
            notices.append(f"{names[k]}: its matches do not link it to {', '.join(names[r] for r in ref)}; "
                           "offset not given")

    rows = _rows(E, grp, n_at, names, used, resid)
    size_count = {int(k): int(v) for k, v in zip(*np.unique(sizes[sizes > 0], return_counts=True))}
    result = CompareResult(stations=stations, rows=rows, group_sizes=size_count,
                           reference=[names[r] for r in ref], window_s=float(window_s), notices=notices)
    if outdir is not None:
        step(f"writing tables and the timeline plot to {outdir}")
        result.files = write_outputs(result, E, grp, n_at, names, Path(outdir))
    return result


def _clock_fit(E: _Events, grp, n_st: int, extra=None):
    """Clock offsets from the groups of two or more stations, optionally with light-curve lags."""
    sizes = np.bincount(grp)
    idx = np.flatnonzero(sizes[grp] >= 2)
    g = grp[idx]
    _, g = np.unique(g, return_inverse=True)
    n_g = int(g.max()) + 1 if len(g) else 0
    # Group class: the most common class among members; ties go to the better clock.
    counts = np.zeros((n_g, N_CLS))
    np.add.at(counts, (g, E.cls[idx]), 1.0)
    by_sigma = np.argsort(SIGMA, kind="stable")
    gcls = by_sigma[np.argmax(counts[:, by_sigma], axis=1)] if n_g else np.zeros(0, dtype=int)
    cls = gcls[g] if n_g else np.zeros(0, dtype=int)
    # Drifting bursts are timed at the lowest top frequency of the group.
    f_ref = np.full(n_g, np.inf)
    np.minimum.at(f_ref, g, E.fmax[idx])
    t = _clock_time(E, idx, cls, f_ref[g] if n_g else np.zeros(0))
    sig = _member_sigma(E, idx, cls)
    n_same = np.zeros((n_st, N_CLS))
    np.add.at(n_same, (E.station[idx], cls), 1.0)
    sig = np.sqrt(sig ** 2 + n_same[E.station[idx], cls] * SYSTEMATIC[cls] ** 2)
    # Work relative to each group's first member to keep float64 precision.
    order = np.argsort(g, kind="stable")
    starts = np.r_[0, np.flatnonzero(np.diff(g[order])) + 1] if n_g else np.zeros(0, dtype=int)
    t_rel = t - t[order][starts][g] if n_g else t
    st = E.station[idx]
    kind = cls.copy()
    grp_all, st_all, t_all, sig_all, kind_all = g, st, t_rel, sig, kind
    if extra is not None:
        la, lb, lag = extra
        k = len(lag)
        gl = n_g + np.arange(k)
        s_half = LC_SIGMA_S / math.sqrt(2.0)
        grp_all = np.concatenate([g, gl, gl])
        st_all = np.concatenate([st, la, lb])
        t_all = np.concatenate([t_rel, np.zeros(k), lag])
        sig_all = np.concatenate([sig, np.full(2 * k, s_half)])
        kind_all = np.concatenate([kind, np.full(2 * k, CCF)])
    if len(grp_all) == 0:
        empty = _Solution(offset=np.full(n_st, np.nan), cov=np.zeros((n_st, n_st)), weight=np.zeros(0),
                          resid=np.zeros(0), component=np.full(n_st, -1))
        return empty, (idx, idx, np.zeros(0), np.zeros(0))
    sol = _solve(grp_all, st_all, t_all, sig_all, kind_all, n_st)
    m = len(idx)
    return sol, (g, idx, sol.weight[:m], sol.resid[:m])


# -- outputs -------------------------------------------------------------------------------

ROW_COLUMNS = ("match_id", "n_stations", "stations", "station", "event_id", "class", "start_utc",
               "peak_utc", "end_utc", "fmin_mhz", "fmax_mhz", "snr", "used_for_clock", "clock_residual_s")


def _rows(E: _Events, grp, n_at, names, used, resid) -> list[dict]:
    """One row per event, groups numbered by time, members of a group together."""
    first_peak = np.full(int(grp.max()) + 1 if len(grp) else 0, np.inf)
    np.minimum.at(first_peak, grp, E.peak)
    rank = np.empty(len(first_peak), dtype=np.int64)
    rank[np.argsort(first_peak, kind="stable")] = np.arange(len(first_peak))
    g_rank = rank[grp].tolist()
    station = E.station.tolist()
    members: dict[int, list[str]] = {}
    for g, s in zip(g_rank, station):
        members.setdefault(g, []).append(names[s])
    joined = {g: "+".join(sorted(m)) for g, m in members.items()}
    n_at_l, used_l = n_at.tolist(), used.tolist()
    resid_l = [None if not math.isfinite(r) else round(r, 4) for r in resid.tolist()]
    cls_l = E.cls.tolist()
    rows = []
    for i in np.lexsort((E.station, rank[grp])).tolist():
        e = E.ev[i]
        rows.append({
            "match_id": f"M{g_rank[i] + 1:06d}", "n_stations": n_at_l[i], "stations": joined[g_rank[i]],
            "station": names[station[i]], "event_id": e["event_id"], "class": CLASSES[cls_l[i]],
            "start_utc": e["start_utc"], "peak_utc": e["peak_utc"], "end_utc": e["end_utc"],
            "fmin_mhz": e["fmin_mhz"], "fmax_mhz": e["fmax_mhz"], "snr": e.get("snr"),
            "used_for_clock": int(used_l[i]), "clock_residual_s": resid_l[i]})
    return rows


def _csv_text(columns, rows) -> bytes:
    out = io.StringIO(newline="")
    w = csv.writer(out, lineterminator="\n")
    w.writerow(columns)
    for r in rows:
        w.writerow(["" if r.get(c) is None else r[c] for c in columns])  # str(float) is its repr
    return out.getvalue().encode("utf-8")


STATION_COLUMNS = ("station", "n_events", "n_confirmed", "n_clock_events", "n_type3", "n_lightcurves",
                   "offset_s", "offset_err_s", "event_offset_s", "event_offset_err_s", "in_reference",
                   "flagged", "clock_sync", "latitude_deg", "longitude_deg", "cadence_s")


def write_outputs(result: CompareResult, E: _Events, grp, n_at, names, outdir: Path) -> dict[str, Path]:
    outdir.mkdir(parents=True, exist_ok=True)
    files = {"matched": write_atomic(outdir / "matched_events.csv", _csv_text(ROW_COLUMNS, result.rows))}
    srows = [{"station": s.name, "n_events": s.n_events, "n_confirmed": s.n_confirmed,
              "n_clock_events": s.n_clock, "n_type3": s.n_type3, "n_lightcurves": s.n_lightcurves,
              "offset_s": s.offset_s, "offset_err_s": s.offset_err_s, "event_offset_s": s.event_offset_s,
              "event_offset_err_s": s.event_offset_err_s, "in_reference": int(s.in_reference),
              "flagged": int(s.flagged), "clock_sync": s.clock_sync,
              "latitude_deg": s.header.get("latitude_deg"), "longitude_deg": s.header.get("longitude_deg"),
              "cadence_s": s.header.get("cadence_s")} for s in result.stations]
    files["stations"] = write_atomic(outdir / "stations.csv", _csv_text(STATION_COLUMNS, srows))
    text = "\n".join(result.summary_lines() + [""] + result.notices) + "\n"
    files["summary"] = write_atomic(outdir / "summary.txt", text.encode("utf-8"))
    files["timeline"] = plot_timeline(E, grp, n_at, names, outdir / "timeline.png")
    return files


# Classes are drawn in this order, so interference lies under the sky's events; their
# colours are rxlog.palette's, the same as in the night report.
DRAW_ORDER = ("rfi", "unknown", "fadeout", "solar_iv", "solar_ii", "jovian_s", "jovian_l", "solar_iii")
BAR_PT = 7.0   # class bar thickness, points


def _segments(xa, xb, ya, yb):
    """Many line segments as one polyline broken by NaNs (fast to draw)."""
    x = np.stack([xa, xb, np.full(len(xa), np.nan)], axis=1).ravel()
    y = np.stack([ya, yb, np.full(len(ya), np.nan)], axis=1).ravel()
    return x, y


def _runs(x0, x1, lo: float, px: float):
    """Union of intervals [x0, x1] at a resolution of ``px``: (starts, ends) of the covered runs.

    What a plot shows anyway, at a few thousand segments however many events there are.
    """
    n = int(math.ceil((float(np.max(x1)) - lo) / px)) + 2
    a = np.clip(((x0 - lo) / px).astype(np.int64), 0, n - 2)
    b = np.clip(((x1 - lo) / px).astype(np.int64), 0, n - 2)
    d = np.zeros(n + 1, dtype=np.int64)
    np.add.at(d, a, 1)
    np.add.at(d, b + 1, -1)
    on = np.r_[False, np.cumsum(d)[:n] > 0, False]
    edges = np.flatnonzero(np.diff(on.astype(np.int8)))
    return lo + edges[0::2] * px, lo + edges[1::2] * px


def plot_timeline(E: _Events, grp, n_at, names, path: Path) -> Path:
    """Each station's events on a time axis, coloured by class; groups seen at 2+ stations joined and marked."""
    import datetime as _dt

    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.dates import AutoDateLocator, ConciseDateFormatter, date2num
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D

    from rxlog.palette import CLASS_NAMES, colour, outline

    epoch = date2num(_dt.datetime(1970, 1, 1))
    day = 86400.0
    fig = Figure(figsize=(11, 1.6 + 0.6 * len(names)), layout="constrained")
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    n_rows = len(names)
    y = n_rows - 1 - E.station.astype(float)
    x0 = epoch + E.start / day
    x1 = epoch + E.end / day
    handles = []
    if len(E.ev):
        lo = float(x0.min())
        px = max(float(x1.max()) - lo, 1e-6) / 1500.0  # about one pixel of the axis
        multi = n_at >= 2
        if multi.any():
            # One vertical line per group seen at several stations, at its mean time
            # (merged per pixel column and station span).
            g = grp[multi]
            n_g = int(grp.max()) + 1
            ymin = np.full(n_g, np.inf)
            ymax = np.full(n_g, -np.inf)
            np.minimum.at(ymin, g, y[multi])
            np.maximum.at(ymax, g, y[multi])
            cnt = np.bincount(g, minlength=n_g)
            xc = np.bincount(g, weights=0.5 * (x0[multi] + x1[multi]), minlength=n_g)
            k = cnt > 0
            col = np.round((xc[k] / cnt[k] - lo) / px)
            key = np.unique(np.c_[col, ymin[k], ymax[k]], axis=0)
            xs = lo + key[:, 0] * px
            ax.plot(*_segments(xs, xs, key[:, 1], key[:, 2]), color="#333333", linewidth=0.6, alpha=0.6)
        for c in DRAW_ORDER:
            m = E.cls == CLS[c]
            if not m.any():
                continue
            # Over a light halo and a dark edge, like the report's boxes: yellow and sky blue
            # show on white too.
            for row in np.unique(y[m]):
                r = m & (y == row)
                a, b = _runs(x0[r], x1[r], lo, px)
                ax.plot(*_segments(a, b + px, np.full(len(a), row), np.full(len(a), row)),
                        color=colour(c), linewidth=BAR_PT, solid_capstyle="butt", path_effects=outline(BAR_PT))
            handles.append(Line2D([], [], color=colour(c), linewidth=BAR_PT, path_effects=outline(BAR_PT),
                                  label=f"{CLASS_NAMES[c]} ({c})"))
        if multi.any():
            mk = np.unique(np.c_[np.round((0.5 * (x0[multi] + x1[multi]) - lo) / px), y[multi]], axis=0)
            ax.plot(lo + mk[:, 0] * px, mk[:, 1] + 0.22, linestyle="", marker="v", markersize=4, color="#000000")
            handles.append(Line2D([], [], marker="v", color="#000000", linestyle="", label="seen at 2+ stations"))
    ax.set_yticks(range(len(names)), names[::-1])
    ax.set_ylim(-0.7, len(names) - 0.3)
    ax.set_ylabel("Station")
    ax.set_xlabel("Time (UTC)")
    loc = AutoDateLocator()
    ax.xaxis.set_major_locator(loc)
    ax.xaxis.set_major_formatter(ConciseDateFormatter(loc))
    if len(E.ev):
        ax.set_xlim(lo - 5 * px, float(x1.max()) + 5 * px)
    ax.set_title("Events by station (each station's own clock); joined: the same event at several stations")
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.0, 1.0), fontsize="small", frameon=False)
    ax.grid(axis="x", alpha=0.3)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110)
    return write_atomic(path, buf.getvalue())
