"""Morning review: time to write a night's report with 500 events, and the review page's
answer time per request.

The night: 14 hours of archived spectra (18:00 to 08:00 local) at 1024 channels and 1 s
cadence — radiometer noise of 0.11 dB on a background falling with frequency — and 500
events spread over it (Type III bursts of seconds, Jovian L-burst stretches of minutes,
interference), put in the event store as detection would; 100 of them labelled. The
report is built once (archive read, overview, 500 zooms, CML-Io diagram, page). Then the
review server answers each kind of request 30 times (page, an image, the event list,
one history, a label POST to each of 30 events) over loopback; the worst time of each
kind is reported.

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

N_EVENTS = 500
N_LABELLED = 100
N_CHAN = 1024
HOURS = 14
NIGHT = dt.date(2027, 2, 3)
TZ = "America/Toronto"
REPORT_TARGET_S = 60.0
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


def _events(t0: float, t1: float, rng) -> list[dict]:
    peaks = np.sort(rng.uniform(t0 + 600, t1 - 2400, N_EVENTS))
    kinds = rng.choice(["solar_iii", "jovian_l", "rfi", "unknown"], N_EVENTS, p=[0.3, 0.3, 0.3, 0.1])
    out = []
    for peak, cls in zip(peaks, kinds):
        dur = {"solar_iii": 8.0, "jovian_l": float(rng.uniform(60, 1800)), "rfi": 30.0, "unknown": 20.0}[cls]
        f0 = float(rng.uniform(16.0, 20.0))
        f1 = min(24.0, f0 + float(rng.uniform(0.5, 6.0)))
        ev = {"event_id": make_event_id("bench", peak, f0, f1), "station": "bench",
              "start_utc": iso(peak - dur / 2), "end_utc": iso(peak + dur / 2), "peak_utc": iso(peak),
              "fmin_mhz": f0, "fmax_mhz": f1, "peak_excess_db": 3.0, "snr": 10.0, "duration_s": dur,
              "class": str(cls), "confidence": 0.7, "reason": "benchmark"}
        if cls == "jovian_l":
            ev.update(cml3_deg=float(rng.uniform(0, 360)), io_phase_deg=float(rng.uniform(0, 360)))
        out.append(ev)
    return out


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
        events = _events(t0, t0 + 3600 * HOURS, rng)
        _write_archive(cfg, t0, events, rng)
        store = EventStore(cfg.store_path)
        store.upsert_events(events)
        for e in events[:: N_EVENTS // N_LABELLED]:
            store.add_label(e["event_id"], "rfi", note="benchmark", who="bench")
        store.close()

        t, cpu = time.perf_counter(), time.process_time()
        index = build_report(cfg, night)
        build_s, build_cpu_s = time.perf_counter() - t, time.process_time() - cpu
        n_zooms = len(list((index.parent / "events").glob("*.png")))

        srv = ReviewServer(cfg, night, port=0)
        srv.start_background()
        try:
            port = srv.port
            page = http.client.HTTPConnection("127.0.0.1", port)
            page.request("GET", "/", headers={"Host": f"127.0.0.1:{port}"})
            token = re.search(rb'name="rxlog-session" content="([^"]+)"', page.getresponse().read()).group(1).decode()
            page.close()
            eid = events[N_EVENTS // 2]["event_id"]
            # A person labels each event once or twice: the POSTs go to REPEAT different events.
            posts = iter([json.dumps({"event_id": e["event_id"], "label": "jovian_l", "note": "", "who": "bench"})
                          .encode() for e in events[1::N_EVENTS // REPEAT][:REPEAT]])
            kinds = {
                "page (500 cards)": ("GET", "/", None, None),
                "event image": ("GET", "/" + event_image_name(events[7]), None, None),
                "event list with labels": ("GET", "/api/events", None, None),
                "label history": ("GET", f"/api/history?event={eid}", None, None),
                "label POST": ("POST", "/api/label", posts, {"Content-Type": "application/json",
                                                             "X-Rxlog-Token": token,
                                                             "Origin": f"http://127.0.0.1:{port}"}),
            }
            times = {k: sorted(_timed(port, m, path, next(body) if body is posts else body, h) for _ in range(REPEAT))
                     for k, (m, path, body, h) in kinds.items()}
        finally:
            srv.shutdown()
            srv.server_close()

    rows = [(f"report, {N_EVENTS} events, {HOURS} h x {N_CHAN} ch", build_s, "s", f"<= {REPORT_TARGET_S:g}",
             build_s <= REPORT_TARGET_S and n_zooms == N_EVENTS),
            ("  of which CPU time of this process", build_cpu_s, "s", "(machine shared: wall >= CPU)", True),
            ("zooms written", n_zooms, "files", f"== {N_EVENTS}", n_zooms == N_EVENTS)]
    for name, ts in times.items():
        worst, median = 1000.0 * ts[-1], 1000.0 * ts[len(ts) // 2]
        rows.append((f"worst of {REPEAT}: {name}", worst, "ms", f"<= {REQUEST_TARGET_MS:g}", worst <= REQUEST_TARGET_MS))
        rows.append(("  median", median, "ms", "", True))
    return rows
