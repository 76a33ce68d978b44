"""Morning review: time to write a night's report with 500 episodes, and the review page's
answer time per request.

The night: 14 hours of archived spectra (18:00 to 08:00 local) at 1024 channels and 1 s
cadence — radiometer noise of 0.11 dB on a background falling with frequency — and 500
episodes spread over it (Type III groups of seconds, Jovian L-burst stretches of
minutes, interference), each of two bursts, put in the event store as detection would;
100 bursts and 50 episodes labelled. The report is built once (archive read, overview,
1500 zooms: every episode and every burst, CML-Io diagram, page). Then the review server
answers each kind of request 30 times (page, an image, the list of events and episodes
with their labels, one episode's history, a label POST to each of 30 events and to each
of 30 episodes, which labels their bursts) over loopback; the worst time of each kind is
reported.

    python -m benchmarks review
"""

from __future__ import annotations

import datetime as dt
import http.client
import json
import re
import tempfile
import time
from pathlib import Path
from zoneinfo import ZoneInfo

import numpy as np

from rxlog.archive.write import ArchiveWriter
from rxlog.review.night import night_starting
from rxlog.review.page import event_image_name
from rxlog.review.report import build_report
from rxlog.review.server import ReviewServer
from rxlog.spectrum import DynamicSpectrum, channel_grid
from rxlog.station.config import config_from_text
from rxlog.store import EventStore, make_event_id
from rxlog.timeutil import iso, parse_iso

N_EPISODES = 500
BURSTS_PER_EPISODE = 2
N_EVENTS = N_EPISODES * BURSTS_PER_EPISODE
N_LABELLED = 100
N_EPISODES_LABELLED = 50
N_CHAN = 1024
HOURS = 14
NIGHT = dt.date(2027, 2, 3)
TZ = "America/Toronto"
# The report's target: 0.12 s per zoom written, the rate of the former target of 60 s
# for a night of 500 events (500 zooms).
REPORT_S_PER_ZOOM = 60.0 / 500
REQUEST_TARGET_MS = 100.0
REPEAT = 30


def _config(root: Path):
    return config_from_text(f"""
[station]
name = "bench"
latitude_deg = 46.083
longitude_deg = -73.412
timezone = "{TZ}"

[spectra]
channels = {N_CHAN}
cadence_s = 1.0

[storage]
root = "data"
""", root / "station.toml")


def _events(t0: float, t1: float, rng) -> tuple[list[dict], list[dict]]:
    """(events, episodes): N_EPISODES episodes of BURSTS_PER_EPISODE bursts each."""
    starts = np.sort(rng.uniform(t0 + 600, t1 - 2400, N_EPISODES))
    kinds = rng.choice(["solar_iii", "jovian_l", "rfi", "unknown"], N_EPISODES, p=[0.3, 0.3, 0.3, 0.1])
    events, episodes = [], []
    for start, cls in zip(starts, kinds):
        dur = {"solar_iii": 8.0, "jovian_l": float(rng.uniform(60, 900)), "rfi": 30.0, "unknown": 20.0}[cls]
        f0 = float(rng.uniform(16.0, 20.0))
        f1 = min(24.0, f0 + float(rng.uniform(0.5, 6.0)))
        bursts = []
        for k in range(BURSTS_PER_EPISODE):
            peak = float(start + k * 1.5 * dur + dur / 2)
            ev = {"event_id": make_event_id("bench", peak, f0, f1), "station": "bench",
                  "start_utc": iso(peak - dur / 2), "end_utc": iso(peak + dur / 2), "peak_utc": iso(peak),
                  "fmin_mhz": f0, "fmax_mhz": f1, "peak_excess_db": 3.0, "snr": 10.0, "duration_s": dur,
                  "class": str(cls), "confidence": 0.7, "reason": "benchmark"}
            if cls == "jovian_l":
                ev.update(cml3_deg=float(rng.uniform(0, 360)), io_phase_deg=float(rng.uniform(0, 360)),
                          source_region="Io-B")
            bursts.append(ev)
        ep_id = "ep-" + bursts[0]["event_id"]
        for ev in bursts:
            ev["episode_id"] = ep_id
        events += bursts
        episodes.append({"episode_id": ep_id, "station": "bench", "class": str(cls),
                         "start_utc": bursts[0]["start_utc"], "end_utc": bursts[-1]["end_utc"],
                         "fmin_mhz": f0, "fmax_mhz": f1, "n_events": len(bursts), "peak_excess_db": 3.0})
    return events, episodes


def _write_archive(cfg, t0: float, events: list[dict], rng):
    freq = channel_grid(16.0, 24.0, N_CHAN)
    fmhz = freq / 1e6
    sky = (-25.5 * np.log10(freq / 20e6) - 60.0).astype(np.float32)
    with ArchiveWriter(cfg.archive_dir, cfg["station"], chunk_s=3600.0) as w:
        for h in range(HOURS):
            a = t0 + 3600 * h
            power = sky[None, :] + rng.normal(0.0, 0.11, (3600, N_CHAN)).astype(np.float32)
            for e in events:      # draw each event as a 2-dB box so zooms show something
                s = int(max(0, parse_iso(e["start_utc"]) - a))
                t = int(min(3600, parse_iso(e["end_utc"]) - a))
                if t > s:
                    band = (fmhz >= e["fmin_mhz"]) & (fmhz <= e["fmax_mhz"])
                    power[s:t, band] += 2.0
            w.write(DynamicSpectrum(power, a, 1.0, freq, segment="bench"))


