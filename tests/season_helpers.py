"""A small simulated archive for the season tests: an hour across a UTC midnight and an
hour two days later, 64 channels, written once and copied into each test's storage root."""

import shutil

from rxlog.sim.write import write_simulation
from rxlog.station.config import config_from_text
from rxlog.store import EventStore
from rxlog.timeutil import parse_iso

CONFIG = """
[station]
name = "season-test"
latitude_deg = 47.5
longitude_deg = 8.7
elevation_m = 450.0

[spectra]
channels = 64

[storage]
root = "store"
"""

START = parse_iso("2026-12-01T00:00:00Z")       # the range: three UTC days
END = parse_iso("2026-12-04T00:00:00Z")
SPANS = (("2026-12-01T23:30:00Z", 1.0), ("2026-12-03T10:00:00Z", 1.0))


def make_archive(root):
    """Simulate the spans into ``root``/store/archive; returns the config."""
    cfg = config_from_text(CONFIG, root / "station.toml")
    for start, hours in SPANS:
        write_simulation(cfg, parse_iso(start), hours, cfg.archive_dir, seed=11, rfi="rural")
    return cfg


def station_copy(template_cfg, where):
    """A fresh station (config, storage root) holding a copy of the template's archive."""
    where.mkdir(parents=True, exist_ok=True)
    cfg = config_from_text(CONFIG, where / "station.toml")
    shutil.copytree(template_cfg.archive_dir, cfg.archive_dir)
    return cfg


def store_rows(cfg):
    """Every row of the store's events (without detected_utc), episodes, quality, labels."""
    store = EventStore(cfg.store_path)
    try:
        events = [{k: v for k, v in e.items() if k not in ("detected_utc", "label_utc")} for e in store.events()]
        labels = [{k: v for k, v in dict(r).items() if k not in ("created_utc", "reattached_utc")}
                  for r in store.db.query("select * from labels order by label_id")]
        return {"events": events, "episodes": store.episodes(), "quality": store.quality(), "labels": labels}
    finally:
        store.close()
