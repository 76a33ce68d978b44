"""Reading the archive back: across hour files, over gaps, with segments kept apart; and
the consolidation invariants (idempotent, restart-safe)."""

import shutil

import numpy as np
import pytest
from archive_helpers import STATION, T_NIGHT, archive_files, noisy_spectrum

from rxlog.archive.read import archive_extent, read_archive
from rxlog.archive.write import ArchiveWriter
from rxlog.spectrum import FLAG_GAP


def _close(a, b):
    return np.nanmax(np.abs(a - b)) <= 0.02


def test_reading_across_an_hour_boundary(tmp_path):
    spec = noisy_spectrum(250, 32, t0=T_NIGHT - 100)          # 21:58:20 .. 22:02:30
    with ArchiveWriter(tmp_path, STATION) as w:
        w.write(spec)
    names = [p.name for p in archive_files(tmp_path)]
    assert names == ["test-station_20261201T21Z.fits", "test-station_20261201T22Z.fits"]
    got = read_archive(tmp_path, spec.t0, spec.t_end)
    assert got.gaps == []
    [seg] = got.segments
    assert seg.n_time == 250 and seg.t0 == pytest.approx(spec.t0, abs=1e-6)
    assert _close(seg.power_db, spec.power_db)
    # a window inside: rows whose start lies in [t0, t1)
    part = read_archive(tmp_path, T_NIGHT - 10, T_NIGHT + 10.5).segments[0]
    assert part.n_time == 21 and part.t0 == pytest.approx(T_NIGHT - 10, abs=1e-6)
    assert _close(part.power_db, spec.power_db[90:111])


def test_short_gap_inside_a_segment_is_filled_with_flagged_nan(tmp_path):
    spec = noisy_spectrum(300, 16, t0=T_NIGHT - 150)
    with ArchiveWriter(tmp_path, STATION) as w:
        w.write(spec.slice_rows(0, 120))                        # gap of 40 s across 22:00
        w.write(spec.slice_rows(160, 300))
    got = read_archive(tmp_path, spec.t0, spec.t_end)
    [seg] = got.segments
    assert seg.n_time == 300
    assert np.isnan(seg.power_db[120:160]).all()
    assert (seg.flags[120:160] & FLAG_GAP).all()
    assert _close(seg.power_db[160:], spec.power_db[160:])
    assert got.gaps == [(pytest.approx(spec.t0 + 120), pytest.approx(spec.t0 + 160))]


def test_long_gap_splits_the_segment(tmp_path):
    spec = noisy_spectrum(200, 16)
    with ArchiveWriter(tmp_path, STATION) as w:
        w.write(spec.slice_rows(0, 50))
        w.write(spec.slice_rows(150, 200))                      # 100 s missing
    got = read_archive(tmp_path, spec.t0 - 5, spec.t_end, fill_gaps_up_to_s=60)
    assert [(s.segment, s.n_time) for s in got.segments] == [("seg-a", 50), ("seg-a", 50)]
    assert got.segments[1].t0 == pytest.approx(spec.t0 + 150)
    assert got.gaps == [(spec.t0 - 5, pytest.approx(spec.t0)),
                        (pytest.approx(spec.t0 + 50), pytest.approx(spec.t0 + 150))]
    # with the default fill of 300 s the same gap is filled instead
    assert len(read_archive(tmp_path, spec.t0, spec.t_end).segments) == 1


