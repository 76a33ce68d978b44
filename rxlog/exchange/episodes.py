"""Episodes confirmed across stations: a storm, a Type III group or a Type IV is real when
another station, hundreds of kilometres away, saw it too.

Episodes last minutes to hours, so they are matched by overlap, not by a time
difference: each station's episode times are first put on the common clock with the
offsets the comparison measured from bursts (rxlog.exchange.clocks: station time minus
true time), then two episodes of different stations are one phenomenon when their time
spans, widened by EPISODE_SLACK_S, overlap and their bands share some frequency.
Overlapping episodes link into groups (a Type IV seen whole at one station and in two
pieces at another is one group); an episode is confirmed when its group holds at least
two stations.
"""

from __future__ import annotations

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from rxlog import boxes
from rxlog.timeutil import parse_iso

# How far apart two stations' episodes may lie, on the common clock, and still be one: an
# episode's edges are its first and last bursts, found on rows of about a second, and a
# weak edge burst seen at one station only moves an edge by a few rows (our choice). The
# clocks themselves are already corrected: the comparison's window, which allows for
# clocks that are off, is not needed again here.
EPISODE_SLACK_S = 5.0

# Columns of matched_episodes.csv, one row per episode.
EPISODE_ROW_COLUMNS = ("episode_match_id", "n_stations", "stations", "station", "episode_id", "class",
                       "confidence", "start_utc", "end_utc", "fmin_mhz", "fmax_mhz", "n_bursts",
                       "clock_offset_s")


def _groups(n: int, ia, ib) -> np.ndarray:
    """Connected components of n items linked by the pairs (ia, ib): a label per item."""
    links = coo_matrix((np.ones(len(ia)), (ia, ib)), shape=(n, n))
    return connected_components(links, directed=False)[1]


def confirm_episodes(episode_lists, offsets: dict[str, float], slack_s: float = EPISODE_SLACK_S):
    """Group the episodes of ``episode_lists`` (EventLists of episodes, one or more per
    station) across stations.

    ``offsets``: station name -> clock offset (s, station minus true; a station missing
    from it is taken as on time). Returns (rows, per-station (n_episodes, n_confirmed),
    group sizes {n_stations: n_groups}); rows are EPISODE_ROW_COLUMNS dicts in time order,
    the members of a group together.
    """
    eps = [(el.name, e) for el in episode_lists for e in el.events]
    if not eps:
        return [], {}, {}
    names = sorted({s for s, _ in eps})
    st = np.array([names.index(s) for s, _ in eps])
    off = np.array([offsets.get(s, 0.0) for s, _ in eps])
    t0 = np.array([parse_iso(e["start_utc"]) for _, e in eps]) - off
    t1 = np.array([parse_iso(e["end_utc"]) for _, e in eps]) - off
    f0 = np.array([e["fmin_mhz"] for _, e in eps])
    f1 = np.array([e["fmax_mhz"] for _, e in eps])
    ia, ib = boxes.overlap_pairs(t0 - slack_s, t1 + slack_s, t0, t1)
    keep = (st[ia] != st[ib]) & (boxes.overlap(f0[ia], f1[ia], f0[ib], f1[ib]) > 0)
    grp = _groups(len(eps), ia[keep], ib[keep])
    members: dict[int, set] = {}
    for g, s in zip(grp.tolist(), st.tolist()):
        members.setdefault(g, set()).add(s)
    n_at = np.array([len(members[g]) for g in grp.tolist()])
    first = {}
    for g, t in zip(grp.tolist(), t0.tolist()):
        first[g] = min(first.get(g, t), t)
    order = sorted(first, key=first.get)
    match_no = {g: k + 1 for k, g in enumerate(order)}
    rows = []
    for i in sorted(range(len(eps)), key=lambda i: (match_no[grp[i]], st[i], t0[i])):
        s, e = eps[i]
        rows.append({"episode_match_id": f"E{match_no[grp[i]]:06d}", "n_stations": int(n_at[i]),
                     "stations": "+".join(names[k] for k in sorted(members[grp[i]])), "station": s,
                     "episode_id": e["episode_id"], "class": e["class"], "confidence": e.get("confidence"),
                     "start_utc": e["start_utc"], "end_utc": e["end_utc"], "fmin_mhz": e["fmin_mhz"],
                     "fmax_mhz": e["fmax_mhz"], "n_bursts": e.get("n_bursts"),
                     "clock_offset_s": float(off[i]) if s in offsets else None})
    per_station = {names[k]: (int((st == k).sum()), int(((st == k) & (n_at >= 2)).sum())) for k in range(len(names))}
    sizes: dict[int, int] = {}
    for g in order:
        sizes[len(members[g])] = sizes.get(len(members[g]), 0) + 1
    return rows, per_station, sizes
