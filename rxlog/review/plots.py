"""The night's two big plots: the overview (the dynamic spectrum with one outlined region
per episode and a box per burst of no episode, the Sun-up, Jupiter-up and forecast bands
and the hourly masked fraction on one local-time axis) and the Jovian candidates on the
CML III–Io-phase plane over the source regions.

Colours: the class palette for events (``rxlog.review.palette``), greys and ink for
everything else, viridis for the spectra.
"""

from __future__ import annotations

import datetime as dt
import importlib
from pathlib import Path

import matplotlib
import matplotlib.dates as mdates
import matplotlib.patheffects as pe
import numpy as np
from matplotlib.collections import LineCollection, PatchCollection
from matplotlib.figure import Figure
from matplotlib.patches import Rectangle

from rxlog.review.data import NightData, running_background
from rxlog.review.items import review_items, span
from rxlog.review.night import Night
from rxlog.review.palette import BAND_GREY, CLASS_COLOURS, LABEL_NAMES, colour, outline
from rxlog.review.summary import fmt_span
from rxlog.sky.regions import regions_from_config, wrapped_spans
from rxlog.store import CLASSES
from rxlog.timeutil import parse_iso


def load_matplotlib():
    """matplotlib, with pyplot (for whatever in this process uses it) on the Agg backend."""
    matplotlib.use("Agg")
    # Loaded here, after Agg is chosen, so that pyplot (if anything in this process uses
    # it) never starts a display backend on a station computer without one.
    importlib.import_module("matplotlib.pyplot")
    return matplotlib


_EPOCH_DAYS = None


def _dnum(t):
    """POSIX seconds -> matplotlib date numbers."""
    global _EPOCH_DAYS
    if _EPOCH_DAYS is None:
        _EPOCH_DAYS = mdates.date2num(dt.datetime(1970, 1, 1, tzinfo=dt.timezone.utc))
    return np.asarray(t, dtype=np.float64) / 86400.0 + _EPOCH_DAYS


def _tz_label(night: Night) -> str:
    off = night.local(night.t0).strftime("%z")
    return f"local time, {night.zone(night.t0)} ({night.tz}, UTC{off[:3]}:{off[3:]} at the start)"


def _excess_limits(excess: np.ndarray) -> tuple[float, float]:
    finite = excess[np.isfinite(excess)]
    if finite.size == 0:
        return -1.0, 3.0
    lo, hi = np.percentile(finite, [1.0, 99.7])
    return float(min(lo, -0.5)), float(max(hi, 3.0))


# -- the overview -----------------------------------------------------------------------

def plot_overview(path: Path, night: Night, data: NightData, events: list[dict], summary: dict,
                  dpi: int = 100, items: list[dict] | None = None) -> Path:
    """The night at a glance (``overview_figure``) as a PNG."""
    overview_figure(night, data, events, summary, dpi, items).savefig(path, dpi=dpi,
                                                                      pil_kwargs={"compress_level": 3})
    return path


MAX_LEGEND_EPISODES = 20    # episodes named in the legend; the page lists them all
LEGEND_COLUMNS = 4
LEGEND_ROW_IN = 0.2         # height of one legend row, inches (8-point text)