def test_new_segment_grid_or_cadence_comes_back_separately_never_resampled(tmp_path):
    a = noisy_spectrum(90, 32, segment="tune-1")
    b = noisy_spectrum(40, 48, t0=a.t_end, segment="tune-1", fmin=18.0, fmax=22.0)   # new channel grid
    c = noisy_spectrum(100, 48, t0=b.t_end, cadence=0.5, segment="tune-1", fmin=18.0, fmax=22.0)
    d = noisy_spectrum(30, 48, t0=c.t_end, cadence=0.5, segment="tune-2", fmin=18.0, fmax=22.0)
    with ArchiveWriter(tmp_path, STATION) as w:
        for s in (a, b, c, d):
            w.write(s)
    got = read_archive(tmp_path, a.t0, d.t_end)
    assert got.gaps == []
    assert [(s.segment, s.n_chan, s.cadence_s, s.n_time) for s in got.segments] == [
        ("tune-1", 32, 1.0, 90), ("tune-1", 48, 1.0, 40), ("tune-1", 48, 0.5, 100), ("tune-2", 48, 0.5, 30)]
    for want, seg in zip((a, b, c, d), got.segments):
        assert np.array_equal(seg.freq_hz, want.freq_hz)
        assert seg.t0 == pytest.approx(want.t0, abs=1e-6)
        assert _close(seg.power_db, want.power_db)


def test_consolidation_is_idempotent_when_killed_before_chunks_were_deleted(tmp_path):
    """A writer killed after renaming the hour file but before deleting its chunks leaves
    both; the next writer must not store those rows twice."""
    spec = noisy_spectrum(150, 16)
    w = ArchiveWriter(tmp_path / "arch", STATION)
    w.write(spec)
    chunks = [p for p in archive_files(tmp_path / "arch") if p.name.endswith(".chunk.fits")]
    assert len(chunks) == 2
    kept = tmp_path / "kept"
    kept.mkdir()
    for c in chunks:
        shutil.copy2(c, kept / c.name)
    w.close()
    for c in chunks:
        shutil.copy2(kept / c.name, c)                         # as if the deletion never happened
    ArchiveWriter(tmp_path / "arch", STATION).close()          # recovery consolidates again
    assert [p.name for p in archive_files(tmp_path / "arch")] == ["test-station_20261201T22Z.fits"]
    [seg] = read_archive(tmp_path / "arch", spec.t0, spec.t_end + 100).segments
    assert seg.n_time == 150
    assert _close(seg.power_db, spec.power_db)


def test_restart_within_the_hour_appends_to_the_hour_file(tmp_path):
    spec = noisy_spectrum(200, 16)
    with ArchiveWriter(tmp_path, STATION) as w:
        w.write(spec.slice_rows(0, 80))
    with ArchiveWriter(tmp_path, STATION) as w:
        w.write(spec.slice_rows(80, 200))
    assert len(archive_files(tmp_path)) == 1
    [seg] = read_archive(tmp_path, spec.t0, spec.t_end).segments
    assert seg.n_time == 200 and _close(seg.power_db, spec.power_db)


def test_recovery_discards_partial_temporary_files(tmp_path):
    spec = noisy_spectrum(10, 8)
    with ArchiveWriter(tmp_path, STATION) as w:
        w.write(spec)
    [hour_file] = archive_files(tmp_path)
    partial = hour_file.parent / f".{hour_file.name}.99999.tmp"
    partial.write_bytes(hour_file.read_bytes()[:3000])        # what a kill mid-write leaves
    ArchiveWriter(tmp_path, STATION).close()
    assert not partial.exists()
    assert read_archive(tmp_path, spec.t0, spec.t_end).segments[0].n_time == 10


def test_spectra_going_back_in_time_within_a_segment_are_refused(tmp_path):
    spec = noisy_spectrum(20, 8)
    w = ArchiveWriter(tmp_path, STATION)
    w.write(spec.slice_rows(0, 10))
    with pytest.raises(ValueError, match="back in time"):
        w.write(spec.slice_rows(5, 15))


def test_archive_extent(tmp_path):
    assert archive_extent(tmp_path) is None
    a = noisy_spectrum(30, 8, t0=T_NIGHT - 7200.5)
    b = noisy_spectrum(30, 8, t0=T_NIGHT + 86400 + 12, segment="b")
    with ArchiveWriter(tmp_path, STATION) as w:
        w.write(a)
        w.write(b)
    assert archive_extent(tmp_path) == (pytest.approx(a.t0, abs=1e-6), pytest.approx(b.t_end, abs=1e-6))
