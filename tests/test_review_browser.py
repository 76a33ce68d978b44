"""The review page in a real headless browser (Debian's chromium driven by Playwright):
step through events with the keyboard, label one, reload, and the label is still there
and in the event store; label an episode with the keyboard and its bursts follow, except
one given its own label; the page shows the class palette and names the zone of its times."""

import os
import re
import shutil

import pytest
from test_report_night import make_night
from test_review_episodes import STORM, make_episode_night

from rxlog.review import palette
from rxlog.review.night import report_dir
from rxlog.review.report import build_report
from rxlog.review.server import ReviewServer
from rxlog.store import EventStore

CHROMIUM = "/usr/bin/chromium"
ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync"]


def _browser_or_skip():
    problem = None
    try:
        from playwright.sync_api import sync_playwright  # noqa: F401
    except ImportError:
        problem = "the playwright package is not installed (pip install -e '.[test]')"
    if problem is None and not (os.path.exists(CHROMIUM) or shutil.which("chromium")):
        problem = f"no chromium at {CHROMIUM} (apt-get install chromium; .ci/run does it as root)"
    if problem:
        if os.environ.get("CI", "").lower() == "true":
            pytest.fail(f"browser test cannot run in CI: {problem}")
        pytest.skip(problem)


@pytest.fixture(scope="module")
def served(tmp_path_factory):
    _browser_or_skip()
    root = tmp_path_factory.mktemp("browser")
    cfg, night, events = make_night(root, hours=0.5, n_bursts=4)
    build_report(cfg, night)
    srv = ReviewServer(cfg, night, port=0)
    srv.start_background()
    yield cfg, night, events, srv
    srv.shutdown()
    srv.server_close()


@pytest.fixture(scope="module")
def browser(served):
    from playwright.sync_api import sync_playwright

    with sync_playwright() as p:
        b = p.chromium.launch(executable_path=CHROMIUM if os.path.exists(CHROMIUM) else shutil.which("chromium"),
                              args=ARGS)
        yield b
        b.close()


def test_step_label_reload_and_the_label_stays(served, browser):
    cfg, night, events, srv = served
    page = browser.new_page()
    errors = []
    page.on("pageerror", lambda e: errors.append(str(e)))
    page.goto(srv.url)
    page.fill("#who", "ana")
    page.locator("#who").press("Tab")           # leave the field so keys go to the page
    page.locator("body").click(position={"x": 5, "y": 5})

    page.keyboard.press("j")
    page.keyboard.press("j")
    page.keyboard.press("j")
    page.keyboard.press("k")                    # back to the second event
    current = page.locator("section.event.current")
    assert current.count() == 1
    target = events[1]["event_id"]
    assert current.get_attribute("data-event-id") == target

    page.keyboard.press("n")                    # type a note, leave with Enter
    page.keyboard.type("faint arc")
    page.keyboard.press("Enter")
    page.keyboard.press("7")                    # key 7: rfi
    card = page.locator(f'section.event[data-event-id="{target}"]')
    card.locator(".status").filter(has_text="saved").wait_for(timeout=5000)
    assert "Interference" in card.locator(".current-label").inner_text()

    page.reload()
    card = page.locator(f'section.event[data-event-id="{target}"]')
    page.wait_for_function(
        "id => document.querySelector(`section.event[data-event-id=\"${id}\"] .current-label`)"
        ".textContent.includes('Interference')", arg=target, timeout=5000)
    assert "ana" in card.locator(".current-label").inner_text()
    assert card.locator("button.on").get_attribute("data-label") == "rfi"
    # Stepping to it again shows its label history.
    page.locator("body").click(position={"x": 5, "y": 5})
    page.keyboard.press("j")
    page.keyboard.press("j")
    card.locator("ol.history li").first.wait_for(timeout=5000)
    assert "faint arc" in card.locator("ol.history").inner_text()
    assert errors == []

    store = EventStore(cfg.store_path)
    try:
        ev = store.get_event(target)
    finally:
        store.close()
    assert (ev["label"], ev["label_note"], ev["label_who"]) == ("rfi", "faint arc", "ana")


def test_page_opened_from_disk_is_read_only_but_complete(served, browser):
    cfg, night, events, srv = served
    page = browser.new_page()
    page.goto((report_dir(cfg, night) / "index.html").as_uri())
    assert page.locator("section.event").count() == len(events)
    assert "Read-only" in page.locator("#mode").inner_text()
    page.locator("body").click(position={"x": 5, "y": 5})
    page.keyboard.press("j")
    assert page.locator("section.event.current").get_attribute("data-event-id") == events[0]["event_id"]
    assert page.locator("section.event.current button").first.is_disabled()
    # Every image on the page loads from the folder.
    page.evaluate("document.querySelectorAll('img').forEach(i => { i.loading = 'eager'; })")
    page.wait_for_function("Array.from(document.images).every(i => i.complete)", timeout=10000)
    sizes = page.evaluate("Array.from(document.images).map(i => i.naturalWidth)")
    assert len(sizes) == len(events) + 2 and all(w > 0 for w in sizes)


def _css_rgb(hex_colour: str) -> str:
    return "rgb({}, {}, {})".format(*(int(hex_colour[k:k + 2], 16) for k in (1, 3, 5)))


