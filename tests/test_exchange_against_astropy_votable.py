"""VOTable export checked with astropy (astropy.io.votable 8.x): the validator, the VOTable 1.4
XML schema astropy ships, astropy's UCD1+ word list, and a read-back with astropy.table."""

import io
import math
from pathlib import Path

import numpy as np
import pytest
from astropy.io import votable
from astropy.io.votable.ucd import check_ucd
from astropy.table import Table

from rxlog.exchange.columns import COLUMNS, FORMAT_VERSION, HEADER
from rxlog.exchange.export import write_event_list
from rxlog.exchange.importer import read_event_list
from rxlog.store import make_event_id
from rxlog.timeutil import iso

T0 = 1_800_000_000.0


def header(**kw):
    h = {"format_version": FORMAT_VERSION, "rxlog_version": "0.1.0", "exported_utc": iso(T0), "station": "st-a",
         "latitude_deg": 47.5, "longitude_deg": 8.7, "elevation_m": 450.0, "antenna": "dipole, E-W",
         "receiver": "rtlsdr", "clock_sync": "synced", "band_fmin_mhz": 16.0, "band_fmax_mhz": 24.0,
         "channels": 1024, "cadence_s": 1.0, "period_start_utc": iso(T0), "period_end_utc": None}
    h.update(kw)
    return h


def events(n=7):
    out = []
    for i in range(n):
        peak = T0 + 600 * i + 0.123
        out.append({"station": "st-a", "event_id": make_event_id("st-a", peak, 18.0, 22.0 + i / 7),
                    "start_utc": iso(peak - 2.5), "end_utc": iso(peak + 4), "peak_utc": iso(peak),
                    "fmin_mhz": 18.0, "fmax_mhz": 22.0 + i / 7, "peak_excess_db": 3.25 + i,
                    "snr": 11.0 + i, "drift_mhz_s": -2.47 if i % 2 else None,
                    "class": ["solar_iii", "jovian_l", "unknown"][i % 3], "confidence": 0.5 + i / 20,
                    "label": "solar_iii" if i == 0 else None, "cml3_deg": 10.0 * i if i % 3 else None,
                    "io_phase_deg": 123.456, "source_region": "Io-B" if i % 3 == 1 else None,
                    "jupiter_alt_deg": -12.5 + i, "sun_alt_deg": 33.0})
    return out


@pytest.fixture
def vot(tmp_path) -> Path:
    return write_event_list(tmp_path / "st-a.vot", "votable", header(), events())


def test_votable_passes_astropy_validate_with_no_warnings(vot):
    report = io.StringIO()
    # astropy.io.votable.validate returns True only when it found no warnings at all.
    assert votable.validate(str(vot), output=report) is True, report.getvalue()


def test_votable_is_valid_against_the_votable_1_4_schema(vot):
    lxml = pytest.importorskip("lxml.etree")
    xsd = Path(votable.__file__).parent / "data" / "VOTable.v1.4.xsd"  # IVOA schema shipped by astropy
    schema = lxml.XMLSchema(lxml.parse(str(xsd)))
    doc = lxml.parse(str(vot))
    assert schema.validate(doc), schema.error_log


def test_column_and_header_ucds_are_ucd1plus_words():
    # astropy's check_ucd against the IVOA UCD1+ controlled vocabulary it ships.
    for name, _kind, _unit, ucd, _desc in COLUMNS:
        assert check_ucd(ucd, check_controlled_vocabulary=True), (name, ucd)
    for key, (_kind, _unit, ucd, _desc) in HEADER.items():
        assert check_ucd(ucd, check_controlled_vocabulary=True), (key, ucd)


def test_votable_reads_back_with_astropy_table_to_the_same_values(vot):
    t = Table.read(vot, format="votable")
    evs = events()
    assert len(t) == len(evs)
    for name, kind, unit, _ucd, _desc in COLUMNS:
        col = t[name]
        if unit:
            assert str(col.unit) == {"MHz/s": "MHz / s"}.get(unit, unit)
        for row, ev in zip(col, evs):
            want = ev[name]
            if kind == "float":
                if want is None:
                    assert np.ma.is_masked(row) or math.isnan(float(row))
                else:
                    assert float(row) == want
            else:
                assert (str(row) if not np.ma.is_masked(row) else "") == (want or "")


def test_votable_station_metadata_travels_as_params_and_infos(vot):
    vt = votable.parse(str(vot))
    table = vt.get_first_table()
    params = {p.name: p.value for p in table.params}
    assert params["station"] == "st-a"
    assert float(params["latitude_deg"]) == 47.5 and float(params["longitude_deg"]) == 8.7
    assert float(params["elevation_m"]) == 450.0 and float(params["cadence_s"]) == 1.0
    assert params["receiver"] == "rtlsdr" and params["clock_sync"] == "synced"
    assert params["antenna"] == "dipole, E-W"
    infos = {i.name: i.value for i in vt.iter_info()}
    assert infos["format_version"] == str(FORMAT_VERSION)
    assert infos["rxlog_version"] == "0.1.0"


def test_votable_reads_back_with_rxlog_to_the_same_events(vot):
    el = read_event_list(vot)
    assert el.format == "votable" and el.notices == []
    assert el.events == events()
    assert el.station["station"] == "st-a" and el.station["channels"] == 1024
    assert el.station["format_version"] == FORMAT_VERSION
