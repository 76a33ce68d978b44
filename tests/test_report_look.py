"""One look across the report's plots, its page and the comparison timeline: one class
palette (Okabe & Ito 2008) everywhere, class boxes that stand out on any background, every
time shown with its zone, confidence labelled, event zooms on an absolute clock axis."""

import datetime as dt
import re
from html.parser import HTMLParser
from zoneinfo import ZoneInfo

import numpy as np
import pytest
from matplotlib.colors import to_hex
from PIL import Image
from test_report_night import NIGHT, TZ, _event, make_night, station_config

from rxlog.exchange.compare import compare_stations
from rxlog.exchange.export import export_events
from rxlog.review import palette
from rxlog.review.data import ZOOM_LENGTHS_S, read_night, zoom_window
from rxlog.review.listing import event_table
from rxlog.review.night import night_events, night_starting, zone_name
from rxlog.review.plots import cml_io_figure, overview_figure
from rxlog.review.report import build_report
from rxlog.review.summary import JOVIAN, fmt_span, night_summary
from rxlog.review.zoom import MAX_CLOCK_TICKS, ZoomPlotter, clock_ticks
from rxlog.store import CLASSES, EventStore
from rxlog.timeutil import parse_iso

# Okabe, M. & Ito, K. (2008) "Color Universal Design (CUD): how to make figures and
# presentations that are friendly to colorblind people", J*FLY; the seven hues as listed by
# the colorblindr R package (palette_OkabeIto) and Wong (2011), Nature Methods 8, 441.
OKABE_ITO_HUES = {"#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7"}
# WCAG 2.1 success criterion 1.4.11 (non-text contrast): graphical objects need a contrast
# ratio of at least 3:1 against adjacent colours.
WCAG_NON_TEXT = 3.0


def _hex(c) -> str:
    return to_hex(c).upper()


@pytest.fixture(scope="module")
def all_classes(tmp_path_factory):
    """A night with one event of every class, 3 minutes apart, in 30 minutes of archived noise."""
    root = tmp_path_factory.mktemp("look")
    cfg, night, _ = make_night(root, hours=0.5, n_bursts=0)
    t0 = dt.datetime.combine(NIGHT, dt.time(21), tzinfo=ZoneInfo(TZ)).timestamp()
    jov = {"cml3_deg": 160.0, "io_phase_deg": 90.0, "source_region": "Io-B", "jupiter_alt_deg": 30.0}
    events = [_event(t0 + 120 + 180 * k, 20.0, 17.0 + 0.5 * k, 19.0 + 0.5 * k, cls,
                     **(jov if cls.startswith("jovian") else {})) for k, cls in enumerate(CLASSES)]
    store = EventStore(cfg.store_path)
    store.upsert_events(events)
    store.close()
    index = build_report(cfg, night)
    return cfg, night, night_events(cfg, night), index


# -- the palette -------------------------------------------------------------------------

def test_palette_is_the_okabe_ito_hues_one_per_sky_class_and_grey_for_interference():
    assert tuple(palette.CLASS_COLOURS) == CLASSES
    sky = {c: v.upper() for c, v in palette.CLASS_COLOURS.items() if c != "rfi"}
    assert set(sky.values()) == OKABE_ITO_HUES and len(set(sky.values())) == len(sky)
    grey = palette.CLASS_COLOURS["rfi"]
    assert grey[1:3] == grey[3:5] == grey[5:7] and grey.upper() not in OKABE_ITO_HUES
    assert set(palette.CLASS_NAMES) == set(CLASSES)


def test_wcag_contrast_matches_the_published_extremes():
    # WCAG 2.1 "contrast ratio": black on white is 21:1, a colour on itself 1:1.
    assert palette.contrast_ratio("#000000", "#FFFFFF") == pytest.approx(21.0)
    assert palette.contrast_ratio("#D55E00", "#D55E00") == pytest.approx(1.0)


def _edge_contrast(rgb: np.ndarray, row: int, col: int, bg: str, half: int = 6) -> float:
    """Largest WCAG contrast against ``bg`` along a row of pixels across an edge at ``col``."""
    seg = rgb[row, max(col - half, 0):col + half + 1]
    return max(palette.contrast_ratio("#%02X%02X%02X" % tuple(p), bg) for p in seg)