def overview_figure(night: Night, data: NightData, events: list[dict], summary: dict, dpi: int = 100,
                    items: list[dict] | None = None):
    """Sun/Jupiter/forecast bands, the dynamic spectrum with an outlined region per episode
    and a box per burst of no episode, hourly masking (a matplotlib Figure).

    ``items``: the night's review items (rxlog.review.items; default: each event its own)."""
    load_matplotlib()
    items = review_items(events, []) if items is None else items
    loose = [(it["number"], it["row"]) for it in items if it["kind"] == "event"]
    episodes = [it for it in items if it["kind"] == "episode"]
    present = sorted({e["class"] for _, e in loose}, key=CLASSES.index)
    handles = [Rectangle((0, 0), 1, 1, facecolor="none", edgecolor=colour(c), linewidth=1.5,
                         path_effects=outline(1.5)) for c in present]
    names = [f"{LABEL_NAMES[c]} ({c})" for c in present]
    named = [it for it in episodes if it["row"]["class"] != "rfi"]
    for it in named[:MAX_LEGEND_EPISODES]:
        handles.append(_episode_patch(it["row"]["class"], (0, 0), 1, 1))
        names.append(f"#{it['number']} {LABEL_NAMES.get(it['row']['class'], it['row']['class'])}, "
                     f"{fmt_span(night, *span(it))}")
    if len(named) > MAX_LEGEND_EPISODES:
        handles.append(Rectangle((0, 0), 1, 1, facecolor="none", edgecolor="none"))
        names.append(f"… and {len(named) - MAX_LEGEND_EPISODES} more episodes (see the page)")
    # The figure grows below by the legend rows past the two its layout has room for.
    extra = max(0, -(-len(handles) // LEGEND_COLUMNS) - 2) * LEGEND_ROW_IN
    height = 7.0 + extra
    y = lambda frac: (frac * 7.0 + extra) / height     # noqa: E731  (a layout in 7-inch fractions)
    h = lambda frac: frac * 7.0 / height               # noqa: E731
    fig = Figure(figsize=(13.0, height), dpi=dpi)
    left, width = 0.07, 0.83
    ax_band = fig.add_axes((left, y(0.81), width, h(0.10)))
    ax = fig.add_axes((left, y(0.31), width, h(0.48)), sharex=ax_band)
    ax_q = fig.add_axes((left, y(0.135), width, h(0.13)), sharex=ax_band)
    cax = fig.add_axes((left + width + 0.012, y(0.31), 0.015, h(0.48)))
    _draw_bands(ax_band, night, summary)
    _draw_spectrum(fig, ax, cax, night, data)
    _draw_episodes(ax, night, data, episodes)
    _draw_event_boxes(ax, night, data, loose)
    if handles:
        fig.legend(handles, names, loc="lower center", bbox_to_anchor=(left + width / 2, 0.0), fontsize=8,
                   ncol=min(len(handles), LEGEND_COLUMNS), frameon=False)
    ax.set_ylabel("frequency (MHz)")
    ax.set_ylim(data.f_edges_mhz[0], data.f_edges_mhz[-1])
    ax.tick_params(axis="x", labelbottom=False)
    _draw_masked(ax_q, night, summary)
    ax_band.set_xlim(*_dnum([night.t0, night.t1]))
    return fig


def _draw_bands(ax_band, night: Night, summary: dict):
    """When the Sun and Jupiter were above the horizon, and the forecast windows (grey, each
    row named: colours are kept for the classes); the title and the UTC axis on top."""
    rows = [("Sun up", summary["sun_up"]), ("Jupiter up", summary["jupiter_up"]),
            ("forecast", [(w["start"], w["end"]) for w in summary["forecast"]])]
    for k, (name, spans) in enumerate(rows):
        y = len(rows) - 1 - k
        xs = [(_dnum(a), _dnum(b) - _dnum(a)) for a, b in spans]
        if xs:
            ax_band.broken_barh(xs, (y + 0.15, 0.7), facecolors=BAND_GREY)
    ax_band.set_yticks([len(rows) - 1 - k + 0.5 for k in range(len(rows))], [r[0] for r in rows])
    ax_band.set_ylim(0, len(rows))
    ax_band.tick_params(axis="x", labelbottom=False)
    ax_band.set_title(f"{summary['station']} — night of {night.name}: dynamic spectrum, "
                      f"{summary['n_items']} items to review ({summary['n_events']} events)", loc="left", fontsize=12)
    utc = ax_band.secondary_xaxis("top")
    utc.xaxis.set_major_locator(mdates.HourLocator(interval=2, tz=dt.timezone.utc))
    utc.xaxis.set_major_formatter(mdates.DateFormatter("%H:%M", tz=dt.timezone.utc))
    utc.set_xlabel("UTC", fontsize=9, labelpad=2)


def _draw_spectrum(fig, ax, cax, night: Night, data: NightData):
    """The night's excess over a running background, with its colour bar."""
    excess = data.power - running_background(data.power)
    vmin, vmax = _excess_limits(excess)
    cmap = matplotlib.colormaps["viridis"].with_extremes(bad="#d0d0d0")
    f0, f1 = data.f_edges_mhz[0], data.f_edges_mhz[-1]
    im = ax.imshow(excess.T, origin="lower", aspect="auto", interpolation="nearest", cmap=cmap,
                   vmin=vmin, vmax=vmax, extent=(_dnum(night.t0), _dnum(data.t_edges[-1]), f0, f1))
    cb = fig.colorbar(im, cax=cax)
    cb.set_label("excess over background (dB)")


def _episode_patch(cls: str, xy, w, h) -> Rectangle:
    """An episode's region: the class colour, lightly filled, a firm outline over a halo."""
    if cls == "rfi":
        return Rectangle(xy, w, h, facecolor="none", edgecolor=CLASS_COLOURS["rfi"], linewidth=0.6, alpha=0.6,
                         linestyle=(0, (3, 2)))
    # A light fill (8 % of the class colour) marks the region and leaves the spectrum readable under it.
    return Rectangle(xy, w, h, facecolor=matplotlib.colors.to_rgba(colour(cls), 0.08), edgecolor=colour(cls),
                     linewidth=1.8, path_effects=outline(1.8))


def _draw_episodes(ax, night: Night, data: NightData, episodes: list[dict]):
    """One outlined region per episode -- its span by its band, one bin wider on each side --
    numbered as on the page where the numbers do not crowd each other (the legend names
    them all): a storm of a hundred bursts reads as one shape. Interference episodes are
    thin, dashed and unnumbered."""
    x0, x1 = _dnum([night.t0, night.t1])
    last = -np.inf
    f0, f1 = data.f_edges_mhz[0], data.f_edges_mhz[-1]
    bin_t = _dnum(data.t_edges[1]) - _dnum(data.t_edges[0])
    bin_f = data.f_edges_mhz[1] - data.f_edges_mhz[0]
    for it in sorted(episodes, key=lambda it: it["row"]["class"] != "rfi"):    # interference underneath
        ep = it["row"]
        t0, t1 = span(it)
        a, b = _dnum(t0) - bin_t, _dnum(t1) + bin_t
        lo, hi = max(ep["fmin_mhz"] - bin_f, f0), min(ep["fmax_mhz"] + bin_f, f1)
        ax.add_patch(_episode_patch(ep["class"], (a, lo), b - a, hi - lo))
        if ep["class"] != "rfi" and a - last >= 0.02 * (x1 - x0):
            ax.annotate(f"#{it['number']}", (a, hi), fontsize=8, color="white", xytext=(1, 1),
                        textcoords="offset points", annotation_clip=False,
                        path_effects=[pe.withStroke(linewidth=2, foreground="black")])
            last = a


def _draw_event_boxes(ax, night: Night, data: NightData, events: list[tuple[int, dict]]):
    """A box per (number, event), numbered as on the page where the numbers do not crowd each other.

    Boxes sit one bin outside each event so the burst itself stays visible, each over a
    light halo and a dark edge so it shows on every colour of the map. Interference boxes
    are drawn thin and faint underneath, and unnumbered, so a day of ionosonde sweeps and
    pulse storms does not hide the bursts.
    """
    x0, x1 = _dnum([night.t0, night.t1])
    f0, f1 = data.f_edges_mhz[0], data.f_edges_mhz[-1]
    boxes, colours, faint = [], [], []
    bin_t = _dnum(data.t_edges[1]) - _dnum(data.t_edges[0])
    bin_f = data.f_edges_mhz[1] - data.f_edges_mhz[0]
    for _, e in events:
        a, b = _dnum(parse_iso(e["start_utc"])) - bin_t, _dnum(parse_iso(e["end_utc"])) + bin_t
        lo, hi = max(e["fmin_mhz"] - bin_f, f0), min(e["fmax_mhz"] + bin_f, f1)
        if e["class"] == "rfi":
            faint.append(Rectangle((a, lo), b - a, hi - lo))
            continue
        boxes.append(Rectangle((a, lo), b - a, hi - lo))
        colours.append(colour(e["class"]))
    if faint:
        ax.add_collection(PatchCollection(faint, facecolors="none", edgecolors=CLASS_COLOURS["rfi"],
                                          linewidths=0.5, alpha=0.45))
    if boxes:
        pc = PatchCollection(boxes, facecolors="none", edgecolors=colours, linewidths=1.0)
        pc.set_path_effects(outline(1.0))
        ax.add_collection(pc)
    last = -np.inf
    for number, e in events:
        if e["class"] == "rfi":
            continue
        a = _dnum(parse_iso(e["start_utc"])) - bin_t
        if a - last >= 0.012 * (x1 - x0):
            ax.annotate(str(number), (a, min(e["fmax_mhz"] + bin_f, f1)), fontsize=7, color="white",
                        xytext=(1, 1), textcoords="offset points", annotation_clip=False,
                        path_effects=[pe.withStroke(linewidth=2, foreground="black")])
            last = a


def _draw_masked(ax_q, night: Night, summary: dict):
    """The hourly masked fraction, the gaps in grey, and the local-time axis."""
    hm = summary["hourly_masked"]
    if hm:
        hx = _dnum([h for h, _ in hm])
        ax_q.bar(hx, [100 * m for _, m in hm], width=1 / 24, align="edge", color="#35608D",
                 edgecolor="white", linewidth=0.5)
    else:
        ax_q.text(0.5, 0.5, "masked fraction not measured yet (rxlog detect)", transform=ax_q.transAxes,
                  ha="center", va="center", fontsize=9, color="#555555")
    for a, b in summary["gaps"]:
        ax_q.axvspan(_dnum(a), _dnum(b), color="#888888", alpha=0.35, linewidth=0)
    ax_q.set_ylabel("masked (%)")
    top = max([5.0] + [100 * m * 1.15 for _, m in hm])
    ax_q.set_ylim(0, min(100.0, top))
    ax_q.xaxis.set_major_locator(mdates.HourLocator(interval=2, tz=night.tz))
    ax_q.xaxis.set_major_formatter(mdates.DateFormatter("%H:%M", tz=night.tz))
    ax_q.xaxis.set_minor_locator(mdates.HourLocator(tz=night.tz))
    ax_q.set_xlabel(_tz_label(night) + "; grey: no recording", labelpad=2)


# -- the CML III–Io-phase plane ---------------------------------------------------------

def _region_boxes(region) -> list[tuple[float, float, float, float]]:
    """A Region's (cml0, cml1, io0, io1) rectangles on 0..360 axes (Io range None: any phase)."""
    io = [(0.0, 360.0)] if region.io_from is None else wrapped_spans(region.io_from, region.io_to)
    return [(c0, c1, i0, i1) for c0, c1 in wrapped_spans(region.cml_from, region.cml_to) for i0, i1 in io]


def plot_cml_io(path: Path, cfg, night: Night, events: list[dict], track=None, dpi: int = 100) -> Path:
    """``cml_io_figure`` as a PNG."""
    cml_io_figure(cfg, night, events, track, dpi).savefig(path, dpi=dpi, pil_kwargs={"compress_level": 3})
    return path


def cml_io_figure(cfg, night: Night, events: list[dict], track=None, dpi: int = 100):
    """The night's Jovian candidates (and Jupiter-up track) on the CML III–Io-phase plane over the source regions.

    ``events`` are (number on the page - 1, event) pairs; ``track`` is (CML III, Io phase)
    arrays, NaN where Jupiter was down.
    """
    load_matplotlib()
    fig = Figure(figsize=(7.0, 6.2), dpi=dpi)
    ax = fig.add_axes((0.11, 0.09, 0.62, 0.84))
    handles = [_draw_regions(ax, cfg)]
    if track is not None and len(track[0]):
        handles.append(_draw_track(ax, track))
    pts = [(i, e) for i, e in events if e.get("cml3_deg") is not None and e.get("io_phase_deg") is not None]
    handles.extend(_draw_candidates(ax, pts))
    ax.set_xlim(0, 360); ax.set_ylim(0, 360)
    ax.set_xticks(range(0, 361, 60)); ax.set_yticks(range(0, 361, 60))
    ax.set_xlabel("central meridian longitude, System III (deg)")
    ax.set_ylabel("Io phase, geocentric (deg)")
    ax.grid(True, color="#cccccc", linewidth=0.5)
    ax.set_title(f"Jovian candidates, night of {night.name}: {len(pts)}", loc="left", fontsize=11)
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0), fontsize=8, frameon=False)
    return fig


