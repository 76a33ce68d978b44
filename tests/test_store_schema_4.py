"""Schema version 4: interference kinds, the masked fraction per channel group and the RFI
mask's learned occupancy, migrated in place from version 3 without losing anything."""

import sqlite3

import sqlite_utils

from rxlog.store import EventStore, make_event_id
from rxlog.store_schema import MIGRATIONS, SCHEMA_VERSION
from rxlog.timeutil import iso

T0 = 1_800_000_000.0  # 2027-01-15T08:00:00Z


def _event(peak, cls="rfi", reason="impulse storm: 12 impulses"):
    return {"event_id": make_event_id("st-a", peak, 16.0, 24.0), "station": "st-a", "start_utc": iso(peak - 1),
            "end_utc": iso(peak + 1), "peak_utc": iso(peak), "fmin_mhz": 16.0, "fmax_mhz": 24.0,
            "class": cls, "confidence": 0.9, "reason": reason}


def _version_3_store(path):
    db = sqlite_utils.Database(sqlite3.connect(str(path)))
    for v in (1, 2, 3):
        MIGRATIONS[v](db)
        db["schema_version"].insert({"version": v, "applied_utc": iso(T0)}, pk="version")
    db["events"].insert(_event(T0))
    db["quality"].insert({"station": "st-a", "hour_utc": iso(T0), "masked_fraction": 0.05, "gap_s": 0.0,
                          "covered_s": 3600.0})
    db.conn.commit()
    db.conn.close()


def test_migration_from_version_3_keeps_events_and_quality_and_adds_the_new_columns(tmp_path):
    path = tmp_path / "events.sqlite"
    _version_3_store(path)
    store = EventStore(path)
    assert store.version == SCHEMA_VERSION >= 4
    (ev,) = store.events()
    assert ev["event_id"] == _event(T0)["event_id"] and ev["reason"].startswith("impulse storm")
    assert ev["rfi_kind"] is None                      # stored before: its kind is only in its reason
    (q,) = store.quality()
    assert q["masked_fraction"] == 0.05 and q["masked_by_group"] is None
    assert store.occupancy("st-a") == []
    # and the new fields are written and read back
    store.upsert_events([dict(_event(T0 + 60), rfi_kind="impulse_train")])
    store.record_quality([{"station": "st-a", "hour_utc": iso(T0 + 3600), "masked_fraction": 0.1, "gap_s": 0.0,
                           "covered_s": 3600.0, "group_fmin_mhz": 16.0, "group_mhz": 0.25,
                           "masked_by_group": [0.0, None, 0.5]}])
    assert store.events(t0=T0 + 30)[0]["rfi_kind"] == "impulse_train"
    assert store.quality(t0=T0 + 3600)[-1]["masked_by_group"] == [0.0, None, 0.5]
    store.close()
    assert EventStore(path).version == SCHEMA_VERSION  # opening again migrates nothing


def test_learned_occupancy_round_trips_per_channel_grid(tmp_path):
    store = EventStore(tmp_path / "events.sqlite")
    st = {"channels": 4, "fmin_hz": 16e6, "fmax_hz": 24e6, "recent": [0.0, 0.9, 0.1, 0.0],
          "by_hour": [[0.0, 0.8, 0.0, 0.0]] * 24}
    store.save_occupancy("st-a", [st])
    store.save_occupancy("st-a", [dict(st, recent=[0.0, 1.0, 0.0, 0.0])])      # the latest replaces it
    (back,) = store.occupancy("st-a")
    assert back["recent"] == [0.0, 1.0, 0.0, 0.0] and back["by_hour"] == st["by_hour"]
    assert store.occupancy("st-b") == []
