"""Ingesting foreign FITS dynamic spectra: a segment of its own with its own grid and
cadence, uncovered channels masked (never zero), idempotent, block size invariant; and
the `rxlog ingest` command."""

import numpy as np
import pytest
from archive_helpers import STATION, noisy_spectrum
from astropy.io import fits
from astropy.time import Time
from click.testing import CliRunner

from rxlog.archive.ingest import ingest_fits
from rxlog.archive.read import read_archive
from rxlog.archive.write import ArchiveWriter, write_spectrum_fits
from rxlog.cli import main
from rxlog.errors import RxlogError
from rxlog.spectrum import FLAG_GAP, FLAG_UNCOVERED
from rxlog.station.config import config_from_text

REF = Time("2026-12-01T21:55:00", scale="utc")      # astropy.time gives the expected epoch
N_TIME, N_CHAN, CADENCE = 1200, 24, 0.5             # 10 minutes across 22:00 UTC


@pytest.fixture
def cfg(tmp_path):
    return config_from_text(
        '[station]\nname = "test-station"\nlatitude_deg = 47.5\nlongitude_deg = 8.7\n'
        '[storage]\nroot = "data"\n', tmp_path / "station.toml")


def foreign(path, power=None):
    """A partner's file: time on NAXIS1 from MJDREF, 18-24 MHz in MHz, dB, its own site."""
    if power is None:
        rng = np.random.default_rng(5)
        power = (3.0 + rng.normal(0.0, 0.3, (N_TIME, N_CHAN))).astype(np.float32)
        power[:, 4] = np.nan                          # a channel the partner's receiver lacks
        power[100:103, 10] = np.nan                   # a short dropout in one channel
    h = fits.Header()
    h.update({"CTYPE1": "TIME", "CUNIT1": "s", "CRPIX1": 1.0, "CRVAL1": CADENCE / 2, "CDELT1": CADENCE,
              "CTYPE2": "FREQ", "CUNIT2": "MHz", "CRPIX2": 1.0, "CRVAL2": 18.125, "CDELT2": 0.25,
              "MJDREF": REF.mjd, "TIMESYS": "UTC", "BUNIT": "dB",
              "OBSGEO-B": 44.0, "OBSGEO-L": 5.5, "OBSGEO-H": 600.0, "TELESCOP": "partner"})
    fits.PrimaryHDU(power.T.copy(), header=h).writeto(path)
    return path, power


def test_ingested_file_is_a_segment_of_its_own(tmp_path, cfg):
    station = noisy_spectrum(900, 64, t0=REF.unix - 100, segment="station")
    with ArchiveWriter(cfg.archive_dir, STATION) as w:
        w.write(station)
    path, power = foreign(tmp_path / "partner.fits")
    [summary] = ingest_fits(cfg, path)
    assert summary.n_time == N_TIME and summary.cadence_s == CADENCE
    got = read_archive(cfg.archive_dir, REF.unix - 100, REF.unix + 800)
    [theirs] = [s for s in got.segments if s.segment == summary.segment]
    ours = [s for s in got.segments if s.segment == "station"]
    assert len(ours) == 1 and ours[0].n_chan == 64 and ours[0].n_time == 900
    # its own grid and cadence, not resampled onto the station's
    assert theirs.n_chan == N_CHAN and theirs.cadence_s == CADENCE and theirs.n_time == N_TIME
    assert np.allclose(theirs.freq_hz, 18.125e6 + 0.25e6 * np.arange(N_CHAN))
    assert theirs.t0 == pytest.approx(REF.unix, abs=1e-3)
    ok = np.isfinite(power)
    assert np.max(np.abs(theirs.power_db[ok] - power[ok])) <= 0.02
    # uncovered channel masked with NaN, never zero; a dropout is a gap
    assert np.isnan(theirs.power_db[:, 4]).all() and (theirs.flags[:, 4] == FLAG_UNCOVERED).all()
    assert np.isnan(theirs.power_db[100:103, 10]).all() and (theirs.flags[100:103, 10] == FLAG_GAP).all()
    # the partner's site is kept with the segment
    assert (theirs.meta["site_latitude_deg"], theirs.meta["site_longitude_deg"]) == (44.0, 5.5)
    assert theirs.meta["source_telescope"] == "partner"


def test_ingesting_twice_stores_the_file_once(tmp_path, cfg):
    path, _ = foreign(tmp_path / "partner.fits")
    [a] = ingest_fits(cfg, path)
    [b] = ingest_fits(cfg, path)
    assert a.segment == b.segment
    got = read_archive(cfg.archive_dir, REF.unix, REF.unix + N_TIME * CADENCE)
    assert [(s.segment, s.n_time) for s in got.segments] == [(a.segment, N_TIME)]


