"""The first run: a fictional club station, one simulated night, every stage.

The Birchwater Radio Sky Circle is an invented club. Its station sits on an invented
hill farm; two invented partner stations, Kestrel Ridge and Saltmarsh Point, hear the
same simulated sky with their own local interference and clock errors. Nothing here
is real data.
"""

from __future__ import annotations

import datetime as dt
import sys
import time
from pathlib import Path
from zoneinfo import ZoneInfo

import click

from rxlog.archive.write import ArchiveWriter
from rxlog.detect.rerun import detect_range
from rxlog.exchange.compare import compare_stations
from rxlog.exchange.export import export_events
from rxlog.exchange.voevent import write_voevents
from rxlog.review.report import build_report
from rxlog.sim.spectra import iter_spectra
from rxlog.sim.truth import write_truth_csv
from rxlog.sky.forecast import forecast_windows, make_forecast
from rxlog.station.config import Config, config_from_text
from rxlog.store import EventStore
from rxlog.timeutil import parse_iso

CLUB = "Birchwater Radio Sky Circle"

# name, latitude, longitude, elevation, time zone, antenna, contact, channels, cadence (s),
# interference (ITU-R P.372 category), clock error (s). The partners run other channel
# grids and cadences, as real partner stations do.
STATIONS = [
    ("birchwater", 46.083, -73.412, 310.0, "America/Toronto",
     "two crossed half-wave dipoles for 20.1 MHz, 3 m above a hayfield",
     "Birchwater Radio Sky Circle, night log keeper", 1024, 1.0, "quiet-rural", 0.0),
    ("kestrel-ridge", 43.212, -77.940, 180.0, "America/New_York",
     "single E-W dipole for 20.1 MHz", "Kestrel Ridge schoolyard radio club", 512, 1.0, "residential", 1.8),
    ("saltmarsh-point", 44.402, -68.215, 25.0, "America/New_York",
     "phased pair of dipoles, 21 MHz", "Saltmarsh Point lighthouse volunteers", 256, 1.0, "rural", 0.2),
]

# The scenario: the club's first winter of logging, Jupiter a few weeks past opposition.
SCENARIO_START = dt.datetime(2027, 2, 1, tzinfo=dt.timezone.utc)
SCENARIO_DAYS = 14
SEED = 20270201


def station_config_text(name, lat, lon, elev, tz, antenna, contact, channels=1024, cadence_s=1.0,
                        rfi="rural") -> str:
    return f"""# rxlog station config for the demo station "{name}" ({CLUB}, fictional).
# A working config: rxlog run, detect, review, export and the rest accept it as it is.

[station]
name = "{name}"
latitude_deg = {lat}
longitude_deg = {lon}
elevation_m = {elev}
timezone = "{tz}"
antenna = "{antenna}"
operator_contact = "{contact}"

[receiver]
kind = "simulated"
sim_rfi = "{rfi}"          # the simulated site's man-made noise (ITU-R P.372 category)
sim_seed = {SEED}        # one seed, one sky: the partner stations hear the same bursts

[spectra]
fmin_mhz = 16.0
fmax_mhz = 24.0
channels = {channels}
cadence_s = {cadence_s}

[storage]
root = "data"
retention_days = 3650
"""


def write_station(out: Path, spec: tuple) -> Config:
    return config_from_text(station_config_text(*spec[:10]), out / spec[0] / "station.toml")


def local_noon_before(t_unix: float, tz: str) -> float:
    """POSIX time of the local noon that starts the night containing ``t_unix``."""
    local = dt.datetime.fromtimestamp(t_unix, ZoneInfo(tz))
    noon = local.replace(hour=12, minute=0, second=0, microsecond=0)
    if local < noon:
        noon -= dt.timedelta(days=1)
    return noon.timestamp()


def pick_night(cfg) -> tuple[float, dict]:
    """The scenario's night: the first forecast window in an Io-controlled region that lasts an
    hour with Jupiter well up. Returns (local noon starting that night, the window)."""

    windows = forecast_windows(cfg, SCENARIO_START.timestamp(), SCENARIO_DAYS)
    good = [w for w in windows if w["region"].startswith("Io-") and w["duration_min"] >= 60
            and w["max_jupiter_alt_deg"] >= 30]
    window = (good or windows)[0]
    return local_noon_before(0.5 * (window["start"] + window["end"]), cfg["station"]["timezone"]), window


