"""SIGTERM and SIGINT stop `rxlog run` cleanly: the chunk in progress reaches disk, a last
health row says why it stopped, and the process exits with status 0 within 5 s; so does
the end of `--duration`. The three runs go side by side, each on its own storage root."""

import signal
import time

from service_helpers import (
    NARROW_IQ,
    Run,
    archive_rows,
    health_rows,
    integrity,
    write_config,
)

from rxlog.station.config import load_config

# The spectral feed hands out a chunk once its last row has passed (1 s), and a flush
# happens every chunk_s (1 s): data older than that must be on disk at the stop.
MAX_UNFLUSHED_S = 2.5


def _check_stopped(cfg, run, t_sig, reason):
    assert f"stopping: {reason}" in run.stderr
    got = archive_rows(cfg.archive_dir)
    assert got.segments, "nothing archived"
    last_end = max(s.t_end for s in got.segments)
    assert t_sig - last_end <= MAX_UNFLUSHED_S, f"last {t_sig - last_end:.2f} s before the stop not archived"
    rows = health_rows(cfg.store_path)
    assert rows[-1]["note"] == f"logger stopped: {reason}" and rows[-1]["receiver_state"] == "stopped"
    assert integrity(cfg.store_path) == "ok"
    assert not list(cfg.archive_dir.rglob("*.tmp")), "temporary files left behind"


def test_sigterm_sigint_and_duration_stop_cleanly(tmp_path):
    cases = {"SIGTERM": NARROW_IQ, "SIGINT": {}, "duration": {}}     # SIGTERM through the IQ path
    cfgs, runs = {}, {}
    for name, feed in cases.items():
        (tmp_path / name).mkdir()
        path = write_config(tmp_path / name, **feed)
        cfgs[name] = load_config(path)
        runs[name] = Run(path, *(["--duration", "6"] if name == "duration" else []))
    try:
        sent = {}
        for name in ("SIGTERM", "SIGINT"):
            runs[name].wait_for("segment ", timeout=40)
        time.sleep(2.0)                                   # a few chunks in, one in progress
        for name in ("SIGTERM", "SIGINT"):
            sent[name] = runs[name].signal(getattr(signal, name))
        for name in ("SIGTERM", "SIGINT"):
            assert runs[name].wait(timeout=10) == 0, runs[name].stderr
            took = time.time() - sent[name]
            assert took <= 5.0, f"{name}: stop took {took:.1f} s"
        assert runs["duration"].wait(timeout=40) == 0, runs["duration"].stderr
    finally:
        for r in runs.values():
            r.kill()
    for name in ("SIGTERM", "SIGINT"):
        _check_stopped(cfgs[name], runs[name], sent[name], name)
    _check_stopped(cfgs["duration"], runs["duration"], runs["duration"].seen_at("stopping: duration reached"),
                   "duration reached")
    out = runs["duration"].proc.stdout.read()
    assert out.startswith("stopped (duration reached):"), out
    assert "INFO logging station faulty" in runs["duration"].stderr