def test_block_size_does_not_change_what_is_stored(tmp_path, cfg):
    """Reading in small blocks (bounded memory) stores the same as one block; a channel
    without data only in the first block is a gap there, not uncovered."""
    rng = np.random.default_rng(9)
    power = (rng.normal(0.0, 1.0, (N_TIME, N_CHAN))).astype(np.float32)
    power[:50, 7] = np.nan
    path, _ = foreign(tmp_path / "p.fits", power)
    results = []
    for block_s, sub in ((20.0, "small"), (3600.0, "large")):
        c = config_from_text(f'[station]\nname = "s"\nlatitude_deg = 1\nlongitude_deg = 2\n'
                             f'[storage]\nroot = "{sub}"\n', tmp_path / f"{sub}.toml")
        ingest_fits(c, path, block_s=block_s)
        [seg] = read_archive(c.archive_dir, REF.unix, REF.unix + 1e4).segments
        results.append(seg)
    assert np.array_equal(results[0].power_db, results[1].power_db, equal_nan=True)
    assert np.array_equal(results[0].flags, results[1].flags)
    assert (results[0].flags[:50, 7] == FLAG_GAP).all() and (results[0].flags[50:, 7] == 0).all()


def test_partner_rxlog_hour_file_keeps_its_segments_and_flags(tmp_path, cfg):
    partner = {"name": "partner", "latitude_deg": 44.0, "longitude_deg": 5.5, "elevation_m": 600.0}
    a = noisy_spectrum(100, 32, t0=REF.unix + 300, segment="0")       # same id as a station might use
    b = noisy_spectrum(50, 16, t0=REF.unix + 400, segment="1", cadence=0.5)
    with ArchiveWriter(tmp_path / "partner", partner) as w:
        w.write(a)
        w.write(b)
    [hour_file] = (tmp_path / "partner").rglob("*.fits")
    done = ingest_fits(cfg, hour_file)
    assert [s.segment.split(":")[1] for s in done] == ["0", "1"]
    got = read_archive(cfg.archive_dir, REF.unix, REF.unix + 3600).segments
    assert [s.segment for s in got] == [d.segment for d in done]
    for want, seg in zip((a, b), got):
        assert np.array_equal(seg.flags, want.flags) and np.array_equal(seg.chan_offset_s, want.chan_offset_s)
        assert np.nanmax(np.abs(seg.power_db - want.power_db)) <= 0.02
        assert seg.meta["site_latitude_deg"] == 44.0 and seg.meta["gain_db"] == want.meta["gain_db"]
    assert len(ingest_fits(cfg, hour_file)) == 2
    assert len(read_archive(cfg.archive_dir, REF.unix, REF.unix + 3600).segments) == 2


def test_ingest_command(tmp_path, cfg):
    path, _ = foreign(tmp_path / "partner.fits")
    r = CliRunner().invoke(main, ["ingest", "--config", str(cfg.path), str(path)])
    assert r.exit_code == 0, r.output
    assert "partner.fits: segment fits-" in r.output and "1200 spectra every 0.5 s" in r.output
    assert "2026-12-01T21:55:00.000Z" in r.output


def test_ingest_command_refuses_bad_files_cleanly(tmp_path, cfg):
    text = tmp_path / "notes.txt"
    text.write_text("not a spectrum")
    r = CliRunner().invoke(main, ["ingest", "--config", str(cfg.path), str(text)])
    assert r.exit_code == 2 and "notes.txt: not a FITS file" in r.output and "Traceback" not in r.output
    path, _ = foreign(tmp_path / "partner.fits")
    with fits.open(path, mode="update") as hdul:
        del hdul[0].header["MJDREF"]
    r = CliRunner().invoke(main, ["ingest", "--config", str(cfg.path), str(path)])
    assert r.exit_code == 2 and "partner.fits" in r.output and "MJDREF" in r.output
    assert not list(cfg.archive_dir.rglob("*.fits"))            # nothing half-stored


def test_band_may_be_the_stations_own(tmp_path, cfg):
    """A file must reach 16-24 MHz or the station's configured band."""
    path, _ = foreign(tmp_path / "high.fits")
    with fits.open(path, mode="update") as hdul:
        hdul[0].header["CRVAL2"] = 30.125                         # 30-36 MHz
    with pytest.raises(RxlogError, match="high.fits: keywords CRVAL2, CDELT2, CUNIT2: .*do not reach 16-24 MHz"):
        ingest_fits(cfg, path)
    wide = config_from_text('[station]\nname = "w"\nlatitude_deg = 1\nlongitude_deg = 2\n'
                            '[spectra]\nfmin_mhz = 28.0\nfmax_mhz = 36.0\n', tmp_path / "wide.toml")
    [s] = ingest_fits(wide, path)
    assert s.fmin_hz == pytest.approx(30.125e6)


@pytest.mark.parametrize("kwargs, words", [
    (dict(t0=Time("1985-06-01T00:00:00", scale="utc").unix), ["POWER extension 1", "receiver era"]),
    (dict(fmin=40.0, fmax=50.0), ["POWER extension 1", "CHANNELS column FREQ", "do not reach 16-24 MHz"]),
])
def test_partner_rxlog_file_outside_the_limits_is_refused(tmp_path, cfg, kwargs, words):
    partner = {"name": "partner", "latitude_deg": 44.0, "longitude_deg": 5.5}
    spec = noisy_spectrum(60, 16, **{"t0": REF.unix, **kwargs})
    path = write_spectrum_fits(spec, tmp_path / "partner.fits", partner)
    with pytest.raises(RxlogError) as e:
        ingest_fits(cfg, path)
    for w in ["partner.fits", *words]:
        assert w in str(e.value), (w, str(e.value))
    assert not cfg.archive_dir.exists()
