"""Event store invariants: idempotent upserts, labels that survive re-detection, migrations."""

import sqlite3

import pytest
import sqlite_utils

from rxlog.errors import RxlogError
from rxlog.store import SCHEMA_VERSION, EventStore, make_event_id
from rxlog.store_schema import _v1, _v2
from rxlog.timeutil import iso

T0 = 1_800_000_000.0  # 2027-01-15T08:00:00Z


def event(peak, fmin=18.0, fmax=22.0, cls="solar_iii", station="st-a", dur=6.0):
    return {"event_id": make_event_id(station, peak, fmin, fmax), "station": station,
            "start_utc": iso(peak - dur / 2), "end_utc": iso(peak + dur / 2), "peak_utc": iso(peak),
            "fmin_mhz": fmin, "fmax_mhz": fmax, "peak_excess_db": 3.0, "snr": 12.0,
            "class": cls, "confidence": 0.8, "reason": "test"}


def test_upsert_is_idempotent(tmp_path):
    store = EventStore(tmp_path / "events.sqlite")
    evs = [event(T0 + 100 * i) for i in range(5)]
    store.upsert_events(evs)
    store.upsert_events(evs)
    assert len(store.events()) == 5
    evs[0]["peak_excess_db"] = 9.0
    store.upsert_events(evs[:1])
    rows = store.events()
    assert len(rows) == 5 and rows[0]["peak_excess_db"] == 9.0


def test_replace_events_only_touches_its_range_and_station(tmp_path):
    store = EventStore(tmp_path / "events.sqlite")
    store.upsert_events([event(T0 + 10), event(T0 + 5000), event(T0 + 10, station="st-b")])
    store.replace_events("st-a", T0, T0 + 1000, [event(T0 + 20), event(T0 + 30)])
    peaks = sorted((r["station"], r["peak_utc"]) for r in store.events())
    assert peaks == sorted([("st-a", iso(T0 + 20)), ("st-a", iso(T0 + 30)),
                            ("st-a", iso(T0 + 5000)), ("st-b", iso(T0 + 10))])


def test_labels_survive_redetection_with_new_ids(tmp_path):
    store = EventStore(tmp_path / "events.sqlite")
    first = [event(T0 + 100), event(T0 + 900, fmin=16.5, fmax=19.0, cls="jovian_l", dur=120)]
    store.replace_events("st-a", T0, T0 + 3600, first)
    store.add_label(first[0]["event_id"], "solar_iii", note="clear", who="ana")
    store.add_label(first[1]["event_id"], "rfi", who="ben")
    # Re-detection with other thresholds: boxes shift a little, ids change.
    second = [event(T0 + 100.7, fmin=17.8, fmax=22.3), event(T0 + 905, fmin=16.4, fmax=19.2, cls="jovian_l", dur=110)]
    assert {e["event_id"] for e in second}.isdisjoint({e["event_id"] for e in first})
    store.replace_events("st-a", T0, T0 + 3600, second)
    rows = {r["event_id"]: r for r in store.events()}
    assert rows[second[0]["event_id"]]["label"] == "solar_iii"
    assert rows[second[0]["event_id"]]["label_who"] == "ana"
    assert rows[second[1]["event_id"]]["label"] == "rfi"
    assert store.events(unlabelled=True) == []


def test_label_stays_on_its_event_and_keeps_history(tmp_path):
    store = EventStore(tmp_path / "events.sqlite")
    a, b = event(T0 + 100), event(T0 + 104, fmin=21.0, fmax=23.0)
    store.upsert_events([a, b])
    store.add_label(a["event_id"], "unsure")
    store.add_label(a["event_id"], "solar_iii", who="ana")
    rows = {r["event_id"]: r for r in store.events()}
    assert rows[a["event_id"]]["label"] == "solar_iii"
    assert rows[b["event_id"]]["label"] is None
    assert [h["label"] for h in store.label_history(a["event_id"])] == ["unsure", "solar_iii"]
    # a class filter does not move labels onto other events
    assert store.events(cls="solar_iii")[1]["label"] is None


def test_a_label_on_an_event_nested_in_another_stays_on_the_nested_one(tmp_path):
    # A Type III inside the box of a longer, wider event: each keeps its own label.
    store = EventStore(tmp_path / "events.sqlite")
    big = event(T0 + 110, fmin=16.5, fmax=23.5, cls="solar_iv", dur=60)
    small = event(T0 + 100, fmin=19.0, fmax=20.0, dur=4)
    store.upsert_events([small, big])
    store.add_label(small["event_id"], "solar_iii", who="ana")
    rows = {r["event_id"]: r for r in store.events()}
    assert rows[small["event_id"]]["label"] == "solar_iii"
    assert rows[big["event_id"]]["label"] is None
    store.add_label(big["event_id"], "solar_iv", who="ben")
    rows = {r["event_id"]: r for r in store.events()}
    assert (rows[small["event_id"]]["label"], rows[big["event_id"]]["label"]) == ("solar_iii", "solar_iv")
    assert [h["label"] for h in store.label_history(small["event_id"])] == ["solar_iii"]
    assert [h["label"] for h in store.label_history(big["event_id"])] == ["solar_iv"]


