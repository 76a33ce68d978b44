"""Observing forecasts: when Jupiter is up, the Sun low and CML / Io phase in a source region.

``forecast_windows`` samples the station's ephemeris tags every ``step_s`` seconds, marks
each sample with the region it lies in (or nothing, when Jupiter is too low, the Sun too
high or no box contains the point), and returns the runs of one region as windows. Each
edge is then found by bisection on the same test, to better than 0.1 s, so a window's
start and end agree with the tags computed at those instants.

``forecast_watches`` joins windows that touch (the source region changes while Jupiter
stays observable) into one watch, the stretch a person would sit through, and leaves out
watches shorter than a minimum. ``write_ics`` writes the watches as an iCalendar file
(RFC 5545) that calendar programs import, the regions and their times in each entry's
description; ``plot_forecast`` draws a week or less as the CML III / Io-phase plane with
the region boxes and each night's observable track, and a longer span as a calendar of
nights by local hour; ``format_forecast`` is the text table.
"""

from __future__ import annotations

import datetime as dt
import math
import zoneinfo
from pathlib import Path
from typing import Callable

import icalendar
import numpy as np

from rxlog.errors import RxlogError
from rxlog.fileio import write_atomic
from rxlog.sky.regions import regions_from_config, wrapped_spans
from rxlog.sky.tags import station_tags
from rxlog.timeutil import iso

# Defaults (common practice): Jupiter at least 10 deg up, since low sources suffer most
# from the ionosphere and local horizons; the Sun below -6 deg (end of civil twilight),
# since daytime D-layer absorption mutes the band.
MIN_JUPITER_ALT_DEG = 10.0
MAX_SUN_ALT_DEG = -6.0
MAX_DAYS = 400
# Our choice, not a published number: a watch shorter than this seldom repays setting up
# for it (storms last minutes to hours). The default of [forecast] min_window_min too;
# --min-window changes it for one run.
MIN_WINDOW_MIN = 20.0
# Windows whose edges lie closer than this are one watch: neighbouring windows share one
# bisected edge, so their gap is zero; a second covers rounding.
TOUCH_S = 1.0
CHUNK_SAMPLES = 20_160   # two weeks at 1-minute steps per ephemeris pass
EDGE_ITERATIONS = 12     # bisection: a 60-s step is cut to 0.015 s


def _check(days, step_s, min_jupiter_alt_deg, max_sun_alt_deg):
    if not (isinstance(days, (int, float)) and math.isfinite(days) and 0 < days <= MAX_DAYS):
        raise RxlogError(f"days: expected a number of days above 0 and at most {MAX_DAYS}, got {days!r}")
    if not (isinstance(step_s, (int, float)) and math.isfinite(step_s) and 1 <= step_s <= 3600):
        raise RxlogError(f"step: expected 1 to 3600 seconds, got {step_s!r}")
    if not -5.0 <= min_jupiter_alt_deg <= 89.0:
        raise RxlogError(f"min Jupiter altitude: expected -5 to 89 degrees, got {min_jupiter_alt_deg!r}")
    if not -90.0 <= max_sun_alt_deg <= 90.0:
        raise RxlogError(f"max Sun altitude: expected -90 to 90 degrees, got {max_sun_alt_deg!r}")


def _labeller(cfg, min_jupiter_alt_deg, max_sun_alt_deg):
    """times -> (code, tags): code 0 = no window, k = the k-th region (1-based)."""
    regions = regions_from_config(cfg)
    names = [r.name for r in regions]

    def label(t):
        tags = station_tags(cfg, t)
        code = np.zeros(t.shape, dtype=np.int16)
        ok = (tags["jupiter_alt_deg"] >= min_jupiter_alt_deg) & (tags["sun_alt_deg"] <= max_sun_alt_deg)
        for k, name in enumerate(names, start=1):
            code[ok & (tags["source_region"] == name)] = k
        return code, tags

    return label, names


