"""Overlap of intervals and of time-frequency boxes: one way for every stage.

An event occupies a box in time and frequency, [t0, t1] x [f0, f1]. Whether two events
share a stretch of time or a band, how much, and which of many intervals meet which,
are asked by the event store (a label finding its event again), by the exchange (events
of partner stations that may be one event) and by the review. The answers live here,
on plain numbers and numpy arrays, so that every stage counts an overlap the same way.
"""

from __future__ import annotations

import numpy as np


def overlap(a0, a1, b0, b1):
    """Signed overlap of the intervals [a0, a1] and [b0, b1]: the length they share when
    positive, 0 when they touch, minus the gap between them when negative.

    Scalars or numpy arrays (broadcast element by element).
    """
    return np.minimum(a1, b1) - np.maximum(a0, b0)


def box_iou(a, b) -> float:
    """Intersection over union of two boxes (t0, t1, f0, f1), from 0 to 1.

    Boxes that only touch, or lie apart, give 0. A box must have an extent in both
    directions when they overlap (the union is then positive).
    """
    dt = overlap(a[0], a[1], b[0], b[1])
    df = overlap(a[2], a[3], b[2], b[3])
    if dt <= 0 or df <= 0:
        return 0.0
    inter = dt * df
    return float(inter / ((a[1] - a[0]) * (a[3] - a[2]) + (b[1] - b[0]) * (b[3] - b[2]) - inter))


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
