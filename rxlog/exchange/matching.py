"""Events of different stations matched one-to-one: candidates, a first guess of the clock
offsets, and groups that never hold two events of one station.

Two events are candidates when their time intervals, widened by the window, overlap and
their frequency ranges overlap (rxlog.boxes); interference pairs only with interference.
Candidates are taken cheapest first: the time difference after the clock offsets known
so far, plus penalties for differing classes and poor frequency overlap.
"""

from __future__ import annotations

import numpy as np

from rxlog.boxes import overlap, overlap_pairs
from rxlog.errors import RxlogError
from rxlog.exchange.timing import CLS, SIGMA, Events, clock_time
from rxlog.store import CLASSES

# Families of classes: solar 0, Jovian 1, unknown 2, interference 3. A pair across the
# families costs FAMILY_MISMATCH_S more, except with unknown, which may be either.
FAMILY = {"solar_iii": 0, "solar_ii": 0, "solar_iv": 0, "fadeout": 0, "jovian_l": 1, "jovian_s": 1,
          "unknown": 2, "rfi": 3}

# Matching penalties, seconds of time difference (our choice): a class disagreement
# costs more than any plausible clock residual, so like pairs with like when both exist.
CLASS_MISMATCH_S = 2.0
FAMILY_MISMATCH_S = 5.0
FREQ_MISMATCH_S = 1.0      # times (1 - frequency overlap / narrower bandwidth)

# Candidate pairs held at most (seven arrays of 8-byte values: about 1 GB); more means
# a window too wide for the lists.
MAX_CANDIDATES = 20_000_000


def candidates(E: Events, n_st: int, window_s: float):
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
            f_ov = overlap(E.fmin[ia], E.fmax[ia], E.fmin[ib], E.fmax[ib])
            f_hi = np.minimum(E.fmax[ia], E.fmax[ib])
            rfi = CLS["rfi"]
            ok = (f_ov >= 0) & ((E.cls[ia] == rfi) == (E.cls[ib] == rfi))
            ia, ib, f_ov, f_hi = ia[ok], ib[ok], f_ov[ok], f_hi[ok]
            total += len(ia)
            if total > MAX_CANDIDATES:
                raise RxlogError(f"more than {MAX_CANDIDATES} overlapping event pairs within {window_s:g} s; "
                                 "use a smaller --window or shorter lists")
            narrow = np.maximum(np.minimum(E.fmax[ia] - E.fmin[ia], E.fmax[ib] - E.fmin[ib]), 0.01)
            freq_frac = np.clip(f_ov / narrow, 0.0, 1.0)
            # Pair class: the better clock of the two when they differ.
            cls = np.where(SIGMA[E.cls[ia]] <= SIGMA[E.cls[ib]], E.cls[ia], E.cls[ib])
            dt = clock_time(E, ib, cls, f_hi) - clock_time(E, ia, cls, f_hi)
            fam_a = np.array([FAMILY[c] for c in CLASSES])[E.cls[ia]]
            fam_b = np.array([FAMILY[c] for c in CLASSES])[E.cls[ib]]
            penalty = (np.where(E.cls[ia] != E.cls[ib], CLASS_MISMATCH_S, 0.0)
                       + np.where((fam_a != fam_b) & (fam_a != 2) & (fam_b != 2), FAMILY_MISMATCH_S, 0.0)
                       + FREQ_MISMATCH_S * (1.0 - freq_frac))
            parts.append((np.full(len(ia), a), np.full(len(ia), b), ia, ib, dt, penalty, cls))
    if not parts:
        return tuple(np.zeros(0, dtype=t) for t in (int, int, int, int, float, float, int))
    return tuple(np.concatenate(x) for x in zip(*parts))


def pair_offsets(sa, sb, dt, cls, n_st, window_s):
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


def group_events(n_events: int, station, ia, ib, cost):
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
