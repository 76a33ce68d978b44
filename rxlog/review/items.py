"""What a reviewer goes through: the night's episodes, each with its bursts, and the bursts
that belong to no episode of the night, as numbered review items.

An item is a plain dict: ``kind`` ("episode" or "event"), ``key`` (its episode or event
id), ``row`` (the store's episode with its context, or the event), ``bursts`` (an
episode's events of the night, oldest first; empty for an event) and ``number`` (its
place on the page). Items from the sky come first, in time order, interference after
them: a morning's review starts with what matters.
"""

from __future__ import annotations

from rxlog.timeutil import parse_iso


def review_items(events: list[dict], episodes: list[dict]) -> list[dict]:
    """The night's review items from its events (oldest first) and episodes."""
    listed = {ep["episode_id"] for ep in episodes}
    bursts: dict[str, list[dict]] = {}
    loose = []
    for e in events:
        if e.get("episode_id") in listed:
            bursts.setdefault(e["episode_id"], []).append(e)
        else:
            loose.append(e)
    items = [{"kind": "episode", "key": ep["episode_id"], "row": ep, "bursts": bursts.get(ep["episode_id"], [])}
             for ep in episodes]
    items += [{"kind": "event", "key": e["event_id"], "row": e, "bursts": []} for e in loose]
    items.sort(key=lambda it: (it["row"]["class"] == "rfi", it["row"]["start_utc"], it["key"]))
    for n, it in enumerate(items, start=1):
        it["number"] = n
    return items


def is_review_item(item: dict) -> bool:
    """Whether the item counts as one to review (interference does not)."""
    return item["row"]["class"] != "rfi"


def span(item: dict) -> tuple[float, float]:
    """An item's (start, end), POSIX seconds."""
    return parse_iso(item["row"]["start_utc"]), parse_iso(item["row"]["end_utc"])


def zoom_targets(items: list[dict]) -> list[dict]:
    """What gets a zoom: each item (an episode's box over its whole span) and every burst
    of an episode, as event-like dicts whose ``event_id`` names the image."""
    out = []
    for it in items:
        if it["kind"] == "episode":
            ep = it["row"]
            out.append({**ep, "event_id": ep["episode_id"], "peak_utc": ep["start_utc"]})
            out.extend(it["bursts"])
        else:
            out.append(it["row"])
    return out


def zoom_numbers(items: list[dict]) -> dict[str, str]:
    """The number each zoom carries, by the id that names its image: '3' for item 3, '3.2'
    for its second burst."""
    out = {}
    for it in items:
        out[it["key"]] = str(it["number"])
        for j, b in enumerate(it["bursts"], start=1):
            out[b["event_id"]] = f"{it['number']}.{j}"
    return out
