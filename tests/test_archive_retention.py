"""Retention deletes only archived spectra older than the configured days: never newer
hours, never the event store, reports or anything else under the storage root."""

import os

from archive_helpers import STATION, T_NIGHT, archive_files, noisy_spectrum
from click.testing import CliRunner

from rxlog.archive.prune import prune
from rxlog.archive.read import read_archive
from rxlog.archive.write import ArchiveWriter
from rxlog.cli import main
from rxlog.station.config import config_from_text

DAY = 86400.0


def _fill(root, days_back):
    """One minute of spectra at 22:00 on each of the given days before T_NIGHT."""
    with ArchiveWriter(root, STATION) as w:
        for d in sorted(days_back, reverse=True):
            w.write(noisy_spectrum(60, 8, t0=T_NIGHT - d * DAY, segment=f"day-{d}"))


def test_prune_deletes_only_hours_older_than_retention(tmp_path):
    root = tmp_path / "archive"
    _fill(root, [40, 31, 30, 29, 1])
    # a chunk not yet consolidated (its writer still open) in an old hour is archive data too
    w = ArchiveWriter(root, STATION)
    w.write(noisy_spectrum(5, 8, t0=T_NIGHT - 35 * DAY, segment="late"))
    w.flush()
    stray = root / "notes.txt"
    stray.write_text("kept")
    # now = 22:30 on T_NIGHT's day; retention 30 days -> cutoff 30 days earlier at 22:30:
    # the hour 22:00-23:00 thirty days back has not ended before the cutoff and stays.
    deleted = prune(root, 30, now=T_NIGHT + 1800)
    names = sorted(p.name for p in deleted)
    assert len(names) == 3
    assert names[0] == "test-station_20261022T22Z.fits"
    assert names[1].startswith("test-station_20261027T22Z.") and names[1].endswith(".chunk.fits")
    assert names[2] == "test-station_20261031T22Z.fits"
    assert not any(p.exists() for p in deleted)
    kept = sorted(p.name for p in archive_files(root))
    assert kept == ["notes.txt", "test-station_20261101T22Z.fits", "test-station_20261102T22Z.fits",
                    "test-station_20261130T22Z.fits"]
    assert not (root / "2026" / "10").exists()                  # emptied folders go too
    assert read_archive(root, T_NIGHT - 30 * DAY, T_NIGHT).segments[0].segment == "day-30"
    # an hour later the hour thirty days back has aged out as well
    assert [p.name for p in prune(root, 30, now=T_NIGHT + 3600 + 1800)] == ["test-station_20261101T22Z.fits"]


def test_prune_command_keeps_event_store_and_reports(tmp_path):
    cfg = config_from_text(
        '[station]\nname = "test-station"\nlatitude_deg = 47.5\nlongitude_deg = 8.7\n'
        '[storage]\nroot = "data"\nretention_days = 10\n', tmp_path / "station.toml")
    old = T_NIGHT - 400 * DAY
    with ArchiveWriter(cfg.archive_dir, cfg["station"]) as w:
        w.write(noisy_spectrum(60, 8, t0=old))
    cfg.storage_root.mkdir(exist_ok=True)
    cfg.store_path.write_bytes(b"SQLite format 3\x00")
    cfg.reports_dir.mkdir()
    (cfg.reports_dir / "night.html").write_text("report")
    for p in (cfg.store_path, cfg.reports_dir / "night.html"):
        os.utime(p, (old, old))                                   # old, but not archive data
    r = CliRunner().invoke(main, ["prune", "--config", str(tmp_path / "station.toml")])
    assert r.exit_code == 0, r.output
    assert "deleted 1 archive file(s) older than 10 days" in r.output
    assert archive_files(cfg.archive_dir) == []
    assert cfg.store_path.exists() and (cfg.reports_dir / "night.html").exists()


def test_prune_command_without_config_is_a_clean_error(tmp_path, monkeypatch):
    monkeypatch.delenv("RXLOG_CONFIG", raising=False)
    r = CliRunner().invoke(main, ["prune"])
    assert r.exit_code == 2 and "Traceback" not in r.output