def _draw_regions(ax, cfg):
    """The source regions in grey, each named in its corner (overlaps show darker): colours
    are kept for the classes of the candidates drawn over them. Returns the legend handle."""
    for reg in regions_from_config(cfg):
        for c0, c1, i0, i1 in _region_boxes(reg):
            ax.add_patch(Rectangle((c0, i0), c1 - c0, i1 - i0, facecolor=BAND_GREY, alpha=0.12,
                                   edgecolor=BAND_GREY, linewidth=1.0))
            ax.text(c0 + 3, i1 - 3, reg.name, fontsize=7, va="top", color="#333333")
    return Rectangle((0, 0), 1, 1, facecolor=BAND_GREY, alpha=0.25, edgecolor=BAND_GREY, label="source regions")


def _draw_track(ax, track):
    """The night's track while Jupiter was up, broken where either angle wraps through 360°."""
    cml, io = np.asarray(track[0], float), np.asarray(track[1], float)
    jump = np.flatnonzero((np.abs(np.diff(cml)) > 180) | (np.abs(np.diff(io)) > 180)) + 1
    for seg_c, seg_i in zip(np.split(cml, jump), np.split(io, jump)):
        ax.plot(seg_c, seg_i, color="#444444", linewidth=1.0, linestyle=(0, (4, 3)))
    return ax.plot([], [], color="#444444", linewidth=1.0, linestyle=(0, (4, 3)), label="this night, Jupiter up")[0]


