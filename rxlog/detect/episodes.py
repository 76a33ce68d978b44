"""Episodes: one per physical phenomenon -- a Jovian storm (its L-bursts and its slow
envelope), a Type III group, a Type II, a Type IV, a fadeout, an unexplained event, a
stretch of interference -- so a reviewer sees a handful of stories instead of a list.

Events join an episode of their family (``family``) that they reach within
``episode_gap_s``. An episode is decided and handed out once nothing can join it any
more: the slow path reports long events half a slow window late, so the detector tells
``close_before`` how far every path has got (``OnlineDetector``). Deciding a closed
episode is collective, on all its events at once:

* a Jovian storm needs STORM_MIN_EVENTS bursts or a slow envelope; fewer bursts are an
  unexplained event, or interference when an impulse storm surrounds them (a blob the
  impulse test missed, not a storm);
* a band-wide dip that starts as a Type IV ends is the baseline's return, not a fadeout;
* a flare's episodes (Type III group, Type II, Type IV, fadeout) that start within
  FLARE_LINK_S of each other share a ``sequence_id``. Linking can reach an episode handed
  out earlier; it is handed out again with its sequence.

Episode records carry episode_id, station, class, confidence, reason (one line),
start_utc, end_utc, fmin_mhz, fmax_mhz, n_events, peak_excess_db and sequence_id (None
outside a sequence).
"""

from __future__ import annotations

from rxlog.timeutil import iso, parse_iso

# Event classes that make one kind of phenomenon (S- and L-bursts of one Jovian storm).
FAMILY = {"jovian_l": "jovian_l", "jovian_s": "jovian_l"}
SOLAR = ("solar_iii", "solar_ii", "solar_iv", "fadeout")
# A storm is a sequence of many L-bursts over minutes to hours (../shared/domain.md); one
# or two bursts do not make one. rxlog's own setting (common practice: a reviewer calls
# a storm from several bursts or a visible envelope).
STORM_MIN_EVENTS = 3
# A flare's bursts start within minutes of each other: the Type III group in the impulsive
# phase, a Type II some minutes later as the shock forms, a Type IV during or after it,
# and a fadeout with the X-ray rise (Dulk 1985, ARA&A 23, 169, reviews the sequence;
# the window is common practice, from memory).
FLARE_LINK_S = 20 * 60.0
# A Type II lane lasts minutes (5-20 min at 16-24 MHz; ../shared/domain.md, after Nelson
# & Melrose 1985, from memory), often in pieces: one drifting piece shorter than this,
# alone, is not called a Type II.
TYPE2_MIN_S = 180.0
# A dip starting this soon after a Type IV's end follows the continuum's decay.
AFTER_IV_S = 5 * 60.0
ROUND = {"fmin_mhz": 4, "fmax_mhz": 4, "peak_excess_db": 3}


def family(cls: str) -> str:
    return FAMILY.get(cls, cls)


