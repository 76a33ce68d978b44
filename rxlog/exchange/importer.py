"""Event lists and episode lists from partner stations, read strictly and safely (CSV,
JSON or VOTable).

Imports take files from anyone: nothing is evaluated or unpickled, XML with a DOCTYPE
or entity declarations is refused (by defusedxml) before astropy's VOTable parser sees
it, each bad row is reported with file and line and skipped, and a file with nothing
usable left is refused with an ``RxlogError``. The layouts read are
rxlog.exchange.columns' (an event list or an episode list, told apart by the header's
``format``, else by the columns), each in any ``format_version`` up to this rxlog's.
"""

from __future__ import annotations

import csv
import datetime as _dt
import io
import json
import math
import re
import warnings
import xml.etree.ElementTree as ET
from dataclasses import dataclass, field
from pathlib import Path

import defusedxml
import defusedxml.ElementTree as defused_et
import numpy as np

from rxlog import validate
from rxlog.errors import RxlogError
from rxlog.exchange.columns import BURSTS, EPISODES, Layout
from rxlog.store import CLASSES, LABELS
from rxlog.timeutil import iso, parse_iso

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
    **{k: (0.0, 360.0) for k in ("cml3_start_deg", "cml3_end_deg", "io_phase_start_deg", "io_phase_end_deg")},
    **{k: (-90.0, 90.0) for k in ("jupiter_alt_min_deg", "jupiter_alt_max_deg", "sun_alt_min_deg", "sun_alt_max_deg")},
    "n_bursts": (0, 1 << 40),
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
    "n_episodes": (0, 1 << 40),
    "format_version": (1, 1 << 20),
}

# Limits that keep a hostile or broken file from exhausting memory (our own choice: a
# year of events of a busy station is a few MB).
MAX_FILE_BYTES = 256 * 1024 * 1024
MAX_LINE_CHARS = 64 * 1024
MAX_ROW_NOTICES = 20  # problem rows reported one by one per file; the rest are counted


@dataclass
class EventList:
    """One station's events (or episodes) as read from a file: header, rows, and what was wrong."""

    station: dict                       # header values (station, latitude_deg, ..., format_version)
    events: list[dict]                  # the layout's fields; times as ISO strings, numbers or None
    notices: list[str] = field(default_factory=list)
    path: str = ""
    format: str = ""
    level: str = "bursts"               # "episodes" for an episode list (rows are episodes)

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
    """Read an event list or an episode list (CSV, JSON or VOTable, any format_version of ours) strictly.

    Bad rows are skipped and reported in ``notices`` with file and line; raises
    RxlogError when the file is unreadable or nothing usable is left.
    """
    p = Path(path)
    try:
        data = validate.read_capped(p, MAX_FILE_BYTES, "an event list")
    except OSError as e:
        raise RxlogError(f"{p}: cannot read ({e.strerror or e})") from None
    fmt = _sniff(p, data)
    if fmt == "json":
        layout, header, rows, problems, unknown = _read_json(p, data)
    elif fmt == "votable":
        layout, header, rows, problems, unknown = _read_votable(p, data)
    else:
        layout, header, rows, problems, unknown = _read_csv(p, data)
    # Records in the file: rows read plus rows already refused while reading.
    n_records = len(rows) + problems.skipped
    return _finish(p, fmt, layout, header, rows, problems, unknown, n_records)


def _layout_of(format_name, names) -> Layout:
    """The layout a file declares in its header's ``format``; without one, the episode list
    when its columns name episodes and not events."""
    name = str(format_name or "").strip()
    if name == EPISODES.name:
        return EPISODES
    if name == BURSTS.name:
        return BURSTS
    names = set(names)
    return EPISODES if "episode_id" in names and "event_id" not in names else BURSTS


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