def _draw_candidates(ax, pts: list[tuple[int, dict]]) -> list:
    """One scatter call per class, the start-to-end motion as one line collection, and the
    numbers as on the page where they do not pile up on each other. Returns legend handles."""
    segs, seg_colours = [], []
    for i, e in pts:
        cs, ce = e.get("cml3_start_deg"), e.get("cml3_end_deg")
        ps, pe_ = e.get("io_phase_start_deg"), e.get("io_phase_end_deg")
        if None not in (cs, ce, ps, pe_) and abs(ce - cs) < 180 and abs(pe_ - ps) < 180:
            segs.append([(cs, ps), (ce, pe_)])
            seg_colours.append(colour(e["class"]))
    if segs:
        ax.add_collection(LineCollection(segs, colors=seg_colours, linewidths=2.5, capstyle="round",
                                         path_effects=outline(2.5)))
    shown = sorted({e["class"] for _, e in pts}, key=CLASSES.index)
    for cls in shown:
        xy = np.array([(e["cml3_deg"], e["io_phase_deg"]) for _, e in pts if e["class"] == cls])
        ax.scatter(xy[:, 0], xy[:, 1], s=36, color=colour(cls), edgecolors="black", linewidths=0.8,
                   zorder=3)
    labelled = []
    for i, e in pts:
        c, p = e["cml3_deg"], e["io_phase_deg"]
        if all(abs(c - c2) > 6 or abs(p - p2) > 6 for c2, p2 in labelled):
            ax.annotate(str(i + 1), (c, p), xytext=(4, 3), textcoords="offset points", fontsize=7)
            labelled.append((c, p))
    return [ax.scatter([], [], s=36, color=colour(cls), edgecolors="black", linewidths=0.8,
                       label=LABEL_NAMES[cls]) for cls in shown]


