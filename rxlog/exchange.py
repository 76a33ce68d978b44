"""Event lists for partner stations: export in open formats, strict and safe import.

An event list is one station's events plus a header that travels with them: station
name and position, antenna and receiver, clock-sync state, band and cadence, the rxlog
version and the ``format_version`` of this layout. Three encodings carry the same
content:

- CSV (RFC 4180) with ISO 8601 UTC times: header lines ``# key: value`` before the
  column row;
- JSON (RFC 8259): ``{"header": {...}, "events": [{...}, ...]}``;
- VOTable 1.4 (IVOA), written with astropy.io.votable: station metadata as PARAMs,
  format and provenance as INFOs, one FIELD per column with unit and UCD.

Single notable events also go out as IVOA VOEvent 2.0 notices.

Imports take files from anyone, so they are strict and safe: nothing is evaluated or
unpickled, XML with a DOCTYPE or entity declarations is refused before any XML library
sees it, each bad row is reported with file and line and skipped, and a file with
nothing usable left is refused with an ``RxlogError``.
"""

from __future__ import annotations

import csv
import datetime as _dt
import io
import json
import math
import re
import time
import xml.etree.ElementTree as ET
from dataclasses import dataclass, field
from pathlib import Path

import defusedxml
import defusedxml.ElementTree as defused_et
import numpy as np

from rxlog import __version__, validate
from rxlog.errors import RxlogError
from rxlog.fileio import write_atomic
from rxlog.store import CLASSES, LABELS, EventStore
from rxlog.timeutil import iso, parse_iso

# Version of the export layout (columns, header keys, encodings). Readers accept every
# version up to this one; a file from a newer rxlog is read for the columns this
# version knows, with a notice.
FORMAT_VERSION = 1
FORMAT_NAME = "rxlog event list"

FORMATS = ("csv", "json", "votable")
SUFFIX = {"csv": ".csv", "json": ".json", "votable": ".vot"}

# (name, kind, unit, UCD (IVOA UCD1+ words), description). The order is the column order.
COLUMNS = (
    ("station", "str", "", "meta.id;instr.obsty", "Station that recorded the event"),
    ("event_id", "str", "", "meta.id;meta.main", "Event id, unique within the station"),
    ("start_utc", "time", "", "time.start", "Start of the event, ISO 8601 UTC"),
    ("end_utc", "time", "", "time.end", "End of the event, ISO 8601 UTC"),
    ("peak_utc", "time", "", "time.epoch", "Time of the peak, ISO 8601 UTC"),
    ("fmin_mhz", "float", "MHz", "em.freq;stat.min", "Lowest frequency of the event"),
    ("fmax_mhz", "float", "MHz", "em.freq;stat.max", "Highest frequency of the event"),
    ("peak_excess_db", "float", "dB", "phot.flux.density;arith.ratio", "Peak power above the background"),
    ("snr", "float", "", "stat.snr", "Signal-to-noise ratio of the detection"),
    ("drift_mhz_s", "float", "MHz/s", "arith.rate;em.freq", "Frequency drift rate (negative: downward)"),
    ("class", "str", "", "src.class", "Detector class: " + ", ".join(CLASSES)),
    ("confidence", "float", "", "stat.probability", "Detector confidence in the class, 0-1"),
    ("label", "str", "", "meta.code.class", "Reviewer's label, if any: " + ", ".join(LABELS)),
    ("cml3_deg", "float", "deg", "pos.bodyrc.lon", "Jupiter central meridian longitude, System III (1965), at the peak"),
    ("io_phase_deg", "float", "deg", "time.phase", "Geocentric Io phase at the peak"),
    ("source_region", "str", "", "meta.code", "Jovian source region (Io-A, Io-B, ...), if any"),
    ("jupiter_alt_deg", "float", "deg", "pos.az.alt", "Jupiter's altitude at the station at the peak"),
    ("sun_alt_deg", "float", "deg", "pos.az.alt", "The Sun's altitude at the station at the peak"),
)
COLUMN_NAMES = tuple(c[0] for c in COLUMNS)
KIND = {c[0]: c[1] for c in COLUMNS}
REQUIRED = ("event_id", "start_utc", "end_utc", "peak_utc", "fmin_mhz", "fmax_mhz", "class")

