"""The event store: one SQLite file (WAL mode) through sqlite-utils.

Tables: stations, segments, events, episodes, labels, episode_labels, quality (hourly
masked fraction and gaps, and the masked fraction per coarse channel group),
mask_occupancy (what the RFI mask learned, per channel grid: carried across restarts of
the logger), health, and schema_version. Detections and human labels are kept apart: a
label belongs to the event it was given to (by event id) for as long as that event
exists. Only when re-running detection replaced the event (a change of thresholds, and
thus of event ids) does the label move, to the new event whose time-frequency box
matches the label's own box best (intersection over union), and only to an event that
carries no label of its own. A label that finds no such event stays in the store as an
orphan, listed by ``orphan_labels`` and tried again at the next re-detection: labels
are never lost and never land on an event a reviewer did not mean.

Episodes (a Jovian storm, a Type III group, a Type IV: one phenomenon, many bursts) are
labelled the same way: an episode label is bound to the episode and moves by the same
rule to the episode that replaced it. An episode's label is its bursts' label too,
except for a burst that carries a label of its own: the burst's own label wins.
"""

from __future__ import annotations

import functools
import json
import math
import sqlite3
import time
from pathlib import Path

import sqlite_utils

from rxlog import boxes
from rxlog.episode_context import episode_context
from rxlog.errors import RxlogError
from rxlog.store_schema import EVENT_COLUMNS, MIGRATIONS, SCHEMA_VERSION
from rxlog.timeutil import iso, parse_iso

CLASSES = ("jovian_l", "jovian_s", "solar_iii", "solar_ii", "solar_iv", "fadeout", "rfi", "unknown")
LABELS = CLASSES + ("noise", "unsure")

# A label whose event was replaced by re-detection moves to the new event whose box
# matches the label's box best, if their intersection over union is at least this. A
# re-detection with other thresholds moves box edges by a few seconds or a few hundred
# kHz (IoU well above 0.5); a burst now swallowed by an event ten times its size (IoU
# below 0.1) is a different detection, and its label waits as an orphan instead.
LABEL_MIN_IOU = 0.3


