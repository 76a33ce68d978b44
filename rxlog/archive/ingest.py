"""Ingest: FITS dynamic spectra and recordings from elsewhere into the station archive, all or nothing.

A FITS file keeps its own channel grid and cadence as a segment of its own; a recording
goes through the station's channelizer (``rxlog.receive.replay``). Either is checked
whole before anything is stored, then written to a private staging archive, and only
when all of it went through are the staged hour files merged into the station archive
under the archive lock (``staged_writer``); a failure part way puts back every hour
already merged.
"""

from __future__ import annotations

import contextlib
import itertools
import math
import os
import re
import shutil
import tempfile
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from rxlog import fileio, validate
from rxlog.archive.foreign import (
    check_complete,
    file_digest,
    is_own,
    open_foreign,
    quiet_astropy,
)
from rxlog.archive.layout import (
    HOUR_S,
    MAX_ABS_POWER_DB,
    archive_files,
    header_text,
    hour_stem,
    read_file,
)
from rxlog.archive.write import ArchiveWriter, locked, write_hour
from rxlog.errors import RxlogError
from rxlog.receive.replay import spectra_from_recording
from rxlog.spectrum import DynamicSpectrum


@dataclass
class IngestSummary:
    """What ``ingest_fits`` stored: one new segment of the archive."""

    path: Path
    segment: str
    t0: float
    t_end: float
    cadence_s: float
    n_time: int
    n_chan: int
    fmin_hz: float
    fmax_hz: float


def ingest_fits(cfg, path, block_s: float = HOUR_S) -> list[IngestSummary]:
    """Store a FITS dynamic spectrum from elsewhere in the station archive as a segment of its own.

    It keeps its own channel grid and cadence (never resampled onto the station grid);
    cells without data are NaN with FLAG_GAP and channels without any data in the file are
    flagged FLAG_UNCOVERED, never zero. A foreign file is read in blocks of ``block_s`` so
    memory stays bounded. A file in rxlog's own layout (from a partner station) keeps its
    flags, channel table and segments. Segment ids start with the file's content hash, so
    ingesting a file twice stores it once. Returns one summary per stored segment.

    The file is checked whole before it counts: complete (not cut short), axes within
    ``rxlog.validate``'s limits and reaching 16-24 MHz or the station's band, dates in the
    receiver era, some usable power. It is stored all or nothing (``staged_writer``):
    a refused or failed file leaves the archive byte for byte as it was.
    """
    path = Path(path)
    check_complete(path)
    with quiet_astropy():
        return _ingest_checked_fits(cfg, path, block_s)


def _ingest_checked_fits(cfg, path: Path, block_s: float) -> list[IngestSummary]:
    accepted = validate.bands(cfg)
    if is_own(path):
        digest = file_digest(path)
        sets = [spec for spec, _l in read_file(path)]
        if not sets:
            raise RxlogError(f"{path}: an rxlog archive file without a POWER/FLAGS/CHANNELS set; "
                             "expected at least one (is the file cut short?)")
        for k, spec in enumerate(sets, start=1):
            _check_own_set(spec, f"{path}: POWER extension {k}", accepted)
        with staged_writer(cfg) as w:
            for spec in sets:
                spec.segment = f"fits-{digest}:{spec.segment}"
                spec.meta["source_file"] = header_text(path.name)
                w.write(spec)
        return [_summary(path, s.segment, s.t0, s.cadence_s, s.n_time, s.freq_hz) for s in sets]
    with open_foreign(path, accepted) as img:
        img.uncovered()                      # reads every pixel once: cut-short data and empty images end here
        rows = max(1, int(block_s / img.cadence))
        with staged_writer(cfg) as w:
            for i0 in range(0, img.n_time, rows):
                w.write(img.block(i0, min(img.n_time, i0 + rows)))
        return [_summary(path, img.segment, img.t0, img.cadence, img.n_time, img.freq_hz)]