def plot_mask(path: Path, night: Night, quality: list[dict], occupancy: list[dict], dpi: int = 100) -> Path | None:
    """``mask_figure`` as a PNG; None (nothing written) when there is nothing to draw."""
    fig = mask_figure(night, quality, occupancy, dpi)
    if fig is None:
        return None
    fig.savefig(path, dpi=dpi, pil_kwargs={"compress_level": 3})
    return path


def mask_grid(quality: list[dict]) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """The night's masked share per channel group and UTC hour from the quality rows
    that carry it: (hour starts POSIX s, group lower edges MHz + the last upper edge,
    (hours, groups) fractions, NaN without data), or None when no row carries it."""
    rows = [q for q in quality if q.get("masked_by_group")]
    if not rows:
        return None
    g = float(rows[0]["group_mhz"])
    lo = min(float(q["group_fmin_mhz"]) for q in rows)
    hi = max(float(q["group_fmin_mhz"]) + g * len(q["masked_by_group"]) for q in rows)
    n = int(round((hi - lo) / g))
    hours = sorted({parse_iso(q["hour_utc"]) for q in rows})
    at = {h: i for i, h in enumerate(hours)}
    grid = np.full((len(hours), n), np.nan)
    for q in rows:
        k = int(round((float(q["group_fmin_mhz"]) - lo) / g))
        vals = np.array([np.nan if v is None else v for v in q["masked_by_group"]], dtype=float)
        grid[at[parse_iso(q["hour_utc"])], k:k + len(vals)] = vals
    return np.asarray(hours), lo + g * np.arange(n + 1), grid