def make_event_id(station: str, peak_unix: float, fmin_mhz: float, fmax_mhz: float) -> str:
    """A readable id: station, peak time to 0.1 s, centre frequency to 1 kHz."""
    t = iso(peak_unix)  # 2026-12-01T22:10:00.123Z
    stamp = t[:4] + t[5:7] + t[8:10] + "T" + t[11:13] + t[14:16] + t[17:21]
    return f"{station}-{stamp}-{(fmin_mhz + fmax_mhz) / 2:.3f}"


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
        for v in sorted(v for v in MIGRATIONS if v > current):
            with self.db.conn:
                MIGRATIONS[v](self.db)
                if v == 3:          # labels bound to events: the orphans once, by the rule of re-detection
                    reattach_orphans(self.db)
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
        """Insert or update episodes by episode_id; episode labels whose episode is gone try
        the stored episodes again."""
        if episodes:
            with self.db.conn:
                self.db["episodes"].upsert_all(episodes, pk="episode_id", alter=True)
                reattach_episode_orphans(self.db, episodes[0]["station"])

    def replace_events(self, station: str, t0: float, t1: float, events: list[dict],
                       episodes: list[dict] = ()) -> dict:
        """Replace, in one transaction, the detections of ``station`` peaking in [t0, t1).

        Labels of events that keep their id stay where they are; labels of replaced
        events move to the best-matching new event (see the module's docstring), and
        episode labels to the best-matching new episode. Returns ``{"reattached":
        [(label_id, from_id, to_id)...], "orphans": [label rows], "episodes_reattached":
        [...], "episode_orphans": [...]}``.
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
            moved = reattach_orphans(self.db, station)
            moved_episodes = reattach_episode_orphans(self.db, station)
        orphans = [o for o in self.orphan_labels(station) if o["end_utc"] >= a and o["start_utc"] < b]
        episode_orphans = [o for o in self.orphan_episode_labels(station) if o["end_utc"] >= a and o["start_utc"] < b]
        return {"reattached": moved, "orphans": orphans,
                "episodes_reattached": moved_episodes, "episode_orphans": episode_orphans}

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
        """Give each event the latest label that belongs to it (bound by event id); an event
        without one takes its episode's latest label. ``label_source`` says which it is."""
        by_id, by_episode = {}, {}
        for e in events:
            e.update(label=None, label_note=None, label_who=None, label_utc=None, label_source=None)
            by_id[e["event_id"]] = e
            if e.get("episode_id"):
                by_episode.setdefault(e["episode_id"], []).append(e)
        for event_id, label, note, who, created in self._latest_labels("labels", "event_id", list(by_id)):
            by_id[event_id].update(label=label, label_note=note, label_who=who, label_utc=created,
                                   label_source="event")
        for episode_id, label, note, who, created in self._latest_labels("episode_labels", "episode_id",
                                                                         list(by_episode)):
            for e in by_episode[episode_id]:
                if e["label_source"] != "event":
                    e.update(label=label, label_note=note, label_who=who, label_utc=created,
                             label_source="episode")

    def _latest_labels(self, table: str, key: str, ids: list[str]) -> list[tuple]:
        """(id, label, note, who, created_utc) of ``table``'s labels owned by ``ids``, oldest
        first: a caller applying them in order keeps the latest."""
        out = []
        for i in range(0, len(ids), 500):
            part = ids[i:i + 500]
            out.extend(self.db.execute(f"select {key}, label, note, who, created_utc from {table} where {key} in ("
                                       + ",".join("?" * len(part)) + ") order by label_id", part).fetchall())
        return out

    # -- labels ---------------------------------------------------------------------------
    def add_label(self, event_id: str, label: str, note: str = "", who: str = "") -> dict:
        """Label an event. The label keeps the event's time-frequency box, so that if
        re-detection ever replaces the event the label can find its successor."""
        if label not in LABELS:
            raise RxlogError(f"unknown label {label!r}; expected one of {', '.join(LABELS)}")
        ev = self.get_event(event_id)
        row = {"station": ev["station"], "event_id": event_id, "given_event_id": event_id, "label": label,
               "note": note or "", "who": who or "", "created_utc": iso(time.time()),
               "start_utc": ev["start_utc"], "end_utc": ev["end_utc"], "peak_utc": ev["peak_utc"],
               "fmin_mhz": ev["fmin_mhz"], "fmax_mhz": ev["fmax_mhz"], "reattached_utc": None}
        with self.db.conn:
            self.db["labels"].insert(row, pk="label_id")
        return row

    def label_history(self, event_id: str) -> list[dict]:
        """Every label (oldest first) that belongs to this event now."""
        self.get_event(event_id)
        return [dict(r) for r in self.db.query("select * from labels where event_id = ? order by label_id",
                                                [event_id])]

    def orphan_labels(self, station: str | None = None) -> list[dict]:
        """Labels whose event was replaced by re-detection and that found no successor yet."""
        sql = "select * from labels where event_id not in (select event_id from events)"
        args = []
        if station is not None:
            sql += " and station = ?"; args.append(station)
        return [dict(r) for r in self.db.query(sql + " order by label_id", args)]

    # -- quality and health ---------------------------------------------------------------
    def record_quality(self, rows: list[dict]):
        """Hourly data quality rows {station, hour_utc, masked_fraction, gap_s, covered_s,
        and optionally group_fmin_mhz, group_mhz, masked_by_group (a list)} (upsert)."""
        if rows:
            rows = [dict(r, masked_by_group=json.dumps(r["masked_by_group"]))
                    if isinstance(r.get("masked_by_group"), list) else r for r in rows]
            with self.db.conn:
                self.db["quality"].upsert_all(rows, pk=("station", "hour_utc"))

    def quality(self, t0: float | None = None, t1: float | None = None) -> list[dict]:
        where, args = [], []
        if t0 is not None:
            where.append("hour_utc >= ?"); args.append(iso(t0 - 3600))
        if t1 is not None:
            where.append("hour_utc < ?"); args.append(iso(t1))
        sql = "select * from quality" + (" where " + " and ".join(where) if where else "") + " order by hour_utc"
        rows = [dict(r) for r in self.db.query(sql, args)]
        for r in rows:
            if r.get("masked_by_group"):
                r["masked_by_group"] = json.loads(r["masked_by_group"])
        return rows

    # -- what the RFI mask learned ------------------------------------------------------------
    def save_occupancy(self, station: str, states: list[dict]):
        """Keep the RFI mask's occupancy per channel grid (``OnlineDetector.occupancy_state``)."""
        now = iso(time.time())
        rows = [{"station": station, "channels": int(st["channels"]), "fmin_hz": float(st["fmin_hz"]),
                 "fmax_hz": float(st["fmax_hz"]), "updated_utc": now, "recent": json.dumps(st["recent"]),
                 "by_hour": json.dumps(st["by_hour"])} for st in states]
        if rows:
            with self.db.conn:
                self.db["mask_occupancy"].upsert_all(rows, pk=("station", "channels", "fmin_hz", "fmax_hz"))

    def occupancy(self, station: str | None = None) -> list[dict]:
        """The stored occupancy states (newest first), ready for ``OnlineDetector.load_occupancy``."""
        sql, args = "select * from mask_occupancy", []
        if station is not None:
            sql += " where station = ?"; args.append(station)
        out = []
        for r in self.db.query(sql + " order by updated_utc desc", args):
            r = dict(r)
            r["recent"], r["by_hour"] = json.loads(r["recent"]), json.loads(r["by_hour"])
            out.append(r)
        return out

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

    # -- episodes -------------------------------------------------------------------------
    def episodes(self, t0: float | None = None, t1: float | None = None, station: str | None = None,
                 episode_id: str | None = None, starting: bool = False) -> list[dict]:
        """Stored episodes overlapping [t0, t1) (``starting``: starting in it), oldest first,
        as the detector wrote them."""
        where, args = [], []
        if t0 is not None:
            where.append("start_utc >= ?" if starting else "end_utc >= ?"); args.append(iso(t0))
        if t1 is not None:
            where.append("start_utc < ?"); args.append(iso(t1))
        if station is not None:
            where.append("station = ?"); args.append(station)
        if episode_id is not None:
            where.append("episode_id = ?"); args.append(episode_id)
        sql = "select * from episodes" + (" where " + " and ".join(where) if where else "") + " order by start_utc"
        return [dict(r) for r in self.db.query(sql, args)]

    def episodes_with_context(self, t0: float | None = None, t1: float | None = None,
                              station: str | None = None, include_rfi: bool = True,
                              labelled_only: bool = False, starting: bool = False,
                              episode_id: str | None = None) -> list[dict]:
        """Episodes overlapping [t0, t1) (``starting``: starting in it), oldest first, each with
        its context from its member events (rxlog.store.episode_context), ``n_bursts``,
        confidence and reason (from its bursts where the detector gave none) and its latest
        label as label/label_note/label_who/label_utc."""
        rows = self.episodes(t0, t1, station, episode_id, starting)
        if not include_rfi:
            rows = [r for r in rows if r["class"] != "rfi"]
        members = self._members([r["episode_id"] for r in rows])
        labels = {eid: (label, note, who, created) for eid, label, note, who, created
                  in self._latest_labels("episode_labels", "episode_id", [r["episode_id"] for r in rows])}
        for r in rows:
            r.update(episode_context(r, members.get(r["episode_id"], [])))
            label, note, who, created = labels.get(r["episode_id"], (None,) * 4)
            r.update(label=label, label_note=note, label_who=who, label_utc=created)
        if labelled_only:
            rows = [r for r in rows if r["label"] is not None]
        return rows

    def _members(self, episode_ids: list[str]) -> dict[str, list[dict]]:
        """The member events of episodes (the columns their context is made from), by episode."""
        cols = ("episode_id", "class", "confidence", "reason", "start_utc", "end_utc", "cml3_deg", "io_phase_deg",
                "cml3_start_deg", "cml3_end_deg", "io_phase_start_deg", "io_phase_end_deg", "source_region",
                "sun_alt_deg", "jupiter_alt_deg")
        out: dict[str, list[dict]] = {}
        select = ", ".join(f'"{c}"' for c in cols)
        for i in range(0, len(episode_ids), 500):
            part = episode_ids[i:i + 500]
            for row in self.db.execute(f"select {select} from events where episode_id in ("
                                       + ",".join("?" * len(part)) + ")", part).fetchall():
                out.setdefault(row[0], []).append(dict(zip(cols, row)))
        return out

    def get_episode(self, episode_id: str) -> dict:
        rows = self.episodes_with_context(episode_id=episode_id)
        if not rows:
            raise RxlogError(f"no episode {episode_id!r} in {self.path}")
        return rows[0]

    def episode_bursts(self, episode_id: str) -> list[dict]:
        """The episode's bursts (oldest first), each with its label (its own, or the episode's)."""
        rows = [dict(r) for r in self.db.query("select * from events where episode_id = ? order by peak_utc",
                                                [episode_id])]
        self._attach_labels(rows)
        return rows

    def add_episode_label(self, episode_id: str, label: str, note: str = "", who: str = "") -> dict:
        """Label an episode, and with it those of its bursts that carry no label of their own.
        The label keeps the episode's box, so that re-detection can find its successor."""
        if label not in LABELS:
            raise RxlogError(f"unknown label {label!r}; expected one of {', '.join(LABELS)}")
        ep = self.get_episode(episode_id)
        row = {"station": ep["station"], "episode_id": episode_id, "given_episode_id": episode_id,
               "label": label, "note": note or "", "who": who or "", "created_utc": iso(time.time()),
               "start_utc": ep["start_utc"], "end_utc": ep["end_utc"], "fmin_mhz": ep["fmin_mhz"],
               "fmax_mhz": ep["fmax_mhz"], "reattached_utc": None}
        with self.db.conn:
            self.db["episode_labels"].insert(row, pk="label_id")
        return row

    def episode_label_history(self, episode_id: str) -> list[dict]:
        """Every label (oldest first) that belongs to this episode now."""
        self.get_episode(episode_id)
        return [dict(r) for r in self.db.query("select * from episode_labels where episode_id = ? "
                                                "order by label_id", [episode_id])]

    def orphan_episode_labels(self, station: str | None = None) -> list[dict]:
        """Episode labels whose episode was replaced by re-detection and that found no successor yet."""
        sql = "select * from episode_labels where episode_id not in (select episode_id from episodes)"
        args = []
        if station is not None:
            sql += " and station = ?"; args.append(station)
        return [dict(r) for r in self.db.query(sql + " order by label_id", args)]


