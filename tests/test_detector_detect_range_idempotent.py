"""Invariants of ``rxlog detect`` over the archive: re-running gives the same store,
labels survive re-detection, and the command line reports what it stored."""

from click.testing import CliRunner
from detector_helpers import Sky

from rxlog.archive.write import ArchiveWriter
from rxlog.cli import main
from rxlog.station.config import config_from_text
from rxlog.store import EventStore

CONFIG = """
[station]
name = "test-station"
latitude_deg = 47.5
longitude_deg = 8.7
elevation_m = 450.0

[spectra]
channels = 256

[rfi]
static_ranges = []

[detector]
slow_window_s = 1800
"""


def _station(tmp_path):
    cfg = config_from_text(CONFIG, tmp_path / "station.toml")
    sky = Sky(3600, n_chan=256)
    sky.type3(600, 2.0)
    sky.type3(1500, 1.0)
    sky.impulse(2400, 3.0)
    with ArchiveWriter(cfg.archive_dir, cfg["station"]) as w:
        spec = sky.spectrum(seed=2)
        for i in range(0, spec.n_time, 600):
            w.write(spec.slice_rows(i, i + 600))
    return cfg


def _rows(store):
    return [{k: v for k, v in e.items() if k != "detected_utc"} for e in store.events()]


def test_rerun_gives_the_same_store_and_keeps_labels(tmp_path):
    from rxlog.detect.rerun import detect_range

    cfg = _station(tmp_path)
    first = detect_range(cfg)
    assert first["events"] >= 3 and first["hours"] >= 1
    store = EventStore(cfg.store_path)
    before = _rows(store)
    target = next(e for e in before if e["class"] != "rfi")
    store.add_label(target["event_id"], "solar_iii", note="clear burst", who="keeper")
    store.close()

    detect_range(cfg)
    store = EventStore(cfg.store_path)
    after = _rows(store)
    labelled = [e for e in after if e["label"] is not None]
    quality = store.quality()
    store.close()
    assert [{k: v for k, v in e.items() if not k.startswith("label")} for e in after] == \
        [{k: v for k, v in e.items() if not k.startswith("label")} for e in before]
    assert [e["event_id"] for e in labelled] == [target["event_id"]]
    assert labelled[0]["label"] == "solar_iii"
    assert len(quality) == first["hours"] and quality[0]["covered_s"] > 0


def test_detect_command_reports_and_rejects_bad_times(tmp_path):
    cfg = _station(tmp_path)
    r = CliRunner().invoke(main, ["detect", "--config", str(cfg.path)])
    assert r.exit_code == 0, r.output
    assert "events" in r.output and str(cfg.store_path) in r.output
    r = CliRunner().invoke(main, ["detect", "--config", str(cfg.path), "--start", "yesterday"])
    assert r.exit_code == 2 and "--start" in r.output
    r = CliRunner().invoke(main, ["detect", "--config", str(cfg.path), "--start", "2026-12-02T00:00Z",
                                  "--end", "2026-12-01T00:00Z"])
    assert r.exit_code == 2 and "after" in r.output


def test_empty_archive_is_a_clean_error(tmp_path):
    cfg = config_from_text(CONFIG, tmp_path / "station.toml")
    r = CliRunner().invoke(main, ["detect", "--config", str(cfg.path)])
    assert r.exit_code == 2 and "no spectra" in r.output


def _occupancy(cfg):
    store = EventStore(cfg.store_path)
    try:
        return store.occupancy("test-station")
    finally:
        store.close()


def test_rerun_keeps_the_masks_occupancy_only_where_no_logger_stored_one(tmp_path):
    """The report's mask picture needs what the mask learned; a re-run over an archive no
    logger wrote stores it, but never replaces a logger's own (newer) state."""
    from rxlog.detect.rerun import detect_range

    cfg = _station(tmp_path)
    detect_range(cfg)
    (learned,) = _occupancy(cfg)
    assert learned["channels"] == 256 and len(learned["by_hour"]) == 24
    live = dict(learned, by_hour=[[0.5] * 256] * 24, recent=[0.5] * 256)
    store = EventStore(cfg.store_path)
    store.save_occupancy("test-station", [live])
    store.close()
    detect_range(cfg)
    (kept,) = _occupancy(cfg)
    assert kept["by_hour"] == live["by_hour"]
