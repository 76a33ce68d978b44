"""The event store: one SQLite file (WAL mode) through sqlite-utils.

Tables: stations, segments, events, episodes, labels, quality (hourly masked fraction
and gaps), health, and schema_version. Detections and human labels are kept apart:
re-running detection replaces events, while labels stay and are re-attached to
whichever event overlaps them best in time and frequency, so a change of thresholds
(and thus of event ids) never loses a label.
"""

from __future__ import annotations

import functools
import sqlite3
import time
from pathlib import Path

import sqlite_utils

from rxlog.errors import RxlogError
from rxlog.timeutil import iso, parse_iso

SCHEMA_VERSION = 2

CLASSES = ("jovian_l", "jovian_s", "solar_iii", "solar_ii", "solar_iv", "fadeout", "rfi", "unknown")
LABELS = CLASSES + ("noise", "unsure")

# Event columns and their SQLite types; the order is the one listings and exports use.
EVENT_COLUMNS = {
    "event_id": str, "station": str, "episode_id": str,
    "start_utc": str, "end_utc": str, "peak_utc": str,
    "fmin_mhz": float, "fmax_mhz": float,
    "peak_excess_db": float, "snr": float, "integrated_excess": float,
    "drift_mhz_s": float, "drift_err_mhz_s": float,
    "duration_s": float, "bandwidth_mhz": float,
    "class": str, "confidence": float, "reason": str,
    "cml3_deg": float, "io_phase_deg": float,
    "cml3_start_deg": float, "cml3_end_deg": float,
    "io_phase_start_deg": float, "io_phase_end_deg": float,
    "source_region": str, "jupiter_alt_deg": float, "sun_alt_deg": float,
    "cutout_path": str,
    "detected_utc": str,
}

# A label belongs to the event whose time-frequency box overlaps it best, if the
# overlap covers at least this fraction of the smaller of the two boxes.
LABEL_MIN_OVERLAP = 0.3


def make_event_id(station: str, peak_unix: float, fmin_mhz: float, fmax_mhz: float) -> str:
    """A readable id: station, peak time to 0.1 s, centre frequency to 1 kHz."""
    t = iso(peak_unix)  # 2026-12-01T22:10:00.123Z
    stamp = t[:4] + t[5:7] + t[8:10] + "T" + t[11:13] + t[14:16] + t[17:21]
    return f"{station}-{stamp}-{(fmin_mhz + fmax_mhz) / 2:.3f}"


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
                                                                  "io_phase_start_deg", "io_phase_end_deg")}
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


MIGRATIONS = {1: _v1, 2: _v2}  # version -> function bringing the store from version-1 to it