@functools.lru_cache(maxsize=65536)
def _t(text: str) -> float:
    return parse_iso(text)


def _box(row: dict) -> tuple[float, float, float, float]:
    """A row's time-frequency box; a zero-length box still has extent (1 s and 10 kHz)."""
    t0, t1, f0, f1 = _t(row["start_utc"]), _t(row["end_utc"]), row["fmin_mhz"], row["fmax_mhz"]
    return t0, max(t1, t0 + 1.0), f0, max(f1, f0 + 0.01)


def box_iou(a: dict, b: dict) -> float:
    """Intersection over union of two rows' time-frequency boxes (0..1)."""
    return boxes.box_iou(_box(a), _box(b))


def reattach_orphans(db: sqlite_utils.Database, station: str | None = None) -> list[tuple[int, str, str]]:
    """Move labels whose event no longer exists to the event that replaced it.

    The labels of one vanished event move together, judged by the box of the latest of
    them. Candidates are events of the same station that carry no label of their own;
    pairs are taken greedily by IoU (at least LABEL_MIN_IOU), ties by the nearer peak, so
    each vanished event gets at most one successor and no successor two predecessors.
    Runs inside the caller's transaction; returns (label_id, from_event, to_event).
    """
    return _reattach(db, station, "labels", "events", "event_id")


