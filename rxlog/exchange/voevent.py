"""Single notable events or episodes as IVOA VOEvent 2.0 notices (IVOA Recommendation
2011-07-11).

A notice carries the event's (or episode's) columns as Params (rxlog.exchange.columns),
the station as a Group and as the observatory location, the peak time (an episode's
start), how it was found, and what the detector or reviewer took it for.
"""

from __future__ import annotations

import re
import time
import xml.etree.ElementTree as ET
from pathlib import Path

from rxlog.errors import RxlogError
from rxlog.exchange.columns import (
    BURSTS,
    EPISODES,
    HEADER,
    Layout,
    cell_text,
    export_row,
    one_line,
    station_header,
)
from rxlog.exchange.export import events_from_store
from rxlog.fileio import write_atomic
from rxlog.store import CLASSES
from rxlog.timeutil import iso, parse_iso

VOEVENT_NS = "http://www.ivoa.net/xml/VOEvent/v2.0"
XSI_NS = "http://www.w3.org/2001/XMLSchema-instance"
SOURCE = {"jovian_l": "Jupiter", "jovian_s": "Jupiter", "solar_iii": "Sun", "solar_ii": "Sun",
          "solar_iv": "Sun", "fadeout": "Sun"}
CONCEPT = {"jovian_l": "Jovian decametric emission, L-bursts", "jovian_s": "Jovian decametric emission, S-bursts",
           "solar_iii": "Solar radio burst, type III", "solar_ii": "Solar radio burst, type II",
           "solar_iv": "Solar radio burst, type IV continuum", "fadeout": "Short-wave fadeout",
           "unknown": "Unclassified radio burst", "rfi": "Radio-frequency interference"}
# Header keys that describe the station in a notice's <What>, in this order.
STATION_KEYS = ("station", "latitude_deg", "longitude_deg", "elevation_m", "antenna", "receiver",
                "clock_sync", "band_fmin_mhz", "band_fmax_mhz", "cadence_s")


def write_voevents(cfg, outdir, event_ids: list[str], level: str = "bursts") -> list[Path]:
    """Write one IVOA VOEvent 2.0 notice per event id to ``outdir``/<event_id>.xml (with
    ``level="episodes"``: per episode id, ``outdir``/<episode_id>.xml).

    Every id is looked up before anything is written; an unknown id writes nothing.
    """
    layout = EPISODES if level == "episodes" else BURSTS
    if not event_ids:
        raise RxlogError(f"no {layout.noun[:-1]} ids given; expected one or more ids from the "
                         f"{layout.noun[:-1]} list")
    get = (lambda store, i: store.get_episode(i)) if layout is EPISODES else (lambda store, i: store.get_event(i))
    events, clock = events_from_store(cfg, lambda store: [get(store, eid) for eid in event_ids])
    header = station_header(cfg, clock_sync=clock, n_events=len(events), layout=layout)
    header["operator_contact"] = cfg["station"].get("operator_contact", "")
    out = Path(outdir)
    return [write_atomic(out / (_safe_name(ev[layout.id_key]) + ".xml"), voevent_bytes(header, ev, layout))
            for ev in events]


def _safe_name(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]", "_", text)[:120]


def _voe_time(t_iso: str) -> str:
    # VOEvent 2.0 gives the time scale in the coordinate system (UTC-...), so ISOTime
    # carries no zone designator (IVOA VOEvent 2.0, section 3.3; from memory).
    return iso(parse_iso(t_iso))[:-1]


def voevent_bytes(header: dict, ev: dict, layout: Layout = BURSTS) -> bytes:
    """One event (or episode) as a VOEvent 2.0 notice (IVOA Recommendation 2011-07-11)."""
    ET.register_namespace("voe", VOEVENT_NS)
    ET.register_namespace("xsi", XSI_NS)
    station = header["station"]
    root = ET.Element(f"{{{VOEVENT_NS}}}VOEvent", {
        "version": "2.0", "role": "observation",
        # rxlog stations have no registered IVOA authority; the id is ours, unregistered.
        "ivorn": f"ivo://rxlog/{_safe_name(station)}#{_safe_name(ev[layout.id_key])}",
        f"{{{XSI_NS}}}schemaLocation": f"{VOEVENT_NS} http://www.ivoa.net/xml/VOEvent/VOEvent-v2.0.xsd",
    })
    row = export_row(ev, layout)
    _who(root, header)
    _what(root, header, row, layout)
    _where_when(root, header, row, layout)
    _how(root, header)
    _why(root, station, row)
    ET.indent(root)
    return ET.tostring(root, encoding="utf-8", xml_declaration=True) + b"\n"


def _who(root: ET.Element, header: dict):
    station = header["station"]
    who = ET.SubElement(root, "Who")
    ET.SubElement(who, "AuthorIVORN").text = f"ivo://rxlog/{_safe_name(station)}"
    ET.SubElement(who, "Date").text = _voe_time(iso(time.time()))
    author = ET.SubElement(who, "Author")
    ET.SubElement(author, "shortName").text = station
    if header.get("operator_contact"):
        ET.SubElement(author, "contactName").text = one_line(header["operator_contact"])