class EventStore:
    """Open (creating or migrating as needed) the event store at ``path``."""

    def __init__(self, path: str | Path):
        self.path = Path(path)
        self.path.parent.mkdir(parents=True, exist_ok=True)
        try:
            conn = sqlite3.connect(str(self.path), timeout=30)
            self.db = sqlite_utils.Database(conn)
            self.db.execute("PRAGMA journal_mode=WAL")
            self.db.execute("PRAGMA synchronous=NORMAL")
            self.migrate()
        except sqlite3.DatabaseError as e:
            raise RxlogError(f"{self.path}: not a usable rxlog event store ({e})") from None

    # -- schema ---------------------------------------------------------------------------
    @property
    def version(self) -> int:
        if "schema_version" not in self.db.table_names():
            return 0
        row = self.db.execute("select max(version) from schema_version").fetchone()
        return row[0] or 0

    def migrate(self) -> int:
        """Apply forward migrations, each in its own transaction; return the final version."""
        current = self.version
        if current > SCHEMA_VERSION:
            raise RxlogError(f"{self.path}: event store schema version {current} is newer than this "
                             f"rxlog understands ({SCHEMA_VERSION}); upgrade rxlog")
        for v in range(current + 1, SCHEMA_VERSION + 1):
            with self.db.conn:
                MIGRATIONS[v](self.db)
                self.db["schema_version"].insert({"version": v, "applied_utc": iso(time.time())},
                                                 pk="version", replace=True)
        return self.version

    def close(self):
        self.db.conn.close()

    # -- stations and segments ------------------------------------------------------------
    def upsert_station(self, station: dict):
        row = {k: station.get(k) for k in ("name", "latitude_deg", "longitude_deg", "elevation_m",
                                            "antenna", "operator_contact")}
        row["updated_utc"] = iso(time.time())
        with self.db.conn:
            self.db["stations"].upsert(row, pk="name")

    def upsert_segment(self, row: dict):
        with self.db.conn:
            self.db["segments"].upsert(row, pk="segment_id", alter=True)

    # -- events ---------------------------------------------------------------------------
    @staticmethod
    def _event_row(ev: dict) -> dict:
        row = {k: ev.get(k) for k in EVENT_COLUMNS}
        if not row["event_id"] or not row["station"]:
            raise ValueError("an event needs event_id and station")
        row["detected_utc"] = row["detected_utc"] or iso(time.time())
        return row

    def upsert_events(self, events: list[dict]):
        """Insert or update events by event_id (re-processing never duplicates). An update
        without a cutout keeps the cutout the stored event already has."""
        rows = [self._event_row(e) for e in events]
        if rows:
            bare = [r["event_id"] for r in rows if not r.get("cutout_path")]
            had = {}
            for i in range(0, len(bare), 500):
                part = bare[i:i + 500]
                q = ("select event_id, cutout_path from events where cutout_path is not null and event_id in ("
                     + ",".join("?" * len(part)) + ")")
                had.update(dict(self.db.execute(q, part).fetchall()))
            for r in rows:
                if not r.get("cutout_path") and r["event_id"] in had:
                    r["cutout_path"] = had[r["event_id"]]
            with self.db.conn:
                self.db["events"].upsert_all(rows, pk="event_id")

    def upsert_episodes(self, episodes: list[dict]):
        if episodes:
            with self.db.conn:
                self.db["episodes"].upsert_all(episodes, pk="episode_id", alter=True)

    def replace_events(self, station: str, t0: float, t1: float, events: list[dict],
                       episodes: list[dict] = ()):
        """Replace, in one transaction, the detections of ``station`` peaking in [t0, t1).

        Labels are untouched; they re-attach to the new events by overlap.
        """
        a, b = iso(t0), iso(t1)
        rows = [self._event_row(e) for e in events]
        with self.db.conn:
            self.db.execute("delete from events where station = ? and peak_utc >= ? and peak_utc < ?",
                            [station, a, b])
            self.db.execute("delete from episodes where station = ? and start_utc >= ? and start_utc < ?",
                            [station, a, b])
            if rows:
                self.db["events"].insert_all(rows, pk="event_id", replace=True)
            if episodes:
                self.db["episodes"].insert_all(list(episodes), pk="episode_id", replace=True, alter=True)

    def get_event(self, event_id: str) -> dict:
        rows = self.events(event_id=event_id)
        if not rows:
            raise RxlogError(f"no event {event_id!r} in {self.path}")
        return rows[0]

    def events(self, t0: float | None = None, t1: float | None = None, cls: str | None = None,
               unlabelled: bool = False, include_rfi: bool = True, labelled_only: bool = False,
               station: str | None = None, event_id: str | None = None) -> list[dict]:
        """Events (oldest first) with their current label attached as label/label_note/label_who/label_utc."""
        where, args = [], []
        if t0 is not None:
            where.append("peak_utc >= ?"); args.append(iso(t0))
        if t1 is not None:
            where.append("peak_utc < ?"); args.append(iso(t1))
        if cls is not None:
            where.append('"class" = ?'); args.append(cls)
        if not include_rfi:
            where.append('"class" != ?'); args.append("rfi")
        if station is not None:
            where.append("station = ?"); args.append(station)
        if event_id is not None:
            where.append("event_id = ?"); args.append(event_id)
        sql = "select * from events" + (" where " + " and ".join(where) if where else "") + " order by peak_utc"
        rows = [dict(r) for r in self.db.query(sql, args)]
        self._attach_labels(rows)
        if unlabelled:
            rows = [r for r in rows if r["label"] is None]
        if labelled_only:
            rows = [r for r in rows if r["label"] is not None]
        return rows

    def _attach_labels(self, events: list[dict]):
        """Give each event the latest label that belongs to it (best time-frequency overlap).

        The owner of a label is chosen among all events of the store near it, not just the
        ones asked for, so a listing filtered by class shows the same labels. Two queries
        per call (labels in range, events near them); boxes are parsed once.
        """
        for e in events:
            e.update(label=None, label_note=None, label_who=None, label_utc=None)
        if not events:
            return
        lo = min(e["start_utc"] for e in events)
        hi = max(e["end_utc"] for e in events)
        labels = [dict(r) for r in self.db.query(
            "select * from labels where start_utc <= ? and end_utc >= ? order by label_id", [hi, lo])]
        if not labels:
            return
        lab_lo = min(lab["start_utc"] for lab in labels)
        lab_hi = max(lab["end_utc"] for lab in labels)
        asked = {e["event_id"]: e for e in events}
        near = [asked.get(r["event_id"], r) for r in (dict(r) for r in self.db.query(
            "select event_id, station, start_utc, end_utc, fmin_mhz, fmax_mhz from events "
            "where start_utc <= ? and end_utc >= ?", [lab_hi, lab_lo]))]
        for lab in labels:   # later labels overwrite earlier ones: the latest wins
            owner = _best_overlap(lab, near)
            if owner is not None and owner["event_id"] in asked:
                asked[owner["event_id"]].update(label=lab["label"], label_note=lab["note"],
                                                label_who=lab["who"], label_utc=lab["created_utc"])

    # -- labels ---------------------------------------------------------------------------
    def add_label(self, event_id: str, label: str, note: str = "", who: str = "") -> dict:
        """Label an event; the label keeps the event's time-frequency box so it survives re-detection."""
        if label not in LABELS:
            raise RxlogError(f"unknown label {label!r}; expected one of {', '.join(LABELS)}")
        ev = self.get_event(event_id)
        row = {"station": ev["station"], "event_id": event_id, "label": label, "note": note or "",
               "who": who or "", "created_utc": iso(time.time()), "start_utc": ev["start_utc"],
               "end_utc": ev["end_utc"], "fmin_mhz": ev["fmin_mhz"], "fmax_mhz": ev["fmax_mhz"]}
        with self.db.conn:
            self.db["labels"].insert(row, pk="label_id")
        return row

    def label_history(self, event_id: str) -> list[dict]:
        """Every label (oldest first) that belongs to this event now."""
        ev = self.get_event(event_id)
        labels = [dict(r) for r in self.db.query(
            "select * from labels where station = ? and start_utc <= ? and end_utc >= ? order by label_id",
            [ev["station"], ev["end_utc"], ev["start_utc"]])]
        if not labels:
            return []
        near = [dict(r) for r in self.db.query(
            "select event_id, station, start_utc, end_utc, fmin_mhz, fmax_mhz from events "
            "where station = ? and start_utc <= ? and end_utc >= ?",
            [ev["station"], max(lab["end_utc"] for lab in labels), min(lab["start_utc"] for lab in labels)])]
        return [lab for lab in labels if (o := _best_overlap(lab, near)) is not None and o["event_id"] == event_id]

    # -- quality and health ---------------------------------------------------------------
    def record_quality(self, rows: list[dict]):
        """Hourly data quality rows {station, hour_utc, masked_fraction, gap_s, covered_s} (upsert)."""
        if rows:
            with self.db.conn:
                self.db["quality"].upsert_all(rows, pk=("station", "hour_utc"))

    def quality(self, t0: float | None = None, t1: float | None = None) -> list[dict]:
        where, args = [], []
        if t0 is not None:
            where.append("hour_utc >= ?"); args.append(iso(t0 - 3600))
        if t1 is not None:
            where.append("hour_utc < ?"); args.append(iso(t1))
        sql = "select * from quality" + (" where " + " and ".join(where) if where else "") + " order by hour_utc"
        return [dict(r) for r in self.db.query(sql, args)]

    def record_health(self, row: dict):
        with self.db.conn:
            self.db["health"].upsert(row, pk=("station", "time_utc"), alter=True)

    def latest_health(self, station: str | None = None) -> dict | None:
        sql, args = "select * from health", []
        if station:
            sql += " where station = ?"; args.append(station)
        rows = list(self.db.query(sql + " order by time_utc desc limit 1", args))
        return dict(rows[0]) if rows else None

    def health(self, t0: float | None = None, t1: float | None = None) -> list[dict]:
        where, args = [], []
        if t0 is not None:
            where.append("time_utc >= ?"); args.append(iso(t0))
        if t1 is not None:
            where.append("time_utc < ?"); args.append(iso(t1))
        sql = "select * from health" + (" where " + " and ".join(where) if where else "") + " order by time_utc"
        return [dict(r) for r in self.db.query(sql, args)]

    def episodes(self, t0: float | None = None, t1: float | None = None) -> list[dict]:
        where, args = [], []
        if t0 is not None:
            where.append("end_utc >= ?"); args.append(iso(t0))
        if t1 is not None:
            where.append("start_utc < ?"); args.append(iso(t1))
        sql = "select * from episodes" + (" where " + " and ".join(where) if where else "") + " order by start_utc"
        return [dict(r) for r in self.db.query(sql, args)]


