"""Episodes: events of one class less than ``episode_gap_s`` apart, grouped (a Jovian
storm, a Type III group), so a reviewer sees one story instead of a list."""

from __future__ import annotations

from rxlog.timeutil import iso, parse_iso


class Episodes:
    """Episodes built as events arrive (in peak order within each batch). An episode
    stays open until no later event can join it, allowing for the slow path's delay
    (``slow_window_s``); ``pop`` hands out the episodes changed since the last call."""

    def __init__(self, gap_s: float, slow_window_s: float):
        self.gap_s, self.slow_window_s = gap_s, slow_window_s
        self.by_id: dict[str, dict] = {}
        self.open: list[dict] = []        # open episodes, with their span as _t0, _t1
        self.touched: set[str] = set()

    def assign(self, e: dict):
        """Put event ``e`` into an open episode of its class that it reaches within the
        gap, or a new one, and set its ``episode_id``."""
        t0, t1 = parse_iso(e["start_utc"]), parse_iso(e["end_utc"])
        gap = self.gap_s
        # episodes are closed once nothing later can join them (allowing for the slow path's delay)
        horizon = t0 - gap - self.slow_window_s
        still = []
        for ep in self.open:
            if ep["_t1"] < horizon:
                self.touched.add(ep["episode_id"])
            else:
                still.append(ep)
        self.open = still
        for ep in self.open:
            if ep["class"] == e["class"] and ep["_t0"] - gap <= t1 and t0 <= ep["_t1"] + gap:
                break
        else:
            ep = {"episode_id": "ep-" + e["event_id"], "station": e["station"], "class": e["class"],
                  "_t0": t0, "_t1": t1, "n_events": 0, "fmin_mhz": e["fmin_mhz"], "fmax_mhz": e["fmax_mhz"],
                  "peak_excess_db": e["peak_excess_db"]}
            self.open.append(ep)
        ep["_t0"], ep["_t1"] = min(ep["_t0"], t0), max(ep["_t1"], t1)
        ep["n_events"] += 1
        ep["fmin_mhz"] = min(ep["fmin_mhz"], e["fmin_mhz"])
        ep["fmax_mhz"] = max(ep["fmax_mhz"], e["fmax_mhz"])
        if abs(e["peak_excess_db"] or 0) > abs(ep["peak_excess_db"] or 0):
            ep["peak_excess_db"] = e["peak_excess_db"]
        ep["start_utc"], ep["end_utc"] = iso(ep["_t0"]), iso(ep["_t1"])
        self.by_id[ep["episode_id"]] = {k: v for k, v in ep.items() if not k.startswith("_")}
        self.touched.add(ep["episode_id"])
        e["episode_id"] = ep["episode_id"]

    def close_all(self):
        """The end of the data: every open episode is final."""
        for ep in self.open:
            self.touched.add(ep["episode_id"])
        self.open = []

    def pop(self) -> list[dict]:
        """The episodes changed since the last call; closed ones are then forgotten."""
        eps = [dict(self.by_id[i]) for i in sorted(self.touched)]
        self.touched.clear()
        still = {ep["episode_id"] for ep in self.open}
        for k in [k for k in self.by_id if k not in still]:     # closed and handed out: forget
            del self.by_id[k]
        return eps
