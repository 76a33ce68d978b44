"""`rxlog status`, `rxlog service` and the one-logger-per-storage-root rule, through the
command line; and the log format journald keeps (one line per message, level first)."""

import io
import logging
import signal
from pathlib import Path
from types import SimpleNamespace

import pytest
from click.testing import CliRunner
from service_helpers import Run, archive_rows, write_config

from rxlog.cli import main
from rxlog.station.journal import setup_logging
from rxlog.timeutil import parse_iso


def _rxlog(*args):
    """The command line in this process (click's test runner): stdout, stderr, exit status."""
    r = CliRunner().invoke(main, list(args))
    if r.exception and not isinstance(r.exception, SystemExit):
        raise r.exception
    return SimpleNamespace(returncode=r.exit_code, stdout=r.stdout, stderr=r.stderr)


def test_status_before_during_and_after_a_run(tmp_path):
    path = write_config(tmp_path)
    p = _rxlog("status", "--config", str(path))
    assert p.returncode == 0, p.stderr
    assert "logger: not running" in p.stdout and "no health rows yet" in p.stdout
    assert not (tmp_path / "store" / "events.sqlite").exists(), "status must not create the store"

    run = Run(path)
    try:
        run.wait_for("segment ", timeout=30)
        p = _rxlog("status", "--config", str(path))
        assert p.returncode == 0, p.stderr
        assert f"logger: running (pid {run.proc.pid}), up " in p.stdout and "1 start in the last 24 h" in p.stdout
        assert "receiver_state: streaming" in p.stdout and "latest health:" in p.stdout
        # a second logger on the same storage root is refused with a clear message
        second = _rxlog("run", "--config", str(path), "--duration", "5")
        assert second.returncode == 2
        assert f"another rxlog run (pid {run.proc.pid}) is logging here" in second.stderr
        assert "Traceback" not in second.stderr
        run.signal(signal.SIGTERM)
        assert run.wait(10) == 0
    finally:
        run.kill()
    store = tmp_path / "store" / "events.sqlite"
    sidecars = lambda: sorted(x.name for x in store.parent.glob("events.sqlite-*"))  # noqa: E731
    before = sidecars()
    p = _rxlog("status", "--config", str(path))
    assert p.returncode == 0
    assert "logger: not running" in p.stdout and "note: logger stopped: SIGTERM" in p.stdout
    # the morning questions, one line each
    last = next(ln for ln in p.stdout.splitlines() if ln.startswith("last archived spectrum: "))
    when, _, file = last.removeprefix("last archived spectrum: ").partition(" in ")
    got = archive_rows(tmp_path / "store" / "archive")
    assert parse_iso(when) == pytest.approx(max(s.t_end for s in got.segments), abs=1e-3)
    assert Path(file).is_file() and Path(file).is_relative_to(tmp_path / "store" / "archive")
    assert "last event: " in p.stdout
    assert "dropped in the last 24 h: 0 samples, 0 spectra; 0 spectra not archived" in p.stdout
    assert "days left unknown" in p.stdout                  # seconds of archive, not six hours
    # read-only: no SQLite -wal/-shm files appear (as root they would lock the service user out)
    assert sidecars() == before


def test_status_with_a_bad_config_exits_2(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text('[station]\nname = "x"\nlatitude_deg = 123\nlongitude_deg = 0\n')
    p = _rxlog("status", "--config", str(bad))
    assert p.returncode == 2 and "latitude_deg" in p.stderr and "Traceback" not in p.stderr


def test_service_command_writes_the_units(tmp_path):
    path = write_config(tmp_path)
    out = tmp_path / "units"
    p = _rxlog("service", "--config", str(path), "--out", str(out))
    assert p.returncode == 0, p.stderr
    names = sorted(x.name for x in out.iterdir())
    assert names == ["60-rxlog-rtlsdr.rules", "rxlog-review.service", "rxlog-review.timer", "rxlog.service"]
    assert sorted(line.rsplit("/", 1)[-1] for line in p.stdout.split()) == names
    printed = _rxlog("service", "--config", str(path))
    assert (out / "rxlog.service").read_text() in printed.stdout


def _log_lines(monkeypatch, journal: bool):
    if journal:
        monkeypatch.setenv("JOURNAL_STREAM", "8:12345")
    else:
        monkeypatch.delenv("JOURNAL_STREAM", raising=False)
    buf = io.StringIO()
    setup_logging("info", stream=buf)
    log = logging.getLogger("rxlog")
    log.debug("not shown at info")
    log.warning("disk nearly full:\n3.2 MB left")
    try:
        raise OSError("no space left on device")
    except OSError:
        log.error("archive write failed", exc_info=True)
    return buf.getvalue().splitlines()


def test_log_lines_are_one_per_message_level_first(monkeypatch):
    lines = _log_lines(monkeypatch, journal=False)
    assert len(lines) == 2
    assert lines[0] == "WARNING disk nearly full: | 3.2 MB left"
    assert lines[1].startswith("ERROR archive write failed | Traceback") and "no space left" in lines[1]


def test_under_systemd_lines_carry_sd_daemon_priorities(monkeypatch):
    # sd-daemon(3): "<4>" warning, "<3>" error, read by journald from a service's stderr
    lines = _log_lines(monkeypatch, journal=True)
    assert lines[0].startswith("<4>WARNING ") and lines[1].startswith("<3>ERROR ")
