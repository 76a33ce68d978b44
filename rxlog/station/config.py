"""Station configuration: TOML (tomllib), validated against one schema.

Every problem is reported as one line naming the file, the key (and its line where it
can be found) and what was expected. ``load_config`` raises ``ConfigError`` carrying
all of them; nothing else reads the TOML file.

Each section's keys live in ``SCHEMA``. A key is a ``Key``: its type, default
(``REQUIRED`` when it must be given), bounds or choices, and a one-line help that
also documents ``config/station.example.toml``.
"""

from __future__ import annotations

import difflib
import math
import os
import re
import tomllib
import zoneinfo
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

from rxlog import validate
from rxlog.detect.settings import (
    DEFAULT_STATIC_RANGES,
    band_problems,
    check_static_ranges,
)
from rxlog.receive import devices, sweep
from rxlog.sky import regions as _regions

REQUIRED = object()


class ConfigError(Exception):
    """Invalid station configuration; ``problems`` holds one line per problem."""

    def __init__(self, problems: list[str]):
        self.problems = list(problems)
        super().__init__("\n".join(self.problems))


@dataclass(frozen=True)
class Key:
    type: type | tuple
    default: Any = REQUIRED
    min: float | None = None
    max: float | None = None
    choices: tuple | None = None
    help: str = ""
    # extra check on a well-typed value; returns a list of "what is wrong" strings
    check: Callable[[Any], list[str]] | None = None


def _timezone_check(value: str) -> list[str]:
    try:
        zoneinfo.ZoneInfo(value)
    except (zoneinfo.ZoneInfoNotFoundError, ValueError):
        return [f"unknown IANA time zone {value!r} (expected e.g. 'Europe/Berlin' or 'UTC')"]
    return []


NUMBER = (int, float)

# Characters no config value has a use for: NUL and the other C0 controls (tab, line feed
# and carriage return allowed in free text), DEL. A NUL in a path makes every file call fail.
_CONTROL = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]")

