"""Long events whole, and one episode per phenomenon, on the simulator's injections.

The simulator draws a Type IV given ``duration_s`` as a rise, a plateau and a 10-min
decay that ends (at a tenth of its peak) when asked; a fadeout given ``duration_s``
recovers to a tenth of its depth by then; a Type II may be band-split into parallel
lanes and patchy (rxlog.sim.sources). The checks are rxlog's own targets: a long event
reported from its start to its end within five minutes, with its own class, a Type II
not absorbed into the Type IV it overlaps, a flare's episodes linked by one sequence,
a Jovian storm one episode.
"""

import math

import pytest
from detector_helpers import CFG, Sky, sun_up

from rxlog.detect.online import detect_spectrum
from rxlog.sim.spectra import simulate_spectra
from rxlog.station.config import config_from_text
from rxlog.timeutil import parse_iso

NOON = parse_iso("2027-01-19T10:00:00Z")       # the Sun 17-22 deg up at 47.5 N
EDGE_S = 300.0                                  # start and end found within five minutes


@pytest.fixture(scope="module")
def cfg(tmp_path_factory):
    return config_from_text("""
[station]
name = "long-test"
latitude_deg = 47.5
longitude_deg = 8.7
[spectra]
channels = 256
""", tmp_path_factory.mktemp("long") / "station.toml")


def _run(cfg, start, hours, inject, seed=3):
    spec, truth = simulate_spectra(cfg, start, hours, seed=seed, include=(), rfi="quiet-rural", inject=inject)
    return detect_spectrum(cfg, spec), {r["class"]: r for r in truth}


def _covers(episodes, cls, truth_row):
    """The episodes of class ``cls`` overlapping the true row, and how far the first start
    and the last end are from the truth's (s)."""
    t0, t1 = parse_iso(truth_row["start_utc"]), parse_iso(truth_row["end_utc"])
    eps = [e for e in episodes if e["class"] == cls
           and parse_iso(e["start_utc"]) < t1 and parse_iso(e["end_utc"]) > t0]
    if not eps:
        return eps, None, None
    return (eps, min(parse_iso(e["start_utc"]) for e in eps) - t0,
            max(parse_iso(e["end_utc"]) for e in eps) - t1)


def test_a_continuum_longer_than_the_slow_window_is_reported_whole():
    # 2.5 h of a 1-dB continuum rising over 5 min, under the synthetic sky's slow drift:
    # longer than the two-hour slow window, so only a baseline carried across it keeps it.
    sky = Sky(7 * 3600, n_chan=64, cadence=2.0)
    sky.patch(5400, 5400 + 9000, 16.0, 24.0, 1.0, rise_s=300)
    res = detect_spectrum(CFG, sky.spectrum(seed=1), tags_fn=sun_up)
    iv = [e for e in res.events if e["class"] == "solar_iv" and "within" not in e["reason"]]
    assert len(iv) == 1
    assert parse_iso(iv[0]["start_utc"]) - sky.t0 == pytest.approx(5400, abs=EDGE_S)
    assert parse_iso(iv[0]["end_utc"]) - sky.t0 == pytest.approx(5400 + 9000, abs=EDGE_S)
    assert [e["class"] for e in res.episodes if e["class"] != "rfi"] == ["solar_iv"]


def test_a_fadeout_is_followed_through_its_slow_recovery():
    # onset over 5 min, recovered to a tenth of its 2-dB depth 45 min after it began
    sky = Sky(5 * 3600, n_chan=64, cadence=2.0)
    sky.fadeout(5400, 2.0, rise_s=300.0, decay_s=2400.0 / math.log(10))
    res = detect_spectrum(CFG, sky.spectrum(seed=2), tags_fn=sun_up)
    (fade,) = [e for e in res.events if e["class"] == "fadeout"]
    assert parse_iso(fade["start_utc"]) - sky.t0 == pytest.approx(5400, abs=EDGE_S)
    assert parse_iso(fade["end_utc"]) - sky.t0 == pytest.approx(5400 + 2700, abs=EDGE_S)


@pytest.fixture(scope="module")
def flare(cfg):
    return flare_run(cfg)


