"""Event zooms: per event, the dynamic spectrum around it with its box, and its light
curve (mean excess inside the event's band and in the rest of the band) on a clock axis
labelled in local time and in UTC.
"""

from __future__ import annotations

import datetime as dt
import math
import warnings
from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.cm import ScalarMappable
from matplotlib.colors import Normalize
from matplotlib.figure import Figure
from matplotlib.font_manager import FontProperties, findfont
from matplotlib.lines import TICKDOWN
from matplotlib.patches import Rectangle
from matplotlib.ticker import LinearLocator, NullFormatter, NullLocator
from PIL import Image, ImageDraw, ImageFont

from rxlog.review.night import Night, utc_stamp
from rxlog.review.palette import INK, LABEL_NAMES, colour, outline
from rxlog.review.plots import load_matplotlib
from rxlog.timeutil import parse_iso


def _zoom_limits(excess, t_edges, start, end, inside_f) -> tuple[float, float]:
    """Colour limits of a zoom from the event's own box, so a strong carrier elsewhere in
    the window saturates instead of washing the event out."""
    tc = 0.5 * (t_edges[:-1] + t_edges[1:])
    inside_t = (tc >= start) & (tc <= end)
    if not inside_t.any():
        inside_t[np.argmin(np.abs(tc - 0.5 * (start + end)))] = True
    box = excess[np.ix_(inside_t, inside_f)]
    box = box[np.isfinite(box)]
    everywhere = excess[np.isfinite(excess)]
    lo = float(np.percentile(everywhere, 1.0)) if everywhere.size else -1.0
    hi = float(np.percentile(box, 99.0)) if box.size else 3.0
    return min(lo, -0.5), max(hi, 3.0)


ZOOM_SPECTRUM_AXES = (0.10, 0.42, 0.76, 0.49)   # figure fraction: left, bottom, width, height
ZOOM_CURVE_AXES = (0.10, 0.155, 0.76, 0.225)

# Clock steps of a zoom's time axis (s): each divides a minute, an hour or a day, so ticks
# fall on round clock times; every zone's offset from UTC is a whole number of 15 minutes
# (tz database, current rules), so steps up to 15 min are round in UTC and local time at once.
CLOCK_STEPS_S = (1, 2, 5, 10, 15, 20, 30, 60, 120, 300, 600, 900, 1200, 1800, 3600, 7200, 10800)
MAX_CLOCK_TICKS = 7
CLOCK_ROW_PT = (5.0, 14.0)   # label rows below the light curve, points from its bottom edge


def clock_ticks(a: float, b: float, offset_s: float = 0.0) -> tuple[np.ndarray, int]:
    """Round clock times inside [a, b] (POSIX s), at most MAX_CLOCK_TICKS of them: (ticks, step).

    Rounded on the local clock, ``offset_s`` east of UTC (steps of an hour or more then
    fall on local hours).
    """
    step = next((s for s in CLOCK_STEPS_S if (b - a) / s <= MAX_CLOCK_TICKS - 1), CLOCK_STEPS_S[-1])
    first = math.ceil((a + offset_s) / step) * step - offset_s
    return np.arange(first, b + 1e-6, step)[:MAX_CLOCK_TICKS], step


