"""Exports read back the same: CSV with the stdlib csv module (RFC 4180), JSON with the stdlib
json module (RFC 8259), all three formats with rxlog's own strict importer; filters and header."""

import csv
import json

import pytest
from exchange_helpers import T0, event, station_config

from rxlog import __version__
from rxlog.errors import RxlogError
from rxlog.exchange.columns import COLUMN_NAMES, FORMAT_VERSION, FORMATS, SUFFIX
from rxlog.exchange.export import export_events
from rxlog.exchange.importer import read_event_list
from rxlog.store import EventStore
from rxlog.timeutil import iso


@pytest.fixture
def cfg(tmp_path):
    cfg = station_config(tmp_path)
    store = EventStore(cfg.store_path)
    store.upsert_events([
        event("st-a", T0 + 100, cls="solar_iii", drift_mhz_s=-2.4, reason="fast drift, 16-24 MHz"),
        event("st-a", T0 + 900, fmin=16.5, fmax=19.0, cls="jovian_l", dur=120, cml3_deg=230.5,
              io_phase_deg=240.25, source_region="Io-A"),
        event("st-a", T0 + 1500, fmin=19.99, fmax=20.01, cls="rfi"),
        event("st-a", T0 + 5000, cls="unknown"),
        event("st-b", T0 + 100, cls="solar_iii"),  # another station's event in the same store
    ])
    store.add_label(store.events(cls="unknown")[0]["event_id"], "solar_ii", who="ana")
    store.record_health({"station": "st-a", "time_utc": iso(T0), "clock_sync": "unsynced"})
    store.record_health({"station": "st-a", "time_utc": iso(T0 + 60), "clock_sync": "synced"})
    store.close()
    return cfg


def comment_header(path):
    h = {}
    for line in path.read_text().splitlines():
        if not line.startswith("#"):
            break
        key, sep, value = line[1:].partition(":")
        if sep:
            h[key.strip()] = value.strip()
    return h


def test_csv_reads_back_with_stdlib_csv(cfg, tmp_path):
    out = tmp_path / "a.csv"
    assert export_events(cfg, out, "csv") == 3  # rfi left out, st-b's event left out
    with out.open(newline="") as f:
        rows = list(csv.DictReader(line for line in f if not line.startswith("#")))
    assert [r["class"] for r in rows] == ["solar_iii", "jovian_l", "unknown"]
    assert list(rows[0]) == list(COLUMN_NAMES)
    assert rows[1]["cml3_deg"] == "230.5" and rows[1]["source_region"] == "Io-A"
    assert rows[0]["drift_mhz_s"] == "-2.4" and rows[1]["drift_mhz_s"] == ""
    assert rows[0]["peak_utc"] == iso(T0 + 100) and rows[0]["peak_utc"].endswith(".000Z")
    assert rows[2]["label"] == "solar_ii" and rows[0]["label"] == ""
    h = comment_header(out)
    assert h["format_version"] == str(FORMAT_VERSION) and h["rxlog_version"] == __version__
    assert h["station"] == "st-a" and float(h["latitude_deg"]) == 47.5 and float(h["elevation_m"]) == 450.0
    assert h["antenna"] == "dual dipole, E-W" and h["receiver"] == "simulated"
    assert h["clock_sync"] == "synced"          # the latest health row
    assert float(h["band_fmin_mhz"]) == 16.0 and float(h["cadence_s"]) == 1.0 and h["channels"] == "1024"
    assert h["n_events"] == "3"


def test_json_reads_back_with_stdlib_json(cfg, tmp_path):
    out = tmp_path / "a.json"
    export_events(cfg, out, "json", include_rfi=True)
    doc = json.loads(out.read_text())
    assert doc["header"]["format_version"] == FORMAT_VERSION and doc["header"]["station"] == "st-a"
    assert doc["header"]["n_events"] == 4
    assert [e["class"] for e in doc["events"]] == ["solar_iii", "jovian_l", "rfi", "unknown"]
    assert doc["events"][1]["io_phase_deg"] == 240.25 and doc["events"][0]["cml3_deg"] is None


@pytest.mark.parametrize("fmt", FORMATS)
def test_every_format_reads_back_to_the_same_events(cfg, tmp_path, fmt):
    out = tmp_path / f"a{SUFFIX[fmt]}"
    export_events(cfg, out, fmt, include_rfi=True)
    store = EventStore(cfg.store_path)
    want = [{k: e.get(k) for k in COLUMN_NAMES} for e in store.events(station="st-a")]
    store.close()
    el = read_event_list(out)
    assert el.events == want and el.notices == [] and el.format == fmt
    assert el.station["station"] == "st-a" and el.station["clock_sync"] == "synced"
    assert el.station["format_version"] == FORMAT_VERSION


def test_time_range_and_labelled_only(cfg, tmp_path):
    out = tmp_path / "a.csv"
    assert export_events(cfg, out, "csv", t0=T0 + 500, t1=T0 + 4000, include_rfi=True) == 2
    h = comment_header(out)
    assert h["period_start_utc"] == iso(T0 + 500) and h["period_end_utc"] == iso(T0 + 4000)
    assert export_events(cfg, out, "csv", labelled_only=True) == 1
    assert [e["label"] for e in read_event_list(out).events] == ["solar_ii"]


def test_export_without_a_store_is_a_clear_error(tmp_path):
    cfg = station_config(tmp_path, name="fresh")
    with pytest.raises(RxlogError, match="no event store yet"):
        export_events(cfg, tmp_path / "x.csv", "csv")
    assert not (tmp_path / "x.csv").exists()
    with pytest.raises(RxlogError, match="unknown export format"):
        export_events(cfg, tmp_path / "x.csv", "xlsx")