@functools.lru_cache(maxsize=65536)
def _t(text: str) -> float:
    return parse_iso(text)


def _box(row: dict) -> tuple[float, float, float, float]:
    return _t(row["start_utc"]), _t(row["end_utc"]), row["fmin_mhz"], row["fmax_mhz"]


def _overlap_fraction(a: dict, b: dict) -> float:
    """Overlap area of two time-frequency boxes over the smaller box's area (0..1)."""
    a0, a1, af0, af1 = _box(a)
    b0, b1, bf0, bf1 = _box(b)
    # A zero-length box still has extent: give it 1 s and 10 kHz.
    a1, b1 = max(a1, a0 + 1.0), max(b1, b0 + 1.0)
    af1, bf1 = max(af1, af0 + 0.01), max(bf1, bf0 + 0.01)
    dt = min(a1, b1) - max(a0, b0)
    df = min(af1, bf1) - max(af0, bf0)
    if dt <= 0 or df <= 0:
        return 0.0
    smaller = min((a1 - a0) * (af1 - af0), (b1 - b0) * (bf1 - bf0))
    return dt * df / smaller


def _best_overlap(label: dict, events: list[dict]) -> dict | None:
    best, score = None, LABEL_MIN_OVERLAP
    for e in events:
        if e["station"] != label["station"]:
            continue
        f = _overlap_fraction(label, e)
        if f >= score:
            best, score = e, f
    return best