def _event(cells: dict, era: tuple[str, str], layout: Layout = BURSTS) -> dict:
    """Typed, checked event (or episode) from raw cells of the known columns; ValueError
    names the problem.

    ``era``: ``_era_text()``, the first and last times accepted."""
    ev = {}
    kinds = layout.kind
    for name, kind in kinds.items():
        try:
            ev[name] = _cell(cells.get(name), kind)
        except ValueError as e:
            raise ValueError(f"{name}: {e}") from None
    for name in layout.required:
        if ev[name] is None:
            raise ValueError(f"{name}: empty; a value is required")
    for name, (lo, hi) in COLUMN_RANGES.items():
        v = ev.get(name)
        if v is not None and not lo <= v <= hi:
            raise ValueError(f"{name} {v:g}: expected {lo:g} to {hi:g}")
    for name in ("start_utc", "end_utc", "peak_utc") if "peak_utc" in kinds else ("start_utc", "end_utc"):
        t = ev[name]
        if not (CANONICAL_TIME.fullmatch(t) and era[0] <= t <= era[1]):   # in-era years have 4 digits
            raise ValueError(f"{name} {t}: outside the receiver era, {era[0][:10]} to {era[1][:10]} "
                             "(a wrong epoch or clock?)")
    if ev["class"] not in CLASSES:
        raise ValueError(f"class: unknown class {_short(ev['class'])}; expected one of {', '.join(CLASSES)}")
    if ev["label"] is not None and ev["label"] not in LABELS:
        raise ValueError(f"label: unknown label {_short(ev['label'])}; expected one of {', '.join(LABELS)}")
    t0, t1, tp = (ev.get(k) for k in ("start_utc", "end_utc", "peak_utc"))
    # Canonical times (same width, zero-padded) sort as text in time order.
    if t1 < t0:
        raise ValueError(f"end_utc {ev['end_utc']} is before start_utc {ev['start_utc']}")
    if tp is not None and not t0 <= tp <= t1:
        raise ValueError(f"peak_utc {ev['peak_utc']} is outside start_utc..end_utc")
    if not 0 < ev["fmin_mhz"] <= ev["fmax_mhz"]:
        raise ValueError(f"fmin_mhz {ev['fmin_mhz']} and fmax_mhz {ev['fmax_mhz']}: expected 0 < fmin <= fmax")
    if ev["station"] is not None and not STATION_NAME.fullmatch(ev["station"]):
        raise ValueError(f"station {_short(ev['station'])}: expected 1-40 letters, digits, '-' or '_'")
    return ev


def _header(raw: dict, where: str, notices: list[str], layout: Layout = BURSTS) -> dict:
    """Typed header values; a value of the wrong type becomes None with a notice."""
    out = {}
    for key, (kind, *_rest) in layout.header.items():
        if key not in raw:
            continue
        try:
            out[key] = _header_value(key, kind, _convert(raw[key], kind))
        except ValueError as e:
            notices.append(f"{where}: header {key}: {e}; ignored")
    return out


