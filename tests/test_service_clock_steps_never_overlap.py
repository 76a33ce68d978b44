"""Steps of the wall clock (NTP corrections) are detected by comparing CLOCK_REALTIME
with CLOCK_MONOTONIC, recorded in the health table, start a new segment, and never
leave overlapping or negative-length data in the archive or the segments table.

The host clock cannot be stepped by a test, so `rxlog run` is given a fake wall clock
($RXLOG_FAKE_CLOCK_STEPS: after_s:delta_s) that the logger and its feed both read."""

import math
import signal
import sqlite3
import time

from service_helpers import Run, archive_rows, health_rows, integrity, write_config

from rxlog.station.config import load_config
from rxlog.timeutil import parse_iso

FORWARD, BACK = 3.0, -2.0


def test_forward_and_backward_steps(tmp_path):
    path = write_config(tmp_path)
    cfg = load_config(path)
    # Steps 7 s and 9 s after the logger's clock starts (spectra flow by then); 9 - 7 = -BACK,
    # so the wall clock repeats the time of the first step: health rows must not collide.
    run = Run(path, env={"RXLOG_FAKE_CLOCK_STEPS": f"7:{FORWARD:+g},9:{BACK:+g}"})
    try:
        run.wait_for("segment ")
        run.wait_for(f"clock step {FORWARD:+.3f} s", timeout=20)
        run.wait_for(f"clock step {BACK:+.3f} s", timeout=20)
        # after a step back, rows are dropped until time passes the last row written
        time.sleep(abs(BACK) + 2.0)
        run.signal(signal.SIGTERM)
        assert run.wait(10) == 0, run.stderr
    finally:
        run.kill()

    health = health_rows(cfg.store_path)
    steps = [h for h in health if h["note"].startswith("clock step")]
    assert [round(h["clock_step_s"], 2) for h in steps] == [FORWARD, BACK], (
        [(h["time_utc"], h["note"]) for h in health], run.stderr)
    assert sum(h["spectra_dropped"] or 0 for h in health_rows(cfg.store_path)) > 0

    got = archive_rows(cfg.archive_dir)
    segs = sorted(got.segments, key=lambda s: s.t0)
    assert all(s.n_time > 0 and s.t_end > s.t0 for s in segs)
    for a, b in zip(segs, segs[1:]):
        assert b.t0 >= a.t_end - 1e-6, f"{b.segment} starts {a.t_end - b.t0:.3f} s inside {a.segment}"
    names = [s.segment for s in segs]
    # a new segment after each step, in order, each with data
    assert [n.rsplit(".", 1)[-1] if n.endswith((".c1", ".c2")) else "c0" for n in names][-3:] == ["c0", "c1", "c2"]
    # the forward step shows as a gap of about its size (plus at most one cadence of slack)
    c0 = next(s for s in segs if not s.segment.endswith((".c1", ".c2")))
    c1 = next(s for s in segs if s.segment.endswith(".c1"))
    assert math.isclose(c1.t0 - c0.t_end, FORWARD, abs_tol=1.0)

    conn = sqlite3.connect(str(cfg.store_path))
    rows = conn.execute("select segment_id, start_utc, end_utc from segments order by start_utc").fetchall()
    conn.close()
    spans = [(parse_iso(a), parse_iso(b)) for _, a, b in rows]
    assert len(rows) == 3 and all(b > a for a, b in spans)
    assert all(s1[0] >= s0[1] - 1e-3 for s0, s1 in zip(spans, spans[1:]))
    assert integrity(cfg.store_path) == "ok"