def _box_on(bg: str, cls: str, effects) -> float:
    """A class box drawn on a plain background: the contrast across its left edge."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.patches import Rectangle

    fig = Figure(figsize=(1.0, 1.0), dpi=80, facecolor=bg)
    canvas = FigureCanvasAgg(fig)
    ax = fig.add_axes((0, 0, 1, 1), facecolor=bg)
    ax.set_xlim(0, 1), ax.set_ylim(0, 1), ax.set_axis_off()
    ax.add_patch(Rectangle((0.3, 0.3), 0.4, 0.4, facecolor="none", edgecolor=palette.colour(cls), linewidth=1.4,
                           path_effects=effects))
    canvas.draw()
    rgb = np.asarray(canvas.buffer_rgba())[:, :, :3]
    return _edge_contrast(rgb, 40, 24, bg)   # 80 px square: left edge at x = 24, half-way up at y = 40


def test_a_class_box_stands_out_on_any_background():
    # The darkest, middle and lightest colours of viridis (the maps), the grey of missing
    # data and white (the page, the comparison timeline).
    from matplotlib import colormaps

    backgrounds = [_hex(colormaps["viridis"](x)) for x in (0.0, 0.5, 1.0)] + ["#D0D0D0", "#FFFFFF"]
    for bg in backgrounds:
        for cls in CLASSES:
            assert _box_on(bg, cls, palette.outline(1.4)) >= WCAG_NON_TEXT, (cls, bg)
    # The class colours alone would not do: the halo and the edge are what make it so.
    assert min(_box_on(bg, cls, []) for bg in backgrounds for cls in CLASSES) < WCAG_NON_TEXT


def _zoom_png(night, tmp_path, cls: str, level: float):
    """A zoom of one event over a flat map at ``level`` dB; (png array, plotter, event, mid)."""
    f_edges = np.linspace(16.0, 24.0, 129)
    plotter = ZoomPlotter(night, f_edges)
    peak = night.t0 + 9 * 3600.0
    ev = {**_event(peak, 20.0, 18.0, 21.0, cls), "event_id": "x"}
    a, b = zoom_window(ev, 1.0)
    t_edges = np.linspace(a, b, 121)
    path = plotter.draw(tmp_path / f"{cls}-{level}.png", 1, ev, t_edges, np.full((120, 128), level), "archive")
    return np.asarray(Image.open(path).convert("RGB")), plotter, ev, 0.5 * (a + b)


@pytest.mark.parametrize("cls, level", [("fadeout", -10.0), ("unknown", -10.0), ("solar_iii", 10.0),
                                        ("rfi", 10.0)])
def test_zoom_box_stands_out_on_the_darkest_and_the_lightest_map(tmp_path, cls, level):
    cfg = station_config(tmp_path)
    night = night_starting(cfg, NIGHT)
    rgb, plotter, ev, mid = _zoom_png(night, tmp_path, cls, level)
    h = rgb.shape[0]
    x, y = plotter.ax.transData.transform((parse_iso(ev["start_utc"]) - mid, 19.5))
    row, col = int(round(h - y)), int(round(x))
    bg = "#%02X%02X%02X" % tuple(rgb[row, col - 25])      # the flat map left of the box
    assert _edge_contrast(rgb, row, col, bg) >= WCAG_NON_TEXT


# -- every plot and the page use the palette ---------------------------------------------

def test_every_report_plot_draws_each_class_in_its_palette_colour(all_classes, tmp_path):
    cfg, night, events, index = all_classes
    assert sorted(e["class"] for e in events) == sorted(CLASSES)
    data = read_night(cfg, night, [])
    summary = night_summary(cfg, night, events, data, [], [], [], [])
    fig = overview_figure(night, data, events, summary)
    drawn = {_hex(c) for ax in fig.axes for coll in ax.collections for c in coll.get_edgecolor()}
    assert {palette.colour(c).upper() for c in CLASSES} <= drawn
    legend = {t.get_text(): _hex(h.get_edgecolor()) for t, h in zip(fig.legends[0].get_texts(),
                                                                     fig.legends[0].legend_handles)}
    assert legend == {f"{palette.CLASS_NAMES[c]} ({c})": palette.colour(c).upper() for c in CLASSES}

    jovian = [(i, e) for i, e in enumerate(events) if e["class"] in JOVIAN]
    fig = cml_io_figure(cfg, night, jovian)
    faces = {_hex(c) for coll in fig.axes[0].collections for c in coll.get_facecolor()}
    assert {palette.colour("jovian_l").upper(), palette.colour("jovian_s").upper()} <= faces

    for cls in CLASSES:
        _, plotter, _, _ = _zoom_png(night, tmp_path, cls, 0.0)
        assert _hex(plotter.box.get_edgecolor()) == palette.colour(cls).upper()
        assert _hex(plotter.span.get_facecolor()) == palette.colour(cls).upper()


def test_comparison_timeline_draws_each_class_in_its_palette_colour(all_classes, tmp_path):
    # Two stations that saw the same events, compared one class at a time: the timeline
    # shows that class's colour and no other class's (but grey, which antialiased grid
    # lines and text may hit).
    cfg, night, events, index = all_classes
    full = tmp_path / "all.csv"
    export_events(cfg, full, "csv", include_rfi=True)
    lines = full.read_text().splitlines(keepends=True)
    head = [x for x in lines if x.startswith("#")]
    columns = next(x for x in lines if not x.startswith("#"))
    rows = lines[len(head) + 1:]
    k = columns.strip().split(",").index("class")
    palette_rgb = {c: palette.colour(c).upper() for c in CLASSES}
    for cls in CLASSES:
        mine = [r for r in rows if r.strip().split(",")[k] == cls]
        a, b = tmp_path / f"{cls}-a.csv", tmp_path / f"{cls}-b.csv"
        a.write_text("".join(head + [columns] + mine))
        b.write_text(a.read_text().replace("testsite", "othersite"))
        compare_stations([a, b], outdir=tmp_path / cls)
        rgb = np.asarray(Image.open(tmp_path / cls / "timeline.png").convert("RGB")).reshape(-1, 3)
        present = {"#%02X%02X%02X" % tuple(p) for p in np.unique(rgb, axis=0)}
        assert {c for c, v in palette_rgb.items() if v in present} - {"rfi"} == {cls} - {"rfi"}
        assert palette_rgb[cls] in present


class _Page(HTMLParser):
    """The page's visible text (no script, no style) and the class attributes of its cards and chips."""

    def __init__(self):
        super().__init__()
        self.text, self.cards, self.chips, self._skip, self._chip = [], [], [], 0, None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag in ("script", "style"):
            self._skip += 1
        classes = (a.get("class") or "").split()
        if tag == "section" and "event" in classes:
            self.cards.append((a["data-class"], classes))
        if "chip" in classes:
            self._chip = [classes, ""]

    def handle_endtag(self, tag):
        if tag in ("script", "style"):
            self._skip -= 1
        if tag == "span" and self._chip is not None:
            self.chips.append(tuple(self._chip))
            self._chip = None

    def handle_data(self, data):
        if not self._skip:
            self.text.append(data)
        if self._chip is not None:
            self._chip[1] += data