def _header_value(key: str, kind: str, v):
    """A typed header value checked against HEADER_RANGES and the receiver era; ValueError if outside."""
    if v is None:
        return v
    if key in HEADER_RANGES:
        lo, hi = HEADER_RANGES[key]
        if not lo <= v <= hi:
            raise ValueError(f"{v:g} is out of range, expected {lo:g} to {hi:g}")
    elif kind == "time":
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
                if m and (m.group(1) in BURSTS.header or m.group(1) in EPISODES.header):
                    header_raw[m.group(1)] = m.group(2).strip()
                continue
            try:
                columns = [c.strip() for c in next(csv.reader([line], strict=True))]
            except csv.Error as e:
                raise RxlogError(f"{p}:{n}: unreadable column row ({e}); expected the column names") from None
            header_line = n
            layout = _layout_of(header_raw.get("format"), columns)
            missing = [c for c in layout.required if c not in columns]
            if missing:
                raise RxlogError(f"{p}:{n}: missing required column(s) {', '.join(missing)}; expected a "
                                 f"column row with at least {', '.join(layout.required)}")
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
                         f"row of column names ({', '.join(BURSTS.required)}, ...)")
    unknown = [c for c in columns if c not in layout.kind]
    return layout, header_raw, rows, problems, unknown


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
    header_raw = doc.get("header") if isinstance(doc, dict) and isinstance(doc.get("header"), dict) else {}
    layout = EPISODES if isinstance(doc, dict) and (header_raw.get("format") == EPISODES.name or (
        "events" not in doc and "episodes" in doc)) else BURSTS
    if isinstance(doc, list):
        events = doc
    elif isinstance(doc, dict) and isinstance(doc.get(layout.noun), list):
        events = doc[layout.noun]
    else:
        raise RxlogError(f"{p}: JSON without an \"events\" list; expected "
                         "{\"header\": {...}, \"events\": [{...}, ...]}")
    rows, unknown = [], set()
    for i, ev in enumerate(events):
        loc = f"events[{i}]"
        if not isinstance(ev, dict):
            problems.row(loc, f"expected an object of column values, got {type(ev).__name__}")
            continue
        unknown.update(k for k in ev if k not in layout.kind)
        rows.append((loc, ev))
    return layout, header_raw, rows, problems, sorted(map(str, unknown))


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
    from astropy.io import (
        votable,  # loaded only for VOTables: it takes a second or more to import
    )

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
    keys = set(BURSTS.header) | set(EPISODES.header)
    for info in list(vot.iter_info()) + list(getattr(table, "infos", [])):
        if info.name in keys:
            header_raw[info.name] = info.value
    for param in table.params:
        if param.name in keys:
            v = param.value
            header_raw[param.name] = v.item() if isinstance(v, np.generic) else (
                None if np.ma.is_masked(v) else v)
    names = [f.name for f in table.fields]
    layout = _layout_of(header_raw.get("format"), names)
    missing = [c for c in layout.required if c not in names]
    if missing:
        raise RxlogError(f"{p}: VOTable without required column(s) {', '.join(missing)}; expected FIELDs "
                         f"{', '.join(layout.required)}, ...")
    arr = table.array
    cols = {n: (arr[n].tolist() if not np.ma.isMaskedArray(arr[n]) else
                [None if m else v for v, m in zip(arr[n].data.tolist(), np.ma.getmaskarray(arr[n]).tolist())])
            for n in names if n in layout.kind}
    rows = [(f"row {i + 1}", {n: cols[n][i] for n in cols}) for i in range(len(arr))]
    unknown = [n for n in names if n not in layout.kind]
    return layout, header_raw, rows, problems, unknown


def _finish(p: Path, fmt: str, layout: Layout, header_raw: dict, rows: list[tuple[str, dict]],
            problems: _Problems, unknown: list[str], n_records: int) -> EventList:
    where = str(p)
    notices: list[str] = []
    header = _header(header_raw, where, notices, layout)
    version = header.get("format_version")
    if version is not None and version > layout.version:
        notices.append(f"{where}: format_version {version} is newer than this rxlog reads "
                       f"({layout.version}); reading the columns it knows")
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
            ev = _event(cells, era, layout)
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
        key = ev[layout.id_key]
        if key in seen:
            problems.row(loc, f"duplicate {layout.id_key} {key!r} (first at {seen[key]})")
            continue
        seen[key] = loc
        events.append(ev)
    n_expected = header.get(layout.count_key)
    if n_expected is not None and n_expected != n_records:
        notices.append(f"{where}: header says {n_expected} {layout.noun} but the file holds {n_records} rows "
                       "(truncated or edited?)")
    notices = problems.summary() + notices
    if not events:
        detail = ("; " + "; ".join(problems.lines[:3])) if problems.lines else ""
        raise RxlogError(f"{where}: no usable {layout.noun} ({n_records} rows, {problems.skipped} skipped){detail}")
    header["station"] = station
    header.setdefault("format_version", None)
    return EventList(station=header, events=events, notices=notices, path=where, format=fmt, level=layout.level)