SCHEMA: dict[str, dict[str, Key]] = {
    "station": {
        "name": Key(str, help="Short station name, used in file names and exports (letters, digits, - and _)",
                    check=lambda v: [] if re.fullmatch(r"[A-Za-z0-9_-]{1,40}", v) else
                    ["expected 1-40 letters, digits, '-' or '_'"]),
        "latitude_deg": Key(NUMBER, min=-90, max=90, help="Geodetic latitude, degrees north"),
        "longitude_deg": Key(NUMBER, min=-180, max=180, help="Longitude, degrees east"),
        "elevation_m": Key(NUMBER, 0.0, min=-500, max=9000, help="Height above the WGS84 ellipsoid, metres"),
        "timezone": Key(str, "UTC", help="IANA time zone for local times in reports and forecasts",
                        check=_timezone_check),
        "antenna": Key(str, "", help="Free text: antenna type and orientation"),
        "operator_contact": Key(str, "", help="Free text: who runs the station and how to reach them"),
    },
    "receiver": {
        "kind": Key(str, "simulated", choices=("simulated", "rtlsdr", "rtltcp", "recording"),
                    help="Where samples come from"),
        "sample_rate_hz": Key(NUMBER, 2_400_000, min=1000, max=100e6,
                              help="Complex samples per second (rtlsdr/rtltcp: 225001-300000 or 900001-3200000)"),
        "gain_db": Key(NUMBER, 30.0, min=0, max=60, help="Fixed tuner gain in dB (the nearest step the tuner has)"),
        "agc": Key(bool, False, help="Automatic gain control: refused, radiometry needs a fixed gain"),
        "ppm": Key(int, 0, min=-500, max=500, help="Crystal frequency correction, parts per million"),
        "device_index": Key(int, 0, min=0, max=63, help="rtlsdr: which dongle, in USB order (ignored when serial is set)"),
        "serial": Key(str, "", help="rtlsdr: pick the dongle by its serial number (rtl_eeprom sets it)"),
        "direct_sampling": Key(str, "off", choices=("off", "i", "q"),
                               help="rtlsdr/rtltcp: HF straight into the ADC (I or Q branch) instead of the tuner"),
        "upconverter_lo_hz": Key(NUMBER, 0.0, min=0, max=500e6,
                                 help="Local oscillator of an upconverter ahead of the dongle, Hz (0: none)"),
        "bias_tee": Key(bool, False, help="rtlsdr/rtltcp: power a preamp or upconverter over the coax"),
        "host": Key(str, "127.0.0.1", help="rtltcp: address of the computer running rtl_tcp"),
        "port": Key(int, 1234, min=1, max=65535, help="rtltcp: TCP port of rtl_tcp"),
        "reconnect_max_s": Key(NUMBER, 60.0, min=1, max=3600,
                               help="rtltcp: keep reconnecting this long before reporting the receiver lost"),
        "recording_path": Key(str, "", help="recording: SigMF or raw file to replay; relative to this file"),
        "recording_format": Key(str, "sigmf", choices=("sigmf", "cu8", "ci8", "ci16_le", "cf32_le"),
                                help="recording: SigMF, or the sample format of a raw file"),
        "recording_center_hz": Key(NUMBER, 0.0, min=0, max=2e9, help="recording (raw): centre frequency, Hz"),
        "recording_start_utc": Key(str, "", help="recording (raw): ISO 8601 UTC time of the first sample"),
        "sim_rfi": Key(str, "rural", choices=("quiet-rural", "rural", "residential", "city", "site"),
                       help="simulated: man-made noise category (ITU-R P.372) and its local interference, "
                            "or site: a quiet club site with every kind of interference"),
        "sim_seed": Key(int, 0, min=0, help="simulated: seed of the simulated sky and noise (same seed, same sky)"),
    },
    "spectra": {
        "fmin_mhz": Key(NUMBER, 16.0, min=validate.MIN_BAND_MHZ, max=validate.MAX_BAND_MHZ,
                        help="Lower band edge, MHz"),
        "fmax_mhz": Key(NUMBER, 24.0, min=validate.MIN_BAND_MHZ, max=validate.MAX_BAND_MHZ,
                        help="Upper band edge, MHz"),
        "channels": Key(int, 1024, min=8, max=65536, help="Number of equal channels across the band"),
        "cadence_s": Key(NUMBER, 1.0, min=1e-4, max=600, help="Seconds between archived spectra"),
    },
    "storage": {
        "root": Key(str, "data", help="Folder for archive, event store and reports; relative to this file"),
        # at most 100,000 days (~270 years): "keep everything", while the cut-off date stays a date
        "retention_days": Key(NUMBER, 90, min=0.01, max=1e5, help="Delete archived spectra older than this many days"),
        "lossless": Key(bool, False, help="Store float32 power exactly (~200 MB/day) instead of 0.0399-dB steps (~49 MB/day)"),
    },
    "sweep": {
        "mode": Key(str, "sweep", choices=("sweep", "single"),
                    help="sweep: step tunings across the band; single: one fixed window, highest time resolution"),
        "tunings_hz": Key(list, [], help="Window centres, Hz (empty: evenly spaced windows covering the band)",
                          check=lambda v: [] if all(isinstance(f, (int, float)) and not isinstance(f, bool)
                                                    and 1e5 <= f <= 2e9 for f in v)
                          else ["expected a list of centre frequencies in Hz, e.g. [17e6, 19e6]"]),
        # frequencies in Hz up to 2e9 as tunings_hz: above any RTL-SDR tuner (~1.77 GHz)
        "step_hz": Key(NUMBER, 0.0, min=0, max=2e9, help="Spacing of automatic tunings, Hz (0: as few windows as cover the band)"),
        "center_hz": Key(NUMBER, 0.0, min=0, max=2e9, help="single: window centre, Hz (0: the middle of the band)"),
        "cycle_s": Key(NUMBER, 1.0, min=0.01, max=600, help="sweep: seconds per pass over all tunings"),
        "discard_s": Key(NUMBER, 0.01, min=0, max=10, help="Samples thrown away after each retune, seconds (rounded up to buffers)"),
        "buffer_samples": Key(int, 16384, min=256, max=1 << 22,
                              help="Samples per synchronous read (a multiple of 256: librtlsdr reads whole 512-byte USB packets)",
                              check=lambda v: [] if v % 256 == 0 else ["expected a multiple of 256"]),
        "usable_fraction": Key(NUMBER, 0.8, min=0.1, max=1.0, help="Middle part of each window used (the edges roll off)"),
        "dc_cut_hz": Key(NUMBER, 3000.0, min=0, max=1e6, help="FFT bins this close to the window centre are not used (DC spike)"),
        "fft_size": Key(int, 1024, min=64, max=65536, help="Samples per FFT frame (a power of two)",
                        check=lambda v: [] if v & (v - 1) == 0 else ["expected a power of two"]),
        "window": Key(str, "hann", choices=("hann", "hamming", "blackman", "blackmanharris", "boxcar"),
                      help="FFT window"),
        "overlap": Key(NUMBER, 0.0, choices=(0, 0.0, 0.5, 0.75), help="Overlap of FFT frames: 0, 0.5 or 0.75"),
        "kurtosis": Key(bool, True, help="Compute spectral kurtosis per cell (for the RFI mask)"),
        "ring_s": Key(NUMBER, 360.0, min=0, max=3600, help="Seconds of full-resolution spectra kept in memory for cutouts (0: none); at least the detector's latency plus a minute (~4.5 min with the default [detector])"),
        "ring_resolution_s": Key(NUMBER, 0.002, min=1e-5, max=60, help="single: time step of the full-resolution spectra, seconds"),
    },
    "rfi": {
        # Default: the 20-MHz time-signal allocation only; the rest is learned (rxlog/detect/settings.py)
        "static_ranges": Key(list, DEFAULT_STATIC_RANGES, check=check_static_ranges,
                             help="Ranges masked whatever the data say: tables {fmin_mhz, fmax_mhz, "
                                  "hours_utc = [from, to] (optional, UTC, may wrap midnight), note}"),
        "carrier_width_mhz": Key(NUMBER, 0.1, min=0.001, max=5,
                                 help="A carrier stands above the median of the channels this far either side"),
        "carrier_sigma": Key(NUMBER, 6.0, min=2, max=100,
                             help="Carrier threshold: block level above its neighbours, in noise units of the level"),
        "carrier_memory_s": Key(NUMBER, 3600.0, min=60, max=864000,
                                help="Memory of the learned carrier list (exponential, seconds)"),
        "carrier_fraction": Key(NUMBER, 0.5, min=0.01, max=1,
                                help="A channel that was a carrier this often in memory stays masked while it fades"),
        "occupancy_days": Key(NUMBER, 7.0, min=0.5, max=365,
                              help="Learned carriers by UTC hour of day: exponential memory of this many days"),
        "sumthreshold_chi1": Key(NUMBER, 7.0, min=2, max=100,
                                 help="SumThreshold (Offringa et al. 2010) single-sample threshold, noise units; "
                                      "runs of M samples use chi1 / 1.5^log2(M)"),
        "sumthreshold_max_mhz": Key(NUMBER, 0.05, min=0, max=5,
                                    help="Longest SumThreshold run along frequency, MHz (narrowband signals)"),
        "sumthreshold_max_s": Key(NUMBER, 8.0, min=0, max=600,
                                  help="Longest SumThreshold run along time, seconds (within one block)"),
        "kurtosis_sigma": Key(NUMBER, 5.0, min=2, max=100,
                              help="Spectral kurtosis (Nita & Gary 2010) departure from 1 that flags a cell, "
                                   "in units of its robust scatter"),
    },
    "detector": {
        "block_s": Key(NUMBER, 30.0, min=1, max=3600, help="Seconds per background block (robust levels per channel)"),
        "fast_window_s": Key(NUMBER, 240.0, min=10, max=7200,
                             help="Fast background: centred median of block levels over this many seconds"),
        "slow_window_s": Key(NUMBER, 7200.0, min=600, max=86400,
                             help="Slow baseline: robust quadratic over this many seconds (long events are "
                                  "reported half of it later)"),
        "slow_freq_mhz": Key(NUMBER, 0.25, min=0.001, max=10, help="Coarse channel width of the slow path, MHz"),
        "smooth_time_s": Key(NUMBER, 2.0, min=0, max=600, help="Burst smoothing box in time, seconds (Type III / L-burst scale)"),
        "smooth_freq_mhz": Key(NUMBER, 0.2, min=0, max=10, help="Burst smoothing box in frequency, MHz"),
        "seed_sigma": Key(NUMBER, 6.0, min=2, max=1000, help="A burst needs a smoothed cell this many sigma above background"),
        "grow_sigma": Key(NUMBER, 3.0, min=1, max=1000, help="A burst extends over cells this many sigma above background"),
        "min_peak_db": Key(NUMBER, 0.2, min=0, max=60, help="A burst's smoothed peak must also exceed this many dB"),
        "slow_seed_db": Key(NUMBER, 0.3, min=0.01, max=60, help="A long event needs a coarse cell this many dB off the slow baseline"),
        "slow_grow_db": Key(NUMBER, 0.15, min=0.01, max=60, help="A long event extends over coarse cells this many dB off"),
        "slow_seed_sigma": Key(NUMBER, 6.0, min=1, max=1000, help="... and this many noise units (seed)"),
        "slow_grow_sigma": Key(NUMBER, 3.0, min=1, max=1000, help="... and this many noise units (extent, and baseline rejection)"),
        "slow_min_s": Key(NUMBER, 120.0, min=0, max=86400, help="Shortest long event, seconds (shorter ones are bursts)"),
        "merge_gap_s": Key(NUMBER, 2.0, min=0, max=600, help="Fragments this close in time and overlapping in frequency are one event"),
        "merge_freq_mhz": Key(NUMBER, 0.3, min=0, max=100, help="Frequency tolerance of that overlap, MHz"),
        "max_event_s": Key(NUMBER, 600.0, min=10, max=86400, help="Longest burst before it is cut (longer ones belong to the slow path)"),
        "episode_gap_s": Key(NUMBER, 600.0, min=0, max=86400, help="Events of one class this close in time form an episode"),
        "sun_up_deg": Key(NUMBER, 0.0, min=-18, max=30, help="The Sun counts as up above this altitude, degrees"),
        "jupiter_up_deg": Key(NUMBER, 0.0, min=-5, max=45, help="Jupiter counts as up above this altitude, degrees"),
        "impulse_sigma": Key(NUMBER, 8.0, min=3, max=1000,
                             help="An impulse lights a whole sweep sub-band for one time step at this significance"),
        "impulse_gap_s": Key(NUMBER, 60.0, min=0, max=86400,
                             help="Impulses closer than this form one impulse storm (one rfi event)"),
    },
    "regions": {
        "boxes": Key(list, _regions.DEFAULT_REGION_BOXES, check=_regions.check_region_boxes,
                     help="Io-source boxes in the CML III / Io-phase plane, in order of precedence"),
    },
    "forecast": {
        "min_window_min": Key(NUMBER, 20.0, min=0, max=1440,
                              help="rxlog forecast leaves out watches shorter than this many minutes"),
    },
    "service": {
        "sim_feed": Key(str, "iq", choices=("iq", "spectra"),
                        help="Simulated receiver only: 'iq' runs samples through the channelizer, "
                             "'spectra' takes spectra straight from the sky model (light on CPU)"),
        "sim_realtime": Key(bool, True, help="Simulated receiver only: deliver data at real time like a "
                                             "dongle (false: as fast as they can be made)"),
        "chunk_s": Key(NUMBER, 60.0, min=0.5, max=60,
                       help="Seconds of spectra per crash-safe archive flush (a power cut loses at most this)"),
        "health_interval_s": Key(NUMBER, 60.0, min=0.5, max=3600, help="Seconds between health rows in the event store"),
        "disk_min_free_mb": Key(NUMBER, 500.0, min=0,
                                help="Below this much free space under the storage root, stop archiving raw "
                                     "spectra (events and health go on) until space returns"),
        "retry_max_s": Key(NUMBER, 60.0, min=0.1, max=3600,
                           help="Longest wait between attempts to reopen a lost receiver (waits double from 1 s)"),
        "clock_step_s": Key(NUMBER, 0.5, min=0.01, max=86400,
                            help="A jump of the wall clock against the monotonic clock above this many seconds "
                                 "is recorded as a clock step and starts a new segment"),
        "watchdog_s": Key(NUMBER, 120.0, min=10, max=3600,
                          help="systemd WatchdogSec: restart the logger when its pipeline stalls this long"),
        "user": Key(str, "rxlog", help="System user the systemd units run as (owns the storage root)",
                    check=lambda v: [] if re.fullmatch(r"[a-z_][a-z0-9_-]{0,31}", v) else
                    ["expected a system user name (lower-case letters, digits, '_' or '-')"]),
        "log_level": Key(str, "info", choices=("debug", "info", "warning", "error"),
                         help="Least severe log messages written to stderr (the journal)"),
        "review_time": Key(str, "07:00", help="Local time (station time zone) of the daily morning review",
                           check=lambda v: [] if re.fullmatch(r"([01][0-9]|2[0-3]):[0-5][0-9]", v) else
                           ["expected HH:MM, 24-hour clock"]),
    },
}


