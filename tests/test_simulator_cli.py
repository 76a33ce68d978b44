"""``rxlog simulate``: spectra in the archive layout or one FITS file, SigMF with --iq,
truth CSV beside each; bad input is one line and exit status 2."""

import csv
import json

import numpy as np
from click.testing import CliRunner

from rxlog.archive import read_archive, read_spectrum_fits
from rxlog.cli import main
from rxlog.receiver import open_recording
from rxlog.sim.events import RFI_KINDS
from rxlog.timeutil import parse_iso

CONFIG = """
[station]
name = "cli-test"
latitude_deg = 47.5
longitude_deg = 8.7
[spectra]
channels = 128
"""


def _cfg(tmp_path):
    p = tmp_path / "station.toml"
    p.write_text(CONFIG)
    return str(p)


def test_simulate_spectra_into_archive_and_fits(tmp_path):
    cfg = _cfg(tmp_path)
    r = CliRunner().invoke(main, ["simulate", "--config", cfg, "--start", "2026-12-01T22:00:00Z", "--hours", "0.05",
                                  "--out", str(tmp_path / "night"), "--rfi", "city", "--seed", "3"])
    assert r.exit_code == 0, r.output
    got = read_archive(tmp_path / "night", parse_iso("2026-12-01T22:00:00Z"), parse_iso("2026-12-01T22:03:00Z"))
    assert sum(s.n_time for s in got.segments) == 180
    with open(tmp_path / "night" / "truth.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert rows and all(r["class"] == "rfi" for r in rows)
    r = CliRunner().invoke(main, ["simulate", "--config", cfg, "--start", "2026-12-01T22:00:00Z", "--hours", "0.01",
                                  "--out", str(tmp_path / "one.fits")])
    assert r.exit_code == 0, r.output
    spec = read_spectrum_fits(tmp_path / "one.fits")
    assert spec.n_time == 36 and np.isfinite(spec.power_db).all()
    assert (tmp_path / "one.truth.csv").is_file()


def test_simulate_iq_writes_a_sigmf_recording_rxlog_can_replay(tmp_path):
    cfg = _cfg(tmp_path)
    r = CliRunner().invoke(main, ["simulate", "--config", cfg, "--start", "2026-12-01T22:00:00Z", "--hours", "0.0002",
                                  "--iq", "--center-mhz", "18.5", "--out", str(tmp_path / "iq" / "rec")])
    assert r.exit_code == 0, r.output
    meta = json.loads((tmp_path / "iq" / "rec.sigmf-meta").read_text())
    assert meta["global"]["core:datatype"] == "cu8"
    assert meta["captures"][0]["core:frequency"] == 18.5e6
    rec = open_recording(tmp_path / "iq" / "rec.sigmf-meta")
    assert rec.n_samples == round(0.0002 * 3600 * 2.4e6)
    assert (tmp_path / "iq" / "rec.truth.csv").is_file()


def test_a_date_start_is_local_noon_of_that_night(tmp_path):
    p = tmp_path / "zurich.toml"
    p.write_text(CONFIG.replace("longitude_deg = 8.7", 'longitude_deg = 8.7\ntimezone = "Europe/Zurich"'))
    r = CliRunner().invoke(main, ["simulate", "--config", str(p), "--start", "2026-12-01", "--hours", "0.01",
                                  "--out", str(tmp_path / "one.fits")])
    assert r.exit_code == 0, r.output
    spec = read_spectrum_fits(tmp_path / "one.fits")
    # Europe/Zurich is UTC+1 in December: local noon is 11:00Z; the first spectrum's middle half a step later
    assert abs(spec.t0 - parse_iso("2026-12-01T11:00:00Z")) <= spec.cadence_s


def test_bad_options_are_one_line_and_exit_2(tmp_path):
    cfg = _cfg(tmp_path)
    for args in (["--start", "yesterday", "--hours", "1"],
                 ["--start", "2026-12-01", "--hours", "1", "--center-mhz", "20"]):
        r = CliRunner().invoke(main, ["simulate", "--config", cfg, "--out", str(tmp_path / "x")] + args)
        assert r.exit_code == 2, r.output
        assert "Traceback" not in r.output and len(r.output.strip().splitlines()) == 1


def test_simulate_site_writes_every_interference_kind_into_the_truth(tmp_path):
    cfg = _cfg(tmp_path)
    # local evening at 47.5 N in January: sounders, broadcasters fading out, the computer's spurs
    r = CliRunner().invoke(main, ["simulate", "--config", cfg, "--start", "2027-01-19T15:00:00Z", "--hours", "0.5",
                                  "--out", str(tmp_path / "site.fits"), "--rfi", "site", "--seed", "1"])
    assert r.exit_code == 0, r.output
    with open(tmp_path / "site.truth.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    kinds = {row["rfi_kind"] for row in rows if row["class"] == "rfi"}
    assert {"sweep", "carrier", "spur"} <= kinds <= set(RFI_KINDS)
    r = CliRunner().invoke(main, ["simulate", "--config", cfg, "--start", "2027-01-19T15:00:00Z", "--hours", "0.1",
                                  "--out", str(tmp_path / "x.fits"), "--rfi", "suburb"])
    assert r.exit_code == 2 and "site" in r.output
