"""The morning report of one night: gather, plot, write.

``build_report`` writes ``<reports_dir>/<night>/``:

- ``index.html``: the summary, the plots and one card per review item -- an episode
  with its bursts folded inside, or a burst of no episode -- with its label control
  (``items.py``, ``page.py``). Styles and script are inside the page, images sit beside it
  and are linked by relative paths, nothing is fetched from the network, so the folder
  can be copied or mailed and still opens from disk. Labelling needs ``rxlog review
  --serve`` (``server.py``); from disk the page is read-only.
- ``overview.png``: the night's dynamic spectrum (excess over a running background)
  with one outlined region per episode (and a box per burst of no episode), the Sun-up
  and Jupiter-up bands and the hourly masked fraction on one local-time axis (``plots.py``).
- ``cml_io.png``: the night's Jovian candidates on the CML III–Io-phase plane over the
  source regions (``plots.py``).
- ``events/<event_id>.png``: per event, a zoom of the dynamic spectrum and its light
  curve (``zoom.py``), from the kept full-resolution cutout when there is one
  (``cutouts.py``), else from the archive (``data.py``); ``events/<episode_id>.png``
  the same over an episode's whole span.
- ``summary.txt``: the terminal summary (``summary.py``).
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import numpy as np

from rxlog.fileio import write_atomic
from rxlog.review.cutouts import read_cutout
from rxlog.review.data import default_night, freq_bins, read_night
from rxlog.review.items import review_items, zoom_numbers, zoom_targets
from rxlog.review.night import (
    Night,
    night_episodes,
    night_events,
    night_starting,
    parse_night,
    report_dir,
)
from rxlog.review.page import event_image_name, render_page
from rxlog.review.plots import plot_cml_io, plot_mask, plot_overview
from rxlog.review.summary import JOVIAN, format_summary, night_summary
from rxlog.review.zoom import ZoomPlotter
from rxlog.sky.forecast import forecast_windows
from rxlog.sky.tags import body_up_intervals, station_tags
from rxlog.store import EventStore

TRACK_STEP_S = 300.0   # sampling of the night's CML–Io-phase track


def build_report(cfg, night: Night | str | dt.date | None = None, progress=None, now: float | None = None) -> Path:
    """Write the report folder of one night (default: the latest complete night with data); return its index.html.

    ``progress(done, total)`` is called as the archive is read.
    """
    night = _as_night(cfg, night, now=now)
    out = report_dir(cfg, night)
    (out / "events").mkdir(parents=True, exist_ok=True)
    events = night_events(cfg, night)
    items = review_items(events, night_episodes(cfg, night))
    targets, numbers = zoom_targets(items), zoom_numbers(items)
    store = EventStore(cfg.store_path)
    try:
        quality = store.quality(night.t0, night.t1)
        occupancy = store.occupancy(cfg["station"]["name"])
    finally:
        store.close()
    jupiter_up = body_up_intervals(cfg, night.t0, night.t1, body="jupiter")
    sun_up = body_up_intervals(cfg, night.t0, night.t1, body="sun")
    forecast = forecast_windows(cfg, night.t0, (night.t1 - night.t0) / 86400.0)

    images: dict[str, str] = {}   # file name -> what it was drawn from
    from_archive = _zooms_from_cutouts(cfg, night, targets, numbers, out, images)
    zoomer = ZoomPlotter(night, freq_bins(cfg))

    def on_zoom(k, ev, t_edges, f_edges, power, bg):
        if np.isfinite(power).any():
            zoomer.draw(out / event_image_name(ev), numbers[ev["event_id"]], ev, t_edges, power - bg[None, :],
                        "archive")
            images[event_image_name(ev)] = "archive"

    data = read_night(cfg, night, [targets[i] for i in from_archive], on_zoom=on_zoom, progress=progress)
    summary = night_summary(cfg, night, events, data, quality, jupiter_up, sun_up, forecast, items=items)
    if data.covered:
        plot_overview(out / "overview.png", night, data, events, summary, items=items)
        images["overview.png"] = "archive"
    plot_cml_io(out / "cml_io.png", cfg, night, jovian_points(items), track=jupiter_track(cfg, jupiter_up))
    images["cml_io.png"] = "event store"
    if plot_mask(out / "mask.png", night, quality, occupancy) is not None:
        images["mask.png"] = "event store"
    # Drop zooms of events that are no longer in the store (re-detection changed the ids).
    for old in (out / "events").glob("*.png"):
        if f"events/{old.name}" not in images:
            old.unlink()
    page = render_page(cfg, night, summary, events, images, items=items)
    write_atomic(out / "summary.txt", format_summary(summary, night) + "\n")
    write_atomic(out / "index.html", page)
    return out / "index.html"


def _as_night(cfg, night: Night | str | dt.date | None, now: float | None = None) -> Night:
    """A Night from a Night, a 'YYYY-MM-DD' string, a date, or None (the default night)."""
    if night is None:
        return default_night(cfg, now=now)
    if isinstance(night, str):
        return parse_night(cfg, night)
    if isinstance(night, dt.date):
        return night_starting(cfg, night)
    return night


def _zooms_from_cutouts(cfg, night: Night, events: list[dict], numbers: dict[str, str], out: Path,
                        images: dict[str, str]) -> list[int]:
    """Draw the zoom of every event that kept a readable cutout (noting it in ``images``);
    return the indices of the others, whose zooms come from the archive."""
    plotters: dict[tuple, ZoomPlotter] = {}   # one per cutout band: a plotter's frame has one frequency axis
    from_archive = []
    for i, ev in enumerate(events):
        cut = read_cutout(cfg, ev)
        if cut is None:
            from_archive.append(i)
            continue
        t_edges, f_edges, excess = cut
        key = (round(float(f_edges[0]), 4), round(float(f_edges[-1]), 4))
        if key not in plotters:
            plotters[key] = ZoomPlotter(night, f_edges)
        plotter = plotters[key]
        plotter.draw(out / event_image_name(ev), numbers[ev["event_id"]], ev, t_edges, excess, "full-resolution cutout")
        images[event_image_name(ev)] = "full-resolution cutout"
    return from_archive


def jovian_points(items: list[dict]) -> list[tuple[int, dict]]:
    """The Jovian review items for the CML III–Io-phase plot, as (number - 1, angles): an
    episode from its start to its end, a single burst at its peak."""
    out = []
    for it in items:
        row = it["row"]
        if row["class"] not in JOVIAN:
            continue
        if it["kind"] == "episode":
            row = {**row, "cml3_deg": row.get("cml3_start_deg"), "io_phase_deg": row.get("io_phase_start_deg")}
        out.append((it["number"] - 1, row))
    return out


def jupiter_track(cfg, jupiter_up: list[tuple[float, float]]):
    """(CML III, Io phase) every TRACK_STEP_S while Jupiter was up, NaN between the up intervals."""
    pieces = [np.append(np.arange(a, b, TRACK_STEP_S), np.nan) for a, b in jupiter_up if b > a]
    if not pieces:
        return None
    t = np.concatenate(pieces)
    ok = np.isfinite(t)
    cml, io = np.full(t.shape, np.nan), np.full(t.shape, np.nan)
    tags = station_tags(cfg, t[ok])
    cml[ok], io[ok] = tags["cml3_deg"], tags["io_phase_deg"]
    return cml, io
