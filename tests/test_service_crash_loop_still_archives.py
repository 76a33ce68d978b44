"""A logger that crashes and is restarted sooner than `chunk_s` (a crash loop) still
leaves data: the first flush of a run comes a few seconds after its first spectra, and a
health row says so. Here each run is SIGKILLed a few seconds in, with chunk_s = 60 s
and health rows only every 60 s."""

import signal
import time

from service_helpers import Run, archive_rows, health_rows, integrity, write_config

from rxlog.station.config import load_config

RUNS = 2
KILL_AFTER_S = 4.5        # after the first spectra: the first flush is due 2 s in (FIRST_FLUSH_S)


def test_runs_killed_seconds_after_start_leave_spectra_and_a_health_row(tmp_path):
    path = write_config(tmp_path, chunk_s=60, health_s=60)
    cfg = load_config(path)
    runs = []                          # (pid, run tag)
    for _ in range(RUNS):
        run = Run(path)
        try:
            run.wait_for("segment ")
            time.sleep(KILL_AFTER_S)
            run.signal(signal.SIGKILL)
            assert run.wait(10) == -signal.SIGKILL
        finally:
            run.kill()
        first = next(ln for ln in run.lines if "segment " in ln)
        runs.append((run.proc.pid, first.split("segment ")[1].split(".")[0]))

    got = archive_rows(cfg.archive_dir)
    rows = health_rows(cfg.store_path)
    for pid, tag in runs:
        archived = sum(s.n_time for s in got.segments if s.segment.startswith(tag + "."))
        assert archived > 0, f"run {tag} (pid {pid}) left no spectra"
        said = [r for r in rows if r["pid"] == pid and r["note"].startswith("first spectra archived")]
        assert len(said) == 1 and 0 < said[0]["spectra_archived"] <= archived, (said, archived)
    assert integrity(cfg.store_path) == "ok"
