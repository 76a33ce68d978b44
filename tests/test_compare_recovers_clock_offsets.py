"""Partner lists built from one invented sky (Type III bursts, L-bursts with scintillation jitter,
Type II bursts), each station with its own local interference, detection losses, measurement
noise on its own archive rows and a known clock offset: the comparison must recover the offsets
(within 0.3 s), count confirmations as the sky made them, and flag the clock that is off."""

import csv

import numpy as np
import pytest
from exchange_helpers import list_header, sky, station_list

from rxlog.errors import RxlogError
from rxlog.exchange.compare import compare_stations
from rxlog.exchange.export import write_event_list


def offsets_of(result):
    return {s.name: s.offset_s for s in result.stations}


def test_offsets_are_recovered_within_0_3_s():
    rng = np.random.default_rng(1)
    s = sky(rng)
    truth = {"st-a": 0.0, "st-b": 2.3, "st-c": -1.1}
    bands = {"st-a": (16, 24), "st-b": (16, 24), "st-c": (18, 22)}  # st-c hears Type III later: lower top
    lists = [station_list(rng, n, s, o, band=bands[n]) for n, o in truth.items()]
    r = compare_stations(lists)
    got = offsets_of(r)
    # Only differences between clocks are observable.
    for a in truth:
        for b in truth:
            assert abs((got[b] - got[a]) - (truth[b] - truth[a])) < 0.3, (a, b, got)
    for st in r.stations:
        assert st.offset_err_s < 0.3 and st.n_type3 > 30


def test_one_bad_clock_among_four_is_flagged_and_left_out_of_the_reference():
    rng = np.random.default_rng(2)
    s = sky(rng)
    truth = {"st-a": 0.0, "st-b": 0.05, "st-c": -0.05, "st-d": 3.0}
    r = compare_stations([station_list(rng, n, s, o) for n, o in truth.items()])
    got = offsets_of(r)
    assert r.reference == ["st-a", "st-b", "st-c"]
    mean_good = np.mean([truth[n] for n in r.reference])
    for n, o in truth.items():
        assert abs(got[n] - (o - mean_good)) < 0.3, (n, got)
    flagged = [st.name for st in r.stations if st.flagged]
    assert flagged == ["st-d"]
    lines = r.summary_lines()
    line_d = next(l for l in lines if l.strip().startswith("st-d:"))
    assert "offset +3.0" in line_d and "±" in line_d and " s " in line_d and "LARGE OFFSET" in line_d
    for n in ("st-a", "st-b", "st-c"):
        line = next(l for l in lines if l.strip().startswith(f"{n}:"))
        assert "offset" in line and "LARGE" not in line


def test_confirmations_follow_the_sky_and_local_interference_stays_unconfirmed():
    rng = np.random.default_rng(3)
    s = sky(rng)
    truth = {}
    lists = [station_list(rng, n, s, o, truth=truth) for n, o in (("st-a", 0.0), ("st-b", 1.5), ("st-c", -0.7))]
    r = compare_stations(lists)
    # How many stations listed each sky event, from the truth.
    seen_by = {}
    for eid, k in truth.items():
        if k >= 0:
            seen_by[k] = seen_by.get(k, 0) + 1
    right = total = rfi_confirmed = rfi_total = 0
    for row in r.rows:
        k = truth[row["event_id"]]
        if k < 0:
            rfi_total += 1
            rfi_confirmed += row["n_stations"] >= 2
        else:
            total += 1
            right += row["n_stations"] == seen_by[k]
    assert right / total > 0.97
    assert rfi_confirmed / rfi_total < 0.05
    # One-to-one: no group holds two events of one station, and members agree on the count.
    groups = {}
    for row in r.rows:
        groups.setdefault(row["match_id"], []).append(row)
    for members in groups.values():
        stations = [m["station"] for m in members]
        assert len(stations) == len(set(stations)) == members[0]["n_stations"]


