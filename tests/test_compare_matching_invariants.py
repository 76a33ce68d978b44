"""Invariants of the matching: the interval sweep finds exactly the overlapping pairs (checked
against a brute-force double loop), groups are one-to-one, the order of the input lists does
not change the result, and events farther apart than the window never match."""

import numpy as np
from exchange_helpers import T0, event, list_header, sky, station_list
from hypothesis import given, settings
from hypothesis import strategies as st

from rxlog.boxes import overlap_pairs
from rxlog.exchange.compare import compare_stations
from rxlog.exchange.importer import EventList

interval_lists = st.lists(st.tuples(st.integers(0, 50), st.integers(0, 10)), max_size=25)


@settings(max_examples=200, deadline=None)
@given(interval_lists, interval_lists)
def test_overlap_pairs_equals_brute_force(a, b):
    a0 = np.array([s for s, _ in a], dtype=float)
    a1 = a0 + np.array([d for _, d in a], dtype=float)
    b0 = np.array([s for s, _ in b], dtype=float)
    b1 = b0 + np.array([d for _, d in b], dtype=float)
    i, j = overlap_pairs(a0, a1, b0, b1)
    got = sorted(zip(i.tolist(), j.tolist()))
    want = sorted((p, q) for p in range(len(a)) for q in range(len(b)) if a0[p] <= b1[q] and b0[q] <= a1[p])
    assert got == want


def result_key(r):
    return sorted((row["event_id"], row["n_stations"], row["stations"]) for row in r.rows), \
        {s.name: round(s.offset_s, 9) if s.offset_s is not None else None for s in r.stations}


def test_input_order_does_not_change_the_result():
    rng = np.random.default_rng(11)
    s = sky(rng, days=1.0, n3=20, nl=30, n2=2)
    lists = [station_list(rng, n, s, o, days=1.0, n_rfi=30) for n, o in
             (("st-a", 0.0), ("st-b", 1.0), ("st-c", -2.0))]
    a = compare_stations(lists)
    b = compare_stations(lists[::-1])
    assert result_key(a)[0] == result_key(b)[0]
    oa, ob = result_key(a)[1], result_key(b)[1]
    assert all(abs(oa[k] - ob[k]) < 1e-6 for k in oa)


def two(events_a, events_b):
    return [EventList(list_header("st-a"), events_a), EventList(list_header("st-b"), events_b)]


def test_events_farther_apart_than_the_window_do_not_match():
    a = [event("st-a", T0, dur=2.0)]
    b_near = [event("st-b", T0 + 2.0 + 4.9, dur=2.0)]   # gap between the intervals: 4.9 s
    b_far = [event("st-b", T0 + 2.0 + 5.1, dur=2.0)]    # 5.1 s
    assert compare_stations(two(a, b_near), window_s=5.0).rows[0]["n_stations"] == 2
    assert compare_stations(two(a, b_far), window_s=5.0).rows[0]["n_stations"] == 1


def test_frequency_ranges_must_overlap_and_interference_matches_only_interference():
    a = [event("st-a", T0, fmin=16.0, fmax=18.0, cls="jovian_l")]
    assert compare_stations(two(a, [event("st-b", T0, fmin=18.5, fmax=20.0, cls="jovian_l")])).rows[0][
        "n_stations"] == 1
    assert compare_stations(two(a, [event("st-b", T0, fmin=17.5, fmax=20.0, cls="rfi")])).rows[0][
        "n_stations"] == 1
    assert compare_stations(two(a, [event("st-b", T0, fmin=17.5, fmax=20.0, cls="unknown")])).rows[0][
        "n_stations"] == 2


def test_one_to_one_prefers_the_closest_like_event():
    # Two Type III at st-b near one at st-a: the closer one is the match, the other stays single.
    a = [event("st-a", T0)]
    b = [event("st-b", T0 + 0.4), event("st-b", T0 + 3.0, fmin=18.1)]
    rows = {r["event_id"]: r for r in compare_stations(two(a, b)).rows}
    assert rows[b[0]["event_id"]]["n_stations"] == 2
    assert rows[b[1]["event_id"]]["n_stations"] == 1


def test_a_reviewer_label_of_noise_keeps_an_event_from_confirming_a_burst():
    a = [event("st-a", T0, cls="solar_iii")]
    b = [event("st-b", T0 + 0.3, cls="solar_iii", label="noise")]
    assert compare_stations(two(a, b)).rows[0]["n_stations"] == 1