def test_identical_boxes_keep_their_own_labels(tmp_path):
    store = EventStore(tmp_path / "events.sqlite")
    a = event(T0 + 100)
    b = dict(event(T0 + 101), start_utc=a["start_utc"], end_utc=a["end_utc"])
    store.upsert_events([a, b])
    store.add_label(b["event_id"], "rfi")
    rows = {r["event_id"]: r for r in store.events()}
    assert rows[a["event_id"]]["label"] is None and rows[b["event_id"]]["label"] == "rfi"
    store.add_label(a["event_id"], "solar_iii")
    rows = {r["event_id"]: r for r in store.events()}
    assert rows[a["event_id"]]["label"] == "solar_iii" and rows[b["event_id"]]["label"] == "rfi"


def test_redetection_moves_nested_labels_to_their_own_successors(tmp_path):
    store = EventStore(tmp_path / "events.sqlite")
    big = event(T0 + 110, fmin=16.5, fmax=23.5, cls="solar_iv", dur=60)
    small = event(T0 + 100, fmin=19.0, fmax=20.0, dur=4)
    store.replace_events("st-a", T0, T0 + 3600, [big, small])
    store.add_label(small["event_id"], "solar_iii")
    store.add_label(big["event_id"], "solar_iv")
    big2 = event(T0 + 111, fmin=16.4, fmax=23.6, cls="solar_iv", dur=58)
    small2 = event(T0 + 100.4, fmin=18.9, fmax=20.1, dur=4.5)
    result = store.replace_events("st-a", T0, T0 + 3600, [big2, small2])
    rows = {r["event_id"]: r for r in store.events()}
    assert rows[small2["event_id"]]["label"] == "solar_iii"
    assert rows[big2["event_id"]]["label"] == "solar_iv"
    assert sorted((f, t) for _, f, t in result["reattached"]) == sorted(
        [(small["event_id"], small2["event_id"]), (big["event_id"], big2["event_id"])])
    assert result["orphans"] == []
    lab = store.label_history(small2["event_id"])[0]
    assert lab["given_event_id"] == small["event_id"] and lab["reattached_utc"]


def test_identical_boxes_after_redetection_pair_by_peak(tmp_path):
    store = EventStore(tmp_path / "events.sqlite")
    a = event(T0 + 100)
    b = dict(event(T0 + 102), start_utc=a["start_utc"], end_utc=a["end_utc"])
    store.replace_events("st-a", T0, T0 + 3600, [a, b])
    store.add_label(a["event_id"], "solar_iii")
    store.add_label(b["event_id"], "rfi")
    a2 = dict(event(T0 + 100.3, fmin=18.1, fmax=22.1))
    b2 = dict(event(T0 + 102.2, fmin=18.1, fmax=22.1), start_utc=a2["start_utc"], end_utc=a2["end_utc"])
    store.replace_events("st-a", T0, T0 + 3600, [b2, a2])
    rows = {r["event_id"]: r for r in store.events()}
    assert rows[a2["event_id"]]["label"] == "solar_iii" and rows[b2["event_id"]]["label"] == "rfi"


def test_a_label_is_never_moved_onto_a_labelled_event_nor_lost(tmp_path):
    store = EventStore(tmp_path / "events.sqlite")
    keep = event(T0 + 500)
    frag = event(T0 + 100, fmin=19.0, fmax=20.0, dur=4)
    store.replace_events("st-a", T0, T0 + 3600, [keep, frag])
    store.add_label(keep["event_id"], "rfi", who="ana")
    store.add_label(frag["event_id"], "solar_iii", who="ben")
    # Re-detection: the fragment is swallowed by a long event ten times its size, and an
    # event overlapping the labelled one keeps its id.
    long_ev = event(T0 + 130, fmin=16.5, fmax=23.5, cls="solar_iv", dur=120)
    result = store.replace_events("st-a", T0, T0 + 3600, [keep, long_ev])
    rows = {r["event_id"]: r for r in store.events()}
    assert rows[long_ev["event_id"]]["label"] is None        # not moved onto a different detection
    assert rows[keep["event_id"]]["label"] == "rfi"
    assert [o["label"] for o in result["orphans"]] == ["solar_iii"]
    assert [o["who"] for o in store.orphan_labels("st-a")] == ["ben"]
    # A later re-detection that finds the burst again gives the label back.
    frag3 = event(T0 + 100.5, fmin=19.05, fmax=20.0, dur=4)
    store.replace_events("st-a", T0, T0 + 3600, [keep, frag3])
    rows = {r["event_id"]: r for r in store.events()}
    assert rows[frag3["event_id"]]["label"] == "solar_iii" and store.orphan_labels() == []