def reattach_episode_orphans(db: sqlite_utils.Database, station: str | None = None) -> list[tuple[int, str, str]]:
    """Move episode labels whose episode no longer exists to the episode that replaced it,
    by the rule of ``reattach_orphans`` (ties by the nearer start). Runs inside the
    caller's transaction; returns (label_id, from_episode, to_episode)."""
    return _reattach(db, station, "episode_labels", "episodes", "episode_id")


def _reattach(db, station, labels: str, owners: str, key: str) -> list[tuple[int, str, str]]:
    """``reattach_orphans`` for labels in table ``labels`` bound by ``key`` to rows of ``owners``."""
    sql = f"select * from {labels} where {key} not in (select {key} from {owners})"
    args = []
    if station is not None:
        sql += " and station = ?"; args.append(station)
    groups: dict[str, list[dict]] = {}
    for r in db.query(sql + " order by label_id", args):
        groups.setdefault(r[key], []).append(dict(r))
    if not groups:
        return []
    tie = "peak_utc" if owners == "events" else "start_utc"   # events: the nearer peak; episodes: start
    pairs = []
    for old_id, group in groups.items():
        lab = group[-1]
        near = db.query(
            f"select {key}, start_utc, end_utc, {tie} as tie, fmin_mhz, fmax_mhz from {owners} "
            f"where station = ? and start_utc <= ? and end_utc >= ? and {key} not in (select {key} from {labels})",
            [lab["station"], iso(_box(lab)[1]), lab["start_utc"]])
        for e in near:
            iou = box_iou(lab, e)
            if iou >= LABEL_MIN_IOU:
                d = abs(_t(e["tie"]) - _t(lab[tie])) if lab.get(tie) else math.inf
                pairs.append((-iou, d, e[key], old_id))
    moved, taken, done = [], set(), set()
    now = iso(time.time())
    for _, _, new_id, old_id in sorted(pairs):
        if new_id in taken or old_id in done:
            continue
        taken.add(new_id)
        done.add(old_id)
        for lab in groups[old_id]:
            db.execute(f"update {labels} set {key} = ?, reattached_utc = ? where label_id = ?",
                       [new_id, now, lab["label_id"]])
            moved.append((lab["label_id"], old_id, new_id))
    return moved