def forecast_windows(cfg, start_unix: float, days: float, min_jupiter_alt_deg: float = MIN_JUPITER_ALT_DEG,
                     max_sun_alt_deg: float = MAX_SUN_ALT_DEG, step_s: float = 60.0,
                     progress: Callable[[int], None] | None = None) -> list[dict]:
    """Observing windows from ``start_unix`` for ``days`` days at the configured station.

    Each window is a dict: start_utc, end_utc (ISO 8601), start, end (POSIX s), region,
    max_jupiter_alt_deg, duration_min, cml3_start_deg, cml3_end_deg,
    io_phase_start_deg, io_phase_end_deg. A window cut by the start or end of the
    period begins or ends there. Windows shorter than about one step may be missed.
    ``progress`` is called with the number of samples done after each pass.
    """
    _check(days, step_s, min_jupiter_alt_deg, max_sun_alt_deg)
    label, names = _labeller(cfg, min_jupiter_alt_deg, max_sun_alt_deg)
    start = float(start_unix)
    end = start + float(days) * 86400.0
    n = int(math.ceil((end - start) / step_s)) + 1
    codes = np.empty(n, dtype=np.int16)
    alt = np.empty(n, dtype=np.float32)
    for a in range(0, n, CHUNK_SAMPLES):
        t = np.minimum(start + step_s * np.arange(a, min(a + CHUNK_SAMPLES, n)), end)
        codes[a:a + t.size], tags = label(t)
        alt[a:a + t.size] = tags["jupiter_alt_deg"]
        if progress is not None:
            progress(t.size)
    times = np.minimum(start + step_s * np.arange(n), end)

    # refine every change of code between neighbouring samples by bisection
    change = np.flatnonzero(codes[1:] != codes[:-1])
    lo, hi = times[change].copy(), times[change + 1].copy()
    left_code = codes[change]
    for _ in range(EDGE_ITERATIONS if change.size else 0):
        mid = 0.5 * (lo + hi)
        same = label(mid)[0] == left_code
        lo, hi = np.where(same, mid, lo), np.where(same, hi, mid)
    edges = 0.5 * (lo + hi)

    bounds = np.concatenate([[start], edges, [end]])
    run_codes = np.concatenate([[codes[0]], codes[change + 1]])
    run_first = np.concatenate([[0], change + 1])                  # first sample of each run
    run_last = np.concatenate([change, [n - 1]])
    keep = np.flatnonzero(run_codes > 0)
    if keep.size == 0:
        return []
    w0, w1 = bounds[keep], bounds[keep + 1]
    edge_tags = station_tags(cfg, np.concatenate([w0, w1]))
    k = keep.size
    windows = []
    for j, r in enumerate(keep):
        inside = alt[run_first[r]:run_last[r] + 1]
        peak = max(float(inside.max()) if inside.size else -90.0,
                   float(edge_tags["jupiter_alt_deg"][j]), float(edge_tags["jupiter_alt_deg"][k + j]))
        windows.append({
            "start_utc": iso(w0[j]), "end_utc": iso(w1[j]), "start": float(w0[j]), "end": float(w1[j]),
            "region": names[run_codes[r] - 1], "max_jupiter_alt_deg": round(peak, 2),
            "duration_min": round((w1[j] - w0[j]) / 60.0, 1),
            "cml3_start_deg": round(float(edge_tags["cml3_deg"][j]), 2),
            "cml3_end_deg": round(float(edge_tags["cml3_deg"][k + j]), 2),
            "io_phase_start_deg": round(float(edge_tags["io_phase_deg"][j]), 2),
            "io_phase_end_deg": round(float(edge_tags["io_phase_deg"][k + j]), 2),
        })
    return windows


def min_window_from_config(cfg) -> float:
    """``[forecast] min_window_min`` of the station config, or the default."""
    return float((cfg.get("forecast") or {}).get("min_window_min", MIN_WINDOW_MIN))


