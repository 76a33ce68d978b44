"""The review page: one night's summary, plots and review items with their label controls.

Items are the night's episodes (a storm, a Type III group, a Type IV: one card, its
bursts folded inside it) and the bursts of no episode (rxlog.review.items). Labelling an
episode labels those of its bursts that carry no label of their own.

The page is rendered from jinja2 templates (``templates/``) with autoescaping on, so
every value from the store or the config is escaped by construction. Its styles and
script are package files (``static/review.css``, ``static/review.js``) put inside the
page when it is written: the report folder stays one folder that opens from disk and
can be copied or mailed, and the server's Content-Security-Policy admits the one inline
script by its nonce. The class colours at the head of the styles are generated from
the palette table (``rxlog.review.palette.css_rules``), so plots and page cannot drift apart.
"""

from __future__ import annotations

import urllib.parse
from importlib.resources import files

import jinja2

from rxlog.review.items import is_review_item, review_items, span
from rxlog.review.night import Night, utc_stamp
from rxlog.review.palette import CLASS_COLOURS, LABEL_NAMES, css_rules
from rxlog.review.summary import JOVIAN, fmt_clock, fmt_hours, fmt_num, fmt_span
from rxlog.store import LABELS
from rxlog.timeutil import parse_iso

# The key that gives each label on the page, in the order the buttons show them (1..9, 0).
LABEL_KEYS = {lab: str((i + 1) % 10) for i, lab in enumerate(LABELS)}
MAX_GAPS_SHOWN = 8


def _static(name: str, closing_tag: str) -> str:
    text = (files("rxlog.review") / "static" / name).read_text(encoding="utf-8")
    # Put inside the page as it is: it must not end its own element.
    if closing_tag in text.lower():
        raise ValueError(f"rxlog/review/static/{name} contains {closing_tag}")
    return text


PAGE_JS = _static("review.js", "</script")
PAGE_CSS = css_rules() + "\n" + _static("review.css", "</style")

_ENV = jinja2.Environment(loader=jinja2.PackageLoader("rxlog.review", "templates"), autoescape=True,
                          undefined=jinja2.StrictUndefined, trim_blocks=True, lstrip_blocks=True,
                          keep_trailing_newline=True)


def event_image_name(ev: dict) -> str:
    """An event's zoom (or an episode's: rxlog.review.items.zoom_targets), relative to the report folder."""
    return f"events/{ev['event_id']}.png"


def episode_image_name(ep: dict) -> str:
    """An episode's zoom over its whole span, relative to the report folder."""
    return f"events/{ep['episode_id']}.png"


def render_page(cfg, night: Night, summary: dict, events: list[dict], images: dict[str, str],
                items: list[dict] | None = None) -> str:
    """The review page as one HTML string (inline CSS and script, relative image links).

    ``images`` maps the file names of the plots and zooms written to what each was drawn
    from; a plot or zoom not in it is left out. ``items``: the night's review items
    (default: each event its own item).
    """
    s, st = summary, cfg["station"]
    items = review_items(events, []) if items is None else items
    index = {it["key"]: it["number"] for it in items}
    payload = {"night": night.name, "station": st["name"],
               "labels": [{"key": LABEL_KEYS[lab], "label": lab} for lab in LABELS],
               "names": LABEL_NAMES}
    cards = [item_card(it, night, images) for it in items]
    return _ENV.get_template("page.html.j2").render(
        station=st["name"], night=night.name,
        opens=f"{fmt_clock(night, night.t0)} {night.zone(night.t0)} {night.local(night.t0):%d %b}",
        closes=f"{fmt_clock(night, night.t1)} {night.zone(night.t1)} {night.local(night.t1):%d %b}",
        timezone=str(night.tz), where=f"{st['latitude_deg']:.3f}°, {st['longitude_deg']:.3f}°",
        made=utc_stamp(parse_iso(s["generated_utc"]), seconds=False),
        facts=_facts(s, night),
        chips=[(c, LABEL_NAMES.get(c, c), n) for c, n in s["items_per_class"].items() if n],
        overview="overview.png" in images, cml_io="cml_io.png" in images, mask="mask.png" in images,
        windows=[{"region": w["region"], "span": fmt_span(night, w["start"], w["end"]),
                  "altitude": fmt_num(w.get("max_jupiter_alt_deg"), "{:.0f}", "°"),
                  "recorded": f"{100 * w['recorded_fraction']:.0f} %",
                  "seen": [index[x] for x in w["seen"]]} for w in s["forecast"]],
        outside=[index[x] for x in s["jovian_outside_forecast"]],
        review=[c for c, it in zip(cards, items) if is_review_item(it)],
        interference=[c for c, it in zip(cards, items) if not is_review_item(it)],
        keys=[{"key": LABEL_KEYS[lab], "name": LABEL_NAMES[lab], "label": lab} for lab in LABELS],
        payload=payload, css=PAGE_CSS, js="\n" + PAGE_JS)