def _check_own_set(spec: DynamicSpectrum, where: str, accepted) -> None:
    """The checks of a foreign file's axes (``rxlog.archive.foreign``), for a set in rxlog's own layout."""
    f = spec.freq_hz
    problem = validate.cadence_problem(spec.cadence_s)
    if problem:
        raise RxlogError(f"{where}: keyword CDELT1: {problem}")
    if not np.isfinite(f).all() or (f.size > 1 and not (np.diff(f) > 0).all()):
        raise RxlogError(f"{where}: CHANNELS column FREQ: expected finite, increasing channel frequencies")
    df = float(np.median(np.diff(f))) if f.size > 1 else validate.MAX_CHANNEL_HZ
    problem = (validate.band_problem(float(f[0]) - df / 2, float(f[-1]) + df / 2, accepted)
               or validate.channel_problem(df, spec.cadence_s))
    if problem:
        raise RxlogError(f"{where}: CHANNELS column FREQ: {problem}")
    if not np.isfinite(spec.chan_offset_s).all():
        raise RxlogError(f"{where}: CHANNELS column CHAN_OFFSET: expected finite seconds")
    problem = validate.era_problem(spec.t0, spec.t_end)
    if problem:
        raise RxlogError(f"{where}: keywords MJDREFI, MJDREFF, CRVAL1: {problem}")
    finite = np.isfinite(spec.power_db)
    if not finite.any():
        raise RxlogError(f"{where}: no usable power value (all NaN); expected a dynamic spectrum")
    if np.abs(spec.power_db[finite]).max() > MAX_ABS_POWER_DB:
        raise RxlogError(f"{where}: power beyond {MAX_ABS_POWER_DB:.0f} dB; expected log power in dB")


_STAGING_PREFIX = ".rxlog-ingest-"


@contextlib.contextmanager
def staged_writer(cfg):
    """An ArchiveWriter for one ingested file, which stores all of it or nothing.

    Spectra go to a private staging archive: in the storage root (the archive's own file
    system) when it exists, else in the temporary folder. Only when the ``with`` block ends
    without an error are its hour files merged into the station archive, under the archive
    lock, each by the crash-safe write (``_commit``); a failure part way puts back every
    hour already merged. A failure before that never touched the archive at all.
    """
    root = cfg.storage_root
    parent = root if root.is_dir() else Path(tempfile.gettempdir())
    _remove_stale_staging(parent)
    try:
        staging = Path(tempfile.mkdtemp(prefix=f"{_STAGING_PREFIX}{os.getpid()}-", dir=parent))
    except OSError as e:
        raise RxlogError(f"{parent}: cannot make a staging folder for the ingest ({e.strerror or e}); "
                         "check free space and permissions") from None
    try:
        with _os_errors_named(staging):
            w = ArchiveWriter(staging / "archive", cfg["station"], lossless=cfg["storage"]["lossless"])
        yield w
        with _os_errors_named(staging):
            w.close()
        with _os_errors_named(cfg.archive_dir):
            _commit(staging, cfg.archive_dir)
    finally:
        shutil.rmtree(staging, ignore_errors=True)


@contextlib.contextmanager
def _os_errors_named(folder: Path):
    """An OSError of the file system (no space, no permission) as an RxlogError naming the folder."""
    try:
        yield
    except OSError as e:
        raise RxlogError(f"{folder}: cannot store the ingested spectra ({e.strerror or e}); "
                         "check free space and permissions; nothing was stored") from None


def _remove_stale_staging(parent: Path) -> None:
    """Delete staging folders of ingests whose process is gone (killed part way)."""
    for entry in parent.glob(f"{_STAGING_PREFIX}*"):
        m = re.match(rf"{re.escape(_STAGING_PREFIX)}(\d+)-", entry.name)
        if not (m and entry.is_dir()):
            continue
        try:
            os.kill(int(m.group(1)), 0)
        except ProcessLookupError:
            shutil.rmtree(entry, ignore_errors=True)
        except (PermissionError, OverflowError):
            pass                               # alive under another user, or not a pid of ours