def forecast_watches(windows: list[dict], min_window_min: float = MIN_WINDOW_MIN) -> list[dict]:
    """Windows that touch joined into watches; watches shorter than ``min_window_min`` left out.

    A watch has a window's fields over its whole span (start, end, start_utc, end_utc,
    duration_min, max_jupiter_alt_deg, CML III and Io phase at its two ends), ``region``
    naming its regions in the order they come (``"Io-A, non-Io-A"``), and ``parts``: the
    windows it is made of, each with its own region and times.
    """
    if not (isinstance(min_window_min, (int, float)) and math.isfinite(min_window_min)
            and 0 <= min_window_min <= 1440):
        raise RxlogError(f"min window: expected 0 to 1440 minutes, got {min_window_min!r}")
    groups: list[list[dict]] = []
    for w in windows:
        if groups and w["start"] - groups[-1][-1]["end"] <= TOUCH_S:
            groups[-1].append(w)
        else:
            groups.append([w])
    watches = []
    for parts in groups:
        first, last = parts[0], parts[-1]
        if last["end"] - first["start"] < 60.0 * min_window_min:
            continue
        names = list(dict.fromkeys(p["region"] for p in parts))
        watches.append({
            "start_utc": first["start_utc"], "end_utc": last["end_utc"],
            "start": first["start"], "end": last["end"], "region": ", ".join(names),
            "max_jupiter_alt_deg": max(p["max_jupiter_alt_deg"] for p in parts),
            "duration_min": round((last["end"] - first["start"]) / 60.0, 1),
            "cml3_start_deg": first["cml3_start_deg"], "cml3_end_deg": last["cml3_end_deg"],
            "io_phase_start_deg": first["io_phase_start_deg"], "io_phase_end_deg": last["io_phase_end_deg"],
            "parts": parts,
        })
    return watches


# --- text ----------------------------------------------------------------------------

def _local(t: float, tz: zoneinfo.ZoneInfo) -> str:
    return dt.datetime.fromtimestamp(t, tz=tz).strftime("%a %Y-%m-%d %H:%M")


def format_forecast(windows: list[dict], timezone: str = "UTC") -> str:
    """The windows (or watches) as an aligned text table, local time (``timezone``) and UTC."""
    tz = zoneinfo.ZoneInfo(timezone)
    width = max([10] + [len(w["region"]) for w in windows])
    head = (f"{'start (' + timezone + ')':<22} {'end':>5}  {'start UTC':<17} {'end UTC':<17} "
            f"{'region':<{width}} {'max alt':>7}  {'CML III':>11}  {'Io phase':>11}")
    lines = [head]
    for w in windows:
        end_local = dt.datetime.fromtimestamp(w["end"], tz=tz).strftime("%H:%M")
        lines.append(
            f"{_local(w['start'], tz):<22} {end_local:>5}  {w['start_utc'][:16].replace('T', ' '):<17} "
            f"{w['end_utc'][:16].replace('T', ' '):<17} {w['region']:<{width}} {w['max_jupiter_alt_deg']:>6.1f}°  "
            f"{w['cml3_start_deg']:>5.1f}-{w['cml3_end_deg']:<5.1f}  {w['io_phase_start_deg']:>5.1f}-{w['io_phase_end_deg']:<5.1f}")
    if not windows:
        lines.append("(no windows: Jupiter never up in a source region with the Sun low enough)")
    return "\n".join(lines)


# --- iCalendar (RFC 5545) ------------------------------------------------------------

def _utc(t: float) -> dt.datetime:
    """A whole-second UTC datetime (iCalendar times carry whole seconds)."""
    return dt.datetime.fromtimestamp(round(t), tz=dt.timezone.utc)


def _hhmm(t: float, tz: zoneinfo.ZoneInfo) -> str:
    return dt.datetime.fromtimestamp(t, tz=tz).strftime("%H:%M")


def _ics_description(w: dict, name: str, tz: zoneinfo.ZoneInfo) -> str:
    """What a watch holds: its span, then each region with its local and UTC times, CML and Io phase."""
    utc = dt.timezone.utc
    lines = [f"Jupiter decametric watch at station {name}: {_hhmm(w['start'], tz)}-{_hhmm(w['end'], tz)} "
             f"{tz.key} ({_hhmm(w['start'], utc)}-{_hhmm(w['end'], utc)} UTC), Jupiter up to "
             f"{w['max_jupiter_alt_deg']:.1f} deg altitude."]
    for p in w.get("parts") or [w]:
        lines.append(f"{p['region']} {_hhmm(p['start'], tz)}-{_hhmm(p['end'], tz)} "
                     f"({_hhmm(p['start'], utc)}-{_hhmm(p['end'], utc)} UTC): CML III "
                     f"{p['cml3_start_deg']:.1f}-{p['cml3_end_deg']:.1f} deg, Io phase "
                     f"{p['io_phase_start_deg']:.1f}-{p['io_phase_end_deg']:.1f} deg.")
    lines.append("Forecast by rxlog.")
    return "\n".join(lines)