def _what(root: ET.Element, header: dict, row: dict, layout: Layout):
    """The event's (or episode's) columns as Params, then the station as a Group of Params."""
    what = ET.SubElement(root, "What")
    for name, kind, unit, ucd, desc in layout.columns:
        if name == "station" or row[name] is None:
            continue
        attrs = {"name": name, "ucd": ucd, "value": cell_text(row[name]),
                 "dataType": {"float": "float", "int": "int"}.get(kind, "string")}
        if unit:
            attrs["unit"] = unit
        p = ET.SubElement(what, "Param", attrs)
        ET.SubElement(p, "Description").text = desc
    group = ET.SubElement(what, "Group", {"name": "station"})
    for key in STATION_KEYS:
        kind, unit, ucd, _ = HEADER[key]
        attrs = {"name": key, "ucd": ucd, "value": cell_text(header.get(key)),
                 "dataType": {"float": "float", "int": "int"}.get(kind, "string")}
        if unit:
            attrs["unit"] = unit
        ET.SubElement(group, "Param", attrs)


def _where_when(root: ET.Element, header: dict, row: dict, layout: Layout):
    station = header["station"]
    ww = ET.SubElement(root, "WhereWhen")
    odl = ET.SubElement(ww, "ObsDataLocation")
    obs = ET.SubElement(odl, "ObservatoryLocation", {"id": station})
    ET.SubElement(obs, "AstroCoordSystem", {"id": "UTC-GEOD-TOPO"})
    coords = ET.SubElement(obs, "AstroCoords", {"coord_system_id": "UTC-GEOD-TOPO"})
    # Geodetic position: longitude, latitude in degrees, height in metres (VOEvent 2.0
    # observatory location, unit "deg-deg-m"; from memory).
    p3 = ET.SubElement(coords, "Position3D", {"unit": "deg-deg-m"})
    for tag, text in (("Name1", "longitude"), ("Name2", "latitude"), ("Name3", "elevation")):
        ET.SubElement(p3, tag).text = text
    v3 = ET.SubElement(p3, "Value3")
    for tag, key in (("C1", "longitude_deg"), ("C2", "latitude_deg"), ("C3", "elevation_m")):
        ET.SubElement(v3, tag).text = cell_text(float(header.get(key) or 0.0))
    # The observation itself: a time in UTC, topocentric (no sky position is given, as
    # the source is the Sun or Jupiter, named under Why).
    loc = ET.SubElement(odl, "ObservationLocation")
    ET.SubElement(loc, "AstroCoordSystem", {"id": "UTC-ICRS-TOPO"})
    c2 = ET.SubElement(loc, "AstroCoords", {"coord_system_id": "UTC-ICRS-TOPO"})
    tm = ET.SubElement(c2, "Time", {"unit": "s"})
    ti = ET.SubElement(tm, "TimeInstant")
    ET.SubElement(ti, "ISOTime").text = _voe_time(row["peak_utc"] if layout is BURSTS else row["start_utc"])
    cadence = header.get("cadence_s")
    if cadence:
        ET.SubElement(tm, "Error").text = cell_text(float(cadence))
    what = "Peak time" if layout is BURSTS else "Start of the episode"
    ET.SubElement(ww, "Description").text = (
        f"{what} at station {station}, by its own clock (clock sync: {header.get('clock_sync')}).")


def _how(root: ET.Element, header: dict):
    how = ET.SubElement(root, "How")
    ET.SubElement(how, "Description").text = one_line(
        f"rxlog {header.get('rxlog_version')} dynamic-spectrum burst detector; receiver "
        f"{header.get('receiver')}; antenna {header.get('antenna') or 'not described'}; band "
        f"{header.get('band_fmin_mhz')}-{header.get('band_fmax_mhz')} MHz every {header.get('cadence_s')} s")


def _why(root: ET.Element, station: str, row: dict):
    """What the event was taken for (the reviewer's class wins), then the notice's one-line description."""
    cls = row["label"] if row["label"] in CLASSES else row["class"]
    conf = row["confidence"]
    why_attrs = {"importance": cell_text(conf)} if conf is not None and 0 <= conf <= 1 else {}
    why = ET.SubElement(root, "Why", why_attrs)
    inf = ET.SubElement(why, "Inference", {"probability": cell_text(conf)} if why_attrs else {})
    if cls in SOURCE:
        ET.SubElement(inf, "Name").text = SOURCE[cls]
    ET.SubElement(inf, "Concept").text = CONCEPT.get(cls, cls)
    ET.SubElement(root, "Description").text = (
        f"{CONCEPT.get(cls, cls)} seen at {station} from {row['start_utc']} to {row['end_utc']}, "
        f"{row['fmin_mhz']}-{row['fmax_mhz']} MHz.")