def flare_run(cfg):
    """A flare: a Type III group, a band-split patchy Type II, a 2-h Type IV from 10 min
    later; then, 40 min after the Type IV, a 45-min fadeout of its own."""
    t = NOON + 3600
    inject = ([{"class": "solar_iii", "t": t + dt, "peak_excess_db": 6.0} for dt in (0, 20, 45)]
              + [{"class": "solar_ii", "t": t + 120, "fmax_mhz": 23.5, "drift_mhz_s": -0.025, "duration_s": 900.0,
                  "split_mhz": 0.6, "patchy": True, "peak_excess_db": 6.0},
                 {"class": "solar_iv", "t": t + 600, "duration_s": 7200.0, "peak_excess_db": 2.0},
                 {"class": "fadeout", "t": t + 600 + 7200 + 2400, "duration_s": 2700.0, "peak_excess_db": -3.0}])
    return _run(cfg, NOON, 6.0, inject)


def test_a_two_hour_type_iv_is_one_episode_from_its_start_to_its_end(flare):
    res, truth = flare
    eps, d0, d1 = _covers(res.episodes, "solar_iv", truth["solar_iv"])
    assert len(eps) == 1
    # The truth ends at a tenth of the peak: for a 2-dB continuum that is ~0.1 dB on a
    # typical coarse channel, the slow path's floor, so the end comes a few minutes early.
    assert abs(d0) <= EDGE_S and abs(d1) <= 2 * EDGE_S


def test_a_45_minute_fadeout_is_found_from_its_onset_to_its_recovery(flare):
    res, truth = flare
    eps, d0, d1 = _covers(res.episodes, "fadeout", truth["fadeout"])
    assert len(eps) == 1
    assert abs(d0) <= EDGE_S and abs(d1) <= EDGE_S


def test_no_fadeout_is_made_of_the_end_of_the_type_iv(flare):
    res, truth = flare
    iv_end = parse_iso(truth["solar_iv"]["end_utc"])
    fade_start = parse_iso(truth["fadeout"]["start_utc"])
    dips = [e for e in res.events + res.episodes if e["class"] == "fadeout"
            and iv_end - 1800 < parse_iso(e["start_utc"]) < fade_start - EDGE_S]
    assert dips == []


def test_a_band_split_type_ii_during_the_type_iv_is_found_as_a_type_ii(flare):
    res, truth = flare
    eps, d0, _ = _covers(res.episodes, "solar_ii", truth["solar_ii"])
    assert len(eps) == 1 and abs(d0) <= EDGE_S
    # not absorbed: the Type IV episode starts after the Type II's
    (iv,) = [e for e in res.episodes if e["class"] == "solar_iv"]
    assert parse_iso(iv["start_utc"]) > parse_iso(eps[0]["start_utc"])


def test_a_flares_episodes_share_one_sequence_and_the_later_fadeout_is_not_in_it(flare):
    res, _ = flare
    by = {}
    for e in res.episodes:
        by.setdefault(e["class"], []).append(e)
    (iii,), (ii,), (iv,), (fade,) = by["solar_iii"], by["solar_ii"], by["solar_iv"], by["fadeout"]
    assert iii["sequence_id"] is not None
    assert iii["sequence_id"] == ii["sequence_id"] == iv["sequence_id"]
    assert fade["sequence_id"] is None            # its flare was later, with no bursts seen
    assert iii["n_events"] >= 2 and all(e["episode_id"] for e in res.events)


def test_episode_records_carry_what_a_reviewer_reads(flare):
    res, _ = flare
    keys = {"episode_id", "station", "class", "confidence", "reason", "start_utc", "end_utc", "fmin_mhz",
            "fmax_mhz", "n_events", "peak_excess_db", "sequence_id"}
    for e in res.episodes:
        assert keys <= set(e)
        assert e["reason"] and "\n" not in e["reason"] and 0 <= e["confidence"] <= 1
    ids = {e["episode_id"] for e in res.episodes}
    assert {e["episode_id"] for e in res.events} <= ids             # no event points to a missing episode