def write_ics(windows: list[dict], path, station, stamp_unix: float | None = None) -> Path:
    """Write watches (or single windows) as an iCalendar file (RFC 5545), one VEVENT each, times in UTC.

    ``station`` is the ``[station]`` table (name, latitude_deg, longitude_deg, timezone)
    or a name. Each entry's description gives the watch's span and, for each source
    region in it, its local and UTC times, CML III and Io phase. The file is written to a
    temporary name and renamed, so an existing file is never left half-written. RFC 5545
    (3.6) wants at least one event: no windows, no file.
    """
    if not windows:
        raise RxlogError(f"{path}: no forecast windows to write (an iCalendar file needs at least one event)")
    st = station if isinstance(station, dict) else {"name": str(station)}
    name = st.get("name", "station")
    tz = zoneinfo.ZoneInfo(st.get("timezone", "UTC"))
    stamp = _utc(dt.datetime.now(dt.timezone.utc).timestamp() if stamp_unix is None else stamp_unix)
    cal = icalendar.Calendar()
    cal.add("prodid", "-//rxlog//Jupiter decametric forecast//EN")
    cal.add("version", "2.0")
    cal.add("calscale", "GREGORIAN")
    cal.add("method", "PUBLISH")
    cal.add("x-wr-calname", f"rxlog forecast, {name}")
    for w in windows:
        regions = list(dict.fromkeys(p["region"] for p in w.get("parts") or [w]))
        ev = icalendar.Event()
        ev.add("uid", f"{_utc(w['start']).strftime('%Y%m%dT%H%M%SZ')}-{name}@rxlog")
        ev.add("dtstamp", stamp)
        ev.add("dtstart", _utc(w["start"]))
        ev.add("dtend", _utc(w["end"]))
        ev.add("summary", f"Jupiter {w['region']} (max alt {w['max_jupiter_alt_deg']:.0f}°)")
        ev.add("description", _ics_description(w, name, tz))
        ev.add("location", name)
        ev.add("categories", ["Jupiter", *regions])
        ev.add("transp", "TRANSPARENT")
        if "latitude_deg" in st and "longitude_deg" in st:
            ev.add("geo", (float(st["latitude_deg"]), float(st["longitude_deg"])))
        cal.add_component(ev)
    return write_atomic(_check_output(path), cal.to_ical(), what="calendar file")


def _check_output(path) -> Path:
    """An output file path whose folder exists and which is not a folder itself."""
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise RxlogError(f"{path}: folder {folder} does not exist; expected an existing folder")
    if path.is_dir():
        raise RxlogError(f"{path}: is a folder; expected a file name")
    return path


# --- the CML-Io phase plot -----------------------------------------------------------

PLOT_STEP_S = 300.0
# Okabe & Ito (2008) colours and a grey, in the order the morning report fills its region boxes
REGION_COLOURS = ["#56B4E9", "#009E73", "#E69F00", "#CC79A7", "#999999", "#F0E442", "#0072B2", "#D55E00"]


