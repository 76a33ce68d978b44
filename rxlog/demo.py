"""The first run: a fictional club station, one simulated night, every stage.

The Birchwater Radio Sky Circle is an invented club. Its station sits on an invented
hill farm; two invented partner stations, Kestrel Ridge and Saltmarsh Point, hear the
same simulated sky with their own local interference and clock errors. Nothing here
is real data.
"""

from __future__ import annotations

import datetime as dt
import time
from pathlib import Path
from zoneinfo import ZoneInfo

import click

from rxlog.config import Config, config_from_text

CLUB = "Birchwater Radio Sky Circle"

# name, latitude, longitude, elevation, time zone, antenna, contact, interference, clock error (s)
STATIONS = [
    ("birchwater", 46.083, -73.412, 310.0, "America/Toronto",
     "two crossed half-wave dipoles for 20.1 MHz, 3 m above a hayfield",
     "Birchwater Radio Sky Circle, night log keeper", "rural", 0.0),
    ("kestrel-ridge", 43.212, -77.940, 180.0, "America/New_York",
     "single E-W dipole for 20.1 MHz", "Kestrel Ridge schoolyard radio club", "residential", 1.8),
    ("saltmarsh-point", 44.402, -68.215, 25.0, "America/New_York",
     "phased pair of dipoles, 21 MHz", "Saltmarsh Point lighthouse volunteers", "quiet-rural", -0.9),
]

# The scenario: the club's first winter of logging, Jupiter a few weeks past opposition.
SCENARIO_START = dt.datetime(2027, 2, 1, tzinfo=dt.timezone.utc)
SCENARIO_DAYS = 14
SEED = 20270201


def station_config_text(name, lat, lon, elev, tz, antenna, contact) -> str:
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

[spectra]
fmin_mhz = 16.0
fmax_mhz = 24.0
channels = 1024
cadence_s = 1.0

[storage]
root = "data"
retention_days = 3650
"""


def write_station(out: Path, spec) -> Config:
    name, lat, lon, elev, tz, antenna, contact = spec[:7]
    return config_from_text(station_config_text(name, lat, lon, elev, tz, antenna, contact),
                            out / name / "station.toml")


def local_noon_before(t_unix: float, tz: str) -> float:
    """POSIX time of the local noon that starts the night containing ``t_unix``."""
    local = dt.datetime.fromtimestamp(t_unix, ZoneInfo(tz))
    noon = local.replace(hour=12, minute=0, second=0, microsecond=0)
    if local < noon:
        noon -= dt.timedelta(days=1)
    return noon.timestamp()


def run_demo(out: str | Path, echo=click.echo) -> dict:
    """Run the demo under ``out``; return the paths it wrote (also printed through ``echo``)."""
    out = Path(out).resolve()
    out.mkdir(parents=True, exist_ok=True)
    started = time.monotonic()
    wrote: dict[str, Path] = {}
    cfg = write_station(out, STATIONS[0])
    wrote["config"] = cfg.path
    echo(f"{CLUB} (fictional) — station {cfg['station']['name']}: config {cfg.path}")
    return wrote