def _timed(port: int, method: str, path: str, body: bytes | None = None, headers=None) -> float:
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=30)
    t = time.perf_counter()
    conn.request(method, path, body=body, headers={"Host": f"127.0.0.1:{port}", **(headers or {})})
    r = conn.getresponse()
    r.read()
    elapsed = time.perf_counter() - t
    conn.close()
    if r.status != 200:
        raise RuntimeError(f"{method} {path}: HTTP {r.status}")
    return elapsed


def run():
    rng = np.random.default_rng(5)
    with tempfile.TemporaryDirectory() as tmp:
        cfg = _config(Path(tmp))
        night = night_starting(cfg, NIGHT)
        t0 = dt.datetime.combine(NIGHT, dt.time(18), tzinfo=ZoneInfo(TZ)).timestamp()
        events, episodes = _events(t0, t0 + 3600 * HOURS, rng)
        _write_archive(cfg, t0, events, rng)
        store = EventStore(cfg.store_path)
        store.upsert_events(events)
        store.upsert_episodes(episodes)
        for e in events[:: N_EVENTS // N_LABELLED]:
            store.add_label(e["event_id"], "rfi", note="benchmark", who="bench")
        for ep in episodes[1:: N_EPISODES // N_EPISODES_LABELLED]:
            store.add_episode_label(ep["episode_id"], "jovian_l", note="benchmark", who="bench")
        store.close()

        t, cpu = time.perf_counter(), time.process_time()
        index = build_report(cfg, night)
        build_s, build_cpu_s = time.perf_counter() - t, time.process_time() - cpu
        n_zooms = len(list((index.parent / "events").glob("*.png")))
        want_zooms = N_EVENTS + N_EPISODES
        report_target_s = REPORT_S_PER_ZOOM * want_zooms

        srv = ReviewServer(cfg, night, port=0)
        srv.start_background()
        try:
            port = srv.port
            page = http.client.HTTPConnection("127.0.0.1", port)
            page.request("GET", "/", headers={"Host": f"127.0.0.1:{port}"})
            token = re.search(rb'name="rxlog-session" content="([^"]+)"', page.getresponse().read()).group(1).decode()
            page.close()
            ep_id = episodes[N_EPISODES // 2]["episode_id"]
            # A person labels each item once or twice: the POSTs go to REPEAT different events
            # and REPEAT different episodes.
            posts = iter([json.dumps({"event_id": e["event_id"], "label": "jovian_l", "note": "", "who": "bench"})
                          .encode() for e in events[3::N_EVENTS // REPEAT][:REPEAT]])
            episode_posts = iter([json.dumps({"episode_id": ep["episode_id"], "label": "solar_iii", "note": "",
                                              "who": "bench"}).encode()
                                  for ep in episodes[2::N_EPISODES // REPEAT][:REPEAT]])
            post_headers = {"Content-Type": "application/json", "X-Rxlog-Token": token,
                            "Origin": f"http://127.0.0.1:{port}"}
            kinds = {
                f"page ({N_EPISODES} episodes, {N_EVENTS} bursts)": ("GET", "/", None, None),
                "event image": ("GET", "/" + event_image_name(events[7]), None, None),
                "events and episodes with labels": ("GET", "/api/events", None, None),
                "episode label history": ("GET", f"/api/history?episode={ep_id}", None, None),
                "event label POST": ("POST", "/api/label", posts, post_headers),
                "episode label POST (its bursts follow)": ("POST", "/api/label", episode_posts, post_headers),
            }
            times = {k: sorted(_timed(port, m, path, next(body) if body in (posts, episode_posts) else body, h)
                               for _ in range(REPEAT))
                     for k, (m, path, body, h) in kinds.items()}
        finally:
            srv.shutdown()
            srv.server_close()

    rows = [(f"report, {N_EPISODES} episodes of {N_EVENTS} bursts, {HOURS} h x {N_CHAN} ch", build_s, "s",
             f"<= {report_target_s:g}", build_s <= report_target_s and n_zooms == want_zooms),
            ("  of which CPU time of this process", build_cpu_s, "s", "(machine shared: wall >= CPU)", True),
            ("zooms written (episodes and bursts)", n_zooms, "files", f"== {want_zooms}", n_zooms == want_zooms)]
    for name, ts in times.items():
        worst, median = 1000.0 * ts[-1], 1000.0 * ts[len(ts) // 2]
        rows.append((f"worst of {REPEAT}: {name}", worst, "ms", f"<= {REQUEST_TARGET_MS:g}", worst <= REQUEST_TARGET_MS))
        rows.append(("  median", median, "ms", "", True))
    return rows
