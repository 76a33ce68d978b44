"""``rxlog ingest`` for recordings: through the channelizer into the archive, read back.

The recording is written with the reference ``sigmf`` package; the archive is read back
with ``rxlog.archive.read.read_archive``.
"""

import numpy as np
import sigmf
from click.testing import CliRunner

from rxlog.archive.read import read_archive
from rxlog.cli import main
from rxlog.station.config import config_from_text
from rxlog.timeutil import parse_iso

RATE = 2_400_000
START = "2026-12-01T22:00:00.000Z"


def station(tmp_path):
    return config_from_text("[station]\nname='t'\nlatitude_deg=47\nlongitude_deg=8\n[sweep]\nmode='single'\n",
                            tmp_path / "station.toml")


def tone_cu8(seconds, f_offset, seed=0):
    rng = np.random.default_rng(seed)
    n = int(seconds * RATE)
    x = 0.03 * (rng.normal(size=n) + 1j * rng.normal(size=n)) + 0.2 * np.exp(2j * np.pi * f_offset * np.arange(n) / RATE)
    return np.clip(np.round(np.stack([x.real, x.imag], 1).ravel() * 127.5 + 127.5), 0, 255).astype(np.uint8)


def test_sigmf_recording_lands_in_the_archive(tmp_path):
    cfg = station(tmp_path)
    data = tmp_path / "night.sigmf-data"
    tone_cu8(3.0, 250e3).tofile(data)
    meta = sigmf.SigMFFile(data_file=str(data), global_info={"core:datatype": "cu8", "core:sample_rate": RATE})
    meta.add_capture(0, metadata={"core:frequency": 20e6, "core:datetime": START})
    meta.tofile(tmp_path / "night.sigmf-meta")
    r = CliRunner().invoke(main, ["ingest", "--config", str(cfg.path), str(tmp_path / "night.sigmf-meta")])
    assert r.exit_code == 0, r.output
    assert "3 spectra every 1 s, 2026-12-01T22:00:00.000Z to 2026-12-01T22:00:03.000Z" in r.output
    t0 = parse_iso(START)
    got = read_archive(cfg.archive_dir, t0, t0 + 10)
    assert len(got.segments) == 1
    ds = got.segments[0]
    assert ds.t0 == t0 and ds.n_time == 3 and ds.n_chan == 1024
    peak = np.nanargmax(ds.power_db, axis=1)
    assert np.all(np.abs(ds.freq_hz[peak] - 20.25e6) < 8e3)


def test_raw_recording_with_its_description(tmp_path):
    cfg = station(tmp_path)
    path = tmp_path / "dongle.cu8"
    tone_cu8(2.0, -400e3, seed=1).tofile(path)
    r = CliRunner().invoke(main, ["ingest", "--config", str(cfg.path), str(path), "--format", "cu8",
                                  "--rate", str(RATE), "--center", "21e6", "--start", "2026-12-01T23:00:00Z"])
    assert r.exit_code == 0, r.output
    t0 = parse_iso("2026-12-01T23:00:00Z")
    ds = read_archive(cfg.archive_dir, t0, t0 + 10).segments[0]
    assert ds.n_time == 2
    assert np.all(np.abs(ds.freq_hz[np.nanargmax(ds.power_db, axis=1)] - 20.6e6) < 8e3)


def test_bad_input_is_a_short_message_and_nothing_is_stored(tmp_path):
    cfg = station(tmp_path)
    path = tmp_path / "dongle.cu8"
    tone_cu8(0.2, 0).tofile(path)
    runner = CliRunner()
    r = runner.invoke(main, ["ingest", "--config", str(cfg.path), str(path)])
    assert r.exit_code == 2 and "dongle.cu8: not a FITS file" in r.output and "--format" in r.output
    r = runner.invoke(main, ["ingest", "--config", str(cfg.path), str(path), "--format", "cu8"])
    assert r.exit_code == 2 and "not given: --rate-msps, --center-mhz, --start" in r.output
    assert "Traceback" not in r.output
    r = runner.invoke(main, ["ingest", "--config", str(cfg.path), str(path), "--format", "cu8", "--rate", "2.4e6",
                             "--center", "2e7", "--start", "not-a-time"])
    assert r.exit_code == 2 and "--start" in r.output
    r = runner.invoke(main, ["ingest", "--config", str(cfg.path), str(path), "--format", "cu8", "--rate", "2.4e6",
                             "--center", "2e7", "--start", "2026-12-01T23:00:00.5Z"])
    assert r.exit_code == 2 and "too short" in r.output
    assert not cfg.archive_dir.exists() or not list(cfg.archive_dir.rglob("*.fits"))