def mask_figure(night: Night, quality: list[dict], occupancy: list[dict], dpi: int = 100):
    """The RFI mask as pictures over frequency and hour: the share of each 0.25-MHz
    channel group the mask took out in each hour of the night (from the hourly quality
    rows), and the occupancy the mask has learned for each channel by UTC hour of day
    (the first grid in ``occupancy``, from the event store's mask_occupancy). None when
    neither is there."""
    grid = mask_grid(quality)
    occ = occupancy[0] if occupancy else None
    if grid is None and occ is None:
        return None
    load_matplotlib()
    fig = Figure(figsize=(11.0, 4.2), dpi=dpi)
    cmap = matplotlib.colormaps["magma_r"]
    if grid is not None:
        ax = fig.add_axes((0.06, 0.14, 0.38, 0.74))
        hours, edges, frac = grid
        t_edges = [_dnum(h) for h in hours] + [_dnum(hours[-1] + 3600.0)]
        im = ax.pcolormesh(t_edges, edges, np.ma.masked_invalid(frac.T), cmap=cmap, vmin=0, vmax=1)
        ax.xaxis.set_major_formatter(mdates.DateFormatter("%H", tz=night.tz))
        ax.set_xlabel(f"hour ({_tz_label(night)})")
        ax.set_ylabel("frequency (MHz)")
        ax.set_title("masked share, this night", loc="left", fontsize=10)
        fig.colorbar(im, ax=ax, fraction=0.05, pad=0.02)
    if occ is not None:
        ax = fig.add_axes((0.56, 0.14, 0.38, 0.74))
        by_hour = np.asarray(occ["by_hour"], dtype=float)
        f = np.linspace(float(occ["fmin_hz"]), float(occ["fmax_hz"]), int(occ["channels"])) / 1e6
        half = 0.5 * (f[1] - f[0]) if len(f) > 1 else 0.005
        im = ax.pcolormesh(np.arange(25), np.append(f - half, f[-1] + half), by_hour.T, cmap=cmap, vmin=0, vmax=1)
        ax.set_xticks(range(0, 25, 6))
        ax.set_xlabel("hour of day (UTC)")
        ax.set_title("learned occupancy by hour of day", loc="left", fontsize=10)
        fig.colorbar(im, ax=ax, fraction=0.05, pad=0.02)
    return fig
