"""Ingest stores a whole file or nothing: a failure while the staged hours are merged into
the archive (here a full disk on the second hour file) puts back every hour already merged,
for recordings and FITS files alike; without the failure both hours are there."""

from pathlib import Path

import hostile_inputs as H
import numpy as np
import pytest
from archive_helpers import T_NIGHT
from click.testing import CliRunner

from rxlog import fileio
from rxlog.archive.read import read_archive
from rxlog.cli import main
from rxlog.errors import RxlogError


def recording_across_the_hour(folder: Path) -> list[str]:
    """Four seconds of cu8 noise from 21:59:58 UTC, so the spectra fall in two hour files."""
    path = folder / "across.cu8"
    H.noise_cu8(4 * H.RATE).tofile(path)
    return [str(path), "--format", "cu8", "--rate", str(H.RATE), "--center", "20e6",
            "--start", "2026-12-01T21:59:58Z"]


def fits_across_the_hour(folder: Path) -> list[str]:
    """Two minutes of a partner's 1-s spectra from 21:59 UTC."""
    power = (3.0 + np.random.default_rng(1).normal(0.0, 0.3, (120, 24))).astype(np.float32)
    return [str(H.foreign_fits(folder / "across.fits", power, MJDREF=(T_NIGHT - 60) / 86400.0 + 40587.0))]


def full_disk_on_second_archive_write(monkeypatch, root: Path):
    """Make the second write into the archive (not the staging folder) fail as a full disk would."""
    real, seen = fileio.write_atomic, []

    def flaky(path, data, what="file"):
        if Path(path).is_relative_to(root):
            seen.append(path)
            if len(seen) == 2:
                raise RxlogError(f"{path}: cannot write {what} ([Errno 28] No space left on device)")
        return real(path, data, what)

    monkeypatch.setattr(fileio, "write_atomic", flaky)
    return seen


@pytest.mark.parametrize("make", [recording_across_the_hour, fits_across_the_hour])
def test_failure_while_merging_puts_every_hour_back(tmp_path, monkeypatch, make):
    cfg = H.station(tmp_path)                       # holds the 21h hour file already
    args = make(tmp_path)
    before = H.tree_digest(cfg.storage_root)
    seen = full_disk_on_second_archive_write(monkeypatch, cfg.archive_dir)
    r = CliRunner().invoke(main, ["ingest", "--config", str(cfg.path), *args])
    assert r.exit_code == 2 and "No space left on device" in r.output, r.output
    assert len(seen) == 2                           # the 21h file was rewritten before the failure
    assert H.tree_digest(cfg.storage_root) == before


@pytest.mark.parametrize("make", [recording_across_the_hour, fits_across_the_hour])
def test_without_failure_both_hours_are_stored_beside_what_was_there(tmp_path, make):
    cfg = H.station(tmp_path)
    r = CliRunner().invoke(main, ["ingest", "--config", str(cfg.path), *make(tmp_path)])
    assert r.exit_code == 0, r.output
    hours = sorted(p.name for p in cfg.archive_dir.rglob("*.fits"))
    assert hours == ["hostile-test_20261201T21Z.fits", "hostile-test_20261201T22Z.fits"]
    segments = read_archive(cfg.archive_dir, T_NIGHT - 3600, T_NIGHT + 3600).segments
    assert "earlier" in {s.segment for s in segments} and len(segments) == 2
    assert not list(cfg.storage_root.glob(".rxlog-ingest-*"))      # staging folder gone


def test_staging_left_by_a_killed_ingest_is_removed(tmp_path):
    cfg = H.station(tmp_path)
    stale = cfg.storage_root / ".rxlog-ingest-999999999-abc"       # no such process
    (stale / "archive").mkdir(parents=True)
    (stale / "archive" / "junk.fits").write_bytes(b"x")
    r = CliRunner().invoke(main, ["ingest", "--config", str(cfg.path), *recording_across_the_hour(tmp_path)])
    assert r.exit_code == 0, r.output
    assert not stale.exists()
