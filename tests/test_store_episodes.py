"""Episodes in the event store: migration to version 5, context from member bursts, episode
labels that cascade to unlabelled bursts and survive re-detection."""

import sqlite_utils

from rxlog.store import SCHEMA_VERSION, EventStore, make_event_id
from rxlog.store_schema import _v1, _v2, _v3
from rxlog.timeutil import iso

T0 = 1_800_000_000.0  # 2027-01-15T08:00:00Z


def burst(peak, episode_id, cls="jovian_l", station="st-a", dur=20.0, fmin=17.0, fmax=20.0, **extra):
    return {"event_id": make_event_id(station, peak, fmin, fmax), "station": station, "episode_id": episode_id,
            "start_utc": iso(peak - dur / 2), "end_utc": iso(peak + dur / 2), "peak_utc": iso(peak),
            "fmin_mhz": fmin, "fmax_mhz": fmax, "peak_excess_db": 3.0, "snr": 10.0, "class": cls,
            "confidence": 0.6, "reason": "arc of L-bursts", **extra}


def episode(bursts, episode_id=None):
    """The episode the detector hands out for ``bursts`` (no confidence or reason: today's detector)."""
    return {"episode_id": episode_id or bursts[0]["episode_id"], "station": bursts[0]["station"],
            "class": bursts[0]["class"], "start_utc": min(b["start_utc"] for b in bursts),
            "end_utc": max(b["end_utc"] for b in bursts), "fmin_mhz": min(b["fmin_mhz"] for b in bursts),
            "fmax_mhz": max(b["fmax_mhz"] for b in bursts), "n_events": len(bursts),
            "peak_excess_db": max(b["peak_excess_db"] for b in bursts)}


def storm(t, episode_id, n=6, shift=0.0, fmin=17.0):
    """A Jovian storm: ``n`` L-burst stretches one minute apart from ``t``."""
    return [burst(t + 60 * k + shift, episode_id, fmin=fmin, cml3_start_deg=350.0 + k, cml3_end_deg=351.0 + k,
                  io_phase_start_deg=90.0 + 0.1 * k, io_phase_end_deg=90.05 + 0.1 * k,
                  source_region="Io-B" if k else "non-Io-A", jupiter_alt_deg=30.0 + k) for k in range(n)]


def test_migration_from_version_3_keeps_episodes_events_and_labels(tmp_path):
    path = tmp_path / "events.sqlite"
    db = sqlite_utils.Database(path)
    for v, step in ((1, _v1), (2, _v2), (3, _v3)):
        step(db)
        db["schema_version"].insert({"version": v, "applied_utc": iso(T0)}, pk="version", replace=True)
    bursts = storm(T0, "ep-old")
    cols = db["events"].columns_dict
    db["events"].insert_all([{k: v for k, v in b.items() if k in cols} for b in bursts], pk="event_id")
    old = {k: v for k, v in episode(bursts).items() if k != "peak_excess_db"}   # version 3 had no such column
    db["episodes"].insert(old, pk="episode_id")
    db["labels"].insert({"station": "st-a", "event_id": bursts[0]["event_id"], "given_event_id": bursts[0]["event_id"],
                         "label": "rfi", "note": "", "who": "ana", "created_utc": iso(T0),
                         "start_utc": bursts[0]["start_utc"], "end_utc": bursts[0]["end_utc"],
                         "peak_utc": bursts[0]["peak_utc"], "fmin_mhz": 17.0, "fmax_mhz": 20.0}, pk="label_id")
    db.conn.close()

    store = EventStore(path)
    assert store.version == SCHEMA_VERSION >= 5
    cols = store.db["episodes"].columns_dict
    assert {"confidence", "reason", "sequence_id", "peak_excess_db"} <= set(cols)
    assert "episode_labels" in store.db.table_names()
    [ep] = store.episodes_with_context()
    assert ep["episode_id"] == "ep-old" and ep["n_bursts"] == 6
    assert ep["confidence"] == 0.6 and ep["reason"] == "arc of L-bursts"   # derived from the bursts
    assert store.get_event(bursts[0]["event_id"])["label"] == "rfi"
    store.add_episode_label("ep-old", "jovian_l", who="ben")
    assert [e["label"] for e in store.episode_bursts("ep-old")] == ["rfi"] + ["jovian_l"] * 5