def test_a_jovian_storm_is_one_episode_not_many(cfg):
    # an Io-A passage at the example station (rxlog.sky.tags: Jupiter up, Sun down)
    t = parse_iso("2027-01-20T01:40:00Z")
    inject = [{"class": "jovian_l", "t": t, "duration_s": 3600.0, "peak_excess_db": 3.0, "region": "Io-A"}]
    res, truth = _run(cfg, t - 3600, 3.0, inject, seed=5)
    storms = [e for e in res.episodes if e["class"] == "jovian_l"]
    assert len(storms) == 1
    assert storms[0]["n_events"] >= 3
    eps, d0, d1 = _covers(res.episodes, "jovian_l", truth["jovian_l"])
    assert abs(d0) <= EDGE_S and abs(d1) <= EDGE_S
    assert len([e for e in res.episodes if e["class"] != "rfi"]) <= 2


# -- the episode rules on hand-made events (rxlog.detect.episodes) ----------------------

def _ev(eid, cls, t0, t1, peak=1.0, reason="r"):
    from rxlog.timeutil import iso
    return {"event_id": eid, "station": "s", "class": cls, "confidence": 0.6, "reason": reason,
            "start_utc": iso(NOON + t0), "end_utc": iso(NOON + t1), "fmin_mhz": 18.0, "fmax_mhz": 22.0,
            "peak_excess_db": peak}


def test_a_storms_late_envelope_joins_its_bursts_into_one_episode():
    from rxlog.detect.episodes import Episodes
    eps = Episodes(600.0, 3600.0)
    bursts = [_ev(f"b{i}", "jovian_l", t, t + 20) for i, t in enumerate((0, 60, 120, 2000, 2060, 2120))]
    for b in bursts:
        assert eps.assign(b, "fine") == []
    assert len({b["episode_id"] for b in bursts}) == 2          # a 30-min lull between them
    moved = eps.assign(_ev("env", "jovian_l", -60, 2200), "slow")
    assert {m["event_id"] for m in moved} == {"b3", "b4", "b5"}
    assert {m["episode_id"] for m in moved} == {bursts[0]["episode_id"]}
    eps.close_all()
    (storm,) = eps.pop()
    assert storm["class"] == "jovian_l" and storm["n_events"] == 7 and "envelope" in storm["reason"]


def test_two_lone_blobs_amid_an_impulse_storm_are_not_a_storm():
    from rxlog.detect.episodes import Episodes
    eps = Episodes(600.0, 3600.0)
    eps.assign(_ev("i1", "rfi", 0, 1800), "impulse")
    eps.assign(_ev("b1", "jovian_l", 300, 310), "fine")
    eps.assign(_ev("b2", "jovian_l", 700, 712), "fine")
    eps.assign(_ev("q1", "jovian_l", 9000, 9010), "fine")         # alone, in a quiet hour
    eps.close_all()
    by = {e["episode_id"]: e for e in eps.pop()}
    assert by["ep-b1"]["class"] == "rfi" and "impulse storm" in by["ep-b1"]["reason"]
    assert by["ep-q1"]["class"] == "unknown"
    assert all(e["class"] != "jovian_l" for e in by.values())


def test_a_late_type_iv_links_the_closed_type_iii_group_into_its_sequence():
    from rxlog.detect.episodes import Episodes
    eps = Episodes(600.0, 4 * 3600.0)
    for i, t in enumerate((0, 20, 45)):
        eps.assign(_ev(f"iii{i}", "solar_iii", t, t + 10), "fine")
    eps.close_before(NOON + 1500)
    (iii,) = eps.pop()
    assert iii["sequence_id"] is None and iii["n_events"] == 3
    eps.assign(_ev("iv", "solar_iv", 600, 7800, peak=2.0), "slow")   # reported an hour after it ends
    eps.assign(_ev("fade", "fadeout", 7900, 9000, peak=-1.0), "slow")  # starts as the Type IV ends
    eps.close_all()
    out = {e["episode_id"]: e for e in eps.pop()}
    assert out["ep-iii0"]["sequence_id"] == out["ep-iv"]["sequence_id"] is not None   # handed out again
    assert out["ep-fade"]["class"] == "unknown" and out["ep-fade"]["sequence_id"] is None
