"""systemd units rendered for a station config, checked by systemd's own verifier.

`systemd-analyze verify` (Debian's systemd package; .ci/run installs it) parses each
unit as systemd would and complains about unknown settings, bad values and missing
executables; it exits 0 even for some of those warnings, so any output counts as failure.
"""

import datetime as dt
import re
import shutil
import subprocess
import sys
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest

from rxlog.errors import RxlogError
from rxlog.station.config import config_from_text
from rxlog.station.units import default_units, units_for_config, write_units

REPO = Path(__file__).resolve().parents[1]
ANALYZE = shutil.which("systemd-analyze")
needs_analyze = pytest.mark.skipif(ANALYZE is None, reason="systemd-analyze not installed (.ci/run installs systemd)")

CONFIG = """
[station]
name = "test-site"
latitude_deg = 47.5
longitude_deg = 8.7
timezone = "Europe/Zurich"
[storage]
root = "{root}"
[service]
user = "radiolog"
watchdog_s = 90
review_time = "06:45"
"""


@pytest.fixture
def cfg(tmp_path):
    return config_from_text(CONFIG.format(root=tmp_path / "store"), tmp_path / "station.toml")


def _verify(paths):
    p = subprocess.run([ANALYZE, "verify", "--man=no", *map(str, paths)], capture_output=True, text=True,
                       timeout=60)
    return p.returncode, (p.stdout + p.stderr).strip()


@needs_analyze
def test_rendered_units_pass_systemd_analyze_verify(cfg, tmp_path):
    paths = write_units(units_for_config(cfg), tmp_path / "units")
    units = [p for p in paths if p.suffix in (".service", ".timer")]
    assert len(units) == 3
    rc, out = _verify(units)
    assert rc == 0 and out == "", out


@needs_analyze
def test_verifier_notices_a_broken_unit(cfg, tmp_path):
    # The check above means something only if the verifier speaks up on a bad unit.
    units = units_for_config(cfg)
    units["rxlog.service"] = units["rxlog.service"].replace("Type=notify", "Type=notifyy")
    paths = write_units(units, tmp_path / "units")
    rc, out = _verify([p for p in paths if p.name == "rxlog.service"])
    assert "notifyy" in out


def _settings(text):
    out = {}
    for line in text.splitlines():
        m = re.match(r"^([A-Za-z]+)=(.*)$", line)
        if m:
            out.setdefault(m.group(1), []).append(m.group(2))
    return out


def test_service_unit_carries_the_config(cfg):
    s = _settings(units_for_config(cfg)["rxlog.service"])
    storage = str(cfg.storage_root.resolve())
    assert s["Type"] == ["notify"] and s["WatchdogSec"] == ["90s"] and s["Restart"] == ["on-failure"]
    assert s["User"] == ["radiolog"] and s["NoNewPrivileges"] == ["yes"] and s["PrivateTmp"] == ["yes"]
    assert s["ProtectSystem"] == ["strict"] and s["ReadWritePaths"] == [storage]
    assert s["ExecStart"] == [f"{sys.executable} -m rxlog run --config {cfg.path}"]


def test_timer_fires_at_review_time_in_station_zone(cfg):
    s = _settings(units_for_config(cfg)["rxlog-review.timer"])
    assert s["OnCalendar"] == ["*-*-* 06:45:00 Europe/Zurich"] and s["Persistent"] == ["true"]
    r = _settings(units_for_config(cfg)["rxlog-review.service"])
    assert r["User"] == ["radiolog"]


def test_review_runs_on_the_night_that_began_yesterday_in_station_time(cfg):
    # systemd.service(5): '$$' is a literal '$', '%%' a literal '%'; the single-quoted
    # argument goes to /bin/sh -c. Run that shell line with `echo` in place of rxlog.
    exec_start = _settings(units_for_config(cfg)["rxlog-review.service"])["ExecStart"][0]
    prefix = "/bin/sh -c '"
    assert exec_start.startswith(prefix) and exec_start.endswith("'")
    line = exec_start[len(prefix):-1].replace("$$", "$").replace("%%", "%")
    head = f"exec {sys.executable} -m rxlog review"
    assert line.startswith(head)
    out = subprocess.run(["/bin/sh", "-c", "echo" + line[len(head):]], capture_output=True, text=True,
                         timeout=10).stdout.split()
    yesterday = (dt.datetime.now(ZoneInfo("Europe/Zurich")) - dt.timedelta(days=1)).date().isoformat()
    assert out == ["--config", str(cfg.path), "--night", yesterday]


@needs_analyze
def test_timer_calendar_is_understood_by_systemd(cfg):
    # systemd-analyze calendar normalises a calendar event and prints its next elapse.
    on = _settings(units_for_config(cfg)["rxlog-review.timer"])["OnCalendar"][0]
    p = subprocess.run([ANALYZE, "calendar", on], capture_output=True, text=True, timeout=30)
    assert p.returncode == 0 and "Next elapse" in p.stdout, p.stderr


def test_udev_rule_grants_the_service_group_rtl2832u_devices(cfg):
    rule = units_for_config(cfg)["60-rxlog-rtlsdr.rules"]
    lines = [ln for ln in rule.splitlines() if ln and not ln.startswith("#")]
    assert lines
    for ln in lines:
        # udev(7): match keys use '==', assignments '='; comma-separated KEY op "value".
        pairs = re.findall(r'([A-Z]+(?:\{\w+\})?)(==|=)"([^"]*)"', ln)
        assert ", ".join(f'{k}{op}"{v}"' for k, op, v in pairs) == ln
        d = {k: v for k, _, v in pairs}
        assert d["SUBSYSTEM"] == "usb" and d["ATTRS{idVendor}"] == "0bda"
        assert d["GROUP"] == "radiolog" and d["MODE"] == "0660"
    assert {re.search(r'idProduct}=="(\w+)"', ln).group(1) for ln in lines} >= {"2838"}


def test_unit_specifiers_in_paths_are_escaped(tmp_path):
    cfg = config_from_text(CONFIG.format(root=tmp_path / "st%h"), tmp_path / "a%b.toml")
    s = _settings(units_for_config(cfg)["rxlog.service"])
    assert s["ReadWritePaths"][0].endswith("st%%h")
    assert "a%%b.toml" in s["ExecStart"][0]


@pytest.mark.parametrize("root", ["my data", "it's", "cost$1", 'q"uote'])
def test_paths_units_cannot_carry_are_refused(tmp_path, root):
    cfg = config_from_text(CONFIG.format(root=(tmp_path / root).as_posix().replace('"', '\\"')),
                           tmp_path / "station.toml")
    with pytest.raises(RxlogError, match="cannot carry this path"):
        units_for_config(cfg)


def test_shipped_systemd_folder_matches_the_renderer():
    for name, text in default_units().items():
        assert (REPO / "systemd" / name).read_text() == text, f"systemd/{name} is stale: re-render it"