def test_cards_and_chips_show_the_palette_and_every_time_names_its_zone(served, browser):
    cfg, night, events, srv = served
    page = browser.new_page()
    errors = []
    page.on("pageerror", lambda e: errors.append(str(e)))
    page.goto(srv.url)
    # Colours as the browser computes them from the page's styles.
    cards = page.evaluate("""() => Array.from(document.querySelectorAll('section.event')).map(c => ({
        cls: c.dataset.class, edge: getComputedStyle(c).borderLeftColor,
        chip: getComputedStyle(c.querySelector('h3 .chip')).backgroundColor,
        chipText: c.querySelector('h3 .chip').textContent, when: c.querySelector('h3 .when').textContent}))""")
    shown = sorted(events, key=lambda e: e["class"] == "rfi")     # interference after what is to review
    assert [c["cls"] for c in cards] == [e["class"] for e in shown]
    for c, e in zip(cards, shown):
        assert c["edge"] == c["chip"] == _css_rgb(palette.colour(c["cls"])), c
        assert c["chipText"].endswith(f"confidence {e['confidence']:.2f}")
        assert re.fullmatch(r"\d\d:\d\d:\d\d EST", c["when"]), c["when"]
    summary_chips = page.evaluate("""() => Array.from(document.querySelectorAll('main > p .chip')).map(s =>
        [s.className, getComputedStyle(s).backgroundColor])""")
    assert {cls.split("cls-")[1]: rgb for cls, rgb in summary_chips} == \
        {e["class"]: _css_rgb(palette.colour(e["class"])) for e in events}
    assert re.search(r"\d\d:\d\d EST \d\d \w+ to\s+\d\d:\d\d EST", page.locator("header .sub").inner_text())
    facts = dict(page.evaluate("""() => Array.from(document.querySelectorAll('.facts-grid div')).map(d =>
        [d.querySelector('b').textContent, d.textContent.slice(d.querySelector('b').textContent.length)])"""))
    assert re.fullmatch(r"(\d\d:\d\d–\d\d:\d\d EST(, )?)+|not up", facts["Jupiter up"]), facts["Jupiter up"]
    # The status line after a label and the label history use one style: local time and zone.
    target = events[-1]["event_id"]
    card = page.locator(f'section.event[data-event-id="{target}"]')
    card.locator('button[data-label="unsure"]').click()
    card.locator(".status").filter(has_text="saved").wait_for(timeout=5000)
    card.locator("ol.history li").first.wait_for(timeout=5000)
    stamp = r"\d{4}-\d\d-\d\d \d\d:\d\d:\d\d (EST|EDT)"
    status = card.locator(".status").inner_text()
    history = card.locator("ol.history li").last.inner_text()
    m_status, m_history = re.search(stamp, status), re.match(stamp, history)
    assert m_status and m_history, (status, history)
    assert m_status.group(0) == m_history.group(0)
    assert errors == []


@pytest.fixture(scope="module")
def served_episodes(tmp_path_factory):
    _browser_or_skip()
    cfg, night, events = make_episode_night(tmp_path_factory.mktemp("browser-episodes"))
    build_report(cfg, night)
    srv = ReviewServer(cfg, night, port=0)
    srv.start_background()
    yield cfg, night, events, srv
    srv.shutdown()
    srv.server_close()


def test_label_an_episode_with_the_keyboard_and_its_bursts_follow(served_episodes, browser):
    cfg, night, events, srv = served_episodes
    bursts = [e for e in events if e.get("episode_id") == STORM]
    page = browser.new_page()
    errors = []
    page.on("pageerror", lambda e: errors.append(str(e)))
    page.goto(srv.url)
    page.fill("#who", "ana")
    page.locator("#who").press("Tab")
    page.locator("body").click(position={"x": 5, "y": 5})
    for _ in range(len(events)):                 # step through the items to the storm
        page.keyboard.press("j")
        if page.locator("section.current").get_attribute("data-episode-id") == STORM:
            break
    assert page.locator("section.current").get_attribute("data-episode-id") == STORM
    page.keyboard.press("1")                     # key 1: jovian_l, for the episode
    head = f'section.episode[data-episode-id="{STORM}"]'
    page.locator(f"{head} > .body .status").filter(has_text="saved").wait_for(timeout=5000)
    assert "Jupiter L-burst" in page.locator(f"{head} > h3 .current-label").inner_text()
    # Its bursts show the label at once, as coming from their episode.
    first = f'section.burst[data-event-id="{bursts[0]["event_id"]}"]'
    assert "from its episode" in page.locator(f"{first} .current-label").text_content()
    page.keyboard.press("o")                     # open the bursts, step to the first
    page.keyboard.press("j")
    assert page.locator("section.current").get_attribute("data-event-id") == bursts[0]["event_id"]
    page.keyboard.press("7")                     # key 7: rfi, the burst's own label
    page.locator(f"{first} .status").filter(has_text="saved").wait_for(timeout=5000)
    page.keyboard.press("o")                     # close again: back on the episode
    assert page.locator("section.current").get_attribute("data-episode-id") == STORM

    page.reload()
    page.wait_for_function(
        "sel => document.querySelector(sel + ' > h3 .current-label').textContent.includes('Jupiter')",
        arg=head, timeout=5000)
    assert "ana" in page.locator(f"{head} > h3 .current-label").inner_text()
    assert "Interference" in page.locator(f"{first} .current-label").text_content()
    assert errors == []
    store = EventStore(cfg.store_path)
    try:
        got = {e["event_id"]: (e["label"], e["label_source"]) for e in store.episode_bursts(STORM)}
        assert store.get_episode(STORM)["label"] == "jovian_l"
    finally:
        store.close()
    assert got == {e["event_id"]: ("rfi", "event") if e is bursts[0] else ("jovian_l", "episode") for e in bursts}