class Episodes:
    """Episodes built as events arrive (``assign``), decided and handed out once closed
    (``close_before``, ``close_all``, then ``pop``). Closed episodes are remembered for
    ``keep_s`` so a later flare episode can link to them."""

    def __init__(self, gap_s: float, keep_s: float):
        self.gap_s, self.keep_s = gap_s, keep_s
        self.open: list[dict] = []
        self.closed: list[dict] = []
        self.out: dict[str, dict] = {}

    # -- events in -------------------------------------------------------------------
    def assign(self, e: dict, path: str) -> list[dict]:
        """Put event ``e`` (found by ``path``) into the open episode of its family it
        reaches within the gap, or a new one, and set its ``episode_id``. An event that
        reaches several open episodes joins them into one; the events of the others are
        returned with their new episode_id (to hand out again)."""
        t0, t1 = parse_iso(e["start_utc"]), parse_iso(e["end_utc"])
        fam, gap = family(e["class"]), self.gap_s
        near = [ep for ep in self.open if ep["family"] == fam and ep["t0"] - gap <= t1 and t0 <= ep["t1"] + gap]
        moved = []
        if not near:
            ep = {"episode_id": "ep-" + e["event_id"], "station": e["station"], "family": fam,
                  "events": {}, "paths": {}, "t0": t0, "t1": t1, "sequence_id": None}
            self.open.append(ep)
        else:
            ep = min(near, key=lambda x: x["t0"])
            for other in near:
                if other is not ep:
                    moved += self._merge(ep, other)
        e["episode_id"] = ep["episode_id"]
        ep["events"][e["event_id"]] = dict(e)
        ep["paths"][e["event_id"]] = path
        ep["t0"], ep["t1"] = min(ep["t0"], t0), max(ep["t1"], t1)
        return moved

    def reassign(self, e: dict, path: str) -> list[dict]:
        """A new version of an event already assigned (a piece a long event claimed, now
        of its class): out of its old episode (dropped when empty), into its new one."""
        for ep in self.open:
            if e["event_id"] in ep["events"]:
                del ep["events"][e["event_id"]]
                del ep["paths"][e["event_id"]]
                if ep["events"]:
                    spans = [(parse_iso(x["start_utc"]), parse_iso(x["end_utc"])) for x in ep["events"].values()]
                    ep["t0"], ep["t1"] = min(s[0] for s in spans), max(s[1] for s in spans)
                else:
                    self.open.remove(ep)
                break
        return self.assign(e, path)

    def _merge(self, ep: dict, other: dict) -> list[dict]:
        self.open.remove(other)
        ep["t0"], ep["t1"] = min(ep["t0"], other["t0"]), max(ep["t1"], other["t1"])
        ep["paths"].update(other["paths"])
        for x in other["events"].values():
            x["episode_id"] = ep["episode_id"]
            ep["events"][x["event_id"]] = x
        return [dict(x) for x in other["events"].values()]

    # -- closing -----------------------------------------------------------------------
    def close_before(self, t: float):
        """Close the episodes no event can join any more: those that end more than the
        gap before ``t``, the time up to which every path has handed out its events
        (including the long events still open there)."""
        done = [ep for ep in self.open if ep["t1"] + self.gap_s < t]
        for ep in sorted(done, key=lambda x: x["t0"]):
            self.open.remove(ep)
            self._close(ep)
        self.closed = [ep for ep in self.closed if ep["t1"] >= t - self.keep_s]

    def close_all(self):
        """The end of the data: every open episode is final."""
        for ep in sorted(self.open, key=lambda x: x["t0"]):
            self._close(ep)
        self.open = []

    def _close(self, ep: dict):
        ep["class"], ep["confidence"], ep["reason"] = self._decide(ep)
        if ep["class"] in SOLAR:
            self._link(ep)
        self.closed.append(ep)
        self.out[ep["episode_id"]] = record(ep)

    def _decide(self, ep: dict) -> tuple[str, float, str]:
        """The episode's class, confidence and one-line reason from all its events."""
        evs = list(ep["events"].values())
        fam, n = ep["family"], len(evs)
        slow = [x for x in evs if ep["paths"][x["event_id"]] == "slow"]
        main = max(slow or evs, key=lambda x: (parse_iso(x["end_utc"]) - parse_iso(x["start_utc"]),
                                               abs(x["peak_excess_db"] or 0)))
        conf = max(float(x["confidence"] or 0) for x in evs if family(x["class"]) == fam)
        span = (ep["t1"] - ep["t0"]) / 60.0
        if fam == "jovian_l" and not slow and n < STORM_MIN_EVENTS:
            if self._impulses_around(ep):
                return "rfi", 0.5, (f"{n} isolated burst(s) amid an impulse storm, no storm envelope: "
                                    "interference the impulse test missed, not a Jovian storm")
            return "unknown", 0.3, (f"{n} burst(s) with Jupiter up but no storm envelope "
                                    f"(a storm needs {STORM_MIN_EVENTS} bursts or one); {main['reason']}")
        if fam == "solar_ii" and not slow and n == 1 and span * 60.0 < TYPE2_MIN_S:
            return "unknown", 0.3, (f"one slowly drifting burst of {span * 60:.0f} s: a Type II lane lasts "
                                    f"minutes; {main['reason']}")
        if fam == "fadeout":
            iv = self._iv_ending_at(ep["t0"])
            if iv is not None:
                return "unknown", 0.3, (f"dip starting as the Type IV {iv['episode_id']} ends: the "
                                        f"background's return after the continuum, not a fadeout; {main['reason']}")
        if fam == "jovian_l":
            what = f"Jovian storm of {n} event(s) over {span:.0f} min" + (", with its envelope" if slow else "")
        elif fam == "solar_iii":
            what = f"Type III group of {n} burst(s) over {span:.0f} min" if n > 1 else "Type III burst"
        elif n > 1:
            what = f"{n} events over {span:.0f} min"
        else:
            what = ""
        return fam, conf, "; ".join(p for p in (what, main["reason"]) if p)

    def _impulses_around(self, ep: dict) -> bool:
        gap = self.gap_s
        return any(o["family"] == "rfi" and "impulse" in o["paths"].values()
                   and o["t0"] - gap <= ep["t1"] and ep["t0"] <= o["t1"] + gap
                   for o in self.open + self.closed)

    def _iv_ending_at(self, t: float) -> dict | None:
        for o in self.closed + self.open:
            if o["family"] == "solar_iv" and abs(t - o["t1"]) <= AFTER_IV_S:
                return o
        return None

    def _link(self, ep: dict):
        """Join a flare's sequence: closed solar episodes starting within FLARE_LINK_S."""
        mates = sorted((o for o in self.closed if o["class"] in SOLAR and abs(o["t0"] - ep["t0"]) <= FLARE_LINK_S),
                       key=lambda o: o["t0"])
        if not mates:
            return
        seq = next((o["sequence_id"] for o in mates if o["sequence_id"]), None) or "seq-" + mates[0]["episode_id"]
        ep["sequence_id"] = seq
        for o in mates:
            if o["sequence_id"] != seq:
                o["sequence_id"] = seq
                self.out[o["episode_id"]] = record(o)

    def pop(self) -> list[dict]:
        """The episodes closed, or changed after closing, since the last call."""
        out = [self.out[k] for k in sorted(self.out)]
        self.out = {}
        return out


def record(ep: dict) -> dict:
    """The episode as handed out."""
    evs = list(ep["events"].values())
    own = [x for x in evs if family(x["class"]) == ep["family"]] or evs
    peak = max(own, key=lambda x: abs(x["peak_excess_db"] or 0))["peak_excess_db"]
    r = {"episode_id": ep["episode_id"], "station": ep["station"], "class": ep["class"],
         "confidence": round(float(ep["confidence"]), 2), "reason": ep["reason"],
         "start_utc": iso(ep["t0"]), "end_utc": iso(ep["t1"]),
         "fmin_mhz": min(x["fmin_mhz"] for x in evs), "fmax_mhz": max(x["fmax_mhz"] for x in evs),
         "n_events": len(evs), "peak_excess_db": peak, "sequence_id": ep["sequence_id"]}
    for k, nd in ROUND.items():
        if r[k] is not None:
            r[k] = round(float(r[k]), nd)
    return r