def scenario_bursts(night_start: float, window: dict) -> list[dict]:
    """The night's memorable bursts, on top of the simulated sky's own: a Jovian storm in the
    forecast window, a Type IV continuum that afternoon, and next morning a Type III group and a Type II.
    Times are hours after the local noon that starts the night."""
    def at(hours):
        return night_start + hours * 3600.0

    storm_start = window["start"] + 15 * 60.0
    storm_s = min(3000.0, window["end"] - storm_start - 60.0)
    return [
        dict(**{"class": "jovian_l"}, t=storm_start, duration_s=storm_s, region=window["region"], peak_excess_db=3.0),
        dict(**{"class": "solar_iv"}, t=at(1.5), peak_excess_db=1.5),
        dict(**{"class": "solar_iii"}, t=at(21.6), peak_excess_db=6.0),
        dict(**{"class": "solar_iii"}, t=at(21.6) + 26.0, peak_excess_db=2.5),
        dict(**{"class": "solar_iii"}, t=at(21.6) + 61.0, peak_excess_db=4.0),
        dict(**{"class": "solar_iii"}, t=at(21.6) + 95.0, peak_excess_db=1.5),
        dict(**{"class": "solar_ii"}, t=at(22.2), peak_excess_db=2.5),
    ]


def simulate_into_archive(cfg, start: float, hours: float, inject: list[dict],
                          clock_error_s: float = 0.0, label: str = "simulating") -> list[dict]:
    """Simulate ``hours`` of spectra (the config's sim_seed and sim_rfi) into the archive; return the truth rows.

    ``clock_error_s`` shifts the station's time stamps as a wrong clock would: the sky is
    the same, the station writes it down late (positive) or early (negative).
    """

    run = iter_spectra(cfg, start, hours, inject=inject)
    # A batch that can simply be re-run needs no minute-by-minute crash safety: hour-long
    # chunks spare the archive 59 of every 60 file writes.
    n_chunks = -(-run.n_rows // run.chunk_rows)
    with ArchiveWriter(cfg.archive_dir, cfg["station"], lossless=cfg["storage"]["lossless"],
                       chunk_s=3600.0) as writer, \
            click.progressbar(length=n_chunks, label=f"  {label}", file=sys.stderr) as bar:
        for chunk in run:
            chunk.t0 += clock_error_s
            writer.write(chunk)
            bar.update(1)
    return run.truth_rows()


def score_against_truth(truth: list[dict], events: list[dict]) -> tuple[int, int]:
    """How many injected sky bursts (not interference) a detected event overlaps in time and frequency."""

    sky = [t for t in truth if t["class"] != "rfi"]
    boxes = [(parse_iso(e["start_utc"]), parse_iso(e["end_utc"]), e["fmin_mhz"], e["fmax_mhz"])
             for e in events if e["class"] != "rfi"]
    found = 0
    for t in sky:
        a, b = parse_iso(t["start_utc"]), parse_iso(t["end_utc"])
        if any(a <= e1 and e0 <= b and t["fmin_mhz"] <= f1 and f0 <= t["fmax_mhz"] for e0, e1, f0, f1 in boxes):
            found += 1
    return found, len(sky)


def detect_quietly(cfg, label: str) -> dict:

    with click.progressbar(length=100, label=f"  {label}", file=sys.stderr) as bar:
        done = [0]

        def progress(a, b):
            pct = int(100 * a / b) if b else 100
            bar.update(pct - done[0])
            done[0] = pct

        return detect_range(cfg, progress=progress)


def run_demo(out: str | Path, echo=click.echo) -> dict:
    """Run the demo under ``out``; return the paths it wrote (also printed through ``echo``)."""

    out = Path(out).resolve()
    out.mkdir(parents=True, exist_ok=True)
    started = time.monotonic()
    wrote: dict[str, Path] = {}
    home, partners = STATIONS[0], STATIONS[1:]
    cfg = write_station(out, home)
    wrote["config"] = cfg.path
    name, tz = cfg["station"]["name"], cfg["station"]["timezone"]
    echo(f"{CLUB} (fictional) — station {name}")
    echo(f"  config        {cfg.path}")

    night_start, window = pick_night(cfg)
    night_date = dt.datetime.fromtimestamp(night_start, ZoneInfo(tz)).date()
    echo(f"  night         {night_date} (local noon to noon, {tz}); forecast {window['region']} "
         f"{window['start_utc'][11:16]}-{window['end_utc'][11:16]} UTC")

    bursts = scenario_bursts(night_start, window)
    truth = simulate_into_archive(cfg, night_start, 24.0, bursts, label="simulating the night")
    wrote["truth"] = write_truth_csv(truth, cfg.storage_root / "truth.csv")
    summary = detect_quietly(cfg, "detecting bursts")
    events = EventStore(cfg.store_path).events()
    found, n_sky = score_against_truth(truth, events)
    by_class = ", ".join(f"{k} {v}" for k, v in sorted(summary["by_class"].items()))
    echo(f"  archive       {cfg.archive_dir}")
    echo(f"  event store   {cfg.store_path}: {len(events)} events ({by_class})")
    echo(f"  truth         {wrote['truth']}: {found} of {n_sky} injected sky bursts overlap a detection")

    report = build_report(cfg, night_date)
    wrote["report"] = report
    echo(f"  report        {report}")

    forecast_dir = cfg.storage_root / "forecast"
    forecast_dir.mkdir(parents=True, exist_ok=True)
    fc = make_forecast(cfg, night_start + 86400.0, 7, ics_path=forecast_dir / f"{name}-next-week.ics",
                       plot_path=forecast_dir / f"{name}-next-week.png")
    wrote["forecast_ics"], wrote["forecast_plot"] = fc["ics_path"], fc["plot_path"]
    echo(f"  forecast      {fc['ics_path']} and {fc['plot_path'].name}; the week after the night:")
    for line in fc["text"].splitlines():
        echo("    " + line)

    # Partners hear the same sky with their own interference and clocks; they share lists.
    exchange_dir = out / "exchange"
    lists = [exchange_dir / f"{name}-events.csv"]
    export_events(cfg, lists[0], "csv")
    # Episode lists beside the event lists: the comparison confirms episodes across stations.
    home_episodes = exchange_dir / f"{name}-episodes.csv"
    with_episodes = [home_episodes] if export_events(cfg, home_episodes, "csv", level="episodes") else []
    # The partners log from an hour before the forecast window to the night's end: the
    # storm and the morning's solar bursts, in less time than a whole night.
    p_start = max(night_start, window["start"] - 3600.0)
    p_hours = (night_start + 86400.0 - p_start) / 3600.0
    p_bursts = [b for b in bursts if b["t"] >= p_start]
    for spec in partners:
        pcfg = write_station(out, spec)
        simulate_into_archive(pcfg, p_start, p_hours, p_bursts, clock_error_s=spec[10],
                              label=f"simulating partner {spec[0]}")
        detect_quietly(pcfg, f"detecting at {spec[0]}")
        path = exchange_dir / f"{spec[0]}-events.csv"
        export_events(pcfg, path, "csv")
        lists.append(path)
        episode_list = exchange_dir / f"{spec[0]}-episodes.csv"
        if export_events(pcfg, episode_list, "csv", level="episodes"):    # an empty list has nothing to confirm
            with_episodes.append(episode_list)
    export_events(cfg, exchange_dir / f"{name}-events.xml", "votable")
    export_events(cfg, exchange_dir / f"{name}-events.json", "json")
    notable = sorted((e for e in events if e["class"] != "rfi"), key=lambda e: -(e["snr"] or 0))[:3]
    write_voevents(cfg, exchange_dir / "voevent", [e["event_id"] for e in notable])
    result = compare_stations(lists + with_episodes, window_s=10.0, outdir=exchange_dir / "comparison")
    wrote["comparison"] = exchange_dir / "comparison"
    echo(f"  exchange      {exchange_dir} (event and episode lists in CSV, VOTable, JSON, VOEvent); comparison:")
    for line in result.summary_lines():
        echo("    " + line)
    echo(f"done in {time.monotonic() - started:.0f} s. Next: open {report}")
    echo(f"  or label episodes and events in a browser: rxlog review --config {cfg.path} --serve")
    return wrote
