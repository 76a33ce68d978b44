"""The report of a simulated night: every event is on the page, the plots are real images,
and the page links only to files that exist inside its folder (so a copy still works)."""

import re
import shutil
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from PIL import Image
from test_report_night import make_night, simulated_night

from rxlog.archive.write import write_spectrum_fits
from rxlog.cli import main
from rxlog.review.data import zoom_window
from rxlog.review.night import report_dir
from rxlog.review.page import event_image_name
from rxlog.review.report import build_report
from rxlog.review.zoom import ZOOM_SPECTRUM_AXES
from rxlog.spectrum import DynamicSpectrum, channel_grid
from rxlog.store import EventStore
from rxlog.timeutil import parse_iso


class PageParser(HTMLParser):
    """Collects links, ids and event cards of the review page."""

    def __init__(self):
        super().__init__()
        self.links, self.ids, self.cards, self.card_images, self.episodes = [], set(), [], {}, []
        self._card = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if "id" in a:
            self.ids.add(a["id"])
        for key in ("src", "href"):
            if key in a:
                self.links.append(a[key])
        if tag == "section" and "event" in (a.get("class") or "").split():
            self._card = a["data-event-id"]
            self.cards.append(self._card)
        elif tag == "section" and "episode" in (a.get("class") or "").split():
            self._card = a["data-episode-id"]
            self.episodes.append(self._card)
        if tag == "img" and self._card is not None:
            self.card_images[self._card] = a["src"]


def parse(index: Path) -> PageParser:
    p = PageParser()
    p.feed(index.read_text(encoding="utf-8"))
    return p


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    root = tmp_path_factory.mktemp("night")
    cfg, night, events, truth = simulated_night(root)
    index = build_report(cfg, night)
    return cfg, night, events, index


def check_links(index: Path, page: PageParser):
    folder = index.parent.resolve()
    for link in page.links:
        assert not re.match(r"^[a-z][a-z0-9+.-]*:|^//|^/", link, re.I), f"not a relative link: {link}"
        if link.startswith("#"):
            assert link[1:] in page.ids, f"dangling anchor {link}"
            continue
        target = (folder / link.split("#")[0]).resolve()
        assert target.is_relative_to(folder) and target.is_file(), f"missing file for {link}"


def test_every_event_has_a_card_and_its_zoom(built):
    cfg, night, events, index = built
    page = parse(index)
    classes = {e["class"] for e in events}
    assert {"solar_iii", "jovian_l"} <= classes, "the simulated bursts were not detected"
    # Each event once: inside its episode's card, or a card of its own.
    assert sorted(page.cards) == sorted(e["event_id"] for e in events)
    assert page.episodes and {e["episode_id"] for e in events} >= set(page.episodes)
    for ep in page.episodes:
        assert page.card_images[ep] == f"events/{ep}.png" and (index.parent / page.card_images[ep]).is_file()
    for e in events:
        src = page.card_images[e["event_id"]]
        assert src == event_image_name(e) and (index.parent / src).is_file()


def test_page_links_only_to_files_in_its_folder_even_when_copied(built, tmp_path):
    cfg, night, events, index = built
    text = index.read_text(encoding="utf-8")
    assert "http://" not in text and "https://" not in text, "the page must not fetch anything"
    assert not re.search(r"url\(", text), "no external resources in the styles"
    check_links(index, parse(index))
    copy = tmp_path / "mailed"
    shutil.copytree(index.parent, copy)
    check_links(copy / "index.html", parse(copy / "index.html"))


def _nontrivial(path: Path, min_size=(400, 250)):
    im = Image.open(path)
    im.load()
    assert im.format == "PNG"
    assert im.size[0] >= min_size[0] and im.size[1] >= min_size[1], im.size
    a = np.asarray(im.convert("RGB")).reshape(-1, 3).astype(np.int64)
    colours = np.unique((a[:, 0] << 16) | (a[:, 1] << 8) | a[:, 2])
    assert len(colours) > 50, f"{path.name}: only {len(colours)} colours"
    assert a.std() > 20


