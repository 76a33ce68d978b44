"""SIGKILL (a power cut, as far as the process can tell) at random moments, ten times:
each restart recovers by itself, every archive file opens, the event store passes
PRAGMA integrity_check, and no kill loses more than one chunk of spectra (the bound for
the logger is 60 s; with chunk_s = 1 s the loss must stay within a couple of seconds)."""

import random
import signal
import time

from service_helpers import (
    Run,
    archive_rows,
    health_rows,
    integrity,
    open_every_fits,
    write_config,
)

from rxlog.archive.write import ArchiveWriter
from rxlog.station.config import load_config
from rxlog.timeutil import parse_iso

KILLS = 10
EARLY = 3                 # kills at a random moment of start-up (store, archive recovery, sky model)
# chunk_s (1 s) + the spectral feed's hand-out latency (1 s) + scheduling slack
MAX_LOSS_S = 3.5


def test_ten_sigkills_at_random_moments(tmp_path):
    path = write_config(tmp_path)
    cfg = load_config(path)
    rng = random.Random(20261201)
    kills = []                       # (run tag, kill wall time, time of its first spectra or None)
    for k in range(KILLS):
        run = Run(path)
        try:
            if k < EARLY:
                time.sleep(rng.uniform(0.2, 2.5))
            else:
                run.wait_for("segment ")
                time.sleep(rng.uniform(0.0, 1.5))
            t_kill = run.signal(signal.SIGKILL)
            assert run.wait(10) == -signal.SIGKILL
        finally:
            run.kill()
        assert "Traceback" not in run.stderr, run.stderr
        first = next((ln for ln in run.lines if "segment " in ln), None)
        if first is None:
            kills.append((None, t_kill, None))
            continue
        # "INFO segment <run tag>.<feed segment>: spectra from <ISO time>, ..."
        tag = first.split("segment ")[1].split(".")[0]
        kills.append((tag, t_kill, parse_iso(first.split("spectra from ")[1].split(",")[0])))

    # What a restart does first: the archive recovers what the last kill left behind.
    ArchiveWriter(cfg.archive_dir, cfg["station"]).close()

    assert integrity(cfg.store_path) == "ok"
    assert open_every_fits(cfg.archive_dir) >= 1
    assert not list(cfg.archive_dir.rglob("*.tmp")), "temporary files left behind"
    got = archive_rows(cfg.archive_dir)
    by_run: dict[str, float] = {}
    for seg in got.segments:
        tag = seg.segment.split(".")[0]
        by_run[tag] = max(by_run.get(tag, 0.0), seg.t_end)
    # Rows never overlap, across all the restarts.
    spans = sorted((s.t0, s.t_end) for s in got.segments)
    assert all(b0 >= a1 - 1e-6 for (_, a1), (b0, _) in zip(spans, spans[1:]))

    checked = 0
    for tag, t_kill, first in kills:
        if first is None:
            continue
        # killed before its first flush, a run loses everything since its first spectra
        loss = t_kill - by_run.get(tag, first)
        assert loss <= MAX_LOSS_S, f"run {tag}: {loss:.2f} s before the kill never reached the archive"
        checked += 1
    assert checked >= KILLS - EARLY
    # Every run that got as far as archiving wrote its own health rows: the store kept working.
    started = sum(r["note"] == "logger started" for r in health_rows(cfg.store_path))
    assert checked <= started <= KILLS
