"""Reading the archive: spectra of an interval, its gaps and extent, and what files it has.

``read_archive`` joins the runs of a segment across files (hour files and chunks not yet
consolidated) and hands each segment back on its own time grid. ``file_spans`` and
``archive_hours`` look at names and headers only. ``read_spectrum_fits`` reads a single
file, ours or from elsewhere.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from astropy.io import fits

from rxlog.archive.foreign import check_complete, is_own, open_foreign, quiet_astropy
from rxlog.archive.layout import (
    FORMAT,
    HOUR_S,
    archive_files,
    hour_index,
    read_file,
    time_tolerance,
)
from rxlog.archive.runs import merge_runs, split_gap_rows
from rxlog.archive.wcs import time_axis
from rxlog.errors import RxlogError
from rxlog.spectrum import FLAG_GAP, DynamicSpectrum

DEFAULT_FILL_S = 300.0               # read_archive fills gaps up to this long inside a segment


@dataclass
class ArchiveRead:
    """What ``read_archive`` found: one spectrum per contiguous run of a segment, and the
    stretches of the requested interval without data, as (start, end) POSIX seconds."""

    segments: list[DynamicSpectrum] = field(default_factory=list)
    gaps: list[tuple[float, float]] = field(default_factory=list)


def read_archive(root, t0: float, t1: float, fill_gaps_up_to_s: float = DEFAULT_FILL_S) -> ArchiveRead:
    """Spectra with row start in [t0, t1) from hour files and not yet consolidated chunks.

    Each segment comes back on its own regular grid, never resampled: runs of one segment
    in neighbouring files are joined (across hour boundaries); gaps inside a segment of at
    most ``fill_gaps_up_to_s`` become NaN rows with FLAG_GAP, longer ones split it.
    ``gaps`` lists the stretches of [t0, t1) covered by no row (before, between and after
    the data), ignoring slivers shorter than half a cadence.
    """
    root = Path(root)
    t0, t1 = float(t0), float(t1)
    pieces = []
    for attempt in range(3):                  # a writer may consolidate chunks while we read
        try:
            pieces = []
            last_hour = math.ceil(t1 / HOUR_S) - 1           # rows start before t1
            for path, _name, _hour, _chunk in archive_files(root, hour_index(t0), last_hour):
                for spec, lossless in read_file(path):
                    clipped = _clip(spec, t0, t1)
                    if clipped is not None:
                        pieces.append((clipped, lossless))
            break
        except RxlogError:
            if attempt == 2:
                raise
    segments = []
    for spec, _lossless in merge_runs(pieces, fill_gaps_up_to_s):
        segments += split_gap_rows(spec, fill_gaps_up_to_s)
    segments.sort(key=lambda s: (s.t0, s.segment))
    return ArchiveRead(segments=segments, gaps=_gaps(segments, t0, t1))


def _clip(spec: DynamicSpectrum, t0: float, t1: float) -> DynamicSpectrum | None:
    tol = time_tolerance(spec.cadence_s)
    i0 = max(0, math.ceil((t0 - spec.t0 - tol) / spec.cadence_s))
    i1 = min(spec.n_time, math.ceil((t1 - spec.t0 - tol) / spec.cadence_s))
    if i1 <= i0:
        return None
    return spec if (i0, i1) == (0, spec.n_time) else spec.slice_rows(i0, i1)


def _gaps(segments: list[DynamicSpectrum], t0: float, t1: float) -> list[tuple[float, float]]:
    spans = []
    for s in segments:
        empty = (s.flags & FLAG_GAP).astype(bool).all(axis=1)
        good = np.flatnonzero(~empty)
        if good.size == 0:
            continue
        breaks = np.flatnonzero(np.diff(good) > 1)
        starts = np.concatenate([[good[0]], good[breaks + 1]])
        ends = np.concatenate([good[breaks], [good[-1]]]) + 1
        spans += [(s.t0 + a * s.cadence_s, s.t0 + b * s.cadence_s, s.cadence_s) for a, b in zip(starts, ends)]
    spans.sort()
    gaps, cursor, cad = [], t0, None
    for a, b, c in spans:
        slack = 0.5 * min(c, cad) if cad else 0.5 * c
        if a - cursor > slack:
            gaps.append((float(cursor), float(min(a, t1))))
        if b > cursor:
            cursor, cad = b, c
    if t1 - cursor > (0.5 * cad if cad else 0.0):
        gaps.append((float(cursor), float(t1)))
    return gaps


def archive_extent(root) -> tuple[float, float] | None:
    """(start of the first row, end of the last row) in the archive, or None if empty."""
    files = archive_files(Path(root))
    if not files:
        return None
    first_hour, last_hour = files[0][2], files[-1][2]
    starts, ends = [], []
    for path, _n, hour, _c in files:
        if hour not in (first_hour, last_hour):
            continue
        for spec, _l in read_file(path):
            for part in split_gap_rows(spec, 0.0):
                starts.append(part.t0)
                ends.append(part.t_end)
    if not starts:
        return None
    return min(starts), max(ends)


def archive_hours(root) -> list[int]:
    """The UTC hours (hours since 1970) that have archive files, oldest first; names only."""
    return sorted({hour for _p, _n, hour, _c in archive_files(Path(root))})


@dataclass
class FileSpan:
    """One archive file as its headers describe it (no pixels are read)."""
    path: Path
    size_bytes: int
    t0: float          # start of its first row (POSIX s)
    t_end: float       # end of its last row
    data_s: float      # seconds of rows it holds (sum over its runs; NaN rows filling a gap count)


def file_spans(root, hour0: int | None = None, hour1: int | None = None) -> list[FileSpan]:
    """The archive's files of UTC hours ``hour0..hour1`` (hours since 1970; None: no
    limit), hour files before chunks, described from their headers only, so a look at a
    day of files costs milliseconds. Takes no lock: a chunk that a writer consolidates
    while we look is skipped (its rows are then in the hour file)."""
    out = []
    for path, _name, _hour, _chunk in archive_files(Path(root), hour0, hour1):
        try:
            size = path.stat().st_size
            with fits.open(path, memmap=False) as hdul:
                if hdul[0].header.get("RXFORMAT") != FORMAT:
                    raise RxlogError(f"{path}: not an rxlog archive file (primary RXFORMAT is not {FORMAT!r})")
                runs = []
                for hdu in hdul[1:]:
                    if hdu.name == "POWER":
                        t = time_axis(hdu.header, 1, path)
                        runs.append((t["t0"], int(hdu.header["NAXIS1"]) * t["cadence"]))
        except FileNotFoundError:
            continue
        except (OSError, KeyError, ValueError, TypeError, IndexError) as e:
            raise RxlogError(f"{path}: unreadable archive file ({e})") from None
        if runs:
            out.append(FileSpan(path=path, size_bytes=size, t0=min(a for a, _ in runs),
                                t_end=max(a + d for a, d in runs), data_s=sum(d for _, d in runs)))
    return out


def read_spectrum_fits(path) -> DynamicSpectrum:
    """Read a dynamic spectrum from a FITS file: one of ours, or a foreign 2-D image whose axes
    are standard WCS (one CTYPE 'FREQ' in Hz/kHz/MHz, the other 'TIME' or 'UTC' in s with its
    origin from MJDREF, MJDREFI+MJDREFF, JDREF or DATEREF; DATE-OBS as a fallback), in either
    axis order. BUNIT starting with 'dB' means log power; anything else is linear power and is
    converted to dB (zero or negative values become NaN with FLAG_GAP). OBSGEO-B/L/H (or -X/Y/Z)
    give the site in ``meta``. Raises RxlogError naming the file and keyword when it cannot,
    and for a foreign file whose axes fall outside ``rxlog.validate``'s limits (16-24 MHz not
    reached, time step, channel width, dates outside the receiver era)."""
    path = Path(path)
    check_complete(path)
    with quiet_astropy():
        if is_own(path):
            sets = read_file(path)
            if len(sets) != 1:
                raise RxlogError(f"{path}: holds {len(sets)} segments; read it with read_archive")
            return sets[0][0]
        with open_foreign(path) as img:
            return img.block(0, img.n_time)