# Header keys: name -> (kind, unit, UCD, description).
HEADER = {
    "format": ("str", "", "meta.code", "Always 'rxlog event list'"),
    "format_version": ("int", "", "meta.version", "Version of this export layout"),
    "rxlog_version": ("str", "", "meta.version", "rxlog version that wrote the file"),
    "exported_utc": ("time", "", "time.creation", "When the file was written, ISO 8601 UTC"),
    "station": ("str", "", "meta.id;instr.obsty", "Station name"),
    "latitude_deg": ("float", "deg", "pos.earth.lat", "Geodetic latitude, north"),
    "longitude_deg": ("float", "deg", "pos.earth.lon", "Longitude, east"),
    "elevation_m": ("float", "m", "pos.earth.altitude", "Height above the WGS84 ellipsoid"),
    "antenna": ("str", "", "instr.setup", "Antenna, free text"),
    "receiver": ("str", "", "instr.setup", "Receiver kind"),
    "clock_sync": ("str", "", "meta.code.status", "Clock synchronisation state at export time"),
    "band_fmin_mhz": ("float", "MHz", "em.freq;stat.min", "Lower edge of the recorded band"),
    "band_fmax_mhz": ("float", "MHz", "em.freq;stat.max", "Upper edge of the recorded band"),
    "channels": ("int", "", "meta.number", "Channels across the band"),
    "cadence_s": ("float", "s", "time.interval", "Seconds between spectra"),
    "period_start_utc": ("time", "", "time.start", "Start of the exported period (empty: from the first event)"),
    "period_end_utc": ("time", "", "time.end", "End of the exported period (empty: to the last event)"),
    "n_events": ("int", "", "meta.number", "Number of events in the file"),
}

