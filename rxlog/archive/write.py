"""Writing the archive: ArchiveWriter, chunks, consolidation into hour files, recovery, the lock.

Crash safety: every file is written under a temporary name, fsynced, renamed and its
directory fsynced, so a reader sees either the old file or the new one. A writer killed
at any instant loses at most the spectra it held in memory (< 60 s); the next writer
removes temporary files and consolidates leftover chunks. Consolidation is idempotent:
rows already in the hour file are recognised by segment and time and not duplicated.
"""

from __future__ import annotations

import contextlib
import fcntl
import math
import os
import re
import warnings
from pathlib import Path

import numpy as np

from rxlog.archive.layout import (
    HOUR_S,
    day_dirs,
    hdu_set,
    hour_index,
    hour_stem,
    parse_name,
    primary_hdu,
    read_file,
    time_tolerance,
    write_hdus,
)
from rxlog.archive.runs import merge_runs, run_key
from rxlog.errors import RxlogError
from rxlog.fileio import ensure_dir, fsync_dir
from rxlog.spectrum import DynamicSpectrum

CHUNK_S = 60.0                       # longest stretch of spectra held in memory
_LOCK_NAME = ".rxlog-archive.lock"


@contextlib.contextmanager
def locked(root: Path):
    """Exclusive lock of the archive for writing files (flock, released if the process dies)."""
    ensure_dir(root)
    with open(root / _LOCK_NAME, "a") as fh:
        fcntl.flock(fh, fcntl.LOCK_EX)
        try:
            yield
        finally:
            fcntl.flock(fh, fcntl.LOCK_UN)


def _consolidate(root: Path, name: str, hour: int) -> Path | None:
    """Merge the chunks of one hour (and the hour file, if any) into the hour file,
    atomically, then delete the chunks. Call with the archive lock held."""
    sub, stem = hour_stem(name, hour)
    folder = root / sub
    hour_path = folder / f"{stem}.fits"
    chunks = sorted(folder.glob(f"{stem}.*.chunk.fits")) if folder.is_dir() else []
    if not chunks:
        return None
    pieces = read_file(hour_path) if hour_path.exists() else []
    for c in chunks:
        try:
            pieces += read_file(c)
        except RxlogError as e:               # cannot happen for a renamed chunk; keep it aside
            warnings.warn(f"{e}; kept as {c.name}.bad", RuntimeWarning)
            os.replace(c, c.with_name(c.name + ".bad"))
    write_hour(hour_path, name, pieces)
    for c in chunks:
        with contextlib.suppress(FileNotFoundError):
            c.unlink()
    fsync_dir(folder)
    return hour_path


def write_hour(path: Path, name: str, pieces: list[tuple[DynamicSpectrum, bool]]) -> None:
    """Write the hour file ``path`` of station ``name`` from pieces of spectra, joined into
    runs (rows in several pieces are taken once), crash-safely."""
    station = {"name": name}
    hdus = [primary_hdu(station, "hour")]
    for ver, (spec, lossless) in enumerate(merge_runs(pieces), start=1):
        hdus += hdu_set(spec, station, lossless, ver)
    write_hdus(path, hdus)


def _recover(root: Path) -> None:
    """Clean up after a writer that was killed: delete temporary files (only a writer
    holding the lock has any, and we hold it now) and consolidate leftover chunks."""
    pending = set()
    for d in day_dirs(root):
        for entry in os.scandir(d):
            if entry.name.startswith(".") and entry.name.endswith(".tmp"):
                os.unlink(entry.path)
                continue
            parsed = parse_name(entry.name)
            if parsed and parsed[2]:
                pending.add(parsed[:2])
    for name, hour in sorted(pending):
        _consolidate(root, name, hour)