def _facts(s: dict, night: Night) -> list[tuple[str, str]]:
    """The summary's facts, (name, text), each time with its zone."""
    gaps = s["gaps"]
    return [
        ("recording", f"{fmt_hours(s['recorded_s'])} of {fmt_hours(s['length_s'])} ({100 * s['uptime']:.0f} %)"),
        ("gaps", (", ".join(fmt_span(night, a, b) for a, b in gaps[:MAX_GAPS_SHOWN])
                  + (" …" if len(gaps) > MAX_GAPS_SHOWN else "")) if gaps else "none"),
        ("masked as interference", "not measured yet (rxlog detect)" if s["masked_fraction"] is None
         else f"{100 * s['masked_fraction']:.1f} % (from {s['masked_source']})"),
        ("to review", f"{s['n_items']} items: {s['n_item_episodes']} episodes, "
                      f"{s['n_items'] - s['n_item_episodes']} single bursts "
                      f"({s['n_items_labelled']} labelled when this page was made)"),
        ("events", f"{s['n_events']} ({s['n_labelled']} labelled when this page was made)"),
        ("Jupiter up", ", ".join(fmt_span(night, a, b) for a, b in s["jupiter_up"]) or "not up"),
        ("Sun up", ", ".join(fmt_span(night, a, b) for a, b in s["sun_up"]) or "not up"),
    ]


def item_card(item: dict, night: Night, images: dict[str, str]) -> dict:
    """What the card of a review item shows: an episode with its bursts, or a single event."""
    n = item["number"]
    if item["kind"] == "event":
        return {**event_card(n, item["row"], night, images.get(event_image_name(item["row"]))),
                "kind": "event", "anchor": f"item-{n}"}
    return episode_card(item, night, images)


def _current(row: dict) -> str:
    """The label a card shows: name, who, and whether it came from the episode."""
    label = row.get("label")
    if not label:
        return "not labelled"
    return (LABEL_NAMES[label] + (f" ({row['label_who']})" if row.get("label_who") else "")
            + (" — from its episode" if row.get("label_source") == "episode" else ""))


def episode_card(item: dict, night: Night, images: dict[str, str]) -> dict:
    """An episode's card: its span, context and reason, its zoom, label buttons, and its
    bursts' cards folded beneath."""
    ep, n = item["row"], item["number"]
    cls, label = ep["class"], ep.get("label")
    a, b = span(item)
    zoom = images.get(episode_image_name(ep))
    return {
        "kind": "episode", "anchor": f"item-{n}", "number": n, "episode_id": ep["episode_id"], "cls": cls,
        "label": label or "", "when": f"{fmt_span(night, a, b)}",
        "class_name": LABEL_NAMES.get(cls, cls), "confidence": fmt_num(ep.get("confidence"), "{:.2f}"),
        "n_bursts": ep.get("n_bursts") or len(item["bursts"]), "current_label": _current(ep),
        "image": urllib.parse.quote(episode_image_name(ep)) if zoom else None,
        "facts": _episode_facts(ep, night, a, b, zoom),
        "buttons": [{"label": lab, "key": LABEL_KEYS[lab], "name": LABEL_NAMES[lab],
                     "classes": _button_class(lab, label)} for lab in LABELS],
        "note": ep.get("label_note") or "",
        "bursts": [{**event_card(f"{n}.{j}", e, night, images.get(event_image_name(e))), "anchor": f"item-{n}-{j}"}
                   for j, e in enumerate(item["bursts"], start=1)],
    }


def _duration(s: float) -> str:
    return f"{s:.0f} s" if s < 120 else (f"{s / 60:.0f} min" if s < 5400 else f"{s / 3600:.1f} h")


