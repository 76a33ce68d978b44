"""rxlog's public entry: what the README's Python examples use, by one short name each.

    from rxlog import api
    cfg = api.load_config("station.toml")
    api.detect_range(cfg)                      # archive -> detector -> event store
    api.build_report(cfg)                      # the morning report of the last night

Each name is the same object as in its home module (the stage it belongs to is in the
module path shown beside it), so ``help(api.detect_range)`` shows its full documentation.
Importing this module loads every stage; a command that needs one stage imports that
stage's module directly.
"""

from rxlog.archive.ingest import ingest_fits, ingest_recording
from rxlog.archive.read import read_archive, read_spectrum_fits
from rxlog.detect.online import OnlineDetector, detect_spectrum
from rxlog.detect.rerun import detect_range
from rxlog.exchange.compare import compare_stations
from rxlog.exchange.export import export_events
from rxlog.exchange.importer import read_event_list
from rxlog.exchange.voevent import write_voevents
from rxlog.review.report import build_report
from rxlog.review.server import ReviewServer
from rxlog.sim.spectra import simulate_spectra
from rxlog.sim.write import write_simulation
from rxlog.sky.forecast import forecast_windows, make_forecast
from rxlog.sky.tags import compute_tags, station_tags
from rxlog.station.config import ConfigError, load_config
from rxlog.station.sources import open_source
from rxlog.station.supervise import run
from rxlog.store import EventStore

__all__ = [
    "load_config", "ConfigError",                        # station.config
    "open_source", "run",                                # station: receiver source, logger
    "simulate_spectra", "write_simulation",              # sim
    "read_archive", "read_spectrum_fits",                # archive
    "ingest_fits", "ingest_recording",
    "OnlineDetector", "detect_spectrum", "detect_range",  # detect
    "EventStore",                                        # store
    "compute_tags", "station_tags",                      # sky
    "forecast_windows", "make_forecast",
    "build_report", "ReviewServer",                      # review
    "export_events", "write_voevents", "read_event_list", "compare_stations",  # exchange
]