def test_type_iii_onsets_outweigh_scintillating_l_bursts():
    # The scintillation pattern reaches st-b 0.8 s after st-a all night, on top of random
    # shifts: 150 L-bursts against 30 Type III. Weighting by count alone would be pulled
    # by ~0.6 s; Type III onsets must keep the offset within 0.15 s.
    rng = np.random.default_rng(4)
    s = sky(rng, n3=30, nl=150, n2=0)
    lists = [station_list(rng, "st-a", s, 0.0, n_rfi=20),
             station_list(rng, "st-b", s, 2.0, l_lag=0.8, n_rfi=20)]
    both = compare_stations(lists)
    d_both = offsets_of(both)["st-b"] - offsets_of(both)["st-a"]
    assert abs(d_both - 2.0) < 0.15
    assert both.stations[1].n_type3 >= 20
    # From the L-bursts alone the offset is off by the lag, and its uncertainty says it can be.
    s_l = [e for e in s if e["kind"] == "jovian_l"]
    lists_l = [station_list(rng, "st-a", s_l, 0.0, n_rfi=20),
               station_list(rng, "st-b", s_l, 2.0, l_lag=0.8, n_rfi=20)]
    l_only = compare_stations(lists_l)
    d_l = offsets_of(l_only)["st-b"] - offsets_of(l_only)["st-a"]
    err_l = np.hypot(l_only.stations[0].offset_err_s, l_only.stations[1].offset_err_s)
    assert abs(d_l - 2.0) > 0.5 and abs(d_l - 2.0) < 3 * err_l
    assert err_l > 4 * np.hypot(both.stations[0].offset_err_s, both.stations[1].offset_err_s)


def test_files_in_all_three_formats_and_the_outputs(tmp_path):
    rng = np.random.default_rng(5)
    s = sky(rng, days=1.0, n3=20, nl=30, n2=2)
    lists = [station_list(rng, n, s, o, days=1.0, n_rfi=30) for n, o in
             (("st-a", 0.0), ("st-b", 1.2), ("st-c", -0.4))]
    paths = [write_event_list(tmp_path / f"{el.name}.{ext}", fmt, list_header(el.name), el.events)
             for el, (fmt, ext) in zip(lists, [("csv", "csv"), ("json", "json"), ("votable", "vot")])]
    out = tmp_path / "out"
    r = compare_stations(paths, window_s=10.0, outdir=out)
    assert set(r.files) == {"matched", "stations", "summary", "timeline"}
    with (out / "matched_events.csv").open(newline="") as f:
        rows = list(csv.DictReader(f))
    assert len(rows) == sum(len(el.events) for el in lists)
    assert {r_["n_stations"] for r_ in rows} >= {"1", "2", "3"}
    with (out / "stations.csv").open(newline="") as f:
        st = {r_["station"]: r_ for r_ in csv.DictReader(f)}
    assert abs(float(st["st-b"]["offset_s"]) - float(st["st-a"]["offset_s"]) - 1.2) < 0.3
    summary = (out / "summary.txt").read_text()
    assert summary.count("offset") >= 3
    png = (out / "timeline.png").read_bytes()
    assert png[:8] == b"\x89PNG\r\n\x1a\n" and len(png) > 10_000


def test_a_large_offset_beyond_the_window_is_not_matched():
    rng = np.random.default_rng(6)
    s = sky(rng, n3=30, nl=0, n2=0)
    lists = [station_list(rng, n, s, o, n_rfi=0) for n, o in (("st-a", 0.0), ("st-b", 25.0))]
    r = compare_stations(lists, window_s=5.0)  # Type III last < 20 s here: nothing within 5 s
    assert r.group_sizes.get(2, 0) == 0
    assert all(st.offset_s is None for st in r.stations)
    assert all("offset unknown" in l for l in r.summary_lines() if l.startswith("  "))
    wide = compare_stations(lists, window_s=60.0)
    o = offsets_of(wide)
    assert abs(o["st-b"] - o["st-a"] - 25.0) < 0.3


def test_bad_arguments_are_clear_errors(tmp_path):
    rng = np.random.default_rng(7)
    el = station_list(rng, "st-a", sky(rng, n3=3, nl=0, n2=0), 0.0, n_rfi=0)
    with pytest.raises(RxlogError, match="at least two stations"):
        compare_stations([el])
    with pytest.raises(RxlogError, match="at least two stations"):
        compare_stations([el, el])  # the same station twice is one station
    with pytest.raises(RxlogError, match="window"):
        compare_stations([el, el], window_s=-1)
    with pytest.raises(RxlogError, match="cannot read"):
        compare_stations([el, tmp_path / "missing.csv"])