def _commit(staging: Path, root: Path) -> None:
    """Merge the hour files of a closed staging archive into ``root``, all or nothing.

    Each staged hour is merged with the archive's hour file, if there is one (rows already
    there are taken once, as in consolidation), or copied in. The archive's previous
    version of every hour is kept (a hard link, else a copy) until all hours are in;
    any failure restores them and removes new files and folders.
    """
    staged = [(p, name, hour) for p, name, hour, chunk in archive_files(staging / "archive") if not chunk]
    if not staged:
        return
    keep = staging / "previous"
    keep.mkdir()
    undo: list[tuple[Path, Path | None, list[Path]]] = []      # (hour file, previous version, new folders)
    with locked(root):
        try:
            for k, (path, name, hour) in enumerate(staged):
                sub, stem = hour_stem(name, hour)
                target = root / sub / f"{stem}.fits"
                if target.exists():
                    previous = keep / f"{k}.fits"
                    _keep_copy(target, previous)
                    undo.append((target, previous, []))
                    write_hour(target, name, read_file(target) + read_file(path))
                else:
                    new = [d for d in (target.parent, target.parent.parent, target.parent.parent.parent)
                           if not d.exists()]
                    undo.append((target, None, new))
                    fileio.write_atomic(target, lambda fh, src=path: _copy_file(src, fh), what="archive file")
        except BaseException:
            _undo(undo)
            raise


def _keep_copy(src: Path, dst: Path) -> None:
    try:
        os.link(src, dst)
    except OSError:
        shutil.copy2(src, dst)


def _copy_file(src: Path, fh) -> None:
    with open(src, "rb") as f:
        shutil.copyfileobj(f, fh, 1 << 20)


def _undo(undo: list[tuple[Path, Path | None, list[Path]]]) -> None:
    """Put the archive's hour files back as they were before a failed commit."""
    for target, previous, new_dirs in reversed(undo):
        try:
            if previous is None:
                target.unlink(missing_ok=True)
                for d in new_dirs:                  # deepest first; only empty ones go
                    with contextlib.suppress(OSError):
                        d.rmdir()
            else:
                try:
                    os.replace(previous, target)
                except OSError:                     # another file system: copy the bytes back
                    fileio.write_atomic(target, previous.read_bytes(), what="archive file")
            if target.parent.is_dir():
                fileio.fsync_dir(target.parent)
        except (OSError, RxlogError) as e:
            warnings.warn(f"{target}: could not be put back after a failed ingest ({e})", RuntimeWarning)


def _summary(path, segment, t0, cadence, n_time, freq_hz) -> IngestSummary:
    return IngestSummary(path=path, segment=segment, t0=t0, t_end=t0 + n_time * cadence, cadence_s=cadence,
                         n_time=n_time, n_chan=freq_hz.size, fmin_hz=float(freq_hz[0]),
                         fmax_hz=float(freq_hz[-1]))


@dataclass
class RecordingSummary:
    """What ``ingest_recording`` stored."""

    path: str
    segments: list
    t0: float
    t_end: float
    rows: int
    duration_s: float


def ingest_recording(cfg, path, progress=None, *, fmt=None, rate_hz=None, center_hz=None, start=None,
                     chunk_samples: int = 1 << 20) -> RecordingSummary:
    """Channelize a recording onto the station grid and append it to the station archive.

    The same channelizer as the live logger (``[sweep]`` FFT settings, ``[spectra]`` grid
    and cadence); each tuning of the recording is a segment of its own. The recording's
    description is checked whole before a sample is read (``open_recording``, and every
    tuning must reach the station band), and the spectra are stored all or nothing
    (``staged_writer``): a refused or failed recording leaves the archive as it was.
    """
    segments, rows, t0, t_end = [], 0, math.inf, -math.inf
    spectra = spectra_from_recording(cfg, path, progress, fmt=fmt, rate_hz=rate_hz, center_hz=center_hz,
                                     start=start, chunk_samples=chunk_samples)
    first = next(spectra, None)          # open and check the recording before staging anything
    if first is None:
        raise RxlogError(f"{path}: too short for one {cfg['spectra']['cadence_s']:g}-s spectrum; nothing stored")
    with staged_writer(cfg) as w:
        for ds in itertools.chain([first], spectra):
            w.write(ds)
            rows += ds.n_time
            t0, t_end = min(t0, ds.t0), max(t_end, ds.t_end)
            if ds.segment not in segments:
                segments.append(ds.segment)
    return RecordingSummary(str(path), segments, t0, t_end, rows, t_end - t0)