def test_page_styles_come_from_the_palette_and_chips_label_confidence(all_classes):
    cfg, night, events, index = all_classes
    html = index.read_text(encoding="utf-8")
    declared = dict(re.findall(r"--class-([a-z_]+?): (#[0-9A-Fa-f]{6});", html))
    assert {k: v.upper() for k, v in declared.items()} == {c: v.upper() for c, v in palette.CLASS_COLOURS.items()}
    page = _Page()
    page.feed(html)
    # Interference comes after what is to review; otherwise the page keeps time order.
    events = sorted(events, key=lambda e: e["class"] == "rfi")
    assert [c for c, _ in page.cards] == [e["class"] for e in events]
    assert all(f"cls-{c}" in classes for c, classes in page.cards)
    card_chips = [text for classes, text in page.chips if "confidence" in text]
    assert len(card_chips) == len(events)
    for e, text in zip(events, card_chips):
        assert text == f"{palette.CLASS_NAMES[e['class']]} · confidence {e['confidence']:.2f}"


# -- times name their zone ---------------------------------------------------------------

ZONES = r"(EST|EDT|UTC)"
TIME = re.compile(r"\b\d{2}:\d{2}(?::\d{2})?\b")


def assert_every_time_names_its_zone(text: str):
    for m in TIME.finditer(text):
        after = text[m.end():m.end() + 14]
        assert re.match(rf"(–\d{{2}}:\d{{2}})? {ZONES}\b", after) or re.match(rf"–\d{{2}}:\d{{2}} {ZONES}\b", after), \
            f"time without its zone: {text[max(0, m.start() - 30):m.end() + 14]!r}"


