"""Station config validation: each kind of mistake gets one clear line and exit status 2."""

from pathlib import Path

import pytest
from click.testing import CliRunner

from rxlog.cli import main
from rxlog.station.config import ConfigError, load_config

EXAMPLE = Path(__file__).resolve().parents[1] / "config" / "station.example.toml"

GOOD = """
[station]
name = "test-st"
latitude_deg = 46.0
longitude_deg = 7.0
"""


def check(tmp_path, text):
    p = tmp_path / "station.toml"
    p.write_text(text)
    return CliRunner().invoke(main, ["config", "check", "--config", str(p)]), p


def test_example_config_passes():
    r = CliRunner().invoke(main, ["config", "check", "--config", str(EXAMPLE)])
    assert r.exit_code == 0, r.output
    assert "ok" in r.output


def test_minimal_config_gets_defaults(tmp_path):
    r, p = check(tmp_path, GOOD)
    assert r.exit_code == 0, r.output
    cfg = load_config(p)
    assert cfg["spectra"]["fmin_mhz"] == 16.0 and cfg["spectra"]["fmax_mhz"] == 24.0
    assert cfg["spectra"]["cadence_s"] == 1.0
    assert cfg.storage_root == tmp_path / "data"


@pytest.mark.parametrize("text, expected", [
    (GOOD.replace("longitude_deg", "longtude_deg"), ["[station] longtude_deg", "unknown key", "did you mean 'longitude_deg'"]),
    (GOOD.replace("46.0", '"north"'), ["[station] latitude_deg", "expected a number", "'north'"]),
    (GOOD.replace("46.0", "91.5"), ["[station] latitude_deg", "out of range", "-90 and 90"]),
    (GOOD + "[spectra]\nfmax_mhz = 75\n", ["[spectra] fmax_mhz", "out of range", "between 1 and 60"]),
    (GOOD + "[spectra]\ncadence_s = 0\n", ["[spectra] cadence_s", "out of range"]),
    (GOOD + "[spectra]\ncadence_s = -1.0\n", ["[spectra] cadence_s", "out of range"]),
    (GOOD.replace('name = "test-st"\n', ""), ["missing required key 'name'"]),
    (GOOD + "[spectrum]\n", ["[spectrum]", "unknown section", "did you mean [spectra]"]),
    (GOOD + "[station\n", ["unreadable TOML"]),
    (GOOD.replace("latitude_deg = 46.0", 'timezone = "Mars/Olympus"\nlatitude_deg = 46.0'), ["[station] timezone", "unknown IANA time zone"]),
    (GOOD + "[spectra]\nfmin_mhz = 24.0\nfmax_mhz = 16.0\n", ["fmax_mhz above fmin_mhz"]),
    (GOOD + "[receiver]\ngain_db = inf\n", ["[receiver] gain_db", "expected a finite number, got inf"]),
    (GOOD + "[storage]\nroot = \"da\\u0000ta\"\n", ["[storage] root", "control character '\\x00'"]),
    (GOOD + "[storage]\nroot = \"station.toml/data\"\n", ["[storage] root", "station.toml is a file"]),
    (GOOD + "[storage]\nretention_days = 1e300\n", ["[storage] retention_days", "between 0.01 and 100000"]),
    (GOOD + "[sweep]\ncenter_hz = 1e300\n", ["[sweep] center_hz", "out of range"]),
    (GOOD + "[sweep]\nring_s = 1e12\ncycle_s = 0.3\n", ["[sweep] ring_s", "out of range"]),
])
def test_each_error_names_file_key_and_expectation(tmp_path, text, expected):
    r, p = check(tmp_path, text)
    assert r.exit_code == 2, r.output
    assert "Traceback" not in r.output
    assert str(p) in r.output
    for piece in expected:
        assert piece in r.output, (piece, r.output)


def test_error_line_numbers_point_at_the_key(tmp_path):
    r, p = check(tmp_path, GOOD.replace("46.0", "123"))
    # latitude_deg sits on line 4 of GOOD
    assert f"{p}:4: [station] latitude_deg" in r.output


def test_missing_file_and_no_config(tmp_path, monkeypatch):
    r = CliRunner().invoke(main, ["config", "check", "--config", str(tmp_path / "nope.toml")])
    assert r.exit_code == 2 and "cannot read config file" in r.output
    monkeypatch.delenv("RXLOG_CONFIG", raising=False)
    r = CliRunner().invoke(main, ["config", "check"])
    assert r.exit_code == 2 and "RXLOG_CONFIG" in r.output


def test_config_from_environment(tmp_path, monkeypatch):
    p = tmp_path / "s.toml"
    p.write_text(GOOD)
    monkeypatch.setenv("RXLOG_CONFIG", str(p))
    r = CliRunner().invoke(main, ["config", "check"])
    assert r.exit_code == 0, r.output


def test_all_problems_reported_at_once(tmp_path):
    with pytest.raises(ConfigError) as e:
        p = tmp_path / "s.toml"
        p.write_text(GOOD.replace("46.0", "100") + "[spectra]\ncadence_s = 0\nbogus = 1\n")
        load_config(p)
    assert len(e.value.problems) == 3


def test_version_and_help():
    r = CliRunner().invoke(main, ["--version"])
    assert r.exit_code == 0 and "rxlog" in r.output
    r = CliRunner().invoke(main, ["--help"])
    assert r.exit_code == 0 and "demo" in r.output.lower()
