"""Events' kept full-resolution cutouts, read back for their zooms.

A cutout is a dynamic spectrum in the archive's FITS layout, written by the logger
around each new event; the event's ``cutout_path`` says where (relative paths are under
the storage root).
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np

from rxlog.archive.read import read_spectrum_fits
from rxlog.errors import RxlogError
from rxlog.review.data import DISPLAY_FLAGS, add_rows, display_channels

CUTOUT_MAX_BINS = (720, 512)   # a cutout is shown at its own resolution up to this many (time, channel) bins


def cutout_file(cfg, ev: dict) -> Path | None:
    """Where an event's kept full-resolution cutout is (relative paths are under the storage root)."""
    if not ev.get("cutout_path"):
        return None
    p = Path(ev["cutout_path"])
    return p if p.is_absolute() else Path(cfg.storage_root) / p


def read_cutout(cfg, ev: dict):
    """An event's cutout as (t_edges, f_edges_mhz, excess) at its own resolution, or None when there is none.

    The background is the per-channel median over the cutout (its burst is brief against
    its length). A cutout that is missing or does not read is no cutout: the zoom is then
    drawn from the archive.
    """
    path = cutout_file(cfg, ev)
    if path is None or not path.is_file():
        return None
    try:
        spec = read_spectrum_fits(path)
    except (RxlogError, OSError, ValueError):
        return None
    n_t = min(spec.n_time, CUTOUT_MAX_BINS[0])
    n_f = min(spec.n_chan, CUTOUT_MAX_BINS[1])
    f = spec.freq_hz / 1e6
    df = float(np.median(np.diff(f))) if f.size > 1 else 0.01
    f_edges = np.linspace(f.min() - df / 2, f.max() + df / 2, n_f + 1)
    t_edges = np.linspace(spec.t0, spec.t_end, n_t + 1)
    chan_bin = np.clip(np.searchsorted(f_edges, f, side="right") - 1, 0, n_f - 1)
    row_bin = np.floor((spec.times - spec.t0) / (t_edges[1] - t_edges[0])).astype(np.int64)
    valid = np.isfinite(spec.power_db) & ((spec.flags & DISPLAY_FLAGS) == 0)
    sums, counts = np.zeros((n_t, n_f)), np.zeros((n_t, n_f))
    add_rows(sums, counts, row_bin, *display_channels(spec.power_db, valid, chan_bin, n_f))
    with np.errstate(invalid="ignore", divide="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        power = sums / counts
        excess = power - np.nanmedian(power, axis=0)[None, :]
    if not np.isfinite(excess).any():
        return None
    return t_edges, f_edges, excess