def test_summary_page_and_listing_name_the_zone_of_every_time(all_classes):
    cfg, night, events, index = all_classes
    summary = (index.parent / "summary.txt").read_text()
    assert re.search(r"Jupiter up: \d\d:\d\d–\d\d:\d\d EST", summary)
    assert_every_time_names_its_zone(summary)
    page = _Page()
    page.feed(index.read_text(encoding="utf-8"))
    assert_every_time_names_its_zone(" ".join(page.text))
    table = event_table(cfg, night=night.name)
    assert table.splitlines()[0].split()[:4] == ["event_id", "peak", "class", "confidence"]
    assert_every_time_names_its_zone(table)


def test_a_span_across_a_clock_change_names_both_zones(tmp_path):
    cfg = station_config(tmp_path)
    night = night_starting(cfg, dt.date(2027, 3, 13))      # US clocks go forward 2027-03-14 02:00
    tz = ZoneInfo(TZ)
    a = dt.datetime(2027, 3, 14, 1, 0, tzinfo=tz).timestamp()
    b = dt.datetime(2027, 3, 14, 3, 30, tzinfo=tz).timestamp()
    assert fmt_span(night, a, b) == "01:00 EST–03:30 EDT"
    assert fmt_span(night, b, b + 3600) == "03:30–04:30 EDT"


def test_a_zone_without_an_abbreviation_is_named_by_its_offset():
    # tzdata names Asia/Kolkata's time 'IST' but Asia/Dubai's only '+04'.
    assert zone_name(dt.datetime(2027, 2, 3, 12, tzinfo=ZoneInfo("Asia/Dubai"))) == "UTC+04:00"
    assert zone_name(dt.datetime(2027, 2, 3, 12, tzinfo=ZoneInfo("Europe/Paris"))) == "CET"


# -- event zooms on an absolute clock ----------------------------------------------------

@pytest.mark.parametrize("offset_h", [0.0, -5.0, 5.5, 5.75, -3.5])
def test_clock_ticks_are_round_local_times_inside_every_zoom_window(offset_h):
    off = offset_h * 3600.0
    for length in ZOOM_LENGTHS_S:
        a = 1_800_000_123.0
        ticks, step = clock_ticks(a, a + length, off)
        assert 3 <= len(ticks) <= MAX_CLOCK_TICKS, (length, ticks)
        assert ticks[0] >= a and ticks[-1] <= a + length
        assert np.all(np.mod(ticks + off, step) == 0)
        assert np.all(np.diff(ticks) == step)


def test_zoom_time_axis_labels_local_and_utc_clock_times(all_classes, tmp_path):
    cfg, night, events, index = all_classes
    rgb, plotter, ev, mid = _zoom_png(night, tmp_path, "solar_iii", 0.0)
    assert [name for name, _ in plotter.clock_rows] == ["EST", "UTC"]
    for (name, labels), tz in zip(plotter.clock_rows, (ZoneInfo(TZ), dt.timezone.utc)):
        assert len(labels) >= 3
        for x, text in labels:
            t = x + mid
            assert dt.datetime.fromtimestamp(t, tz).strftime("%H:%M:%S") == text
            assert abs(t - round(t)) < 1e-6 and round(t) % 5 == 0       # round clock seconds
    # The labels are on the image: ink in the two rows under the light curve, below each tick.
    h = rgb.shape[0]
    bottom = int(round(h - plotter.lc.bbox.y0))
    for x, _ in plotter.clock_rows[0][1]:
        col = int(round(plotter.lc.transData.transform((x, 0.0))[0]))
        strip = rgb[bottom + 4:bottom + 24, col - 6:col + 7].min(axis=2)
        assert strip.min() < 100, "no label under a tick"
