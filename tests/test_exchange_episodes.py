"""Episode lists: `rxlog export --level episodes` in every format, read back by the strict
importer; VOEvent notices per episode against the IVOA schema; the episode layout's own
format version; `rxlog compare` confirming episodes across stations on the clocks the
bursts give."""

from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from exchange_helpers import T0, event, list_header, sky, station_config, station_list

from rxlog.cli import main
from rxlog.exchange.columns import (
    EPISODE_COLUMNS,
    EPISODE_FORMAT_NAME,
    EPISODE_FORMAT_VERSION,
    FORMATS,
    SUFFIX,
)
from rxlog.exchange.compare import compare_stations
from rxlog.exchange.export import export_events
from rxlog.exchange.importer import EventList, read_event_list
from rxlog.store import EventStore
from rxlog.timeutil import iso

lxml = pytest.importorskip("lxml.etree")

# The episode list's layout as each format_version defines it: (name, kind, unit) per
# column. A change of EPISODE_COLUMNS must come with a new EPISODE_FORMAT_VERSION and its
# layout added here; partners' readers rely on it.
LAYOUTS = {
    1: (("station", "str", ""), ("episode_id", "str", ""), ("start_utc", "time", ""), ("end_utc", "time", ""),
        ("fmin_mhz", "float", "MHz"), ("fmax_mhz", "float", "MHz"), ("class", "str", ""),
        ("confidence", "float", ""), ("n_bursts", "int", ""), ("peak_excess_db", "float", "dB"),
        ("reason", "str", ""), ("sequence_id", "str", ""), ("label", "str", ""),
        ("cml3_start_deg", "float", "deg"), ("cml3_end_deg", "float", "deg"),
        ("io_phase_start_deg", "float", "deg"), ("io_phase_end_deg", "float", "deg"),
        ("source_region", "str", ""), ("jupiter_alt_min_deg", "float", "deg"),
        ("jupiter_alt_max_deg", "float", "deg"), ("sun_alt_min_deg", "float", "deg"),
        ("sun_alt_max_deg", "float", "deg")),
}


def test_episode_columns_do_not_change_without_a_format_version_bump():
    assert tuple((c[0], c[1], c[2]) for c in EPISODE_COLUMNS) == LAYOUTS[EPISODE_FORMAT_VERSION]


@pytest.fixture(scope="module")
def schema():
    # The IVOA Recommendation's schema (tests/data/README.md says where it comes from).
    return lxml.XMLSchema(lxml.parse(str(Path(__file__).parent / "data" / "VOEvent-v2.0.xsd")))


def schema_doc(path):
    return lxml.parse(str(path))


def _storm(station, t, ep_id, n=5):
    return [event(station, t + 60 * k, fmin=17.0, fmax=20.0, cls="jovian_l", dur=30, episode_id=ep_id,
                  cml3_start_deg=200.0 + k, cml3_end_deg=200.5 + k, io_phase_start_deg=230.0, io_phase_end_deg=230.1,
                  source_region="Io-A", jupiter_alt_deg=40.0 + k, confidence=0.5 + 0.1 * k) for k in range(n)]


@pytest.fixture
def cfg(tmp_path):
    cfg = station_config(tmp_path)
    store = EventStore(cfg.store_path)
    storm = _storm("st-a", T0 + 600, "ep-storm")
    group = [event("st-a", T0 + 5000 + 20 * k, episode_id="ep-t3", sun_alt_deg=20.0 + k) for k in range(3)]
    rfi = [event("st-a", T0 + 6000, cls="rfi", episode_id="ep-rfi")]
    store.upsert_events(storm + group + rfi)
    for ep_id, evs in (("ep-storm", storm), ("ep-t3", group), ("ep-rfi", rfi)):
        store.upsert_episodes([{"episode_id": ep_id, "station": "st-a", "class": evs[0]["class"],
                                "start_utc": evs[0]["start_utc"], "end_utc": evs[-1]["end_utc"],
                                "fmin_mhz": evs[0]["fmin_mhz"], "fmax_mhz": evs[0]["fmax_mhz"],
                                "n_events": len(evs), "peak_excess_db": 4.5,
                                "sequence_id": "flare-1" if ep_id == "ep-t3" else None}])
    store.add_episode_label("ep-storm", "jovian_l", who="ana")
    store.close()
    return cfg


@pytest.mark.parametrize("fmt", FORMATS)
def test_episode_export_reads_back_one_row_per_episode_with_its_context(cfg, tmp_path, fmt):
    out = tmp_path / f"eps{SUFFIX[fmt]}"
    assert export_events(cfg, out, fmt, level="episodes") == 2          # interference left out
    el = read_event_list(out)
    assert el.level == "episodes" and el.notices == []
    assert el.station["format_version"] == EPISODE_FORMAT_VERSION and el.station["station"] == "st-a"
    storm, group = el.events
    assert (storm["episode_id"], storm["class"], storm["n_bursts"]) == ("ep-storm", "jovian_l", 5)
    assert storm["start_utc"] == iso(T0 + 600 - 15) and storm["end_utc"] == iso(T0 + 840 + 15)
    assert storm["confidence"] == pytest.approx(0.9) and storm["label"] == "jovian_l"
    assert (storm["cml3_start_deg"], storm["cml3_end_deg"], storm["source_region"]) == (200.0, 204.5, "Io-A")
    assert (storm["jupiter_alt_min_deg"], storm["jupiter_alt_max_deg"]) == (40.0, 44.0)
    assert storm["peak_excess_db"] == 4.5 and storm["sequence_id"] is None
    assert (group["n_bursts"], group["sequence_id"], group["sun_alt_min_deg"], group["sun_alt_max_deg"]) == \
        (3, "flare-1", 20.0, 22.0)
    assert group["reason"]                                               # from its bursts


