"""The night's events and episodes with their labels as the review server keeps them
between requests, and label histories as the page shows them."""

from __future__ import annotations

import threading

from rxlog.review.night import Night
from rxlog.store import EventStore
from rxlog.timeutil import parse_iso

LABEL_FIELDS = ("event_id", "class", "label", "label_note", "label_who", "label_utc", "label_source")
EPISODE_LABEL_FIELDS = ("episode_id", "class", "label", "label_note", "label_who", "label_utc")


class NightLabels:
    """The night's events and episodes with their current labels, kept between requests.

    Reading the whole night from the store for every request would be wasteful; the rows
    are re-read only when the store changed behind the server's back (a signature of the
    events, episodes and both label tables, one cheap query each). A label saved through
    the server changes exactly one event's row (labels are bound to event ids), or one
    episode's row and its bursts', so only those rows are read again.
    """

    def __init__(self, station: str, t0: float, t1: float):
        self.station, self.t0, self.t1 = station, t0, t1
        self.lock = threading.Lock()
        self.sig = None
        self.rows: dict[str, dict] = {}
        self.episodes: dict[str, dict] = {}

    def _signature(self, store: EventStore) -> tuple:
        labels = store.db.execute("select count(*), coalesce(max(label_id), 0) from labels").fetchone()
        ep_labels = store.db.execute("select count(*), coalesce(max(label_id), 0) from episode_labels").fetchone()
        events = store.db.execute("select count(*), max(detected_utc) from events where station = ?",
                                  [self.station]).fetchone()
        episodes = store.db.execute("select count(*), max(end_utc), sum(n_events) from episodes where station = ?",
                                    [self.station]).fetchone()
        return tuple(labels) + tuple(ep_labels) + tuple(events) + tuple(episodes)

    def _fresh(self, store: EventStore):
        sig = self._signature(store)
        if sig != self.sig:
            self.rows = {r["event_id"]: r for r in store.events(self.t0, self.t1, station=self.station)}
            self.episodes = {r["episode_id"]: r for r in store.episodes_with_context(
                self.t0, self.t1, station=self.station, starting=True)}
            self.sig = sig

    def all(self, store: EventStore) -> list[dict]:
        with self.lock:
            self._fresh(store)
            return list(self.rows.values())

    def all_episodes(self, store: EventStore) -> list[dict]:
        with self.lock:
            self._fresh(store)
            return list(self.episodes.values())

    def get(self, store: EventStore, event_id: str) -> dict | None:
        with self.lock:
            self._fresh(store)
            return self.rows.get(event_id)

    def get_episode(self, store: EventStore, episode_id: str) -> dict | None:
        with self.lock:
            self._fresh(store)
            return self.episodes.get(episode_id)

    def add_episode_label(self, store: EventStore, episode_id: str, label: str, note: str,
                          who: str) -> tuple[dict, list[dict]] | None:
        """Save an episode label; return the episode's row and its night's bursts' rows as the
        store now sees them (None: not this night's episode)."""
        with self.lock:
            self._fresh(store)
            if episode_id not in self.episodes:
                return None
            store.add_episode_label(episode_id, label, note=note, who=who)
            self.episodes[episode_id] = store.get_episode(episode_id)
            bursts = [b for b in store.episode_bursts(episode_id) if b["event_id"] in self.rows]
            for b in bursts:
                self.rows[b["event_id"]] = b
            self.sig = self._signature(store)
            return self.episodes[episode_id], bursts

    def add_label(self, store: EventStore, event_id: str, label: str, note: str, who: str) -> dict | None:
        """Save a label and return the event's row as the store now sees it (None: not this night's)."""
        with self.lock:
            self._fresh(store)
            if event_id not in self.rows:
                return None
            store.add_label(event_id, label, note=note, who=who)
            self.rows[event_id] = store.get_event(event_id)
            self.sig = self._signature(store)
            return self.rows[event_id]


def history_rows(rows: list[dict], night: Night) -> list[dict]:
    """A label history for the page; ``created_shown`` is the time in the page's own style
    (local, with its zone), which the page's status line uses too."""
    return [{**{k: r.get(k) for k in ("label", "note", "who", "created_utc")},
             "created_shown": night.stamp(parse_iso(r["created_utc"]))} for r in rows]
