"""The season's figures as PNG files: occurrence maps with the source-region boxes, the
Sun's bursts, the uptime calendar and the masked fraction by hour of day.

Figures are built on ``matplotlib.figure.Figure`` (no pyplot, no global state), so
they draw the same in a worker, a server or a test.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure
from matplotlib.patches import Rectangle

from rxlog.season.occurrence import OccurrenceMap
from rxlog.season.solar import SOLAR_TYPES
from rxlog.sky.regions import Region, wrapped_spans

TYPE_COLOURS = {"solar_iii": "#c0392b", "solar_ii": "#e67e22", "solar_iv": "#8e44ad", "fadeout": "#2c3e50"}
DPI = 110


def _save(fig: Figure, path: Path) -> Path:
    fig.savefig(path, dpi=DPI)
    return path


def occurrence_plot(m: OccurrenceMap, regions: list[Region], path: Path, title: str) -> Path:
    """Occurrence probability over CML III (x) and Io phase (y), unobserved bins grey,
    with each region's box drawn and named."""
    fig = Figure(figsize=(7.5, 6.2))
    ax = fig.add_subplot()
    ax.set_facecolor("#d9d9d9")
    e = m.edges
    shown = np.ma.masked_invalid(m.p.T)
    mesh = ax.pcolormesh(e, e, shown, cmap="viridis", vmin=0.0, vmax=max(0.05, float(np.nanmax(m.p, initial=0.0))))
    fig.colorbar(mesh, ax=ax, label="occurrence probability (emission time / time observed)")
    for r in regions:
        io_spans = [(0.0, 360.0)] if r.io_from is None else wrapped_spans(r.io_from, r.io_to)
        for a, b in wrapped_spans(r.cml_from, r.cml_to):
            for c, d in io_spans:
                ax.add_patch(Rectangle((a, c), b - a, d - c, fill=False, lw=1.4, ec="white", ls="--"))
        a, _ = wrapped_spans(r.cml_from, r.cml_to)[0]
        c, _ = io_spans[0]
        ax.text(a + 2, c + 3 if r.io_from is not None else 350, r.name, color="white", fontsize=8, va="top"
                if r.io_from is None else "bottom")
    ax.set_xlim(0, 360)
    ax.set_ylim(0, 360)
    ax.set_xticks(np.arange(0, 361, 60))
    ax.set_yticks(np.arange(0, 361, 60))
    ax.set_xlabel("CML III (deg)")
    ax.set_ylabel("Io phase (deg)")
    ax.set_title(title, fontsize=10)
    fig.tight_layout()
    return _save(fig, path)


def solar_plot(daily: list[dict], by_alt: list[dict], monthly: list[dict], path: Path) -> Path:
    """Bursts per type per day with the Sun-up hours listened; rates against the Sun's
    altitude; fadeouts per month."""
    fig = Figure(figsize=(9, 8.5))
    ax1, ax2, ax3 = fig.subplots(3, 1)
    days = [dt.date.fromisoformat(r["date"]) for r in daily]
    bottom = np.zeros(len(daily))
    for c in (*SOLAR_TYPES, "fadeout"):
        n = np.array([r[c] for r in daily], dtype=float)
        ax1.bar(days, n, bottom=bottom, color=TYPE_COLOURS[c], label=c, width=0.8)
        bottom += n
    ax1.set_ylabel("events per day")
    ax1b = ax1.twinx()
    ax1b.plot(days, [r["sun_hours_listened"] for r in daily], color="#f1c40f", lw=1.5, label="Sun-up hours listened")
    ax1b.set_ylabel("hours listened, Sun up")
    ax1.legend(loc="upper left", fontsize=7, ncol=4)
    ax1.set_title("Solar bursts per day (bars) and hours listened with the Sun up (line)", fontsize=10)
    mids = [(r["sun_alt_from_deg"] + r["sun_alt_to_deg"]) / 2 for r in by_alt]
    for c in SOLAR_TYPES:
        ax2.plot(mids, [r[f"{c}_per_hour"] for r in by_alt], "o-", color=TYPE_COLOURS[c], label=c)
    ax2.set_xlabel("Sun's altitude (deg)")
    ax2.set_ylabel("bursts per hour listened")
    ax2.legend(fontsize=7)
    ax3.bar([r["month"] for r in monthly], [r["fadeouts"] for r in monthly], color=TYPE_COLOURS["fadeout"])
    ax3.set_ylabel("fadeouts per month")
    fig.autofmt_xdate()
    fig.tight_layout()
    return _save(fig, path)


def uptime_plot(calendar: list[dict], path: Path) -> Path:
    """A calendar: one square per day (weeks across, weekdays down), its shade the hours
    covered; days with a cause in the health log are marked."""
    first = dt.date.fromisoformat(calendar[0]["date"])
    start = first - dt.timedelta(days=first.weekday())
    n_weeks = (dt.date.fromisoformat(calendar[-1]["date"]) - start).days // 7 + 1
    grid = np.full((7, n_weeks), np.nan)
    marks = []
    for r in calendar:
        d = dt.date.fromisoformat(r["date"])
        k = (d - start).days
        grid[k % 7, k // 7] = r["covered_h"]
        if r["causes"]:
            marks.append((k // 7, k % 7))
    fig = Figure(figsize=(max(4.0, 0.32 * n_weeks + 2.5), 3.2))
    ax = fig.add_subplot()
    ax.set_facecolor("#eeeeee")
    im = ax.imshow(np.ma.masked_invalid(grid), cmap="Greens", vmin=0, vmax=24, aspect="equal")
    for x, y in marks:
        ax.plot(x, y, "x", color="#c0392b", ms=5)
    ax.set_yticks(range(7), ["Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun"], fontsize=7)
    ax.set_xticks(range(n_weeks), [(start + dt.timedelta(weeks=w)).strftime("%d %b") for w in range(n_weeks)],
                  fontsize=6, rotation=90)
    fig.colorbar(im, ax=ax, label="hours covered")
    ax.set_title("Uptime: hours covered per day (x: a cause in the health log)", fontsize=9)
    fig.tight_layout()
    return _save(fig, path)


def masked_plot(by_hour: list[dict], path: Path) -> Path:
    fig = Figure(figsize=(7, 3))
    ax = fig.add_subplot()
    ax.bar([r["hour_utc"] for r in by_hour], [100 * r["masked_fraction"] for r in by_hour], color="#7f8c8d")
    ax.set_xlabel("hour of day (UTC)")
    ax.set_ylabel("masked (%)")
    ax.set_xticks(range(0, 24, 3))
    ax.set_title("Share of the band masked as interference, by hour of day", fontsize=9)
    fig.tight_layout()
    return _save(fig, path)