def test_bursts_stay_the_default_level(cfg, tmp_path):
    default, bursts = tmp_path / "d.csv", tmp_path / "b.csv"
    export_events(cfg, default, "csv")
    export_events(cfg, bursts, "csv", level="bursts")
    strip = lambda p: [x for x in p.read_text().splitlines() if not x.startswith("# exported_utc")]  # noqa: E731
    assert strip(default) == strip(bursts)
    assert read_event_list(default).level == "bursts" and len(read_event_list(default).events) == 8


def test_export_command_writes_episode_lists_and_notices(cfg, tmp_path, schema):
    run = CliRunner().invoke
    out = tmp_path / "eps.csv"
    r = run(main, ["export", "--config", str(cfg.path), "--level", "episodes", "--out", str(out)])
    assert r.exit_code == 0, r.output
    assert "wrote 2 episodes" in r.output
    assert out.read_text().startswith(f"# {EPISODE_FORMAT_NAME}: one station's episodes")
    r = run(main, ["export", "--config", str(cfg.path), "--level", "episodes", "--voevent", str(tmp_path / "n"),
                   "ep-storm", "ep-t3"])
    assert r.exit_code == 0, r.output
    for name in ("ep-storm", "ep-t3"):
        doc = schema_doc(tmp_path / "n" / f"{name}.xml")
        schema.assertValid(doc)
        assert doc.getroot().get("ivorn").endswith(f"#{name}")
        params = {p.get("name"): p.get("value") for p in doc.getroot().iter("Param")}
        assert params["episode_id"] == name and "n_bursts" in params
    r = run(main, ["export", "--config", str(cfg.path), "--level", "episodes", "--voevent", str(tmp_path / "m"),
                   "ep-nothing"])
    assert r.exit_code == 2 and "no episode 'ep-nothing'" in r.output and not (tmp_path / "m").exists()


def _episode_list(name, spans, offset):
    """Episodes at ``spans`` (true start, end, fmin, fmax) as a station whose clock is ``offset`` s ahead lists them."""
    rows = [{"station": name, "episode_id": f"ep-{name}-{k}", "start_utc": iso(a + offset), "end_utc": iso(b + offset),
             "fmin_mhz": f0, "fmax_mhz": f1, "class": "solar_iii", "confidence": 0.8, "n_bursts": 3}
            for k, (a, b, f0, f1) in enumerate(spans)]
    head = dict(list_header(name), format=EPISODE_FORMAT_NAME, format_version=EPISODE_FORMAT_VERSION)
    return EventList(station=head, events=rows, path=f"{name}-episodes", format="memory", level="episodes")


def test_compare_confirms_episodes_on_the_clocks_the_bursts_give():
    rng = np.random.default_rng(4)
    s = sky(rng)
    offsets = {"st-a": 0.0, "st-b": 7.0}       # st-b's clock 7 s ahead: only the bursts tell
    bursts = [station_list(rng, n, s, o) for n, o in offsets.items()]
    shared = [(T0 + 3600 * k, T0 + 3600 * k + 1.0, 16.0, 24.0) for k in range(1, 6)]   # short groups
    local = [(T0 + 40000.0, T0 + 40300.0, 21.0, 21.5)]
    eps = [_episode_list("st-a", shared + local, 0.0), _episode_list("st-b", shared, 7.0)]
    r = compare_stations(bursts + eps)
    by_id = {row["episode_id"]: row for row in r.episode_rows}
    assert len(by_id) == 11
    for k in range(5):
        assert by_id[f"ep-st-a-{k}"]["n_stations"] == by_id[f"ep-st-b-{k}"]["n_stations"] == 2
        assert by_id[f"ep-st-a-{k}"]["episode_match_id"] == by_id[f"ep-st-b-{k}"]["episode_match_id"]
    assert by_id["ep-st-a-5"]["n_stations"] == 1
    assert r.episode_group_sizes == {2: 5, 1: 1}
    st = {x.name: x for x in r.stations}
    assert (st["st-a"].n_episodes, st["st-a"].n_episodes_confirmed) == (6, 5)
    assert (st["st-b"].n_episodes, st["st-b"].n_episodes_confirmed) == (5, 5)
    assert any("5 confirmed" in line for line in r.summary_lines())
    # Clocks come from the bursts alone: the same offsets with or without the episodes.
    alone = compare_stations(bursts)
    assert [x.offset_s for x in alone.stations] == [x.offset_s for x in r.stations]


def test_compare_writes_matched_episodes(tmp_path):
    rng = np.random.default_rng(5)
    s = sky(rng)
    bursts = [station_list(rng, n, s, 0.0) for n in ("st-a", "st-b")]
    span = [(T0 + 7200.0, T0 + 9000.0, 16.0, 24.0)]
    r = compare_stations(bursts + [_episode_list("st-a", span, 0.0), _episode_list("st-b", span, 0.0)],
                         outdir=tmp_path / "cmp")
    text = (tmp_path / "cmp" / "matched_episodes.csv").read_text().splitlines()
    assert text[0].startswith("episode_match_id,n_stations,stations,station,episode_id")
    assert len(text) == 3 and all(",2,st-a+st-b," in line for line in text[1:])
    assert r.files["episodes"] == tmp_path / "cmp" / "matched_episodes.csv"
