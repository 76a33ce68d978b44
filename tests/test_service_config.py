"""[service] keys are validated like the rest of the config: one line naming file, key and
line, exit status 2 from the command line."""

from click.testing import CliRunner

from rxlog.cli import main

BASE = """[station]
name = "x"
latitude_deg = 47.5
longitude_deg = 8.7
[receiver]
kind = "rtltcp"
direct_sampling = "q"
reconnect_max_s = {reconnect}
[sweep]
mode = "single"
[service]
watchdog_s = 120
{extra}
"""


def _check(tmp_path, reconnect=30, extra=""):
    p = tmp_path / "station.toml"
    p.write_text(BASE.format(reconnect=reconnect, extra=extra))
    r = CliRunner().invoke(main, ["config", "check", "--config", str(p)])
    return r.exit_code, r.output + (r.stderr if r.stderr_bytes is not None else "")


def test_valid_service_section(tmp_path):
    code, out = _check(tmp_path)
    assert code == 0, out


def test_watchdog_shorter_than_reconnect_is_refused(tmp_path):
    code, out = _check(tmp_path, reconnect=300)
    assert code == 2
    assert "station.toml:12: [service] watchdog_s: expected more than [receiver] reconnect_max_s (300 s)" in out


def test_bad_values_name_key_and_line(tmp_path):
    code, out = _check(tmp_path, extra='chunk_s = 90\nreview_time = "7am"\nuser = "Root User"')
    assert code == 2
    assert "station.toml:13: [service] chunk_s: out of range, expected between 0.5 and 60, got 90" in out
    assert "station.toml:14: [service] review_time: expected HH:MM, 24-hour clock" in out
    assert "station.toml:15: [service] user: expected a system user name" in out