STATION_NAME = re.compile(r"[A-Za-z0-9_-]{1,40}")
# Times as rxlog writes them (rxlog.timeutil.iso); others are rewritten in this form.
CANONICAL_TIME = re.compile(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z")

# Ranges of numbers on import (inclusive). Frequencies: the band an rxlog station can be
# configured for ([spectra] fmin_mhz, fmax_mhz); angles by their definitions; the site as
# [station] accepts it; cadence as rxlog.validate. A row with a value outside is skipped
# with a notice, a header value outside is ignored with a notice, as for a wrong type.
COLUMN_RANGES = {
    "fmin_mhz": (validate.MIN_BAND_MHZ, validate.MAX_BAND_MHZ),
    "fmax_mhz": (validate.MIN_BAND_MHZ, validate.MAX_BAND_MHZ),
    "confidence": (0.0, 1.0),
    "cml3_deg": (0.0, 360.0),
    "io_phase_deg": (0.0, 360.0),
    "jupiter_alt_deg": (-90.0, 90.0),
    "sun_alt_deg": (-90.0, 90.0),
}
HEADER_RANGES = {
    "latitude_deg": (-90.0, 90.0),
    "longitude_deg": (-180.0, 180.0),
    "elevation_m": (-500.0, 9000.0),
    "band_fmin_mhz": (validate.MIN_BAND_MHZ, validate.MAX_BAND_MHZ),
    "band_fmax_mhz": (validate.MIN_BAND_MHZ, validate.MAX_BAND_MHZ),
    "channels": (1, 1 << 20),
    "cadence_s": (validate.MIN_CADENCE_S, validate.MAX_CADENCE_S),
    "n_events": (0, 1 << 40),
    "format_version": (1, 1 << 20),
}

# Limits that keep a hostile or broken file from exhausting memory (our own choice: a
# year of events of a busy station is a few MB).
MAX_FILE_BYTES = 256 * 1024 * 1024
MAX_LINE_CHARS = 64 * 1024
MAX_ROW_NOTICES = 20  # problem rows reported one by one per file; the rest are counted


# -- writing -------------------------------------------------------------------------------

def station_header(cfg, clock_sync: str = "unknown", n_events: int = 0,
                   t0: float | None = None, t1: float | None = None) -> dict:
    """The header of an event list for the station of ``cfg``."""
    st, sp = cfg["station"], cfg["spectra"]
    return {
        "format": FORMAT_NAME,
        "format_version": FORMAT_VERSION,
        "rxlog_version": __version__,
        "exported_utc": iso(time.time()),
        "station": st["name"],
        "latitude_deg": float(st["latitude_deg"]),
        "longitude_deg": float(st["longitude_deg"]),
        "elevation_m": float(st["elevation_m"]),
        "antenna": st.get("antenna", ""),
        "receiver": cfg["receiver"]["kind"],
        "clock_sync": clock_sync or "unknown",
        "band_fmin_mhz": float(sp["fmin_mhz"]),
        "band_fmax_mhz": float(sp["fmax_mhz"]),
        "channels": int(sp["channels"]),
        "cadence_s": float(sp["cadence_s"]),
        "period_start_utc": iso(t0) if t0 is not None else None,
        "period_end_utc": iso(t1) if t1 is not None else None,
        "n_events": int(n_events),
    }


def export_events(cfg, path, fmt: str, t0: float | None = None, t1: float | None = None,
                  include_rfi: bool = False, labelled_only: bool = False) -> int:
    """Write this station's events peaking in [t0, t1) to ``path`` as csv, json or votable.

    Returns the number of events written. The file is replaced atomically.
    """
    if fmt not in FORMATS:
        raise RxlogError(f"unknown export format {fmt!r}; expected one of {', '.join(FORMATS)}")
    if not Path(cfg.store_path).exists():
        raise RxlogError(f"{cfg.store_path}: no event store yet; run the logger (or the demo) first")
    store = EventStore(cfg.store_path)
    try:
        events = store.events(t0=t0, t1=t1, include_rfi=include_rfi, labelled_only=labelled_only,
                              station=cfg["station"]["name"])
        health = store.latest_health(cfg["station"]["name"]) or store.latest_health()
    finally:
        store.close()
    clock = (health or {}).get("clock_sync") or "unknown"
    header = station_header(cfg, clock_sync=clock, n_events=len(events), t0=t0, t1=t1)
    write_event_list(path, fmt, header, events)
    return len(events)


def write_event_list(path, fmt: str, header: dict, events: list[dict]) -> Path:
    """Write ``events`` (dicts with the event store's field names) with ``header`` to ``path``."""
    if fmt not in FORMATS:
        raise RxlogError(f"unknown export format {fmt!r}; expected one of {', '.join(FORMATS)}")
    header = dict(header, n_events=len(events))
    rows = [_export_row(e) for e in events]
    if fmt == "csv":
        data = _csv_bytes(header, rows)
    elif fmt == "json":
        data = _json_bytes(header, rows)
    else:
        data = _votable_bytes(header, rows)
    return write_atomic(Path(path), data)


def _export_row(ev: dict) -> dict:
    row = {}
    for name in COLUMN_NAMES:
        v = ev.get(name)
        if KIND[name] == "float":
            v = None if v is None or not math.isfinite(float(v)) else float(v)
        elif KIND[name] == "time":
            v = None if v in (None, "") else iso(parse_iso(v) if isinstance(v, str) else float(v))
        else:
            v = None if v in (None, "") else _one_line(str(v))
        row[name] = v
    return row


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def _text(v) -> str:
    """A header or cell value as text: floats in their shortest exact form."""
    if v is None:
        return ""
    if isinstance(v, float):
        return repr(v)
    return _one_line(str(v))


def _csv_bytes(header: dict, rows: list[dict]) -> bytes:
    out = io.StringIO(newline="")
    out.write(f"# {FORMAT_NAME}: one station's events; times ISO 8601 UTC, frequencies MHz\n")
    for key in HEADER:
        out.write(f"# {key}: {_text(header.get(key))}\n")
    w = csv.writer(out, lineterminator="\n")
    w.writerow(COLUMN_NAMES)
    for r in rows:
        w.writerow([_text(r[c]) for c in COLUMN_NAMES])
    return out.getvalue().encode("utf-8")


def _json_bytes(header: dict, rows: list[dict]) -> bytes:
    doc = {"header": {k: header.get(k) for k in HEADER}, "events": rows}
    return (json.dumps(doc, indent=1, allow_nan=False, ensure_ascii=False) + "\n").encode("utf-8")


def _votable_bytes(header: dict, rows: list[dict]) -> bytes:
    from astropy.io.votable.tree import Field, Info, Param, Resource, TableElement, VOTableFile

    vo = VOTableFile(version="1.4")
    res = Resource()
    vo.resources.append(res)
    res.infos.append(Info(name="format", value=FORMAT_NAME))
    res.infos.append(Info(name="format_version", value=str(FORMAT_VERSION)))
    res.infos.append(Info(name="rxlog_version", value=str(header.get("rxlog_version") or __version__)))
    res.infos.append(Info(name="time_scale", value="UTC"))
    table = TableElement(vo, name="events")
    table.description = f"{FORMAT_NAME} of station {header.get('station')}"
    res.tables.append(table)
    for key, (kind, unit, ucd, desc) in HEADER.items():
        if key in ("format", "format_version", "rxlog_version"):
            continue
        value = header.get(key)
        kw = {"datatype": {"float": "double", "int": "long"}.get(kind, "char")}
        if kw["datatype"] == "char":
            kw["arraysize"] = "*"
            value = _text(value)
        elif value is None:
            value = "NaN" if kind == "float" else None
            if value is None:
                continue
        p = Param(vo, name=key, ID=f"h_{key}", ucd=ucd, unit=unit or None, value=value, **kw)
        p.description = desc
        table.params.append(p)
    for name, kind, unit, ucd, desc in COLUMNS:
        kw = {"datatype": "double"} if kind == "float" else {"datatype": "char", "arraysize": "*"}
        if kind == "time":
            kw["xtype"] = "timestamp"  # DALI 1.1 ISO 8601 timestamp
        f = Field(vo, name=name, ID=name, ucd=ucd, unit=unit or None, **kw)
        f.description = desc
        table.fields.append(f)
    table.create_arrays(len(rows))
    for name in COLUMN_NAMES:
        if KIND[name] == "float":
            table.array[name] = np.array([np.nan if r[name] is None else r[name] for r in rows], dtype=float)
        else:
            col = np.empty(len(rows), dtype=object)
            col[:] = [r[name] or "" for r in rows]
            table.array[name] = col
    buf = io.BytesIO()
    vo.to_xml(buf)
    return buf.getvalue()


# -- VOEvent 2.0 notices ------------------------------------------------------------------

VOEVENT_NS = "http://www.ivoa.net/xml/VOEvent/v2.0"
XSI_NS = "http://www.w3.org/2001/XMLSchema-instance"
SOURCE = {"jovian_l": "Jupiter", "jovian_s": "Jupiter", "solar_iii": "Sun", "solar_ii": "Sun",
          "solar_iv": "Sun", "fadeout": "Sun"}
CONCEPT = {"jovian_l": "Jovian decametric emission, L-bursts", "jovian_s": "Jovian decametric emission, S-bursts",
           "solar_iii": "Solar radio burst, type III", "solar_ii": "Solar radio burst, type II",
           "solar_iv": "Solar radio burst, type IV continuum", "fadeout": "Short-wave fadeout",
           "unknown": "Unclassified radio burst", "rfi": "Radio-frequency interference"}


def write_voevents(cfg, outdir, event_ids: list[str]) -> list[Path]:
    """Write one IVOA VOEvent 2.0 notice per event id to ``outdir``/<event_id>.xml.

    Every id is looked up before anything is written; an unknown id writes nothing.
    """
    if not event_ids:
        raise RxlogError("no event ids given; expected one or more ids from the event list")
    if not Path(cfg.store_path).exists():
        raise RxlogError(f"{cfg.store_path}: no event store yet; run the logger (or the demo) first")
    store = EventStore(cfg.store_path)
    try:
        events = [store.get_event(eid) for eid in event_ids]
        health = store.latest_health(cfg["station"]["name"]) or store.latest_health()
    finally:
        store.close()
    header = station_header(cfg, clock_sync=(health or {}).get("clock_sync") or "unknown",
                            n_events=len(events))
    header["operator_contact"] = cfg["station"].get("operator_contact", "")
    out = Path(outdir)
    return [write_atomic(out / (_safe_name(ev["event_id"]) + ".xml"), voevent_bytes(header, ev))
            for ev in events]


def _safe_name(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]", "_", text)[:120]


def _voe_time(t_iso: str) -> str:
    # VOEvent 2.0 gives the time scale in the coordinate system (UTC-...), so ISOTime
    # carries no zone designator (IVOA VOEvent 2.0, section 3.3; from memory).
    return iso(parse_iso(t_iso))[:-1]


def voevent_bytes(header: dict, ev: dict) -> bytes:
    """One event as a VOEvent 2.0 notice (IVOA Recommendation 2011-07-11)."""
    ET.register_namespace("voe", VOEVENT_NS)
    ET.register_namespace("xsi", XSI_NS)
    station = header["station"]
    root = ET.Element(f"{{{VOEVENT_NS}}}VOEvent", {
        "version": "2.0", "role": "observation",
        # rxlog stations have no registered IVOA authority; the id is ours, unregistered.
        "ivorn": f"ivo://rxlog/{_safe_name(station)}#{_safe_name(ev['event_id'])}",
        f"{{{XSI_NS}}}schemaLocation": f"{VOEVENT_NS} http://www.ivoa.net/xml/VOEvent/VOEvent-v2.0.xsd",
    })
    who = ET.SubElement(root, "Who")
    ET.SubElement(who, "AuthorIVORN").text = f"ivo://rxlog/{_safe_name(station)}"
    ET.SubElement(who, "Date").text = _voe_time(iso(time.time()))
    author = ET.SubElement(who, "Author")
    ET.SubElement(author, "shortName").text = station
    if header.get("operator_contact"):
        ET.SubElement(author, "contactName").text = _one_line(header["operator_contact"])

    what = ET.SubElement(root, "What")
    row = _export_row(ev)
    for name, kind, unit, ucd, desc in COLUMNS:
        if name == "station" or row[name] is None:
            continue
        attrs = {"name": name, "ucd": ucd, "value": _text(row[name]),
                 "dataType": "float" if kind == "float" else "string"}
        if unit:
            attrs["unit"] = unit
        p = ET.SubElement(what, "Param", attrs)
        ET.SubElement(p, "Description").text = desc
    group = ET.SubElement(what, "Group", {"name": "station"})
    for key in ("station", "latitude_deg", "longitude_deg", "elevation_m", "antenna", "receiver",
                "clock_sync", "band_fmin_mhz", "band_fmax_mhz", "cadence_s"):
        kind, unit, ucd, _ = HEADER[key]
        attrs = {"name": key, "ucd": ucd, "value": _text(header.get(key)),
                 "dataType": {"float": "float", "int": "int"}.get(kind, "string")}
        if unit:
            attrs["unit"] = unit
        ET.SubElement(group, "Param", attrs)

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
        ET.SubElement(v3, tag).text = _text(float(header.get(key) or 0.0))
    # The observation itself: a time in UTC, topocentric (no sky position is given, as
    # the source is the Sun or Jupiter, named under Why).
    loc = ET.SubElement(odl, "ObservationLocation")
    ET.SubElement(loc, "AstroCoordSystem", {"id": "UTC-ICRS-TOPO"})
    c2 = ET.SubElement(loc, "AstroCoords", {"coord_system_id": "UTC-ICRS-TOPO"})
    tm = ET.SubElement(c2, "Time", {"unit": "s"})
    ti = ET.SubElement(tm, "TimeInstant")
    ET.SubElement(ti, "ISOTime").text = _voe_time(row["peak_utc"])
    cadence = header.get("cadence_s")
    if cadence:
        ET.SubElement(tm, "Error").text = _text(float(cadence))
    ET.SubElement(ww, "Description").text = (
        f"Peak time at station {station}, by its own clock (clock sync: {header.get('clock_sync')}).")

    how = ET.SubElement(root, "How")
    ET.SubElement(how, "Description").text = _one_line(
        f"rxlog {header.get('rxlog_version')} dynamic-spectrum burst detector; receiver "
        f"{header.get('receiver')}; antenna {header.get('antenna') or 'not described'}; band "
        f"{header.get('band_fmin_mhz')}-{header.get('band_fmax_mhz')} MHz every {cadence} s")

    cls = row["label"] if row["label"] in CLASSES else row["class"]
    conf = row["confidence"]
    why_attrs = {"importance": _text(conf)} if conf is not None and 0 <= conf <= 1 else {}
    why = ET.SubElement(root, "Why", why_attrs)
    inf = ET.SubElement(why, "Inference", {"probability": _text(conf)} if why_attrs else {})
    if cls in SOURCE:
        ET.SubElement(inf, "Name").text = SOURCE[cls]
    ET.SubElement(inf, "Concept").text = CONCEPT.get(cls, cls)
    ET.SubElement(root, "Description").text = (
        f"{CONCEPT.get(cls, cls)} seen at {station} from {row['start_utc']} to {row['end_utc']}, "
        f"{row['fmin_mhz']}-{row['fmax_mhz']} MHz.")
    ET.indent(root)
    return ET.tostring(root, encoding="utf-8", xml_declaration=True) + b"\n"


# -- reading ------------------------------------------------------------------------------

@dataclass
class EventList:
    """One station's events as read from a file: header, events, and what was wrong."""

    station: dict                       # header values (station, latitude_deg, ..., format_version)
    events: list[dict]                  # COLUMN_NAMES fields; times as ISO strings, floats or None
    notices: list[str] = field(default_factory=list)
    path: str = ""
    format: str = ""

    @property
    def name(self) -> str:
        return self.station["station"]


class _Problems:
    """Row problems of one file: the first few verbatim, then a count."""

    def __init__(self, where: str):
        self.where = where
        self.lines: list[str] = []
        self.skipped = 0

    def row(self, loc: str, msg: str):
        self.skipped += 1
        if self.skipped <= MAX_ROW_NOTICES:
            self.lines.append(f"{self.where}:{loc}: {msg}; row skipped")

    def summary(self) -> list[str]:
        out = list(self.lines)
        if self.skipped > MAX_ROW_NOTICES:
            out.append(f"{self.where}: ... and {self.skipped - MAX_ROW_NOTICES} more rows skipped")
        return out


def read_event_list(path) -> EventList:
    """Read an event list (CSV, JSON or VOTable, any format_version of ours) strictly.

    Bad rows are skipped and reported in ``notices`` with file and line; raises
    RxlogError when the file is unreadable or nothing usable is left.
    """
    p = Path(path)
    try:
        size = p.stat().st_size
        if size > MAX_FILE_BYTES:
            raise RxlogError(f"{p}: {size / 2**20:.0f} MB is too large for an event list "
                             f"(limit {MAX_FILE_BYTES // 2**20} MB)")
        data = p.read_bytes()
    except OSError as e:
        raise RxlogError(f"{p}: cannot read ({e.strerror or e})") from None
    fmt = _sniff(p, data)
    if fmt == "json":
        header, rows, problems, unknown = _read_json(p, data)
    elif fmt == "votable":
        header, rows, problems, unknown = _read_votable(p, data)
    else:
        header, rows, problems, unknown = _read_csv(p, data)
    # Records in the file: rows read plus rows already refused while reading.
    n_records = len(rows) + problems.skipped
    return _finish(p, fmt, header, rows, problems, unknown, n_records)


def _sniff(p: Path, data: bytes) -> str:
    """The format from the first line; binary data is refused here, bad later lines row by row."""
    if not data.strip():
        raise RxlogError(f"{p}: empty file; expected an event list (CSV, JSON or VOTable)")
    start = len(data) - len(data.lstrip())
    end = data.find(b"\n", start)
    head = data[start:end if 0 <= end < start + 4096 else start + 4096]
    if b"\x00" in head:
        raise RxlogError(f"{p}: binary data, not an event list; expected CSV, JSON or VOTable text")
    try:
        text = head.decode("utf-8-sig")
    except UnicodeDecodeError as e:
        if e.start < len(head) - 3:  # not just a character cut at the 4096-byte mark
            raise RxlogError(f"{p}: not UTF-8 text (byte {start + e.start}); expected an event list "
                             "(CSV, JSON or VOTable)") from None
        text = head[:e.start].decode("utf-8-sig")
    first = text.lstrip("\ufeff")[:1]
    if first in "{[":
        return "json"
    if first == "<":
        return "votable"
    return "csv"


def _short(v) -> str:
    s = repr(v)
    return s if len(s) <= 40 else s[:37] + "..."


def _convert(value, kind: str):
    """A cell (text from CSV, a JSON value, a VOTable value) -> typed value or None; ValueError if wrong."""
    if value is None:
        return None
    if not isinstance(value, (str, float, int)):
        if isinstance(value, np.ma.core.MaskedConstant):
            return None
        if isinstance(value, np.generic):
            value = value.item()
        if isinstance(value, bytes):
            value = value.decode("utf-8", errors="strict")
    if kind in ("str", "time"):
        if not isinstance(value, str):
            raise ValueError(f"expected text, got {_short(value)}")
        v = value.strip()
        if not v:
            return None
        if kind == "time":
            try:
                t = parse_iso(v)
                return v if CANONICAL_TIME.fullmatch(v) else iso(t)
            except (ValueError, OverflowError):
                raise ValueError(f"not an ISO 8601 UTC time: {_short(value)} "
                                 "(expected e.g. 2026-12-01T22:10:00.123Z)") from None
        return v
    if isinstance(value, bool):
        raise ValueError(f"expected a number, got {_short(value)}")
    if isinstance(value, str):
        v = value.strip()
        if not v:
            return None
        try:
            x = float(v)
        except ValueError:
            raise ValueError(f"expected a number, got {_short(value)}") from None
    elif isinstance(value, (int, float)):
        try:
            x = float(value)
        except OverflowError:
            raise ValueError(f"number out of range: {_short(value)}") from None
    else:
        raise ValueError(f"expected a number, got {_short(value)}")
    if math.isnan(x):
        return None
    if not math.isfinite(x):
        raise ValueError(f"expected a finite number, got {_short(value)}")
    if kind == "int":
        if x != int(x):
            raise ValueError(f"expected a whole number, got {_short(value)}")
        return int(x)
    return x


def _cell(v, kind: str):
    """_convert with a fast path for the common case: well-formed CSV text."""
    if v.__class__ is str:
        v = v.strip()
        if not v:
            return None
        if kind == "str":
            return v
        if kind == "float":
            try:
                x = float(v)
            except ValueError:
                x = math.nan  # _convert gives the message
            if math.isfinite(x):
                return x
        elif kind == "time" and CANONICAL_TIME.fullmatch(v):
            try:
                _dt.datetime.fromisoformat(v)  # a real date and time?
                return v
            except ValueError:
                pass  # _convert gives the message
    return _convert(v, kind)


def _era_text() -> tuple[str, str]:
    """The receiver era as canonical time text (which sorts in time order)."""
    return iso(validate.ERA_START), iso(validate.era_end())


def _event(cells: dict, era: tuple[str, str]) -> dict:
    """Typed, checked event from raw cells of the known columns; ValueError names the problem.

    ``era``: ``_era_text()``, the first and last times accepted."""
    ev = {}
    for name, kind in KIND.items():
        try:
            ev[name] = _cell(cells.get(name), kind)
        except ValueError as e:
            raise ValueError(f"{name}: {e}") from None
    for name in REQUIRED:
        if ev[name] is None:
            raise ValueError(f"{name}: empty; a value is required")
    for name, (lo, hi) in COLUMN_RANGES.items():
        v = ev[name]
        if v is not None and not lo <= v <= hi:
            raise ValueError(f"{name} {v:g}: expected {lo:g} to {hi:g}")
    for name in ("start_utc", "end_utc", "peak_utc"):
        t = ev[name]
        if not (CANONICAL_TIME.fullmatch(t) and era[0] <= t <= era[1]):   # in-era years have 4 digits
            raise ValueError(f"{name} {t}: outside the receiver era, {era[0][:10]} to {era[1][:10]} "
                             "(a wrong epoch or clock?)")
    if ev["class"] not in CLASSES:
        raise ValueError(f"class: unknown class {_short(ev['class'])}; expected one of {', '.join(CLASSES)}")
    if ev["label"] is not None and ev["label"] not in LABELS:
        raise ValueError(f"label: unknown label {_short(ev['label'])}; expected one of {', '.join(LABELS)}")
    t0, t1, tp = (ev[k] for k in ("start_utc", "end_utc", "peak_utc"))
    # Canonical times (same width, zero-padded) sort as text in time order.
    if t1 < t0:
        raise ValueError(f"end_utc {ev['end_utc']} is before start_utc {ev['start_utc']}")
    if not t0 <= tp <= t1:
        raise ValueError(f"peak_utc {ev['peak_utc']} is outside start_utc..end_utc")
    if not 0 < ev["fmin_mhz"] <= ev["fmax_mhz"]:
        raise ValueError(f"fmin_mhz {ev['fmin_mhz']} and fmax_mhz {ev['fmax_mhz']}: expected 0 < fmin <= fmax")
    if ev["station"] is not None and not STATION_NAME.fullmatch(ev["station"]):
        raise ValueError(f"station {_short(ev['station'])}: expected 1-40 letters, digits, '-' or '_'")
    return ev


def _header(raw: dict, where: str, notices: list[str]) -> dict:
    """Typed header values; a value of the wrong type becomes None with a notice."""
    out = {}
    for key, (kind, *_rest) in HEADER.items():
        if key not in raw:
            continue
        try:
            out[key] = _header_value(key, _convert(raw[key], kind))
        except ValueError as e:
            notices.append(f"{where}: header {key}: {e}; ignored")
    return out


def _header_value(key: str, v):
    """A typed header value checked against HEADER_RANGES and the receiver era; ValueError if outside."""
    if v is None:
        return v
    if key in HEADER_RANGES:
        lo, hi = HEADER_RANGES[key]
        if not lo <= v <= hi:
            raise ValueError(f"{v:g} is out of range, expected {lo:g} to {hi:g}")
    elif HEADER[key][0] == "time":
        problem = validate.era_problem(parse_iso(v))
        if problem:
            raise ValueError(f"{v}: {problem}")
    return v


def _read_csv(p: Path, data: bytes):
    problems = _Problems(str(p))
    header_raw: dict[str, str] = {}
    columns: list[str] | None = None
    rows: list[tuple[str, dict]] = []
    if data.startswith(b"\xef\xbb\xbf"):
        data = data[3:]
    lines = data.split(b"\n")
    if lines and lines[-1] == b"":
        lines.pop()
    header_line = 0
    for n, raw in enumerate(lines, start=1):
        loc = f"{n}"
        if len(raw) > MAX_LINE_CHARS:
            if columns is None:
                raise RxlogError(f"{p}:{n}: line of {len(raw)} bytes before the column row; "
                                 "expected '# key: value' header lines, then the column names")
            problems.row(loc, f"line of {len(raw)} bytes is longer than {MAX_LINE_CHARS}")
            continue
        try:
            line = raw.decode("utf-8").rstrip("\r")
        except UnicodeDecodeError as e:
            if columns is None:
                raise RxlogError(f"{p}:{n}: not UTF-8 text (byte {e.start}); expected an event list") from None
            problems.row(loc, f"not UTF-8 text (byte {e.start})")
            continue
        if columns is None:
            if not line.strip():
                continue
            if line.startswith("#"):
                m = re.match(r"#\s*([A-Za-z_][A-Za-z0-9_]*)\s*:\s?(.*)$", line)
                if m and m.group(1) in HEADER:
                    header_raw[m.group(1)] = m.group(2).strip()
                continue
            try:
                columns = [c.strip() for c in next(csv.reader([line], strict=True))]
            except csv.Error as e:
                raise RxlogError(f"{p}:{n}: unreadable column row ({e}); expected the column names") from None
            header_line = n
            missing = [c for c in REQUIRED if c not in columns]
            if missing:
                raise RxlogError(f"{p}:{n}: missing required column(s) {', '.join(missing)}; expected a "
                                 f"column row with at least {', '.join(REQUIRED)}")
            dup = sorted({c for c in columns if columns.count(c) > 1})
            if dup:
                raise RxlogError(f"{p}:{n}: column(s) {', '.join(dup)} appear more than once")
            continue
        if not line.strip():
            continue
        try:
            cells = next(csv.reader([line], strict=True))
        except csv.Error as e:
            problems.row(loc, f"unreadable CSV ({e})")
            continue
        if len(cells) != len(columns):
            problems.row(loc, f"{len(cells)} fields, expected {len(columns)} as in the column row "
                              f"(line {header_line})")
            continue
        rows.append((loc, dict(zip(columns, cells))))
    if columns is None:
        raise RxlogError(f"{p}: no column row found; expected '# key: value' header lines, then a "
                         f"row of column names ({', '.join(REQUIRED)}, ...)")
    unknown = [c for c in columns if c not in KIND]
    return header_raw, rows, problems, unknown


def _read_json(p: Path, data: bytes):
    problems = _Problems(str(p))
    try:
        doc = json.loads(data.decode("utf-8-sig"))
    except UnicodeDecodeError as e:
        raise RxlogError(f"{p}: not UTF-8 text (byte {e.start}); expected a JSON event list") from None
    except json.JSONDecodeError as e:
        raise RxlogError(f"{p}:{e.lineno}: not valid JSON ({e.msg} at column {e.colno}); "
                         "expected {\"header\": {...}, \"events\": [...]}") from None
    except (RecursionError, ValueError) as e:
        raise RxlogError(f"{p}: unreadable JSON ({str(e)[:80]}); expected an event list") from None
    if isinstance(doc, list):
        header_raw, events = {}, doc
    elif isinstance(doc, dict) and isinstance(doc.get("events"), list):
        header_raw = doc.get("header") if isinstance(doc.get("header"), dict) else {}
        events = doc["events"]
    else:
        raise RxlogError(f"{p}: JSON without an \"events\" list; expected "
                         "{\"header\": {...}, \"events\": [{...}, ...]}")
    rows, unknown = [], set()
    for i, ev in enumerate(events):
        loc = f"events[{i}]"
        if not isinstance(ev, dict):
            problems.row(loc, f"expected an object of column values, got {type(ev).__name__}")
            continue
        unknown.update(k for k in ev if k not in KIND)
        rows.append((loc, ev))
    return header_raw, rows, problems, sorted(map(str, unknown))


def check_xml_safe(data: bytes, where: str):
    """Refuse XML that declares a DOCTYPE or entities (entity expansion, external entities)
    before astropy's VOTable parser sees it: defusedxml parses it once with DTDs,
    entities and external references forbidden. A VOTable never needs any of them."""
    try:
        defused_et.fromstring(data, forbid_dtd=True, forbid_entities=True, forbid_external=True)
    except defusedxml.DefusedXmlException:
        raise RxlogError(f"{where}: XML with a DOCTYPE or entity declarations is refused; "
                         "expected a plain VOTable") from None
    except ET.ParseError as e:
        line = e.position[0] if getattr(e, "position", None) else "?"
        reason = str(e).split(":")[0]
        raise RxlogError(f"{where}:{line}: not well-formed XML ({reason}); expected a VOTable") from None


def _read_votable(p: Path, data: bytes):
    import warnings

    from astropy.io import votable

    check_xml_safe(data, str(p))
    problems = _Problems(str(p))
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            vot = votable.parse(io.BytesIO(data), verify="ignore")
            table = vot.get_first_table()
    except RxlogError:
        raise
    except Exception as e:  # any failure of the VOTable parser on untrusted input
        raise RxlogError(f"{p}: not a readable VOTable ({str(e)[:120]})") from None
    header_raw = {}
    for info in list(vot.iter_info()) + list(getattr(table, "infos", [])):
        if info.name in HEADER:
            header_raw[info.name] = info.value
    for param in table.params:
        if param.name in HEADER:
            v = param.value
            header_raw[param.name] = v.item() if isinstance(v, np.generic) else (
                None if np.ma.is_masked(v) else v)
    names = [f.name for f in table.fields]
    missing = [c for c in REQUIRED if c not in names]
    if missing:
        raise RxlogError(f"{p}: VOTable without required column(s) {', '.join(missing)}; expected FIELDs "
                         f"{', '.join(REQUIRED)}, ...")
    arr = table.array
    cols = {n: (arr[n].tolist() if not np.ma.isMaskedArray(arr[n]) else
                [None if m else v for v, m in zip(arr[n].data.tolist(), np.ma.getmaskarray(arr[n]).tolist())])
            for n in names if n in KIND}
    rows = [(f"row {i + 1}", {n: cols[n][i] for n in cols}) for i in range(len(arr))]
    unknown = [n for n in names if n not in KIND]
    return header_raw, rows, problems, unknown


def _finish(p: Path, fmt: str, header_raw: dict, rows: list[tuple[str, dict]], problems: _Problems,
            unknown: list[str], n_records: int) -> EventList:
    where = str(p)
    notices: list[str] = []
    header = _header(header_raw, where, notices)
    version = header.get("format_version")
    if version is not None and version > FORMAT_VERSION:
        notices.append(f"{where}: format_version {version} is newer than this rxlog reads "
                       f"({FORMAT_VERSION}); reading the columns it knows")
    if unknown:
        notices.append(f"{where}: ignoring unknown column(s) {', '.join(unknown[:12])}"
                       + (f" and {len(unknown) - 12} more" if len(unknown) > 12 else ""))
    station = header.get("station")
    if station is not None and not STATION_NAME.fullmatch(station):
        raise RxlogError(f"{where}: header station {_short(station)}: expected 1-40 letters, digits, '-' or '_'")
    events: list[dict] = []
    seen: dict[str, str] = {}
    era = _era_text()
    for loc, cells in rows:
        try:
            ev = _event(cells, era)
        except ValueError as e:
            problems.row(loc, str(e))
            continue
        if station is None:
            if ev["station"] is None:
                problems.row(loc, "station: empty, and the file has no station header")
                continue
            station = ev["station"]
        if ev["station"] is None:
            ev["station"] = station
        elif ev["station"] != station:
            problems.row(loc, f"station {ev['station']!r} differs from the file's station {station!r}")
            continue
        if ev["event_id"] in seen:
            problems.row(loc, f"duplicate event_id {ev['event_id']!r} (first at {seen[ev['event_id']]})")
            continue
        seen[ev["event_id"]] = loc
        events.append(ev)
    n_expected = header.get("n_events")
    if n_expected is not None and n_expected != n_records:
        notices.append(f"{where}: header says {n_expected} events but the file holds {n_records} rows "
                       "(truncated or edited?)")
    notices = problems.summary() + notices
    if not events:
        detail = ("; " + "; ".join(problems.lines[:3])) if problems.lines else ""
        raise RxlogError(f"{where}: no usable events ({n_records} rows, {problems.skipped} skipped){detail}")
    header["station"] = station
    header.setdefault("format_version", None)
    return EventList(station=header, events=events, notices=notices, path=where, format=fmt)