def _episode_facts(ep: dict, night: Night, a: float, b: float, zoom_source: str | None) -> list[tuple[str, str]]:
    facts = [("span", f"{night.stamp(a)} – {night.stamp(b)} · {utc_stamp(a)} – {utc_stamp(b)}"),
             ("duration", _duration(b - a)),
             ("band", f"{ep['fmin_mhz']:.3f}–{ep['fmax_mhz']:.3f} MHz"),
             ("peak excess", fmt_num(ep.get("peak_excess_db"), "{:.1f}", " dB"))]
    if ep["class"] in JOVIAN or ep["class"] == "unknown":
        rng = lambda k: (f"{fmt_num(ep.get(k + '_start_deg'), '{:.0f}', '°')} → "  # noqa: E731
                         f"{fmt_num(ep.get(k + '_end_deg'), '{:.0f}', '°')}")
        facts.append(("CML III · Io phase", f"{rng('cml3')} · {rng('io_phase')}"
                      + (f" · {ep['source_region']}" if ep.get("source_region") else "")))
        facts.append(("Jupiter altitude", f"{fmt_num(ep.get('jupiter_alt_min_deg'), '{:.0f}', '°')} to "
                                          f"{fmt_num(ep.get('jupiter_alt_max_deg'), '{:.0f}', '°')}"))
    if ep["class"] not in JOVIAN:
        facts.append(("Sun altitude", f"{fmt_num(ep.get('sun_alt_min_deg'), '{:.0f}', '°')} to "
                                      f"{fmt_num(ep.get('sun_alt_max_deg'), '{:.0f}', '°')}"))
    facts += [("why", ep.get("reason") or "—")]
    if ep.get("sequence_id"):
        facts.append(("flare sequence", ep["sequence_id"]))
    return facts + [("zoom from", zoom_source or "—"), ("episode id", ep["episode_id"])]


def event_card(number, ev: dict, night: Night, zoom_source: str | None) -> dict:
    """What the card of an event numbered ``number`` on the page shows, as plain values for
    the template (``zoom_source``: what its zoom was drawn from, None when it has none)."""
    peak = parse_iso(ev["peak_utc"])
    cls = ev["class"]
    label = ev.get("label")
    return {
        "number": number, "event_id": ev["event_id"], "cls": cls, "label": label or "",
        "when": f"{fmt_clock(night, peak, True)} {night.zone(peak)}",
        "class_name": LABEL_NAMES.get(cls, cls), "confidence": fmt_num(ev.get("confidence"), "{:.2f}"),
        "current_label": _current(ev), "label_source": ev.get("label_source") or "",
        "image": urllib.parse.quote(event_image_name(ev)) if zoom_source else None,
        "facts": _event_facts(ev, night, peak, zoom_source),
        "buttons": [{"label": lab, "key": LABEL_KEYS[lab], "name": LABEL_NAMES[lab],
                     "classes": _button_class(lab, label)} for lab in LABELS],
        "note": ev.get("label_note") or "",
    }


def _event_facts(ev: dict, night: Night, peak: float, zoom_source: str | None) -> list[tuple[str, str]]:
    drift = fmt_num(ev.get("drift_mhz_s"), "{:+.3f}", " MHz/s") \
        + (f" ± {ev['drift_err_mhz_s']:.3f}" if ev.get("drift_err_mhz_s") is not None else "")
    angles = f"{fmt_num(ev.get('cml3_deg'), '{:.0f}', '°')} · {fmt_num(ev.get('io_phase_deg'), '{:.0f}', '°')}" \
        + (f" · {ev['source_region']}" if ev.get("source_region") else "")
    return [
        ("peak", f"{night.stamp(peak)} · {utc_stamp(peak)}"),
        ("band", f"{ev['fmin_mhz']:.3f}–{ev['fmax_mhz']:.3f} MHz"),
        ("duration", fmt_num(ev.get("duration_s"), "{:.1f}", " s")),
        ("peak excess · S/N", f"{fmt_num(ev.get('peak_excess_db'), '{:.1f}', ' dB')} · {fmt_num(ev.get('snr'), '{:.1f}')}"),
        ("drift", drift),
        ("CML III · Io phase", angles),
        ("Jupiter · Sun altitude",
         f"{fmt_num(ev.get('jupiter_alt_deg'), '{:.0f}', '°')} · {fmt_num(ev.get('sun_alt_deg'), '{:.0f}', '°')}"),
        ("why", ev.get("reason") or "—"),
        ("zoom from", zoom_source or "—"),
        ("event id", ev["event_id"]),
    ]


def _button_class(lab: str, current: str | None) -> str:
    return " ".join(([f"cls-{lab}"] if lab in CLASS_COLOURS else []) + (["on"] if lab == current else []))
