"""Event lists and episode lists written for partner stations: CSV, JSON and VOTable.

Three encodings carry the same content (the layouts are rxlog.exchange.columns: one row
per event, the bursts, or one per episode):

- CSV (RFC 4180) with ISO 8601 UTC times: header lines ``# key: value`` before the
  column row;
- JSON (RFC 8259): ``{"header": {...}, "events": [{...}, ...]}`` (``"episodes"`` in an
  episode list);
- VOTable 1.4 (IVOA), written with astropy.io.votable: station metadata as PARAMs,
  format and provenance as INFOs, one FIELD per column with unit and UCD.

Files are replaced atomically (rxlog.fileio.write_atomic).
"""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import numpy as np

from rxlog import __version__
from rxlog.errors import RxlogError
from rxlog.exchange.columns import (
    BURSTS,
    FORMATS,
    LAYOUTS,
    Layout,
    cell_text,
    export_row,
    station_header,
)
from rxlog.fileio import write_atomic
from rxlog.store import EventStore


def events_from_store(cfg, fetch) -> tuple[list[dict], str]:
    """``fetch(store)``'s events from the station's event store, and the clock-sync state
    the station last reported ("unknown" if none)."""
    if not Path(cfg.store_path).exists():
        raise RxlogError(f"{cfg.store_path}: no event store yet; run the logger (or the demo) first")
    store = EventStore(cfg.store_path)
    try:
        events = fetch(store)
        health = store.latest_health(cfg["station"]["name"]) or store.latest_health()
    finally:
        store.close()
    return events, (health or {}).get("clock_sync") or "unknown"


def export_events(cfg, path, fmt: str, t0: float | None = None, t1: float | None = None,
                  include_rfi: bool = False, labelled_only: bool = False, level: str = "bursts") -> int:
    """Write this station's events peaking in [t0, t1) to ``path`` as csv, json or votable;
    with ``level="episodes"``, its episodes starting in [t0, t1), one row each, with their
    context (rxlog.exchange.columns.EPISODES).

    Returns the number of rows written. The file is replaced atomically.
    """
    if fmt not in FORMATS:
        raise RxlogError(f"unknown export format {fmt!r}; expected one of {', '.join(FORMATS)}")
    if level not in LAYOUTS:
        raise RxlogError(f"unknown export level {level!r}; expected one of {', '.join(LAYOUTS)}")
    station = cfg["station"]["name"]
    if level == "episodes":
        fetch = lambda store: store.episodes_with_context(t0, t1, station=station, include_rfi=include_rfi,
                                                          labelled_only=labelled_only, starting=True)
    else:
        fetch = lambda store: store.events(t0=t0, t1=t1, include_rfi=include_rfi, labelled_only=labelled_only,
                                           station=station)
    rows, clock = events_from_store(cfg, fetch)
    layout = LAYOUTS[level]
    header = station_header(cfg, clock_sync=clock, n_events=len(rows), t0=t0, t1=t1, layout=layout)
    write_event_list(path, fmt, header, rows, layout)
    return len(rows)


def write_event_list(path, fmt: str, header: dict, events: list[dict], layout: Layout = BURSTS) -> Path:
    """Write ``events`` (dicts with the event store's field names; episodes with
    ``layout=EPISODES``) with ``header`` to ``path``."""
    if fmt not in FORMATS:
        raise RxlogError(f"unknown export format {fmt!r}; expected one of {', '.join(FORMATS)}")
    header = dict(header, **{layout.count_key: len(events)})
    rows = [export_row(e, layout) for e in events]
    if fmt == "csv":
        data = _csv_bytes(header, rows, layout)
    elif fmt == "json":
        data = _json_bytes(header, rows, layout)
    else:
        data = _votable_bytes(header, rows, layout)
    return write_atomic(Path(path), data)


def _csv_bytes(header: dict, rows: list[dict], layout: Layout) -> bytes:
    out = io.StringIO(newline="")
    out.write(f"# {layout.name}: one station's {layout.noun}; times ISO 8601 UTC, frequencies MHz\n")
    for key in layout.header:
        out.write(f"# {key}: {cell_text(header.get(key))}\n")
    w = csv.writer(out, lineterminator="\n")
    w.writerow(layout.names)
    for r in rows:
        w.writerow([cell_text(r[c]) for c in layout.names])
    return out.getvalue().encode("utf-8")


def _json_bytes(header: dict, rows: list[dict], layout: Layout) -> bytes:
    doc = {"header": {k: header.get(k) for k in layout.header}, layout.noun: rows}
    return (json.dumps(doc, indent=1, allow_nan=False, ensure_ascii=False) + "\n").encode("utf-8")


def _votable_bytes(header: dict, rows: list[dict], layout: Layout) -> bytes:
    # Loaded only for VOTables: astropy.io.votable takes a second or more to import.
    from astropy.io.votable.tree import (
        Field,
        Info,
        Param,
        Resource,
        TableElement,
        VOTableFile,
    )

    vo = VOTableFile(version="1.4")
    res = Resource()
    vo.resources.append(res)
    res.infos.append(Info(name="format", value=layout.name))
    res.infos.append(Info(name="format_version", value=str(layout.version)))
    res.infos.append(Info(name="rxlog_version", value=str(header.get("rxlog_version") or __version__)))
    res.infos.append(Info(name="time_scale", value="UTC"))
    table = TableElement(vo, name=layout.noun)
    table.description = f"{layout.name} of station {header.get('station')}"
    res.tables.append(table)
    for key, (kind, unit, ucd, desc) in layout.header.items():
        if key in ("format", "format_version", "rxlog_version"):
            continue
        value = header.get(key)
        kw = {"datatype": {"float": "double", "int": "long"}.get(kind, "char")}
        if kw["datatype"] == "char":
            kw["arraysize"] = "*"
            value = cell_text(value)
        elif value is None:
            value = "NaN" if kind == "float" else None
            if value is None:
                continue
        p = Param(vo, name=key, ID=f"h_{key}", ucd=ucd, unit=unit or None, value=value, **kw)
        p.description = desc
        table.params.append(p)
    for name, kind, unit, ucd, desc in layout.columns:
        kw = {"datatype": {"float": "double", "int": "long"}[kind]} if kind in ("float", "int") \
            else {"datatype": "char", "arraysize": "*"}
        if kind == "time":
            kw["xtype"] = "timestamp"  # DALI 1.1 ISO 8601 timestamp
        f = Field(vo, name=name, ID=name, ucd=ucd, unit=unit or None, **kw)
        f.description = desc
        table.fields.append(f)
    table.create_arrays(len(rows))
    for name, kind, *_ in layout.columns:
        if kind == "float":
            table.array[name] = np.array([np.nan if r[name] is None else r[name] for r in rows], dtype=float)
        elif kind == "int":
            table.array[name] = np.array([r[name] or 0 for r in rows], dtype=np.int64)
        else:
            col = np.empty(len(rows), dtype=object)
            col[:] = [r[name] or "" for r in rows]
            table.array[name] = col
    buf = io.BytesIO()
    vo.to_xml(buf)
    return buf.getvalue()