def _type_name(t) -> str:
    if t is NUMBER or t == NUMBER:
        return "a number"
    names = {str: "a string", int: "an integer", float: "a number", bool: "true or false",
             list: "a list", dict: "a table"}
    if isinstance(t, tuple):
        return " or ".join(names.get(x, x.__name__) for x in t)
    return names.get(t, t.__name__)


def _is_type(value, t) -> bool:
    if isinstance(value, bool) and t is not bool and not (isinstance(t, tuple) and bool in t):
        return False
    return isinstance(value, t)


def _key_lines(text: str) -> dict[tuple[str, str], int]:
    """Map (section, key) -> 1-based line of its assignment, by a light scan of the TOML text."""
    where: dict[tuple[str, str], int] = {}
    section = ""
    for n, line in enumerate(text.splitlines(), start=1):
        s = line.strip()
        m = re.match(r"^\[\[?\s*([A-Za-z0-9_.\-]+)\s*\]\]?", s)
        if m:
            section = m.group(1)
            where.setdefault((section, ""), n)
            continue
        m = re.match(r"^([A-Za-z0-9_\-]+)\s*=", s)
        if m:
            where.setdefault((section, m.group(1)), n)
    return where


def validate(data: dict, path: str | os.PathLike = "<config>", text: str = "") -> tuple[dict, list[str]]:
    """Check parsed TOML against SCHEMA; return (config with defaults filled, problems)."""
    lines = _key_lines(text)
    problems: list[str] = []
    out: dict[str, dict] = {}

    def at(section: str, key: str = "") -> str:
        n = lines.get((section, key)) or lines.get((section, ""))
        name = f"[{section}] {key}".rstrip() if key else f"[{section}]"
        return f"{path}:{n}: {name}" if n else f"{path}: {name}"

    for section in data:
        if section not in SCHEMA:
            close = difflib.get_close_matches(section, SCHEMA.keys(), n=1)
            hint = f" (did you mean [{close[0]}]?)" if close else f" (expected one of {', '.join(SCHEMA)})"
            problems.append(f"{at(section)}: unknown section{hint}")
        elif not isinstance(data[section], dict):
            problems.append(f"{path}: {section}: expected a [{section}] table")

    for section, keys in SCHEMA.items():
        given = data.get(section, {})
        if not isinstance(given, dict):
            continue
        values: dict[str, Any] = {}
        for key, value in given.items():
            if key not in keys:
                close = difflib.get_close_matches(key, keys.keys(), n=1)
                hint = f" (did you mean '{close[0]}'?)" if close else (
                    f" (valid keys: {', '.join(keys)})" if keys else " (this section has no keys yet)")
                problems.append(f"{at(section, key)}: unknown key{hint}")
                continue
            spec = keys[key]
            if not _is_type(value, spec.type):
                problems.append(f"{at(section, key)}: expected {_type_name(spec.type)}, got {value!r}")
                continue
            if isinstance(value, float) and not math.isfinite(value):
                problems.append(f"{at(section, key)}: expected a finite number, got {value!r}")
                continue
            if isinstance(value, str) and _CONTROL.search(value):
                problems.append(f"{at(section, key)}: control character "
                                f"{_CONTROL.search(value).group()!r} in {value!r}; expected plain text")
                continue
            if spec.choices is not None and value not in spec.choices:
                problems.append(f"{at(section, key)}: expected one of {', '.join(map(repr, spec.choices))}, got {value!r}")
                continue
            if spec.min is not None and value < spec.min or spec.max is not None and value > spec.max:
                lo = "" if spec.min is None else f"{spec.min:g}"
                hi = "" if spec.max is None else f"{spec.max:g}"
                rng = f"between {lo} and {hi}" if lo and hi else (f"at least {lo}" if lo else f"at most {hi}")
                problems.append(f"{at(section, key)}: out of range, expected {rng}, got {value!r}")
                continue
            if spec.check is not None:
                errs = spec.check(value)
                if errs:
                    problems.extend(f"{at(section, key)}: {e}" for e in errs)
                    continue
            values[key] = value
        for key, spec in keys.items():
            if key in values:
                continue
            if key in given:  # present but invalid: already reported
                continue
            if spec.default is REQUIRED:
                problems.append(f"{at(section)}: missing required key '{key}' ({spec.help})")
            else:
                values[key] = spec.default
        out[section] = values

    sp = out.get("spectra", {})
    if {"fmin_mhz", "fmax_mhz"} <= sp.keys() and sp["fmin_mhz"] >= sp["fmax_mhz"]:
        problems.append(f"{at('spectra', 'fmax_mhz')}: expected fmax_mhz above fmin_mhz "
                        f"({sp['fmin_mhz']} >= {sp['fmax_mhz']})")
    for check in CROSS_CHECKS:
        try:
            problems.extend(check(out, at))
        except KeyError:
            if not problems:
                raise
            # a key the check needs is invalid, and already reported
    return out, problems


