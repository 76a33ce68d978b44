"""The timeline plot of a comparison: each station's events by class, groups seen at
several stations joined."""

from __future__ import annotations

import datetime as _dt
import io
import math
from pathlib import Path

import numpy as np

from rxlog.exchange.timing import CLS, Events
from rxlog.fileio import write_atomic
from rxlog.review.palette import CLASS_NAMES, colour, outline

# Classes are drawn in this order, so interference lies under the sky's events; their
# colours are rxlog.review.palette's, the same as in the night report.
DRAW_ORDER = ("rfi", "unknown", "fadeout", "solar_iv", "solar_ii", "jovian_s", "jovian_l", "solar_iii")
BAR_PT = 7.0   # class bar thickness, points


def _segments(xa, xb, ya, yb):
    """Many line segments as one polyline broken by NaNs (fast to draw)."""
    x = np.stack([xa, xb, np.full(len(xa), np.nan)], axis=1).ravel()
    y = np.stack([ya, yb, np.full(len(ya), np.nan)], axis=1).ravel()
    return x, y


def _runs(x0, x1, lo: float, px: float):
    """Union of intervals [x0, x1] at a resolution of ``px``: (starts, ends) of the covered runs.

    What a plot shows anyway, at a few thousand segments however many events there are.
    """
    n = int(math.ceil((float(np.max(x1)) - lo) / px)) + 2
    a = np.clip(((x0 - lo) / px).astype(np.int64), 0, n - 2)
    b = np.clip(((x1 - lo) / px).astype(np.int64), 0, n - 2)
    d = np.zeros(n + 1, dtype=np.int64)
    np.add.at(d, a, 1)
    np.add.at(d, b + 1, -1)
    on = np.r_[False, np.cumsum(d)[:n] > 0, False]
    edges = np.flatnonzero(np.diff(on.astype(np.int8)))
    return lo + edges[0::2] * px, lo + edges[1::2] * px


def _group_segments(grp, multi, y, x_mid, lo: float, px: float):
    """One vertical line per group seen at several stations (``multi``: its members), at the
    group's mean time, from its lowest to its highest station; merged per pixel column
    and station span. ``x_mid``: the members' mid times. As one NaN-broken polyline."""
    g = grp[multi]
    n_g = int(grp.max()) + 1
    ymin = np.full(n_g, np.inf)
    ymax = np.full(n_g, -np.inf)
    np.minimum.at(ymin, g, y[multi])
    np.maximum.at(ymax, g, y[multi])
    cnt = np.bincount(g, minlength=n_g)
    xc = np.bincount(g, weights=x_mid, minlength=n_g)
    k = cnt > 0
    col = np.round((xc[k] / cnt[k] - lo) / px)
    key = np.unique(np.c_[col, ymin[k], ymax[k]], axis=0)
    xs = lo + key[:, 0] * px
    return _segments(xs, xs, key[:, 1], key[:, 2])


def plot_timeline(E: Events, grp, n_at, names, path: Path) -> Path:
    """Each station's events on a time axis, coloured by class; groups seen at 2+ stations joined and marked."""
    # matplotlib loads only when a timeline is drawn: it takes seconds to import.
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.dates import AutoDateLocator, ConciseDateFormatter, date2num
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D

    epoch = date2num(_dt.datetime(1970, 1, 1))
    day = 86400.0
    fig = Figure(figsize=(11, 1.6 + 0.6 * len(names)), layout="constrained")
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    n_rows = len(names)
    y = n_rows - 1 - E.station.astype(float)
    x0 = epoch + E.start / day
    x1 = epoch + E.end / day
    handles = []
    if len(E.ev):
        lo = float(x0.min())
        px = max(float(x1.max()) - lo, 1e-6) / 1500.0  # about one pixel of the axis
        multi = n_at >= 2
        x_mid = 0.5 * (x0[multi] + x1[multi])
        if multi.any():
            ax.plot(*_group_segments(grp, multi, y, x_mid, lo, px), color="#333333", linewidth=0.6, alpha=0.6)
        for c in DRAW_ORDER:
            m = E.cls == CLS[c]
            if not m.any():
                continue
            # Over a light halo and a dark edge, like the report's boxes: yellow and sky blue
            # show on white too.
            for row in np.unique(y[m]):
                r = m & (y == row)
                a, b = _runs(x0[r], x1[r], lo, px)
                ax.plot(*_segments(a, b + px, np.full(len(a), row), np.full(len(a), row)),
                        color=colour(c), linewidth=BAR_PT, solid_capstyle="butt", path_effects=outline(BAR_PT))
            handles.append(Line2D([], [], color=colour(c), linewidth=BAR_PT, path_effects=outline(BAR_PT),
                                  label=f"{CLASS_NAMES[c]} ({c})"))
        if multi.any():
            mk = np.unique(np.c_[np.round((x_mid - lo) / px), y[multi]], axis=0)
            ax.plot(lo + mk[:, 0] * px, mk[:, 1] + 0.22, linestyle="", marker="v", markersize=4, color="#000000")
            handles.append(Line2D([], [], marker="v", color="#000000", linestyle="", label="seen at 2+ stations"))
    ax.set_yticks(range(len(names)), names[::-1])
    ax.set_ylim(-0.7, len(names) - 0.3)
    ax.set_ylabel("Station")
    ax.set_xlabel("Time (UTC)")
    loc = AutoDateLocator()
    ax.xaxis.set_major_locator(loc)
    ax.xaxis.set_major_formatter(ConciseDateFormatter(loc))
    if len(E.ev):
        ax.set_xlim(lo - 5 * px, float(x1.max()) + 5 * px)
    ax.set_title("Events by station (each station's own clock); joined: the same event at several stations")
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.0, 1.0), fontsize="small", frameon=False)
    ax.grid(axis="x", alpha=0.3)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110)
    return write_atomic(path, buf.getvalue())