def test_plots_exist_and_are_nontrivial_images(built):
    cfg, night, events, index = built
    folder = index.parent
    _nontrivial(folder / "overview.png", (1000, 500))
    _nontrivial(folder / "cml_io.png")
    zooms = [folder / event_image_name(e) for e in events]
    for z in zooms:
        _nontrivial(z)
    # Each zoom shows its own event, not a copy of another.
    assert len({z.read_bytes() for z in zooms}) == len(zooms)


def _grey_inside_and_outside_box(png: Path, ev: dict, t_edges_centre: float, half: float, band=(16.0, 24.0)):
    """90th percentiles of the luminance of the zoom's spectrum pixels inside and outside the event box."""
    a = np.asarray(Image.open(png).convert("L")).astype(float)
    h, w = a.shape
    left, bottom, width, height = ZOOM_SPECTRUM_AXES
    x0, x1 = int(left * w) + 2, int((left + width) * w) - 2
    y0, y1 = int((1 - bottom - height) * h) + 2, int((1 - bottom) * h) - 2
    panel = a[y0:y1, x0:x1]
    ts = t_edges_centre - half + (np.arange(panel.shape[1]) + 0.5) / panel.shape[1] * 2 * half
    fs = band[1] - (np.arange(panel.shape[0]) + 0.5) / panel.shape[0] * (band[1] - band[0])
    tin = (ts > parse_iso(ev["start_utc"]) + 1) & (ts < parse_iso(ev["end_utc"]) - 1)
    fin = (fs > ev["fmin_mhz"] + 0.1) & (fs < ev["fmax_mhz"] - 0.1)
    inside = panel[np.ix_(fin, tin)]
    outside = panel[:, ~((ts > parse_iso(ev["start_utc"]) - 3) & (ts < parse_iso(ev["end_utc"]) + 3))]
    return np.percentile(inside, 90), np.percentile(outside, 90)


def test_zoom_shows_the_burst_inside_its_box(built):
    # viridis gets lighter with value (perceptually uniform), so the burst's brightest
    # cells must be lighter than the quiet sky beside it.
    cfg, night, events, index = built
    ev = max((e for e in events if e["class"] == "solar_iii"), key=lambda e: e["peak_excess_db"])
    a, b = zoom_window(ev, cfg["spectra"]["cadence_s"])
    inside, outside = _grey_inside_and_outside_box(index.parent / event_image_name(ev), ev,
                                                   0.5 * (a + b), 0.5 * (b - a))
    assert inside > outside + 25, (inside, outside)


def test_summary_counts_what_was_recorded(built):
    cfg, night, events, index = built
    text = (index.parent / "summary.txt").read_text()
    # simulated_night records two stretches of 45 minutes.
    assert "recorded 1.5 h of 24.0 h (6 %)" in text
    assert "3 gaps" in text                  # before, between and after the stretches
    per_class = {}
    for e in events:
        per_class[e["class"]] = per_class.get(e["class"], 0) + 1
    assert f"events: {len(events)} (" in text
    for cls, n in per_class.items():
        assert f"{cls} {n}" in text
    assert "Jupiter up:" in text and "Sun up:" in text
    # The storm lies in the night's Io-B forecast window, which was recorded in part.
    line = next(x for x in text.splitlines() if "forecast Io-B" in x)
    assert "seen" in line and "nothing seen" not in line


def test_masked_fraction_is_the_detectors_record_weighted_by_recorded_time(built):
    cfg, night, events, index = built
    store = EventStore(cfg.store_path)
    try:
        rows = [q for q in store.quality() if q["masked_fraction"] is not None]
    finally:
        store.close()
    assert rows, "detection left no quality rows"
    w = np.array([q["covered_s"] for q in rows])
    m = np.array([q["masked_fraction"] for q in rows])
    expected = 100 * (m * w).sum() / w.sum()
    assert f"masked as interference: {expected:.1f} % (from detection)" in (index.parent / "summary.txt").read_text()


