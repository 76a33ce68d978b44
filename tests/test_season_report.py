"""``rxlog season``: the page, plots and tables from a store; emission time over exposure;
the health log's causes in the uptime calendar; a range without data is one line and
exit status 2; the network map counts only emission heard at two or more stations."""

import csv

import numpy as np
from click.testing import CliRunner
from exchange_helpers import event, list_header

from rxlog.cli import main
from rxlog.exchange.export import write_event_list
from rxlog.sky.tags import station_tags
from rxlog.station.config import config_from_text
from rxlog.store import EventStore
from rxlog.timeutil import iso, parse_iso

T0, T1 = parse_iso("2026-12-01T00:00:00Z"), parse_iso("2026-12-08T00:00:00Z")
GAP_DAY = "2026-12-03"
CONFIG = """
[station]
name = "home"
latitude_deg = 47.5
longitude_deg = 8.7
elevation_m = 450.0

[storage]
root = "data"
"""


def _read(path):
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def _jupiter_high(cfg):
    """The first whole hour of the week with Jupiter above 30 degrees all through it."""
    t = np.arange(T0, T1, 600.0)
    alt = station_tags(cfg, t)["jupiter_alt_deg"]
    for i in range(0, t.size - 6):
        if t[i] % 3600 == 0 and (alt[i:i + 7] > 30).all():
            return float(t[i])
    raise AssertionError("Jupiter never high this week")


def _station(tmp_path):
    cfg = config_from_text(CONFIG, tmp_path / "station.toml")
    store = EventStore(cfg.store_path)
    quality = []
    for h in np.arange(T0, T1, 3600.0):
        gap = iso(h).startswith(GAP_DAY) and int(h % 86400 // 3600) < 6
        quality.append({"station": "home", "hour_utc": iso(h), "covered_s": 0.0 if gap else 3600.0,
                        "gap_s": 3600.0 if gap else 0.0, "masked_fraction": 0.2})
    store.record_quality(quality)
    store.record_health({"station": "home", "time_utc": f"{GAP_DAY}T02:00:00.000Z", "samples_received": 0,
                         "samples_dropped": 0, "queue_depth": 0, "cpu_percent": 1.0, "disk_free_mb": 1e4,
                         "clock_sync": "synced", "receiver_state": "retrying", "note": ""})
    tj = _jupiter_high(cfg)
    storm = event("home", tj + 1800, cls="jovian_l", dur=3600.0)
    sun = [event("home", parse_iso("2026-12-02T11:00:00Z") + 60 * k, cls="solar_iii", sun_alt_deg=19.0)
           for k in range(3)]
    store.replace_events("home", T0, T1, [storm, *sun])
    store.close()
    return cfg, tj


def test_season_writes_page_plots_and_tables_normalised_by_exposure(tmp_path):
    cfg, tj = _station(tmp_path)
    out = tmp_path / "season"
    r = CliRunner().invoke(main, ["season", "--config", str(cfg.path), "--start", iso(T0), "--end", iso(T1),
                                  "--out", str(out)])
    assert r.exit_code == 0, r.output
    for name in ("occurrence.png", "solar.png", "uptime.png", "masked.png"):
        assert (out / name).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    page = (out / "index.html").read_text()
    assert "occurrence.png" in page and "regions.csv" in page
    bins = _read(out / "occurrence.csv")
    # the storm's hour, listened with 80 % of the band unmasked, is the emission time
    emission_h = sum(float(b["emission_h"]) for b in bins)
    assert abs(emission_h - 0.8) < 0.8 * 120 / 3600 + 1e-6
    exposure_h = sum(float(b["exposure_h"]) for b in bins)
    assert all(float(b["wilson_lo"]) <= float(b["probability"]) <= float(b["wilson_hi"]) for b in bins)
    regions = _read(out / "regions.csv")
    assert [r["region"] for r in regions] == ["Io-A", "Io-B", "Io-C", "Io-D", "non-Io-A", "non-Io"]
    assert abs(sum(float(r["exposure_h"]) for r in regions) - exposure_h) < 1e-3
    days = {d["date"]: d for d in _read(out / "uptime.csv")}
    assert float(days[GAP_DAY]["covered_h"]) == 18.0 and "receiver retrying x1" in days[GAP_DAY]["causes"]
    assert float(days["2026-12-02"]["covered_h"]) == 24.0 and days["2026-12-02"]["causes"] == ""
    solar = {d["date"]: d for d in _read(out / "solar_daily.csv")}
    assert solar["2026-12-02"]["solar_iii"] == "3" and float(solar["2026-12-02"]["sun_hours_listened"]) > 4
    by_hour = _read(out / "masked_by_hour.csv")
    assert len(by_hour) == 24 and all(abs(float(h["masked_fraction"]) - 0.2) < 1e-9 for h in by_hour)


def test_a_range_without_data_is_one_line_and_exit_2(tmp_path):
    cfg, _ = _station(tmp_path)
    out = tmp_path / "empty"
    r = CliRunner().invoke(main, ["season", "--config", str(cfg.path), "--start", "2026-06-01T00:00Z",
                                  "--end", "2026-06-08T00:00Z", "--out", str(out)])
    assert r.exit_code == 2
    assert r.output.count("\n") == 1 and "no data" in r.output and "Traceback" not in r.output
    assert not out.exists()


def test_network_map_counts_only_emission_heard_at_two_stations(tmp_path):
    cfg, tj = _station(tmp_path)
    confirmed = event("away", tj + 1200, cls="jovian_l", dur=600.0)     # inside the home station's storm
    alone = event("away", tj - 3 * 86400, cls="jovian_l", dur=1800.0)   # heard by this partner only
    partner = write_event_list(tmp_path / "away.csv", "csv", list_header("away"), [confirmed, alone])
    out = tmp_path / "season"
    r = CliRunner().invoke(main, ["season", "--config", str(cfg.path), "--start", iso(T0), "--end", iso(T1),
                                  "--out", str(out), "--partners", str(partner)])
    assert r.exit_code == 0, r.output
    assert (out / "network.png").is_file() and "network.png" in (out / "index.html").read_text()
    net_h = sum(float(b["emission_h"]) for b in _read(out / "network.csv"))
    own_h = sum(float(b["emission_h"]) for b in _read(out / "occurrence.csv"))
    assert abs(net_h - own_h) < 0.8 * 240 / 3600      # the joined storm; the lone event is left out
    bad = tmp_path / "bad.csv"
    bad.write_text("not,an,event,list\n1,2,3,4\n")
    r = CliRunner().invoke(main, ["season", "--config", str(cfg.path), "--start", iso(T0), "--end", iso(T1),
                                  "--out", str(tmp_path / "s2"), "--partners", str(bad)])
    assert r.exit_code == 2 and "bad.csv" in r.output and not (tmp_path / "s2").exists()
