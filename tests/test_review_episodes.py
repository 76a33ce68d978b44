"""Episodes in the morning review: one card per episode with its bursts inside, one
outlined region per episode on the overview, labels given to an episode (from the page's
server or the shell) reaching its bursts unless they carry their own."""

import json

import pytest
from click.testing import CliRunner
from matplotlib.patches import Rectangle
from test_report_night import make_night
from test_review_server import page_token, request

from rxlog.cli import main
from rxlog.review import palette
from rxlog.review.data import read_night
from rxlog.review.items import review_items
from rxlog.review.night import night_episodes, night_events
from rxlog.review.plots import overview_figure
from rxlog.review.report import build_report
from rxlog.review.server import ReviewServer
from rxlog.review.summary import night_summary
from rxlog.store import EventStore

STORM = "ep-storm"


def make_episode_night(root, n_bursts=12):
    """make_night's bursts, its Jovian ones made one storm episode (and the rest none).
    Returns (cfg, night, events)."""
    cfg, night, events = make_night(root, hours=1.0, n_bursts=n_bursts)
    storm = [e for e in events if e["class"] == "jovian_l"]
    store = EventStore(cfg.store_path)
    store.upsert_events([{**e, "episode_id": STORM} for e in storm])
    store.upsert_episodes([{"episode_id": STORM, "station": storm[0]["station"], "class": "jovian_l",
                            "start_utc": storm[0]["start_utc"], "end_utc": storm[-1]["end_utc"],
                            "fmin_mhz": 16.5, "fmax_mhz": 20.0, "n_events": len(storm), "peak_excess_db": 4.0,
                            "confidence": 0.85, "reason": "storm of L-burst arcs, 16.5-20 MHz"}])
    store.close()
    return cfg, night, night_events(cfg, night)


@pytest.fixture(scope="module")
def night(tmp_path_factory):
    cfg, night, events = make_episode_night(tmp_path_factory.mktemp("episodes"))
    build_report(cfg, night)
    return cfg, night, events


@pytest.fixture
def server(night):
    cfg, n, _ = night
    srv = ReviewServer(cfg, n, port=0)
    srv.start_background()
    yield srv
    srv.shutdown()
    srv.server_close()


def storm_bursts(events):
    return [e for e in events if e.get("episode_id") == STORM]


def test_the_storm_is_one_item_and_its_bursts_sit_inside_its_card(night):
    cfg, n, events = night
    items = review_items(events, night_episodes(cfg, n))
    assert len(storm_bursts(events)) == 4
    assert [it["kind"] for it in items].count("episode") == 1
    assert len(items) == len(events) - len(storm_bursts(events)) + 1
    html = (cfg.reports_dir / n.name / "index.html").read_text(encoding="utf-8")
    card = html[html.index(f'data-episode-id="{STORM}"'):]
    card = card[:card.index("</details></section>")]
    assert all(f'data-event-id="{e["event_id"]}"' in card for e in storm_bursts(events))
    assert "storm of L-burst arcs" in card and "4 bursts" in card
    summary = (cfg.reports_dir / n.name / "summary.txt").read_text()
    assert "to review: 7 items (jovian_l 1, solar_iii 2, solar_ii 2, unknown 2): 1 episode, 6 single bursts" in summary


def test_overview_draws_one_region_per_episode_with_its_class_and_time_in_the_legend(night):
    cfg, n, events = night
    items = review_items(events, night_episodes(cfg, n))
    data = read_night(cfg, n, [])
    fig = overview_figure(n, data, events, night_summary(cfg, n, events, data, [], [], [], [], items=items),
                          items=items)
    ax = fig.axes[1]
    jovian = palette.colour("jovian_l").upper()
    regions = [p for p in ax.patches if isinstance(p, Rectangle)
               and "#%02X%02X%02X" % tuple(int(round(255 * c)) for c in p.get_edgecolor()[:3]) == jovian]
    assert len(regions) == 1                       # not one box per burst
    boxes = [c for coll in ax.collections for c in coll.get_edgecolor()]
    assert all("#%02X%02X%02X" % tuple(int(round(255 * x)) for x in c[:3]) != jovian for c in boxes)
    legend = [t.get_text() for t in fig.legends[0].get_texts()]
    number = next(it["number"] for it in items if it["kind"] == "episode")
    assert any(t.startswith(f"#{number} Jupiter L-burst, ") and "EST" in t for t in legend), legend