# Checks that look at more than one key: functions (config, at) -> list of problem lines.
CROSS_CHECKS: list[Callable[[dict, Callable[..., str]], list[str]]] = []


def _receiver_and_sweep_checks(cfg: dict, at) -> list[str]:
    return devices.config_problems(cfg, at) + sweep.config_problems(cfg, at)


CROSS_CHECKS.append(_receiver_and_sweep_checks)


def _service_checks(cfg: dict, at) -> list[str]:
    """The watchdog must outlast the receiver's own reconnect attempts (the pipeline waits on them)."""
    rx, svc = cfg.get("receiver", {}), cfg.get("service", {})
    if rx.get("kind") == "rtltcp" and {"reconnect_max_s", "watchdog_s"} <= rx.keys() | svc.keys():
        if rx["reconnect_max_s"] >= svc["watchdog_s"]:
            return [f"{at('service', 'watchdog_s')}: expected more than [receiver] reconnect_max_s "
                    f"({rx['reconnect_max_s']:g} s), or systemd restarts the logger while it reconnects"]
    return []


CROSS_CHECKS.append(_service_checks)


def _static_range_checks(cfg: dict, at) -> list[str]:
    """Static ranges the station wrote must reach its band (the default list is left
    alone: a station outside 16-24 MHz simply has no time signal to mask)."""
    sp, ranges = cfg.get("spectra", {}), cfg.get("rfi", {}).get("static_ranges")
    if not ranges or ranges == DEFAULT_STATIC_RANGES or not {"fmin_mhz", "fmax_mhz"} <= sp.keys():
        return []
    return [f"{at('rfi', 'static_ranges')}: {p}" for p in band_problems(ranges, sp["fmin_mhz"], sp["fmax_mhz"])]