def test_context_runs_from_the_first_burst_to_the_last_through_360(tmp_path):
    store = EventStore(tmp_path / "events.sqlite")
    bursts = storm(T0, "ep-1", n=12)            # CML from 350 past 360 to 2 (wraps)
    bursts[3]["confidence"] = 0.9
    store.upsert_events(bursts)
    store.upsert_episodes([episode(bursts)])
    [ep] = store.episodes_with_context()
    assert (ep["cml3_start_deg"], ep["cml3_end_deg"]) == (350.0, 362.0)
    assert (ep["io_phase_start_deg"], ep["io_phase_end_deg"]) == (90.0, 90.05 + 1.1)
    assert ep["source_region"] == "Io-B"        # eleven of twelve bursts
    assert (ep["jupiter_alt_min_deg"], ep["jupiter_alt_max_deg"]) == (30.0, 41.0)
    assert ep["confidence"] == 0.9              # the most confident burst
    # What the detector gives wins over what the bursts say.
    store.upsert_episodes([{**episode(bursts), "confidence": 0.75, "reason": "storm envelope over 11 min"}])
    [ep] = store.episodes_with_context()
    assert (ep["confidence"], ep["reason"]) == (0.75, "storm envelope over 11 min")


def test_an_episode_label_labels_its_bursts_unless_they_carry_their_own(tmp_path):
    store = EventStore(tmp_path / "events.sqlite")
    a, b = storm(T0, "ep-a"), storm(T0 + 3600, "ep-b")
    store.upsert_events(a + b)
    store.upsert_episodes([episode(a), episode(b)])
    store.add_label(a[2]["event_id"], "rfi", who="ana")
    store.add_episode_label("ep-a", "jovian_l", note="Io-B storm", who="ben")
    rows = {r["event_id"]: r for r in store.events()}
    assert rows[a[2]["event_id"]]["label"] == "rfi"                     # its own label wins
    assert rows[a[2]["event_id"]]["label_source"] == "event"
    for x in a[:2] + a[3:]:
        assert (rows[x["event_id"]]["label"], rows[x["event_id"]]["label_who"]) == ("jovian_l", "ben")
        assert rows[x["event_id"]]["label_source"] == "episode"
    assert all(rows[x["event_id"]]["label"] is None for x in b)          # the other episode is untouched
    assert len(store.events(unlabelled=True)) == len(b)
    # A burst labelled after its episode keeps its own label too.
    store.add_label(a[4]["event_id"], "unsure")
    assert store.get_event(a[4]["event_id"])["label"] == "unsure"
    assert store.get_episode("ep-a")["label"] == "jovian_l"


def test_episode_label_is_kept_when_redetection_replaces_the_episode(tmp_path):
    store = EventStore(tmp_path / "events.sqlite")
    first_a, first_b = storm(T0, "ep-a"), storm(T0 + 3600, "ep-b", fmin=18.0)
    store.replace_events("st-a", T0 - 600, T0 + 7200, first_a + first_b, [episode(first_a), episode(first_b)])
    store.add_episode_label("ep-a", "jovian_l", who="ana")
    store.add_episode_label("ep-b", "rfi", who="ben")
    # Re-detection: bursts shift by a few seconds, every id changes, episodes too.
    second_a, second_b = storm(T0, "ep-a2", shift=3.0), storm(T0 + 3600, "ep-b2", shift=-2.0, fmin=18.1)
    out = store.replace_events("st-a", T0 - 600, T0 + 7200, second_a + second_b,
                               [episode(second_a), episode(second_b)])
    assert sorted((f, t) for _, f, t in out["episodes_reattached"]) == [("ep-a", "ep-a2"), ("ep-b", "ep-b2")]
    assert store.get_episode("ep-a2")["label"] == "jovian_l"
    assert store.get_episode("ep-b2")["label"] == "rfi"
    assert all(e["label"] == "jovian_l" for e in store.episode_bursts("ep-a2"))
    assert [h["given_episode_id"] for h in store.episode_label_history("ep-a2")] == ["ep-a"]
    assert store.orphan_episode_labels() == []


def test_episode_label_that_finds_no_successor_waits_as_an_orphan(tmp_path):
    store = EventStore(tmp_path / "events.sqlite")
    a = storm(T0, "ep-a")
    store.replace_events("st-a", T0 - 600, T0 + 7200, a, [episode(a)])
    store.add_episode_label("ep-a", "jovian_l", who="ana")
    elsewhere = storm(T0 + 5000, "ep-far")
    out = store.replace_events("st-a", T0 - 600, T0 + 7200, elsewhere, [episode(elsewhere)])
    assert out["episodes_reattached"] == [] and [o["label"] for o in out["episode_orphans"]] == ["jovian_l"]
    assert store.get_episode("ep-far")["label"] is None
    # The detection comes back: the label finds it.
    store.replace_events("st-a", T0 - 600, T0 + 7200, a, [episode(a)])
    assert store.get_episode("ep-a")["label"] == "jovian_l"
