"""Interval overlap and box IoU agree with counting unit cells on an integer grid (a brute
force that shares no code with rxlog.boxes), for scalars and arrays alike."""

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from rxlog.boxes import box_iou, overlap

spans = st.tuples(st.integers(0, 30), st.integers(0, 12))
boxes = st.tuples(st.integers(0, 20), st.integers(1, 8), st.integers(0, 20), st.integers(1, 8))


def cells(lo, hi):
    return set(range(lo, hi))


@settings(max_examples=200, deadline=None)
@given(spans, spans)
def test_overlap_is_the_shared_length_or_minus_the_gap(a, b):
    a0, a1 = a[0], a[0] + a[1]
    b0, b1 = b[0], b[0] + b[1]
    shared = len(cells(a0, a1) & cells(b0, b1))
    gap = max(b0 - a1, a0 - b1, 0)
    want = shared if shared else -gap
    assert overlap(a0, a1, b0, b1) == want
    arr = overlap(np.array([a0, b0]), np.array([a1, b1]), np.array([b0, a0]), np.array([b1, a1]))
    assert arr.tolist() == [want, want]


@settings(max_examples=200, deadline=None)
@given(boxes, boxes)
def test_box_iou_is_shared_cells_over_covered_cells(a, b):
    box_a = (a[0], a[0] + a[1], a[2], a[2] + a[3])
    box_b = (b[0], b[0] + b[1], b[2], b[2] + b[3])
    ca = {(t, f) for t in cells(*box_a[:2]) for f in cells(*box_a[2:])}
    cb = {(t, f) for t in cells(*box_b[:2]) for f in cells(*box_b[2:])}
    want = len(ca & cb) / len(ca | cb)
    got = box_iou(box_a, box_b)
    assert isinstance(got, float)
    assert got == want or abs(got - want) < 1e-12
    assert box_iou(box_b, box_a) == got
