"""VOEvent 2.0 notices checked against the IVOA VOEvent 2.0 XML schema (tests/data/VOEvent-v2.0.xsd,
the IVOA Recommendation's schema; see tests/data/README.md) with lxml."""

from pathlib import Path

import pytest
from exchange_helpers import T0, event, station_config

from rxlog.errors import RxlogError
from rxlog.exchange.voevent import write_voevents
from rxlog.store import EventStore

lxml = pytest.importorskip("lxml.etree")
XSD = Path(__file__).parent / "data" / "VOEvent-v2.0.xsd"
NS = "{http://www.ivoa.net/xml/VOEvent/v2.0}"


@pytest.fixture(scope="module")
def schema():
    return lxml.XMLSchema(lxml.parse(str(XSD)))


@pytest.fixture
def store_cfg(tmp_path):
    cfg = station_config(tmp_path)
    store = EventStore(cfg.store_path)
    evs = [event("st-a", T0 + 100, cls="solar_iii", drift_mhz_s=-2.4, confidence=0.9),
           event("st-a", T0 + 900, fmin=16.5, fmax=19.0, cls="jovian_l", dur=120, cml3_deg=230.5,
                 io_phase_deg=240.0, source_region="Io-A", confidence=0.7),
           event("st-a", T0 + 2000, cls="unknown", confidence=None)]
    store.upsert_events(evs)
    store.add_label(evs[2]["event_id"], "solar_ii", who="ana")
    store.record_health({"station": "st-a", "time_utc": "2027-01-15T09:00:00.000Z", "clock_sync": "synced"})
    store.close()
    return cfg, evs


def test_notices_validate_against_the_voevent_2_0_schema(store_cfg, tmp_path, schema):
    cfg, evs = store_cfg
    paths = write_voevents(cfg, tmp_path / "notices", [e["event_id"] for e in evs])
    assert len(paths) == 3
    for p in paths:
        doc = lxml.parse(str(p))
        assert schema.validate(doc), (p.name, schema.error_log)


def test_notice_carries_the_event_and_the_station(store_cfg, tmp_path):
    cfg, evs = store_cfg
    (path,) = write_voevents(cfg, tmp_path / "n", [evs[1]["event_id"]])
    root = lxml.parse(str(path)).getroot()
    assert root.tag == f"{NS}VOEvent" and root.get("version") == "2.0" and root.get("role") == "observation"
    assert root.get("ivorn").endswith("#" + evs[1]["event_id"])
    params = {p.get("name"): p for p in root.iter("Param")}
    assert params["class"].get("value") == "jovian_l"
    assert params["fmin_mhz"].get("unit") == "MHz" and float(params["fmin_mhz"].get("value")) == 16.5
    assert params["source_region"].get("value") == "Io-A"
    assert params["clock_sync"].get("value") == "synced"   # from the latest health row
    assert float(params["latitude_deg"].get("value")) == 47.5
    assert root.findtext("WhereWhen/ObsDataLocation/ObservationLocation/AstroCoords/Time/TimeInstant/ISOTime") \
        == evs[1]["peak_utc"][:-1]
    assert root.findtext("Why/Inference/Name") == "Jupiter"
    pos = root.find("WhereWhen/ObsDataLocation/ObservatoryLocation/AstroCoords/Position3D/Value3")
    assert [float(pos.findtext(c)) for c in ("C1", "C2", "C3")] == [8.7, 47.5, 450.0]


def test_reviewer_label_sets_the_notice_concept(store_cfg, tmp_path):
    cfg, evs = store_cfg
    (path,) = write_voevents(cfg, tmp_path / "n", [evs[2]["event_id"]])
    root = lxml.parse(str(path)).getroot()
    assert root.findtext("Why/Inference/Concept") == "Solar radio burst, type II"
    assert root.find("Why").get("importance") is None  # no detector confidence: no importance claimed


def test_unknown_event_id_writes_nothing(store_cfg, tmp_path):
    cfg, evs = store_cfg
    out = tmp_path / "n"
    with pytest.raises(RxlogError, match="no event 'nope'"):
        write_voevents(cfg, out, [evs[0]["event_id"], "nope"])
    assert not out.exists() or not any(out.iterdir())