CROSS_CHECKS.append(_static_range_checks)


class Config(dict):
    """A validated station config: ``cfg['station']['name']``; ``path`` and ``storage_root`` resolved."""

    path: Path
    storage_root: Path

    @property
    def station(self) -> dict:
        return self["station"]

    @property
    def archive_dir(self) -> Path:
        return self.storage_root / "archive"

    @property
    def store_path(self) -> Path:
        return self.storage_root / "events.sqlite"

    @property
    def reports_dir(self) -> Path:
        return self.storage_root / "reports"


def load_config(path: str | os.PathLike | None) -> Config:
    """Read and validate a station config; raise ConfigError with one line per problem."""
    if path is None or str(path) == "":
        raise ConfigError(["no station config given: pass --config FILE or set RXLOG_CONFIG"])
    p = Path(path)
    try:
        raw = p.read_bytes()
    except OSError as e:
        raise ConfigError([f"{p}: cannot read config file ({e.strerror or e})"]) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise ConfigError([f"{p}: not UTF-8 text; expected a TOML station config"]) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise ConfigError([f"{p}: unreadable TOML: {e}"]) from None
    values, problems = validate(data, p, text)
    if problems:
        raise ConfigError(problems)
    cfg = Config(values)
    cfg.path = p.resolve()
    root = Path(os.path.expanduser(cfg["storage"]["root"]))
    cfg.storage_root = root if root.is_absolute() else (cfg.path.parent / root)
    problem = _root_problem(cfg["storage"]["root"], cfg.storage_root)
    if problem:
        n = _key_lines(text).get(("storage", "root")) or _key_lines(text).get(("storage", ""))
        raise ConfigError([f"{p}:{n}: [storage] root: {problem}" if n else f"{p}: [storage] root: {problem}"])
    return cfg


def _root_problem(text: str, root: Path) -> str | None:
    """What is wrong with the storage root as a folder to create or use, or None."""
    if not text.strip():
        return 'empty; expected the folder for archive, event store and reports, e.g. root = "data"'
    try:
        for folder in (root, *root.parents):
            if folder.exists():
                if not folder.is_dir():
                    return f"{folder} is a file, not a folder; expected a folder (existing or to be created)"
                return None
    except OSError as e:
        return f"{root}: unusable as a folder ({e.strerror or e})"
    return None


def config_from_text(text: str, path: str | os.PathLike) -> Config:
    """Write ``text`` to ``path`` and load it (used by the demo and tests to make working configs)."""
    p = Path(path)
    p.parent.mkdir(parents=True, exist_ok=True)
    p.write_text(text, encoding="utf-8")
    return load_config(p)