def _break_wraps(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Insert NaN where a track jumps across 0/360 so lines do not streak across the plot."""
    jump = np.flatnonzero((np.abs(np.diff(x)) > 180.0) | (np.abs(np.diff(y)) > 180.0)) + 1
    return np.insert(x, jump, np.nan), np.insert(y, jump, np.nan)


def forecast_figure(cfg, start_unix: float, days: float, windows: list[dict] | None = None,
                    min_jupiter_alt_deg: float = MIN_JUPITER_ALT_DEG, max_sun_alt_deg: float = MAX_SUN_ALT_DEG,
                    dpi: int = 100):
    """The forecast's matplotlib Figure: the CML III / Io-phase plane for a week or less,
    a calendar of nights by local hour for a longer span (see ``plot_forecast``)."""
    _check(days, PLOT_STEP_S, min_jupiter_alt_deg, max_sun_alt_deg)
    if windows is None:
        windows = forecast_watches(forecast_windows(cfg, start_unix, days, min_jupiter_alt_deg, max_sun_alt_deg),
                                   min_window_from_config(cfg))
    t = float(start_unix) + np.arange(0.0, float(days) * 86400.0 + 1.0, PLOT_STEP_S)
    tags = station_tags(cfg, t)
    ok = (tags["jupiter_alt_deg"] >= min_jupiter_alt_deg) & (tags["sun_alt_deg"] <= max_sun_alt_deg)
    draw = _calendar if days > CALENDAR_FROM_DAYS else _plane
    fig = draw(cfg, t, tags, ok, windows, dpi)
    name = cfg["station"].get("name", "")
    tz = zoneinfo.ZoneInfo(cfg["station"].get("timezone", "UTC"))
    first = dt.datetime.fromtimestamp(float(start_unix), tz=tz).strftime("%Y-%m-%d")
    fig.axes[0].set_title(f"{name}: Jupiter observable from {first}, {days:g} days "
                          f"(alt >= {min_jupiter_alt_deg:g}°, Sun <= {max_sun_alt_deg:g}°)", fontsize=9)
    return fig


def plot_forecast(cfg, start_unix: float, days: float, path, windows: list[dict] | None = None,
                  min_jupiter_alt_deg: float = MIN_JUPITER_ALT_DEG, max_sun_alt_deg: float = MAX_SUN_ALT_DEG,
                  dpi: int = 100) -> Path:
    """PNG of the forecast.

    Up to a week: the CML III / Io-phase plane with the region boxes and each night's
    track where Jupiter is at least min_jupiter_alt_deg up and the Sun at most
    max_sun_alt_deg, one colour per night, ``windows`` drawn thick over it. Longer: a
    calendar, one row per night (named by the local date on which it begins) against
    the local hour, each window's regions in their colours over the observable hours.
    ``windows`` are watches or windows; None means this config's watches.
    """
    fig = forecast_figure(cfg, start_unix, days, windows, min_jupiter_alt_deg, max_sun_alt_deg, dpi)
    path = _check_output(path)
    try:
        fig.savefig(path, format="png")
    except OSError as e:
        raise RxlogError(f"{path}: cannot write ({e.strerror or e})") from None
    return path


def _new_figure(width: float, height: float, dpi: int):
    # matplotlib is imported when a plot is drawn: the forecast's text and calendar file do without it
    import matplotlib
    matplotlib.use("Agg", force=False)
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), dpi=dpi)
    FigureCanvasAgg(fig)
    return fig


def _region_colours(cfg) -> dict[str, str]:
    return {reg.name: REGION_COLOURS[k % len(REGION_COLOURS)] for k, reg in enumerate(regions_from_config(cfg))}


def _plane(cfg, t, tags, ok, windows, dpi):
    # matplotlib is imported when a plot is drawn: the forecast's text and calendar file do without it
    from matplotlib import colormaps
    from matplotlib.patches import Rectangle

    tz = zoneinfo.ZoneInfo(cfg["station"].get("timezone", "UTC"))
    fig = _new_figure(8.0, 6.4, dpi)
    ax = fig.add_axes((0.09, 0.09, 0.66, 0.83))
    handles = []
    for k, reg in enumerate(regions_from_config(cfg)):
        colour = REGION_COLOURS[k % len(REGION_COLOURS)]
        io = [(0.0, 360.0)] if reg.io_from is None else wrapped_spans(reg.io_from, reg.io_to)
        for c0, c1 in wrapped_spans(reg.cml_from, reg.cml_to):
            for i0, i1 in io:
                ax.add_patch(Rectangle((c0, i0), c1 - c0, i1 - i0, facecolor=colour, alpha=0.18,
                                       edgecolor=colour, linewidth=1.0))
        handles.append(Rectangle((0, 0), 1, 1, facecolor=colour, alpha=0.4, edgecolor=colour, label=reg.name))

    # one track per local night: samples grouped by the local date 12 hours earlier
    offset = np.array([dt.datetime.fromtimestamp(x, tz=tz).utcoffset().total_seconds() for x in t])
    night = np.floor((t + offset - 43200.0) / 86400.0).astype(np.int64)
    nights = np.unique(night[ok])
    cmap = colormaps["viridis"]
    for j, nd in enumerate(nights):
        sel = ok & (night == nd)
        x = np.where(sel, tags["cml3_deg"], np.nan)
        y = np.where(sel, tags["io_phase_deg"], np.nan)
        x, y = _break_wraps(x, y)
        label = (dt.date(1970, 1, 1) + dt.timedelta(days=int(nd))).strftime("%a %m-%d")
        ax.plot(x, y, color=cmap(0.85 * j / max(1, len(nights) - 1)), linewidth=1.2, label=label)
    for w in windows:
        tw = np.linspace(w["start"], w["end"], 20)
        tw_tags = station_tags(cfg, tw)
        x, y = _break_wraps(tw_tags["cml3_deg"], tw_tags["io_phase_deg"])
        ax.plot(x, y, color="black", linewidth=3.0, solid_capstyle="round")

    ax.set_xlim(0, 360)
    ax.set_ylim(0, 360)
    ax.set_xticks(range(0, 361, 60))
    ax.set_yticks(range(0, 361, 60))
    ax.set_xlabel("CML System III (deg)")
    ax.set_ylabel("Io phase (deg)")
    ax.grid(True, color="#dddddd", linewidth=0.6)
    track_handles = ax.get_legend_handles_labels()[0]
    fig.legend(handles=handles + track_handles, loc="upper left", bbox_to_anchor=(0.77, 0.92),
               fontsize=7, frameon=False, title="regions / nights", title_fontsize=8)
    return fig


# --- the calendar of nights ----------------------------------------------------------------

CALENDAR_FROM_DAYS = 7.0        # longer spans: one row per night instead of one track per night
OBSERVABLE_COLOUR = "#e8e8e8"   # Jupiter up and the Sun low, outside every region (lighter than non-Io-A's grey)
CALENDAR_ROW_IN = 0.16          # inches per night


def _night_hour(t: float, tz: zoneinfo.ZoneInfo) -> tuple[dt.date, float]:
    """The night holding ``t`` (local date on which it began, nights run noon to noon) and
    the local clock hour counted from that date's midnight (12 to 36)."""
    shifted = dt.datetime.fromtimestamp(t, tz=tz).replace(tzinfo=None) - dt.timedelta(hours=12)
    return shifted.date(), 12.0 + shifted.hour + (shifted.minute + shifted.second / 60.0) / 60.0


def calendar_bars(spans, timezone: str) -> list[tuple[dt.date, float, float, str]]:
    """(start, end, label) spans in POSIX seconds -> bars (night, hour0, hour1, label) of a
    calendar with one row per night.

    A night is named by the local date on which it begins and runs from local noon to the
    next; hours are local clock hours from that date's midnight (12 to 36), so a span past
    midnight stays on its night's row, and one past local noon is split there. A bar
    starts at the local clock time and is as long as the span (on a night the clocks
    change, its end is off the clock by the hour they moved).
    """
    tz = zoneinfo.ZoneInfo(timezone)
    bars = []
    for t0, t1, label in spans:
        t0, t1 = float(t0), float(t1)
        while t1 > t0:
            night, x0 = _night_hour(t0, tz)
            noon = dt.datetime.combine(night + dt.timedelta(days=1), dt.time(12), tzinfo=tz).timestamp()
            t_end = min(t1, noon)
            bars.append((night, x0, min(36.0, x0 + (t_end - t0) / 3600.0), label))
            t0 = t_end
    return bars


def _true_runs(t: np.ndarray, ok: np.ndarray) -> list[tuple[float, float]]:
    """(first, last) sample times of each run of True in ``ok``."""
    edges = np.flatnonzero(np.diff(np.concatenate([[0], ok.astype(np.int8), [0]])))
    return [(float(t[a]), float(t[b - 1])) for a, b in zip(edges[::2], edges[1::2])]


def _calendar(cfg, t, tags, ok, windows, dpi):
    # matplotlib is imported when a plot is drawn: the forecast's text and calendar file do without it
    from matplotlib.patches import Patch

    tz_name = cfg["station"].get("timezone", "UTC")
    tz = zoneinfo.ZoneInfo(tz_name)
    colours = _region_colours(cfg)
    first = _night_hour(t[0], tz)[0]
    last = _night_hour(max(t[0], t[-1] - 1.0), tz)[0]        # a span ending at local noon opens no night
    rows = (last - first).days + 1
    fig = _new_figure(8.0, max(4.0, min(14.0, 1.5 + CALENDAR_ROW_IN * rows)), dpi)
    ax = fig.add_axes((0.14, 0.08, 0.60, 0.86))

    observable = calendar_bars([(a, b, "") for a, b in _true_runs(t, ok)], tz_name)
    parts = [p for w in windows for p in (w.get("parts") or [w])]
    regions = calendar_bars([(p["start"], p["end"], p["region"]) for p in parts], tz_name)
    for bars, height in ((observable, 0.8), (regions, 0.8)):
        by_label: dict[str, list] = {}
        for night, x0, x1, label in bars:
            by_label.setdefault(label, []).append(((night - first).days, x0, x1))
        for label, rects in by_label.items():
            colour = OBSERVABLE_COLOUR if label == "" else colours.get(label, "#000000")
            for row, x0, x1 in rects:
                ax.broken_barh([(x0, x1 - x0)], (row - height / 2, height), facecolors=colour, linewidth=0)

    hours = [x for _, x0, x1, _ in observable + regions for x in (x0, x1)]
    lo = max(12, 3 * math.floor(min(hours) / 3)) if hours else 12
    hi = min(36, 3 * math.ceil(max(hours) / 3)) if hours else 36
    ax.set_xlim(lo, hi)
    ax.set_xticks(range(lo, hi + 1, 3))
    ax.set_xticklabels([f"{h % 24:02d}:00" for h in range(lo, hi + 1, 3)])
    ax.set_xlabel(f"local time ({tz_name})")
    every = 1 if rows <= 45 else 7
    ax.set_yticks(range(0, rows, every))
    ax.set_yticklabels([(first + dt.timedelta(days=k)).strftime("%a %Y-%m-%d") for k in range(0, rows, every)],
                       fontsize=7 if rows > 20 else 8)
    ax.set_ylim(rows - 0.5, -0.5)
    ax.set_ylabel(f"night beginning (local date, {tz_name})")
    ax.grid(True, axis="x", color="#bbbbbb", linewidth=0.6)
    ax.set_axisbelow(True)

    shown = [name for name in colours if any(b[3] == name for b in regions)]
    shown += sorted({b[3] for b in regions} - set(colours))
    handles = [Patch(facecolor=colours.get(name, "#000000"), label=name) for name in shown]
    handles.append(Patch(facecolor=OBSERVABLE_COLOUR, label="observable,\nno region"))
    fig.legend(handles=handles, loc="upper left", bbox_to_anchor=(0.76, 0.94), fontsize=7, frameon=False,
               title="source region", title_fontsize=8)
    return fig


# --- everything the forecast command does --------------------------------------------

def make_forecast(cfg, start_unix: float, days: float, min_jupiter_alt_deg: float = MIN_JUPITER_ALT_DEG,
                  max_sun_alt_deg: float = MAX_SUN_ALT_DEG, ics_path=None, plot_path=None,
                  progress: Callable[[int], None] | None = None, min_window_min: float | None = None) -> dict:
    """Watches, their text table and, if paths are given, the iCalendar file and the plot.

    ``min_window_min`` (default: the config's ``[forecast] min_window_min``) leaves out
    shorter watches. Output folders are checked before any work is done. Returns a dict
    with windows (one per region, none left out), watches, text, ics_path and plot_path
    (None when not asked for, and ics_path None when there are no watches to put in a
    calendar).
    """
    for p in (ics_path, plot_path):
        if p is not None:
            _check_output(p)
    if min_window_min is None:
        min_window_min = min_window_from_config(cfg)
    windows = forecast_windows(cfg, start_unix, days, min_jupiter_alt_deg, max_sun_alt_deg, progress=progress)
    watches = forecast_watches(windows, min_window_min)
    out = {"windows": windows, "watches": watches,
           "text": format_forecast(watches, cfg["station"].get("timezone", "UTC")),
           "ics_path": None, "plot_path": None}
    if ics_path is not None and watches:
        out["ics_path"] = write_ics(watches, ics_path, cfg["station"])
    if plot_path is not None:
        out["plot_path"] = plot_forecast(cfg, start_unix, days, plot_path, watches, min_jupiter_alt_deg,
                                         max_sun_alt_deg)
    return out
