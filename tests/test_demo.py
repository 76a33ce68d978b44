"""`rxlog demo` in a temporary folder: every stage runs and leaves its files, and the
config it writes is a working station config for the other commands."""

import csv
import re

import pytest
from click.testing import CliRunner

from rxlog.cli import main
from rxlog.station.config import load_config
from rxlog.store import EventStore


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    r = CliRunner().invoke(main, ["demo", "--out", str(out)])
    assert r.exit_code == 0, r.output
    return out, r.output


def test_demo_writes_config_archive_store_and_report(demo):
    out, output = demo
    cfg = load_config(out / "birchwater" / "station.toml")
    assert str(cfg.path) in output
    assert any(cfg.archive_dir.rglob("*.fits"))
    events = EventStore(cfg.store_path).events()
    assert events, "the simulated night should yield events"
    report = next(cfg.reports_dir.glob("*/index.html"))
    assert str(report) in output
    html = report.read_text()
    assert sum(e["event_id"] in html for e in events) == len(events)
    truth = list(csv.DictReader(open(cfg.storage_root / "truth.csv")))
    assert truth and {"class", "start_utc", "peak_excess_db"} <= truth[0].keys()
    # The night reads as a handful of items: a storm is one, not its hundreds of bursts.
    summary = (report.parent / "summary.txt").read_text()
    n_items = int(re.search(r"to review: (\d+) items", summary).group(1))
    assert 0 < n_items <= 20, summary


def test_demo_forecast_and_exchange(demo):
    out, output = demo
    fc = out / "birchwater" / "data" / "forecast"
    assert (fc / "birchwater-next-week.ics").read_text().startswith("BEGIN:VCALENDAR")
    assert (fc / "birchwater-next-week.png").stat().st_size > 10_000
    ex = out / "exchange"
    for name in ("birchwater", "kestrel-ridge", "saltmarsh-point"):
        assert (ex / f"{name}-events.csv").exists() and (ex / f"{name}-episodes.csv").exists()
    assert (ex / "comparison" / "matched_episodes.csv").exists() and "episodes confirmed" in output
    assert (ex / "comparison" / "timeline.png").exists()
    assert "offset" in output


def test_demo_config_works_with_station_commands(demo):
    out, _ = demo
    config = str(out / "birchwater" / "station.toml")
    r = CliRunner().invoke(main, ["config", "check", "--config", config])
    assert r.exit_code == 0, r.output
    r = CliRunner().invoke(main, ["events", "--config", config])
    assert r.exit_code == 0, r.output
