"""Round trips through the archive's FITS layout: quantised within 0.02 dB, lossless exact,
flags, channel table, segment id and receiver settings preserved; chunking does not
change what is read back."""

import numpy as np
import pytest
from archive_helpers import STATION, T_NIGHT, noisy_spectrum

from rxlog.archive.layout import QUANT_STEP_DB
from rxlog.archive.read import read_archive, read_spectrum_fits
from rxlog.archive.write import ArchiveWriter, write_spectrum_fits
from rxlog.spectrum import FLAG_GAP


def _with_nan(spec):
    spec.power_db[3, 5] = np.nan
    spec.flags[3, 5] |= FLAG_GAP
    return spec


def test_quantised_round_trip_within_002_db(tmp_path):
    spec = _with_nan(noisy_spectrum(200, 128))
    # wide dynamic range: strong bursts and deep fadeouts stay within the error budget too
    spec.power_db[10] += 45.0
    spec.power_db[11] -= 40.0
    path = write_spectrum_fits(spec, tmp_path / "s.fits", STATION)
    back = read_spectrum_fits(path)
    err = np.abs(back.power_db - spec.power_db)
    assert np.nanmax(err) <= 0.02
    assert np.nanmax(err) > 0.25 * QUANT_STEP_DB      # really quantised, not stored as float
    assert np.isnan(back.power_db[3, 5]) and np.isnan(back.power_db).sum() == 1
    assert np.array_equal(back.flags, spec.flags)
    assert np.array_equal(back.freq_hz, spec.freq_hz)
    assert np.array_equal(back.chan_offset_s, spec.chan_offset_s)
    assert back.t0 == pytest.approx(spec.t0, abs=1e-6)
    assert back.cadence_s == spec.cadence_s
    assert back.segment == spec.segment
    for key, value in spec.meta.items():
        assert back.meta[key] == value and type(back.meta[key]) is type(value)
    assert back.meta["site_latitude_deg"] == STATION["latitude_deg"]


def test_lossless_round_trip_is_exact(tmp_path):
    spec = _with_nan(noisy_spectrum(50, 32, cadence=0.25))
    back = read_spectrum_fits(write_spectrum_fits(spec, tmp_path / "s.fits", STATION, lossless=True))
    assert np.array_equal(back.power_db, spec.power_db, equal_nan=True)
    assert back.power_db.dtype == np.float32


@pytest.mark.parametrize("lossless", [False, True])
def test_archive_round_trip(tmp_path, lossless):
    spec = _with_nan(noisy_spectrum(150, 64))
    with ArchiveWriter(tmp_path, STATION, lossless=lossless) as w:
        w.write(spec)
    got = read_archive(tmp_path, spec.t0, spec.t_end)
    assert len(got.segments) == 1 and got.gaps == []
    back = got.segments[0]
    if lossless:
        assert np.array_equal(back.power_db, spec.power_db, equal_nan=True)
    else:
        assert np.nanmax(np.abs(back.power_db - spec.power_db)) <= 0.02
    assert np.array_equal(back.flags, spec.flags)
    assert back.t0 == pytest.approx(spec.t0, abs=1e-6)


def test_chunking_does_not_change_what_is_read(tmp_path):
    """Writing the same rows in blocks of 1, 7 or all at once gives identical archives."""
    spec = noisy_spectrum(185, 32)
    results = []
    for size in (1, 7, spec.n_time):
        root = tmp_path / f"blocks{size}"
        with ArchiveWriter(root, STATION) as w:
            for i in range(0, spec.n_time, size):
                w.write(spec.slice_rows(i, min(spec.n_time, i + size)))
        got = read_archive(root, spec.t0, spec.t_end)
        assert len(got.segments) == 1
        results.append(got.segments[0])
    for other in results[1:]:
        assert np.array_equal(other.power_db, results[0].power_db, equal_nan=True)
        assert np.array_equal(other.flags, results[0].flags)
        assert other.t0 == results[0].t0


def test_chunks_reach_disk_before_close_and_are_readable(tmp_path):
    """At most 60 s are held in memory: after 150 rows at 1 s, 120 are on disk and readable."""
    spec = noisy_spectrum(150, 32)
    w = ArchiveWriter(tmp_path, STATION)
    w.write(spec)
    got = read_archive(tmp_path, T_NIGHT, T_NIGHT + 1000)
    assert sum(s.n_time for s in got.segments) == 120
    w.close()
    assert sum(s.n_time for s in read_archive(tmp_path, T_NIGHT, T_NIGHT + 1000).segments) == 150