class ZoomPlotter:
    """Draws event zooms on one reused figure.

    The frame (axes, ticks, legend, colour bar) is rendered once per zoom length and
    kept; each event restores its frame and redraws only what changes: the image, the
    box, the light curves and a few texts. The light-curve and colour scales always
    have five evenly spaced ticks, with limits chosen so those ticks fall on round
    values; the tick marks are part of the frame and only their labels are drawn per
    event. The time axis is the event's own clock: round local and UTC times, their
    tick marks drawn per event and their labels written onto the finished image with
    Pillow in matplotlib's own font (a dozen short labels cost 1 ms there, 25 ms as
    matplotlib texts). That is several times faster than a full redraw, which is what
    makes 500 zooms a minute's work.
    """

    N_TICKS = 5

    def __init__(self, night: Night, f_edges_mhz: np.ndarray, dpi: int = 80):
        mpl = load_matplotlib()
        self.night, self.dpi = night, dpi
        self.fig = Figure(figsize=(7.0, 4.4), dpi=dpi)
        self.canvas = FigureCanvasAgg(self.fig)
        self.ax = self.fig.add_axes(ZOOM_SPECTRUM_AXES)
        self.lc = self.fig.add_axes(ZOOM_CURVE_AXES, sharex=self.ax)
        self.cax = self.fig.add_axes((0.875, 0.42, 0.02, 0.49))
        cmap = mpl.colormaps["viridis"].with_extremes(bad="#d0d0d0")
        f0, f1 = float(f_edges_mhz[0]), float(f_edges_mhz[-1])
        self.im = self.ax.imshow(np.zeros((2, 2)), origin="lower", aspect="auto", interpolation="nearest",
                                 cmap=cmap, extent=(0, 1, f0, f1))
        # The colour bar shows the map on 0..1; its tick labels carry each event's dB values.
        cb = self.fig.colorbar(ScalarMappable(Normalize(0, 1), cmap), cax=self.cax)
        cb.set_ticks(np.linspace(0, 1, self.N_TICKS))
        self.cax.yaxis.set_major_formatter(NullFormatter())
        self.cax.set_ylabel("excess (dB)", fontsize=8, labelpad=18)
        self.box = Rectangle((0, 0), 1, 1, facecolor="none", linewidth=1.4, path_effects=outline(1.4))
        self.ax.add_patch(self.box)
        self.ax.set_ylim(f0, f1)
        self.ax.set_ylabel("frequency (MHz)", fontsize=8)
        self.ax.tick_params(labelbottom=False, labelsize=7)
        self.title = self.fig.text(0.10, 0.935, "", fontsize=9)
        self.when = ""          # the window centre's date and time, written under the clock rows
        self.span = Rectangle((0, 0), 1, 1, transform=self.lc.get_xaxis_transform(), alpha=0.25, linewidth=0)
        self.lc.add_patch(self.span)
        (self.line_out,) = self.lc.plot([], [], color="#a3abb1", linewidth=1.0, label="rest of band")
        (self.line_in,) = self.lc.plot([], [], color=INK, linewidth=1.3, label="event band")
        self.lc.set_ylabel("excess (dB)", fontsize=8, labelpad=16)
        self.lc.tick_params(labelsize=7)
        self.lc.yaxis.set_major_locator(LinearLocator(self.N_TICKS))
        self.lc.yaxis.set_major_formatter(NullFormatter())
        self.lc.grid(True, color="#dddddd", linewidth=0.5)
        self.lc.legend(loc="upper right", fontsize=7, frameon=False, ncol=2)
        frac = np.linspace(0, 1, self.N_TICKS)
        self.lc_labels = [self.lc.text(-0.012, y, "", transform=self.lc.transAxes, ha="right", va="center",
                                       fontsize=7) for y in frac]
        self.cb_labels = [self.cax.text(1.6, y, "", transform=self.cax.transAxes, ha="left", va="center",
                                        fontsize=7) for y in frac]
        # The time axis, per event: grid lines and tick marks at round clock times, one row
        # of labels in local time and one in UTC (one row when the station keeps UTC).
        self.lc.xaxis.set_major_locator(NullLocator())
        self.lc.xaxis.set_minor_locator(NullLocator())
        (self.time_grid,) = self.lc.plot([], [], color="#dddddd", linewidth=0.5,
                                         transform=self.lc.get_xaxis_transform())
        self.time_marks = [a.plot([], [], linestyle="", marker=TICKDOWN, markersize=3.5, color="black",
                                  clip_on=False, transform=a.get_xaxis_transform())[0] for a in (self.ax, self.lc)]
        self.clock_rows: list[tuple[str, list[tuple[float, str]]]] = []   # (zone, [(x, label)]) per row
        self.fonts = [ImageFont.truetype(findfont(FontProperties(weight=w)), size=pt * dpi / 72.0,
                                         layout_engine=ImageFont.Layout.BASIC)
                      for w, pt in (("normal", 7.0), ("bold", 7.0), ("normal", 8.0))]
        # Drawn per event, in this order (the box over the image, the curves over the grid).
        self.dynamic = [self.im, self.box, self.span, self.time_grid, self.line_out, self.line_in,
                        *self.time_marks, self.title, *self.lc_labels, *self.cb_labels]
        for a in self.dynamic:
            a.set_animated(True)
        self.frames: dict[float, object] = {}

    def _frame(self, half: float):
        """The drawn frame for a window of [-half, half] seconds (rendered on first use)."""
        self.ax.set_xlim(-half, half)
        if half not in self.frames:
            self.canvas.draw()
            self.frames[half] = self.canvas.copy_from_bbox(self.fig.bbox)
        return self.frames[half]

    def _scale(self, labels, lo: float, hi: float) -> tuple[float, float]:
        """Round limits covering lo..hi with N_TICKS evenly spaced round ticks; label them."""
        start, step = _round_ticks(lo, hi, self.N_TICKS - 1)
        digits = 0 if step >= 1 else (1 if step >= 0.1 else 2)
        for k, t in enumerate(labels):
            t.set_text(f"{start + k * step:.{digits}f}")
        return start, start + (self.N_TICKS - 1) * step

    def _clock_axis(self, a: float, b: float, mid: float):
        """Tick marks, grid lines and labels at round clock times of the window [a, b]."""
        offset = self.night.local(mid).utcoffset().total_seconds()
        ticks, step = clock_ticks(a, b, offset)
        x = ticks - mid
        for marks in self.time_marks:
            marks.set_data(x, np.zeros_like(x))
        self.time_grid.set_data(np.repeat(x, 3), np.tile([0.0, 1.0, np.nan], len(x)))
        fmt = "%H:%M:%S" if step < 60 else "%H:%M"
        # No label right at the left edge, where it would run into the row names.
        ticks, x = ticks[ticks - a >= 0.045 * (b - a)], x[ticks - a >= 0.045 * (b - a)]
        local = self.night.zone(mid)
        zones = [(local, self.night.tz), ("UTC", dt.timezone.utc)] if local != "UTC" else [("UTC", dt.timezone.utc)]
        self.clock_rows = [(name, [(float(xj), dt.datetime.fromtimestamp(t, tz).strftime(fmt))
                                   for xj, t in zip(x, ticks)]) for name, tz in zones]

    def _write_clock_labels(self, img):
        """Write the rows of clock labels (and their zone names) under the light curve, and
        the window centre's date and time at the foot, onto ``img``."""
        draw = ImageDraw.Draw(img)
        h = img.height
        bottom = h - self.lc.bbox.y0
        name_x = self.lc.bbox.x0 - 0.012 * self.lc.bbox.width
        for (name, labels), pt in zip(self.clock_rows, CLOCK_ROW_PT):
            y = bottom + pt * self.dpi / 72.0
            draw.text((name_x, y), name, font=self.fonts[1], fill="black", anchor="ra")
            for xj, text in labels:
                px = self.lc.transData.transform((xj, 0.0))[0]
                draw.text((px, y), text, font=self.fonts[0], fill="black", anchor="ma")
        draw.text((0.48 * img.width, h - 0.02 * h), self.when, font=self.fonts[2], fill="black", anchor="md")

    def draw(self, path: Path, number: int, ev: dict, t_edges: np.ndarray, excess: np.ndarray,
             source: str) -> Path:
        """Render one event: ``excess`` is (n_time, n_freq) dB over background on the display channels."""
        mid = 0.5 * (t_edges[0] + t_edges[-1])
        frame = self._frame(round(0.5 * (t_edges[-1] - t_edges[0]), 3))
        start, end = parse_iso(ev["start_utc"]), parse_iso(ev["end_utc"])
        x = t_edges - mid
        f0, f1 = self.ax.get_ylim()
        n_f = excess.shape[1]
        fc = f0 + (f1 - f0) * (np.arange(n_f) + 0.5) / n_f
        inside = (fc >= ev["fmin_mhz"]) & (fc <= ev["fmax_mhz"])
        if not inside.any():
            inside[np.argmin(np.abs(fc - 0.5 * (ev["fmin_mhz"] + ev["fmax_mhz"])))] = True
        self.im.set_data(np.ma.masked_invalid(excess.T))
        self.im.set_extent((x[0], x[-1], f0, f1))
        self.im.set_clim(*self._scale(self.cb_labels, *_zoom_limits(excess, t_edges, start, end, inside)))
        self.box.set_bounds(start - mid, ev["fmin_mhz"], max(end - start, 1e-3),
                            max(ev["fmax_mhz"] - ev["fmin_mhz"], 0.02))
        self.box.set_edgecolor(colour(ev["class"]))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            lc_in = np.nanmean(excess[:, inside], axis=1)
            lc_out = np.nanmean(excess[:, ~inside], axis=1) if (~inside).any() else np.full(len(x) - 1, np.nan)
        xc = 0.5 * (x[:-1] + x[1:])
        self.line_in.set_data(xc, lc_in)
        self.line_out.set_data(xc, lc_out)
        self.span.set_bounds(start - mid, 0, max(end - start, 1e-3), 1)
        self.span.set_facecolor(colour(ev["class"]))
        both = np.concatenate([lc_in, lc_out])
        both = both[np.isfinite(both)]
        lo, hi = (float(both.min()), float(both.max())) if both.size else (-1.0, 1.0)
        head = max(0.35 * (hi - lo), 0.3)            # room for the legend
        self.lc.set_ylim(*self._scale(self.lc_labels, lo, hi + head))
        self._clock_axis(float(t_edges[0]), float(t_edges[-1]), mid)
        self.when = f"window centre {self.night.stamp(mid)} = {utc_stamp(mid)}"
        self.title.set_text(f"#{number}  {LABEL_NAMES.get(ev['class'], ev['class'])}  ({source})")
        self.canvas.restore_region(frame)
        for a in self.dynamic:
            self.fig.draw_artist(a)
        # A 256-colour palette (viridis itself has 256 entries) keeps a noisy zoom near 60 kB
        # instead of 250 kB in full colour, and is quicker to write.
        w, h = self.canvas.get_width_height()
        img = Image.frombuffer("RGBA", (w, h), self.canvas.buffer_rgba(), "raw", "RGBA", 0, 1).convert("RGB")
        self._write_clock_labels(img)
        img.quantize(colors=256, method=Image.Quantize.FASTOCTREE).save(path, format="PNG", compress_level=6)
        return path


def _round_ticks(lo: float, hi: float, n: int) -> tuple[float, float]:
    """(start, step): the smallest round step whose n steps from a multiple of it cover lo..hi."""
    span = max(hi - lo, 1e-6)
    k = math.floor(math.log10(span / n))
    while True:
        for m in (1.0, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0, 6.0, 8.0):
            step = m * 10.0 ** k
            start = math.floor(lo / step) * step
            if start + n * step >= hi:
                return start, step
        k += 1
