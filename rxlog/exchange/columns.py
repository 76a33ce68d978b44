"""The layouts of event lists and episode lists: columns, header keys, units, UCDs, name
and version.

An event list is one station's events plus a header that travels with them: station
name and position, antenna and receiver, clock-sync state, band and cadence, the rxlog
version and the ``format_version`` of this layout. Every encoding (rxlog.exchange.export:
CSV, JSON, VOTable; rxlog.exchange.voevent: VOEvent 2.0) and the importer read the
layout from here, and a value is written as text the same way in all of them.

An episode list is the same for episodes (one row per phenomenon: a Jovian storm, a
Type III group, a Type IV) with its own columns, ``format`` name and
``format_version``: the two layouts change independently. ``Layout`` bundles what a
writer and the importer need of either (``BURSTS``, ``EPISODES``).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

from rxlog import __version__
from rxlog.store import CLASSES, LABELS
from rxlog.timeutil import iso, parse_iso

# Version of the export layout (columns, header keys, encodings). Readers accept every
# version up to this one; a file from a newer rxlog is read for the columns this
# version knows, with a notice.
FORMAT_VERSION = 1
FORMAT_NAME = "rxlog event list"

FORMATS = ("csv", "json", "votable")
SUFFIX = {"csv": ".csv", "json": ".json", "votable": ".vot"}

# (name, kind, unit, UCD (IVOA UCD1+ words), description). The order is the column order.
COLUMNS = (
    ("station", "str", "", "meta.id;instr.obsty", "Station that recorded the event"),
    ("event_id", "str", "", "meta.id;meta.main", "Event id, unique within the station"),
    ("start_utc", "time", "", "time.start", "Start of the event, ISO 8601 UTC"),
    ("end_utc", "time", "", "time.end", "End of the event, ISO 8601 UTC"),
    ("peak_utc", "time", "", "time.epoch", "Time of the peak, ISO 8601 UTC"),
    ("fmin_mhz", "float", "MHz", "em.freq;stat.min", "Lowest frequency of the event"),
    ("fmax_mhz", "float", "MHz", "em.freq;stat.max", "Highest frequency of the event"),
    ("peak_excess_db", "float", "dB", "phot.flux.density;arith.ratio", "Peak power above the background"),
    ("snr", "float", "", "stat.snr", "Signal-to-noise ratio of the detection"),
    ("drift_mhz_s", "float", "MHz/s", "arith.rate;em.freq", "Frequency drift rate (negative: downward)"),
    ("class", "str", "", "src.class", "Detector class: " + ", ".join(CLASSES)),
    ("confidence", "float", "", "stat.probability", "Detector confidence in the class, 0-1"),
    ("label", "str", "", "meta.code.class", "Reviewer's label, if any: " + ", ".join(LABELS)),
    ("cml3_deg", "float", "deg", "pos.bodyrc.lon", "Jupiter central meridian longitude, System III (1965), at the peak"),
    ("io_phase_deg", "float", "deg", "time.phase", "Geocentric Io phase at the peak"),
    ("source_region", "str", "", "meta.code", "Jovian source region (Io-A, Io-B, ...), if any"),
    ("jupiter_alt_deg", "float", "deg", "pos.az.alt", "Jupiter's altitude at the station at the peak"),
    ("sun_alt_deg", "float", "deg", "pos.az.alt", "The Sun's altitude at the station at the peak"),
)
COLUMN_NAMES = tuple(c[0] for c in COLUMNS)
KIND = {c[0]: c[1] for c in COLUMNS}
REQUIRED = ("event_id", "start_utc", "end_utc", "peak_utc", "fmin_mhz", "fmax_mhz", "class")

# Header keys: name -> (kind, unit, UCD, description).
HEADER = {
    "format": ("str", "", "meta.code", "Always 'rxlog event list'"),
    "format_version": ("int", "", "meta.version", "Version of this export layout"),
    "rxlog_version": ("str", "", "meta.version", "rxlog version that wrote the file"),
    "exported_utc": ("time", "", "time.creation", "When the file was written, ISO 8601 UTC"),
    "station": ("str", "", "meta.id;instr.obsty", "Station name"),
    "latitude_deg": ("float", "deg", "pos.earth.lat", "Geodetic latitude, north"),
    "longitude_deg": ("float", "deg", "pos.earth.lon", "Longitude, east"),
    "elevation_m": ("float", "m", "pos.earth.altitude", "Height above the WGS84 ellipsoid"),
    "antenna": ("str", "", "instr.setup", "Antenna, free text"),
    "receiver": ("str", "", "instr.setup", "Receiver kind"),
    "clock_sync": ("str", "", "meta.code.status", "Clock synchronisation state at export time"),
    "band_fmin_mhz": ("float", "MHz", "em.freq;stat.min", "Lower edge of the recorded band"),
    "band_fmax_mhz": ("float", "MHz", "em.freq;stat.max", "Upper edge of the recorded band"),
    "channels": ("int", "", "meta.number", "Channels across the band"),
    "cadence_s": ("float", "s", "time.interval", "Seconds between spectra"),
    "period_start_utc": ("time", "", "time.start", "Start of the exported period (empty: from the first event)"),
    "period_end_utc": ("time", "", "time.end", "End of the exported period (empty: to the last event)"),
    "n_events": ("int", "", "meta.number", "Number of events in the file"),
}


# Version of the episode list's layout (its columns, header keys, encodings), kept apart
# from the event list's: bump it whenever EPISODE_COLUMNS or EPISODE_HEADER change.
EPISODE_FORMAT_VERSION = 1
EPISODE_FORMAT_NAME = "rxlog episode list"

EPISODE_COLUMNS = (
    ("station", "str", "", "meta.id;instr.obsty", "Station that recorded the episode"),
    ("episode_id", "str", "", "meta.id;meta.main", "Episode id, unique within the station"),
    ("start_utc", "time", "", "time.start", "Start of the episode (its first burst), ISO 8601 UTC"),
    ("end_utc", "time", "", "time.end", "End of the episode (its last burst), ISO 8601 UTC"),
    ("fmin_mhz", "float", "MHz", "em.freq;stat.min", "Lowest frequency of the episode"),
    ("fmax_mhz", "float", "MHz", "em.freq;stat.max", "Highest frequency of the episode"),
    ("class", "str", "", "src.class", "Detector class: " + ", ".join(CLASSES)),
    ("confidence", "float", "", "stat.probability", "Detector confidence in the class, 0-1"),
    ("n_bursts", "int", "", "meta.number", "Number of bursts (detected events) in the episode"),
    ("peak_excess_db", "float", "dB", "phot.flux.density;arith.ratio", "Highest peak power above the background"),
    ("reason", "str", "", "meta.note", "Why the detector gave this class, in one line"),
    ("sequence_id", "str", "", "meta.id.assoc", "A flare's related episodes share this id; empty if none"),
    ("label", "str", "", "meta.code.class", "Reviewer's label of the episode, if any: " + ", ".join(LABELS)),
    ("cml3_start_deg", "float", "deg", "pos.bodyrc.lon", "Jupiter CML, System III (1965), at the start"),
    ("cml3_end_deg", "float", "deg", "pos.bodyrc.lon", "Jupiter CML, System III (1965), at the end"),
    ("io_phase_start_deg", "float", "deg", "time.phase", "Geocentric Io phase at the start"),
    ("io_phase_end_deg", "float", "deg", "time.phase", "Geocentric Io phase at the end"),
    ("source_region", "str", "", "meta.code", "Jovian source region of most of its bursts, if any"),
    ("jupiter_alt_min_deg", "float", "deg", "pos.az.alt;stat.min", "Jupiter's lowest altitude at its bursts' peaks"),
    ("jupiter_alt_max_deg", "float", "deg", "pos.az.alt;stat.max", "Jupiter's highest altitude at its bursts' peaks"),
    ("sun_alt_min_deg", "float", "deg", "pos.az.alt;stat.min", "The Sun's lowest altitude at its bursts' peaks"),
    ("sun_alt_max_deg", "float", "deg", "pos.az.alt;stat.max", "The Sun's highest altitude at its bursts' peaks"),
)
EPISODE_REQUIRED = ("episode_id", "start_utc", "end_utc", "fmin_mhz", "fmax_mhz", "class")
EPISODE_HEADER = {**{k: v for k, v in HEADER.items() if k != "n_events"},
                  "format": ("str", "", "meta.code", f"Always '{EPISODE_FORMAT_NAME}'"),
                  "n_episodes": ("int", "", "meta.number", "Number of episodes in the file")}


@dataclass(frozen=True)
class Layout:
    """What writers and the importer need of one kind of list."""

    level: str            # "bursts" or "episodes", as `rxlog export --level` names it
    name: str             # the header's ``format``
    version: int          # the header's ``format_version``
    columns: tuple        # (name, kind, unit, UCD, description), in column order
    required: tuple       # columns a row must have a value in
    header: dict          # header keys: name -> (kind, unit, UCD, description)
    noun: str             # what a row is: "events", "episodes" (the JSON key and VOTable table name)
    id_key: str           # the column that names a row
    count_key: str        # the header key counting the rows

    @property
    def names(self) -> tuple:
        return tuple(c[0] for c in self.columns)

    @property
    def kind(self) -> dict:
        return {c[0]: c[1] for c in self.columns}


BURSTS = Layout("bursts", FORMAT_NAME, FORMAT_VERSION, COLUMNS, REQUIRED, HEADER, "events", "event_id", "n_events")
EPISODES = Layout("episodes", EPISODE_FORMAT_NAME, EPISODE_FORMAT_VERSION, EPISODE_COLUMNS, EPISODE_REQUIRED,
                  EPISODE_HEADER, "episodes", "episode_id", "n_episodes")
LAYOUTS = {"bursts": BURSTS, "episodes": EPISODES}


def station_header(cfg, clock_sync: str = "unknown", n_events: int = 0,
                   t0: float | None = None, t1: float | None = None, layout: Layout = BURSTS) -> dict:
    """The header of an event list (or, with ``layout=EPISODES``, an episode list) for the
    station of ``cfg``; ``n_events`` is the number of rows."""
    st, sp = cfg["station"], cfg["spectra"]
    head = {
        "format": layout.name,
        "format_version": layout.version,
        "rxlog_version": __version__,
        "exported_utc": iso(time.time()),
        "station": st["name"],
        "latitude_deg": float(st["latitude_deg"]),
        "longitude_deg": float(st["longitude_deg"]),
        "elevation_m": float(st["elevation_m"]),
        "antenna": st.get("antenna", ""),
        "receiver": cfg["receiver"]["kind"],
        "clock_sync": clock_sync or "unknown",
        "band_fmin_mhz": float(sp["fmin_mhz"]),
        "band_fmax_mhz": float(sp["fmax_mhz"]),
        "channels": int(sp["channels"]),
        "cadence_s": float(sp["cadence_s"]),
        "period_start_utc": iso(t0) if t0 is not None else None,
        "period_end_utc": iso(t1) if t1 is not None else None,
    }
    head[layout.count_key] = int(n_events)
    return head


def export_row(ev: dict, layout: Layout = BURSTS) -> dict:
    """An event (or episode: the event store's field names) as the values of the layout's
    columns: floats finite or None, times in canonical ISO 8601 UTC, text on one line."""
    row = {}
    for name, kind, *_ in layout.columns:
        v = ev.get(name)
        if kind == "float":
            v = None if v is None or not math.isfinite(float(v)) else float(v)
        elif kind == "int":
            v = None if v is None else int(v)
        elif kind == "time":
            v = None if v in (None, "") else iso(parse_iso(v) if isinstance(v, str) else float(v))
        else:
            v = None if v in (None, "") else one_line(str(v))
        row[name] = v
    return row


def one_line(text: str) -> str:
    """Text on one line: each run of white space (newlines too) one space, none at the ends."""
    return " ".join(str(text).split())


def cell_text(v) -> str:
    """A header or cell value as text: floats in their shortest exact form."""
    if v is None:
        return ""
    if isinstance(v, float):
        return repr(v)
    return one_line(str(v))