def test_masked_fraction_unknown_before_detection(tmp_path):
    cfg, night, events = make_night(tmp_path, hours=0.3, n_bursts=1)
    index = build_report(cfg, night)
    assert "masked as interference: not measured yet" in (index.parent / "summary.txt").read_text()


def test_report_with_events_but_no_spectra_still_lists_them(tmp_path):
    cfg, night, events = make_night(tmp_path, hours=0.5, n_bursts=3)
    shutil.rmtree(cfg.archive_dir)
    index = build_report(cfg, night)
    page = parse(index)
    assert page.cards == [e["event_id"] for e in events]
    assert "No spectra for this event in the archive." in index.read_text()
    check_links(index, page)


def test_kept_cutout_is_drawn_instead_of_the_archive(tmp_path):
    cfg, night, events = make_night(tmp_path, hours=0.5, n_bursts=2)
    ev = events[0]
    # A 10-ms cutout of 4 s around the peak, 64 channels over the event's band.
    peak = parse_iso(ev["peak_utc"])
    n, freq = 400, channel_grid(ev["fmin_mhz"], ev["fmax_mhz"], 64)
    power = np.random.default_rng(3).normal(0, 0.3, (n, 64)).astype(np.float32)
    power[180:220, 20:40] += 8.0
    rel = Path("cutouts") / "one.fits"
    write_spectrum_fits(DynamicSpectrum(power, peak - 2.0, 0.01, freq, segment="cut"),
                        cfg.storage_root / rel, cfg["station"])
    store = EventStore(cfg.store_path)
    store.upsert_events([{**{k: ev[k] for k in ev if not k.startswith("label")}, "cutout_path": str(rel)}])
    store.close()
    index = build_report(cfg, night)
    html = index.read_text()
    cards = html.split('<section class="event ')[1:]
    assert "full-resolution cutout" in cards[0] and "full-resolution cutout" not in cards[1]
    _nontrivial(index.parent / event_image_name(ev))


def test_rebuild_drops_zooms_of_events_no_longer_stored(tmp_path):
    cfg, night, events = make_night(tmp_path, hours=0.5, n_bursts=3)
    index = build_report(cfg, night)
    gone = index.parent / event_image_name(events[0])
    assert gone.is_file()
    store = EventStore(cfg.store_path)
    store.replace_events("testsite", night.t0, night.t1, [{k: e[k] for k in e if not k.startswith("label")}
                                                          for e in events[1:]])
    store.close()
    build_report(cfg, night)
    assert not gone.exists()
    check_links(index, parse(index))


def test_label_survives_redetection_into_the_rebuilt_page(tmp_path):
    cfg, night, events = make_night(tmp_path, hours=0.5, n_bursts=3)
    store = EventStore(cfg.store_path)
    store.add_label(events[1]["event_id"], "solar_ii", note="slow drift", who="ana")
    # Detection re-run with other thresholds: boxes shift a little and ids change.
    again = []
    for e in events:
        shifted = {k: v for k, v in e.items() if not k.startswith("label")}
        shifted["fmin_mhz"] += 0.05
        shifted["event_id"] += "-b"
        again.append(shifted)
    store.replace_events("testsite", night.t0, night.t1, again)
    store.close()
    index = build_report(cfg, night)
    card = index.read_text().split(f'data-event-id="{again[1]["event_id"]}"')[1].split("</section>")[0]
    assert "label: <span class=\"current-label\">Solar type II (ana)</span>" in card
    assert 'value="slow drift"' in card


def test_review_command_prints_the_summary_and_the_path(tmp_path):
    cfg, night, events = make_night(tmp_path, hours=0.5, n_bursts=3)
    r = CliRunner().invoke(main, ["review", "--config", str(cfg.path), "--night", night.name])
    assert r.exit_code == 0, r.output
    assert f"events: {len(events)}" in r.output
    assert f"report: {report_dir(cfg, night) / 'index.html'}" in r.output


def test_review_command_rejects_a_bad_night(built):
    cfg, *_ = built
    r = CliRunner().invoke(main, ["review", "--config", str(cfg.path), "--night", "tomorrow"])
    assert r.exit_code == 2
    assert "YYYY-MM-DD" in r.output