def test_migration_to_version_3_keeps_labels_on_the_events_they_were_given_to(tmp_path):
    path = tmp_path / "events.sqlite"
    db = sqlite_utils.Database(sqlite3.connect(str(path)))
    _v1(db)
    _v2(db)
    for v in (1, 2):
        db["schema_version"].insert({"version": v, "applied_utc": iso(T0)}, pk="version")
    big = event(T0 + 110, fmin=16.5, fmax=23.5, cls="solar_iv", dur=60)
    small = event(T0 + 100, fmin=19.0, fmax=20.0, dur=4)
    gone = event(T0 + 900)
    successor = event(T0 + 900.5, fmin=18.1, fmax=22.2)
    db["events"].insert_all([big, small, successor])
    for ev, lab in ((small, "solar_iii"), (gone, "rfi")):
        db["labels"].insert({"station": "st-a", "event_id": ev["event_id"], "label": lab, "note": "", "who": "",
                             "created_utc": iso(T0), "start_utc": ev["start_utc"], "end_utc": ev["end_utc"],
                             "fmin_mhz": ev["fmin_mhz"], "fmax_mhz": ev["fmax_mhz"]})
    db.conn.commit()
    db.conn.close()
    store = EventStore(path)
    assert store.version == SCHEMA_VERSION
    rows = {r["event_id"]: r for r in store.events()}
    assert rows[small["event_id"]]["label"] == "solar_iii" and rows[big["event_id"]]["label"] is None
    assert rows[successor["event_id"]]["label"] == "rfi"


def test_unknown_label_and_event_are_clear_errors(tmp_path):
    store = EventStore(tmp_path / "events.sqlite")
    e = event(T0)
    store.upsert_events([e])
    with pytest.raises(RxlogError, match="unknown label"):
        store.add_label(e["event_id"], "martians")
    with pytest.raises(RxlogError, match="no event"):
        store.add_label("nope", "rfi")


def test_migration_from_version_1_keeps_data(tmp_path):
    path = tmp_path / "events.sqlite"
    db = sqlite_utils.Database(sqlite3.connect(str(path)))
    _v1(db)
    db["schema_version"].insert({"version": 1, "applied_utc": iso(T0)}, pk="version")
    old = {k: v for k, v in event(T0).items()}
    db["events"].insert(old)
    db.conn.commit()
    db.conn.close()
    store = EventStore(path)
    assert store.version == SCHEMA_VERSION
    assert "cml3_start_deg" in store.db["events"].columns_dict
    rows = store.events()
    assert len(rows) == 1 and rows[0]["event_id"] == old["event_id"]


def test_newer_schema_is_refused_and_garbage_file_is_clear_error(tmp_path):
    path = tmp_path / "events.sqlite"
    store = EventStore(path)
    store.db["schema_version"].insert({"version": SCHEMA_VERSION + 5, "applied_utc": iso(T0)})
    store.db.conn.commit()
    store.close()
    with pytest.raises(RxlogError, match="newer"):
        EventStore(path)
    junk = tmp_path / "junk.sqlite"
    junk.write_bytes(b"this is not sqlite" * 100)
    with pytest.raises(RxlogError, match="not a usable"):
        EventStore(junk)


def test_store_is_wal_and_passes_integrity_check(tmp_path):
    store = EventStore(tmp_path / "events.sqlite")
    store.upsert_events([event(T0)])
    assert store.db.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    assert store.db.execute("PRAGMA integrity_check").fetchone()[0] == "ok"


def test_quality_and_health_rows(tmp_path):
    store = EventStore(tmp_path / "events.sqlite")
    store.record_quality([{"station": "st-a", "hour_utc": iso(T0), "masked_fraction": 0.1, "gap_s": 0, "covered_s": 3600}])
    store.record_quality([{"station": "st-a", "hour_utc": iso(T0), "masked_fraction": 0.2, "gap_s": 5, "covered_s": 3595}])
    assert [q["masked_fraction"] for q in store.quality()] == [0.2]
    store.record_health({"station": "st-a", "time_utc": iso(T0), "samples_received": 10, "samples_dropped": 0,
                         "queue_depth": 0, "cpu_percent": 5.0, "disk_free_mb": 1e4, "clock_sync": "unknown",
                         "receiver_state": "ok"})
    assert store.latest_health()["receiver_state"] == "ok"


def test_an_update_without_a_cutout_keeps_the_stored_cutout(tmp_path):
    # The detector re-issues a piece of a long event with a new class an hour later; the
    # cutout the logger saved for its first version must stay with it.
    store = EventStore(tmp_path / "events.sqlite")
    first = dict(event(T0), cls="unknown", cutout_path="cutouts/2027/01/15/x.fits")
    first["class"] = "unknown"
    store.upsert_events([first])
    store.upsert_events([dict(first, **{"class": "solar_iv", "cutout_path": None})])
    row = store.events()[0]
    assert row["class"] == "solar_iv" and row["cutout_path"] == "cutouts/2027/01/15/x.fits"
    store.upsert_events([dict(first, cutout_path="cutouts/2027/01/15/y.fits")])
    assert store.events()[0]["cutout_path"] == "cutouts/2027/01/15/y.fits"
