"""The event store's tables and how an older store is brought up to date.

``MIGRATIONS`` maps each schema version to the function that brings a store from the
version before it; ``rxlog.store.EventStore`` applies those above a store's version in
increasing order, inside one transaction each, so an existing database is migrated in
place and a newer one than rxlog understands is refused.
"""

from __future__ import annotations

import sqlite_utils

# Event columns and their SQLite types; the order is the one listings and exports use.
EVENT_COLUMNS = {
    "event_id": str, "station": str, "episode_id": str,
    "start_utc": str, "end_utc": str, "peak_utc": str,
    "fmin_mhz": float, "fmax_mhz": float,
    "peak_excess_db": float, "snr": float, "integrated_excess": float,
    "drift_mhz_s": float, "drift_err_mhz_s": float,
    "duration_s": float, "bandwidth_mhz": float,
    "class": str, "confidence": float, "reason": str, "rfi_kind": str,
    "cml3_deg": float, "io_phase_deg": float,
    "cml3_start_deg": float, "cml3_end_deg": float,
    "io_phase_start_deg": float, "io_phase_end_deg": float,
    "source_region": str, "jupiter_alt_deg": float, "sun_alt_deg": float,
    "cutout_path": str,
    "detected_utc": str,
}

# Episode columns added in version 5 (the detector hands them out; older stores lack them).
EPISODE_EXTRA_COLUMNS = {"confidence": float, "reason": str, "sequence_id": str, "peak_excess_db": float}


def _v1(db: sqlite_utils.Database):
    db["stations"].create({"name": str, "latitude_deg": float, "longitude_deg": float,
                           "elevation_m": float, "antenna": str, "operator_contact": str,
                           "updated_utc": str}, pk="name", if_not_exists=True)
    db["segments"].create({"segment_id": str, "station": str, "start_utc": str, "end_utc": str,
                           "center_hz": float, "rate_hz": float, "gain_db": float,
                           "channels": int, "fmin_mhz": float, "fmax_mhz": float,
                           "cadence_s": float, "settings": str},
                          pk="segment_id", if_not_exists=True)
    cols = {k: v for k, v in EVENT_COLUMNS.items() if k not in ("cml3_start_deg", "cml3_end_deg",
                                                                  "io_phase_start_deg", "io_phase_end_deg",
                                                                  "rfi_kind")}
    db["events"].create(cols, pk="event_id", if_not_exists=True)
    db["events"].create_index(["station", "peak_utc"], if_not_exists=True)
    db["episodes"].create({"episode_id": str, "station": str, "start_utc": str, "end_utc": str,
                           "class": str, "n_events": int, "fmin_mhz": float, "fmax_mhz": float},
                          pk="episode_id", if_not_exists=True)
    db["labels"].create({"label_id": int, "station": str, "event_id": str, "label": str, "note": str,
                         "who": str, "created_utc": str, "start_utc": str, "end_utc": str,
                         "fmin_mhz": float, "fmax_mhz": float}, pk="label_id", if_not_exists=True)
    db["labels"].create_index(["station", "start_utc"], if_not_exists=True)
    db["quality"].create({"station": str, "hour_utc": str, "masked_fraction": float,
                          "gap_s": float, "covered_s": float}, pk=("station", "hour_utc"),
                         if_not_exists=True)
    db["health"].create({"station": str, "time_utc": str, "samples_received": int,
                         "samples_dropped": int, "queue_depth": int, "cpu_percent": float,
                         "disk_free_mb": float, "clock_sync": str, "receiver_state": str,
                         "note": str}, pk=("station", "time_utc"), if_not_exists=True)


def _v2(db: sqlite_utils.Database):
    """Version 2 keeps CML and Io phase at event start and end beside the peak values."""
    existing = db["events"].columns_dict
    for col in ("cml3_start_deg", "cml3_end_deg", "io_phase_start_deg", "io_phase_end_deg"):
        if col not in existing:
            db["events"].add_column(col, float)


def _v3(db: sqlite_utils.Database):
    """Version 3 binds labels to events by id: ``given_event_id`` keeps the event a reviewer
    labelled, ``event_id`` is the event that owns the label now, ``peak_utc`` breaks ties
    between identical boxes and ``reattached_utc`` says when re-detection moved it. Labels
    whose event is gone (earlier versions re-attached them by overlap at every read) are
    bound once, right after this step, by the rule re-detection uses (``rxlog.store``'s
    ``reattach_orphans``, which the store runs when it brings a store to version 3)."""
    existing = db["labels"].columns_dict
    for col, kind in (("given_event_id", str), ("peak_utc", str), ("reattached_utc", str)):
        if col not in existing:
            db["labels"].add_column(col, kind)
    db.execute("update labels set given_event_id = event_id where given_event_id is null")
    db.execute("update labels set peak_utc = (select e.peak_utc from events e where e.event_id = labels.event_id) "
               "where peak_utc is null")
    db["labels"].create_index(["event_id"], if_not_exists=True)


def _v4(db: sqlite_utils.Database):
    """Version 4 names the kind of each interference event (``events.rfi_kind``: impulse,
    impulse_train, narrowband_burst, switched_broadband, sweep, carrier, broadband_noise,
    non_gaussian; null for other classes), keeps the hourly masked fraction per coarse
    channel group (``quality.group_fmin_mhz``, ``group_mhz`` and ``masked_by_group``, a JSON
    list of fractions, null where a group had no data) and what the RFI mask learned
    (``mask_occupancy``: per station and channel grid, the recent and hour-of-day occupancy
    of each channel as JSON lists). Interference events stored before say their kind only
    in their reason; they keep a null kind."""
    if "rfi_kind" not in db["events"].columns_dict:
        db["events"].add_column("rfi_kind", str)
    existing = db["quality"].columns_dict
    for col, kind in (("group_fmin_mhz", float), ("group_mhz", float), ("masked_by_group", str)):
        if col not in existing:
            db["quality"].add_column(col, kind)
    db["mask_occupancy"].create({"station": str, "channels": int, "fmin_hz": float, "fmax_hz": float,
                                 "updated_utc": str, "recent": str, "by_hour": str},
                                pk=("station", "channels", "fmin_hz", "fmax_hz"), if_not_exists=True)


def _v5(db: sqlite_utils.Database):
    """Version 5 makes episodes the unit of review: their class confidence, one-line reason,
    flare sequence and peak excess are kept beside the span and band, the bursts of an
    episode are found by an index, and reviewers' episode labels get their own table
    (bound to the episode, with its box for reattachment, as event labels are)."""
    have = db["episodes"].columns_dict
    for col, kind in EPISODE_EXTRA_COLUMNS.items():
        if col not in have:
            db["episodes"].add_column(col, kind)
    db["events"].create_index(["episode_id"], if_not_exists=True)
    db["episodes"].create_index(["station", "start_utc"], if_not_exists=True)
    db["episode_labels"].create({"label_id": int, "station": str, "episode_id": str, "given_episode_id": str,
                                 "label": str, "note": str, "who": str, "created_utc": str,
                                 "start_utc": str, "end_utc": str, "fmin_mhz": float, "fmax_mhz": float,
                                 "reattached_utc": str}, pk="label_id", if_not_exists=True)
    db["episode_labels"].create_index(["episode_id"], if_not_exists=True)


# Version -> function bringing the store to that version, applied in increasing order.
MIGRATIONS = {1: _v1, 2: _v2, 3: _v3, 4: _v4, 5: _v5}
SCHEMA_VERSION = max(MIGRATIONS)
