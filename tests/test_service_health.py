"""Health probes: clock-sync parsing against the tools' documented output, CPU and disk
figures against psutil and statvfs, and the run lock across real processes."""

import os
import signal
import subprocess
import sys
import textwrap
import time

import psutil
import pytest

from rxlog.station import health as hl

# `timedatectl show` prints KEY=VALUE properties (systemd's timedatectl(1); property names
# as printed by systemd 252 on Debian 12).
TIMEDATECTL_SHOW = """Timezone=Europe/Zurich
LocalRTC=no
CanNTP=yes
NTP=yes
NTPSynchronized={sync}
TimeUSec=Tue 2026-12-01 22:10:00 CET
RTCTimeUSec=Tue 2026-12-01 22:10:00 CET
"""

# `chronyc tracking` layout as in the chronyc(1) manual's example (from memory).
CHRONYC_TRACKING = """Reference ID    : CB00710F (ntp1.example.net)
Stratum         : 3
Ref time (UTC)  : Fri Jan 27 09:49:17 2017
System time     : 0.000006523 seconds slow of NTP time
Last offset     : -0.000006747 seconds
RMS offset      : 0.000035822 seconds
Frequency       : 3.225 ppm slow
Residual freq   : -0.000 ppm
Skew            : 0.129 ppm
Root delay      : 0.013639022 seconds
Root dispersion : 0.001100737 seconds
Update interval : 64.2 seconds
Leap status     : {leap}
"""


@pytest.mark.parametrize("sync, state", [("yes", hl.SYNCED), ("no", hl.UNSYNCED)])
def test_parse_timedatectl_show(sync, state):
    assert hl.parse_timedatectl(TIMEDATECTL_SHOW.format(sync=sync)) == state


@pytest.mark.parametrize("leap, state", [("Normal", hl.SYNCED), ("Insert second", hl.SYNCED),
                                         ("Not synchronised", hl.UNSYNCED)])
def test_parse_chronyc_tracking(leap, state):
    assert hl.parse_chronyc_tracking(CHRONYC_TRACKING.format(leap=leap)) == state


def _fake_tool(folder, name, text, rc=0):
    p = folder / name
    p.write_text(f"#!/bin/sh\n/bin/cat <<'END'\n{text}END\nexit {rc}\n")
    p.chmod(0o755)


def test_clock_sync_state_runs_the_tools_on_path(tmp_path, monkeypatch):
    bin_ = tmp_path / "bin"
    bin_.mkdir()
    monkeypatch.setenv("PATH", str(bin_))
    assert hl.clock_sync_state() == hl.UNKNOWN          # neither tool present
    _fake_tool(bin_, "chronyc", CHRONYC_TRACKING.format(leap="Not synchronised"))
    assert hl.clock_sync_state() == hl.UNSYNCED          # chrony only
    # timedatectl failing (no systemd as PID 1, as in a container) falls back to chrony
    _fake_tool(bin_, "timedatectl", "", rc=1)
    assert hl.clock_sync_state() == hl.UNSYNCED
    _fake_tool(bin_, "timedatectl", TIMEDATECTL_SHOW.format(sync="yes"))
    assert hl.clock_sync_state() == hl.SYNCED


def test_cpu_meter_agrees_with_psutil():
    meter = hl.CpuMeter()
    p = psutil.Process()
    p.cpu_percent()
    t_end = time.monotonic() + 0.5
    x = 0
    while time.monotonic() < t_end:
        x += 1
    ours, theirs = meter.percent(), p.cpu_percent()
    assert ours > 50 and abs(ours - theirs) < 20


def test_disk_free_matches_statvfs_and_walks_up_to_an_existing_parent(tmp_path):
    st = os.statvfs(tmp_path)
    expected = st.f_bavail * st.f_frsize / 1e6
    assert abs(hl.disk_free_mb(tmp_path / "not" / "yet") - expected) < 50


def test_rss_agrees_with_psutil():
    assert abs(hl.rss_mb() - psutil.Process().memory_info().rss / 1e6) < 5


HOLDER = textwrap.dedent("""
    import sys, time
    from rxlog.station.health import RunLock
    lock = RunLock(sys.argv[1])
    print("held" if lock.acquire() else "busy", flush=True)
    time.sleep(60)
""")


def test_run_lock_is_exclusive_and_survives_sigkill_of_its_holder(tmp_path):
    root = tmp_path / "store"
    holder = subprocess.Popen([sys.executable, "-c", HOLDER, str(root)], stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "held"
        assert hl.running_logger(root) == holder.pid
        assert hl.RunLock(root).acquire(wait_s=0.2) is False
        holder.send_signal(signal.SIGKILL)
        holder.wait(10)
        # the lock file stays behind, but the kernel dropped the lock with the process
        assert (root / hl.LOCK_NAME).exists()
        assert hl.running_logger(root) is None
        lock = hl.RunLock(root)
        assert lock.acquire()
        lock.release()
    finally:
        holder.kill()
        holder.wait()
        holder.stdout.close()


def test_running_logger_without_lock_file(tmp_path):
    assert hl.running_logger(tmp_path / "nothing") is None
