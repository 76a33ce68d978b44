"""SIGTERM and SIGINT stop `rxlog run` cleanly: the chunk in progress reaches disk, a last
health row says why it stopped, and the process exits with status 0 within 5 s."""

import signal
import time

import pytest

from rxlog.config import load_config
from service_helpers import NARROW_IQ, Run, archive_rows, health_rows, integrity, write_config

# The spectral feed hands out a chunk once its last row has passed (1 s), and a flush
# happens every chunk_s (1 s): data older than that must be on disk at the stop.
MAX_UNFLUSHED_S = 2.5


@pytest.mark.parametrize("sig, feed", [(signal.SIGTERM, NARROW_IQ), (signal.SIGINT, {})],
                         ids=["SIGTERM-iq", "SIGINT-spectra"])
def test_signal_flushes_and_exits_zero_within_5_s(tmp_path, sig, feed):
    path = write_config(tmp_path, **feed)
    cfg = load_config(path)
    run = Run(path)
    try:
        run.wait_for("segment ")
        time.sleep(2.5)                           # a few chunks in, one in progress
        t_sig = run.signal(sig)
        rc = run.wait(timeout=10)
        took = time.time() - t_sig
    finally:
        run.kill()
    assert rc == 0, run.stderr
    assert took <= 5.0, f"stop took {took:.1f} s"
    assert f"stopping: {sig.name}" in run.stderr
    got = archive_rows(cfg.archive_dir)
    assert got.segments, "nothing archived"
    last_end = max(s.t_end for s in got.segments)
    assert t_sig - last_end <= MAX_UNFLUSHED_S, f"last {t_sig - last_end:.2f} s before the signal not archived"
    rows = health_rows(cfg.store_path)
    assert rows[-1]["note"] == f"logger stopped: {sig.name}" and rows[-1]["receiver_state"] == "stopped"
    assert integrity(cfg.store_path) == "ok"
    assert not list(cfg.archive_dir.rglob("*.tmp")), "temporary files left behind"


def test_duration_ends_the_run_with_status_zero(tmp_path):
    path = write_config(tmp_path)
    run = Run(path, "--duration", "3")
    try:
        rc = run.wait(timeout=30)
    finally:
        run.kill()
    assert rc == 0, run.stderr
    out = run.proc.stdout.read()
    assert out.startswith("stopped (duration reached):"), out
    assert "INFO logging station faulty" in run.stderr