def _post(srv, token, body):
    return request(srv, "POST", "/api/label", body, headers={"Content-Type": "application/json",
                                                            "X-Rxlog-Token": token,
                                                            "Origin": f"http://127.0.0.1:{srv.port}"})


def test_an_episode_label_from_the_page_reaches_its_bursts_but_not_one_with_its_own(night, server):
    cfg, n, events = night
    bursts = storm_bursts(events)
    token = page_token(server)
    status, _, body = _post(server, token, {"event_id": bursts[1]["event_id"], "label": "unsure", "note": "",
                                            "who": "ana"})
    assert status == 200, body
    status, _, body = _post(server, token, {"episode_id": STORM, "label": "jovian_l", "note": "Io-B", "who": "ben"})
    assert status == 200, body
    answer = json.loads(body)
    assert answer["episode"]["label"] == "jovian_l" and answer["history"][-1]["note"] == "Io-B"
    got = {b["event_id"]: (b["label"], b["label_source"]) for b in answer["bursts"]}
    want = {e["event_id"]: ("jovian_l", "episode") for e in bursts}
    want[bursts[1]["event_id"]] = ("unsure", "event")
    assert got == want
    status, _, body = request(server, "GET", "/api/events")
    listed = json.loads(body)
    assert {e["episode_id"]: e["label"] for e in listed["episodes"]} == {STORM: "jovian_l"}
    store = EventStore(cfg.store_path)
    try:
        assert {e["event_id"]: e["label"] for e in store.episode_bursts(STORM)} == {k: v[0] for k, v in want.items()}
        others = [e for e in store.events() if e.get("episode_id") != STORM and e["label"]]
        assert others == []
    finally:
        store.close()
    status, _, body = request(server, "GET", f"/api/history?episode={STORM}")
    assert status == 200 and [h["label"] for h in json.loads(body)["history"]] == ["jovian_l"]


@pytest.mark.parametrize("body, status", [
    ({"episode_id": "ep-nothing", "label": "jovian_l"}, 404),
    ({"episode_id": STORM, "event_id": "x", "label": "jovian_l"}, 400),
    ({"episode_id": 5, "label": "jovian_l"}, 400),
    ({"episode_id": STORM, "label": "storm"}, 400),
])
def test_bad_episode_label_requests_are_refused_without_touching_the_store(night, server, body, status):
    cfg, _, _ = night
    store = EventStore(cfg.store_path)
    before = store.db.execute("select count(*) from episode_labels").fetchone()[0]
    store.close()
    got, _, answer = _post(server, page_token(server), body)
    assert got == status, answer
    store = EventStore(cfg.store_path)
    assert store.db.execute("select count(*) from episode_labels").fetchone()[0] == before
    store.close()


def test_label_command_takes_an_episode_id_and_events_lists_episodes(tmp_path):
    cfg, n, events = make_episode_night(tmp_path, n_bursts=6)
    bursts = storm_bursts(events)
    run = lambda *a: CliRunner().invoke(main, [str(x) for x in a])   # noqa: E731
    r = run("label", "--config", cfg.path, bursts[0]["event_id"], "rfi", "--who", "ana")
    assert r.exit_code == 0, r.output
    r = run("label", "--config", cfg.path, STORM, "jovian_l", "--who", "ben", "--note", "storm")
    assert r.exit_code == 0, r.output
    assert "an episode" in r.output and "its 2 bursts" in r.output
    store = EventStore(cfg.store_path)
    labels = {e["event_id"]: e["label"] for e in store.episode_bursts(STORM)}
    store.close()
    assert labels == {bursts[0]["event_id"]: "rfi", bursts[1]["event_id"]: "jovian_l"}
    r = run("events", "--config", cfg.path, "--episodes", "--night", n.name)
    assert r.exit_code == 0 and STORM in r.output and "jovian_l (ben)" in r.output and "1 episode " in r.output
    r = run("label", "--config", cfg.path, "ep-nothing", "jovian_l")
    assert r.exit_code == 2 and "no event 'ep-nothing'" in r.output