class ArchiveWriter:
    """Append dynamic spectra to the archive under ``root`` (``cfg.archive_dir``).

    ``write(spec)`` takes rows of any length; at most ``CHUNK_S`` of spectra are held in
    memory, the rest reach disk as chunk files. When the UTC hour changes (and on
    ``close()``) the hour's chunks are consolidated into its hour file. Constructing a
    writer first recovers what a killed writer left behind.
    ``station`` is ``cfg['station']`` (name for file names; site for OBSGEO-*).
    """

    def __init__(self, root, station: dict, lossless: bool = False, chunk_s: float = CHUNK_S):
        self.root = Path(root)
        self.station = dict(station)
        self.name = str(station.get("name") or "station")
        if not re.fullmatch(r"[A-Za-z0-9_-]{1,40}", self.name):
            raise RxlogError(f"station name {self.name!r}: expected 1-40 letters, digits, '-' or '_'")
        self.lossless = bool(lossless)
        self.chunk_s = float(chunk_s)
        self._buf: list[DynamicSpectrum] = []
        self._buf_rows = 0
        self._pending: set[int] = set()     # hours with chunks written by us, not yet consolidated
        self._count = 0
        self.rows_written = 0               # rows this writer has put on disk (chunk or hour files)
        with locked(self.root):
            _recover(self.root)

    # -- public
    def write(self, spec: DynamicSpectrum) -> None:
        if spec.n_time == 0:
            return
        if not spec.cadence_s > 0:
            raise ValueError(f"cadence_s must be positive, got {spec.cadence_s}")
        for piece in self._split_hours(spec):
            self._append(piece)

    @property
    def rows_buffered(self) -> int:
        """Rows held in memory, not yet on disk (a crash now would lose them)."""
        return self._buf_rows

    def flush(self) -> None:
        """Put everything held in memory on disk now (as a chunk)."""
        self._write_chunk(self._buf_rows)

    def close(self) -> None:
        """Flush and consolidate every hour this writer touched."""
        self._write_chunk(self._buf_rows, hour_done=True)
        self._consolidate(set(self._pending))

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    # -- internals
    def _split_hours(self, spec: DynamicSpectrum):
        cad, i = spec.cadence_s, 0
        while i < spec.n_time:
            hour = hour_index(spec.t0 + i * cad, cad)
            end = (hour + 1) * HOUR_S
            j = min(spec.n_time, max(i + 1, math.ceil((end - spec.t0 - time_tolerance(cad)) / cad)))
            yield spec.slice_rows(i, j) if (i, j) != (0, spec.n_time) else spec
            i = j

    def _append(self, piece: DynamicSpectrum) -> None:
        if self._buf:
            last = self._buf[-1]
            same = run_key(last) == run_key(piece)
            if same and piece.t0 < last.t_end - time_tolerance(last.cadence_s):
                raise ValueError(f"segment {piece.segment!r}: spectra go back in time "
                                 f"({piece.t0} before {last.t_end})")
            contiguous = same and abs(piece.t0 - last.t_end) <= time_tolerance(last.cadence_s)
            new_hour = hour_index(piece.t0, piece.cadence_s) != hour_index(last.t0, last.cadence_s)
            if not contiguous or new_hour:
                self._write_chunk(self._buf_rows, hour_done=new_hour)
        hour = hour_index(piece.t0, piece.cadence_s)
        done = {h for h in self._pending if h != hour}
        if done:
            self._consolidate(done)
        self._buf.append(piece)
        self._buf_rows += piece.n_time
        rows = max(1, int(self.chunk_s / piece.cadence_s + 1e-9))
        while self._buf_rows >= rows:
            self._write_chunk(rows)

    def _write_chunk(self, rows: int, hour_done: bool = False) -> None:
        """Write the first ``rows`` buffered rows as one chunk file.

        When they are all of an hour that is over and nothing else of that hour is on
        disk (bulk writes with long chunks), they go straight to the hour file instead:
        the same atomic write, without writing and merging a chunk.
        """
        if rows <= 0 or not self._buf:
            return
        spec = self._buf[0] if len(self._buf) == 1 else _concat(self._buf)
        part, rest = spec.slice_rows(0, rows), spec.slice_rows(rows, spec.n_time)
        hour = hour_index(part.t0, part.cadence_s)
        sub, stem = hour_stem(self.name, hour)
        folder = self.root / sub
        with locked(self.root):
            hour_done = hour_done or part.t_end >= (hour + 1) * HOUR_S - time_tolerance(part.cadence_s)
            alone = (hour_done and hour not in self._pending
                     and not (folder / f"{stem}.fits").exists()
                     and not (folder.is_dir() and any(folder.glob(f"{stem}.*.chunk.fits"))))
            if alone:
                write_hdus(folder / f"{stem}.fits",
                              [primary_hdu(self.station, "hour")] + hdu_set(part, self.station, self.lossless, 1))
            else:
                path = folder / f"{stem}.{os.getpid()}-{self._count:06d}.chunk.fits"
                write_hdus(path, [primary_hdu(self.station, "chunk")] + hdu_set(part, self.station, self.lossless, 1))
                self._pending.add(hour)
        self._count += 1
        self.rows_written += part.n_time
        self._buf = [rest] if rest.n_time else []
        self._buf_rows = rest.n_time

    def _consolidate(self, hours: set[int]) -> None:
        with locked(self.root):
            for hour in sorted(hours):
                _consolidate(self.root, self.name, hour)
                self._pending.discard(hour)


def _concat(pieces: list[DynamicSpectrum]) -> DynamicSpectrum:
    first = pieces[0]
    return DynamicSpectrum(
        power_db=np.concatenate([p.power_db for p in pieces]), t0=first.t0, cadence_s=first.cadence_s,
        freq_hz=first.freq_hz, flags=np.concatenate([p.flags for p in pieces]),
        chan_offset_s=first.chan_offset_s, segment=first.segment, meta=dict(first.meta))


def write_spectrum_fits(spec: DynamicSpectrum, path, station: dict, lossless: bool = False) -> Path:
    """Write one self-contained FITS file with the archive's layout (one POWER/FLAGS/CHANNELS
    set), atomically. ``station`` gives the site and name (``cfg['station']``)."""
    path = Path(path)
    write_hdus(path, [primary_hdu(station, "spectrum")] + hdu_set(spec, station, lossless, 1))
    return path
