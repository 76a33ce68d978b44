"""A nearly full disk, on a small filesystem the test mounts itself (tmpfs): the logger
stops archiving raw spectra, keeps recording events and health, warns once, survives the
disk filling up completely (health rows are held until the event store takes them again),
and resumes archiving once space is back — without a restart, and with one more warning."""

import os
import signal
import subprocess
import time

import pytest
from service_helpers import (
    Run,
    archive_rows,
    health_rows,
    integrity,
    open_every_fits,
    write_config,
)

from rxlog.station.config import load_config
from rxlog.timeutil import parse_iso

SIZE_MB = 16
MIN_FREE_MB = 6


@pytest.fixture
def small_fs(tmp_path):
    mnt = tmp_path / "small"
    mnt.mkdir()
    p = subprocess.run(["mount", "-t", "tmpfs", "-o", f"size={SIZE_MB}m", "tmpfs", str(mnt)],
                       capture_output=True, text=True)
    if p.returncode != 0:
        if os.environ.get("CI"):
            pytest.fail(f"cannot mount a tmpfs in CI: {p.stderr.strip()}")
        pytest.skip(f"mounting a tmpfs is not permitted here (needs root): {p.stderr.strip()}")
    try:
        yield mnt
    finally:
        subprocess.run(["umount", "-l", str(mnt)], capture_output=True)


def _free_mb(path):
    st = os.statvfs(path)
    return st.f_bavail * st.f_frsize / 1e6


def _fill(path, leave_mb):
    """Grow a ballast file until only ``leave_mb`` is free (0: until the disk is full)."""
    with open(path, "ab", buffering=0) as f:         # unbuffered: nothing left to flush at close
        block = b"\0" * 65536
        try:
            while _free_mb(path.parent) > leave_mb:
                f.write(block)
        except OSError:
            pass


def _archived_rows(cfg):
    return sum(s.n_time for s in archive_rows(cfg.archive_dir).segments)


def test_disk_nearly_full_pauses_raw_spectra_then_resumes(tmp_path, small_fs):
    path = write_config(tmp_path, root=small_fs / "store", disk_min=MIN_FREE_MB)
    cfg = load_config(path)
    ballast = small_fs / "ballast.bin"
    run = Run(path)
    try:
        run.wait_for("segment ")
        time.sleep(1.0)
        _fill(ballast, MIN_FREE_MB - 2)
        t_pause = run.wait_for("WARNING raw spectra paused", timeout=10)
        time.sleep(1.5)                      # an in-flight chunk may still land
        rows_at_pause = _archived_rows(cfg)
        time.sleep(1.5)
        assert _archived_rows(cfg) == rows_at_pause, "raw spectra still archived below the threshold"
        paused = [h for h in health_rows(cfg.store_path) if h["raw_archiving"] == "paused"]
        assert len(paused) >= 3 and sum(h["spectra_not_archived"] for h in paused) > 0
        assert all(h["spectra_received"] is not None for h in paused)

        # Completely full: SQLite and FITS writes fail; the logger must keep running.
        _fill(ballast, 0)
        t_full = time.time()
        time.sleep(2.0)
        assert run.proc.poll() is None, run.stderr

        t_free = time.time()
        ballast.unlink()
        t_resume = run.wait_for("WARNING raw spectra resumed", timeout=15)
        time.sleep(2.5)
        assert run.proc.poll() is None
        t_sig = run.signal(signal.SIGTERM)
        assert run.wait(10) == 0, run.stderr
    finally:
        run.kill()
    assert time.time() - t_sig < 5.5
    got = archive_rows(cfg.archive_dir)
    assert max(s.t_end for s in got.segments) > t_resume + 1.0, "archiving did not resume"
    # Health went on through the full disk: rows before, during and after the pause.
    t = [parse_iso(h["time_utc"]) for h in health_rows(cfg.store_path)]
    assert any(t_pause < x < t_resume for x in t) and any(x > t_resume for x in t)
    # ... also while the disk was completely full: those rows waited in memory.
    assert sum(t_full < x < t_free for x in t) >= 2
    # One warning when raw spectra paused and one when they resumed, not one per retry.
    warnings = [ln for ln in run.lines if ln.startswith("WARNING")]
    assert len(warnings) == 2, "\n".join(warnings[:20])
    assert warnings[0].startswith("WARNING raw spectra paused")
    assert warnings[1].startswith("WARNING raw spectra resumed")
    assert integrity(cfg.store_path) == "ok"
    assert open_every_fits(cfg.archive_dir) >= 1
    assert "Traceback" not in run.stderr
