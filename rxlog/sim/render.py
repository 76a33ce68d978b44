"""Drawing a sky model on a grid of times and frequencies: the mean power each cell
receives (K at the receiver input) and the background under it, with each event's
strongest excess for the truth table.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rxlog.sim.antenna import RECEIVER_NOISE_K
from rxlog.sim.model import SkyModel


@dataclass
class Grid:
    """Where a model is drawn: row times, channel centres (sorted), each channel's sampling
    offset within a row, the integration window of a cell and the channel width."""
    times: np.ndarray
    freq_hz: np.ndarray
    offsets_s: np.ndarray
    dwell_s: float
    df_hz: float


def render(model: SkyModel, grid: Grid, peaks: dict | None = None, events=None):
    """Mean power (K at the receiver input) on a grid, and the background under it.

    Returns (total, background), float64 (n_time, n_chan). ``peaks`` (event id -> [ratio,
    t, f]) collects each event's extreme of (background + event) / background; events
    are drawn where their drawing area meets the grid.
    """
    t_rows = np.asarray(grid.times, dtype=np.float64)
    f = np.asarray(grid.freq_hz, dtype=np.float64)
    off = np.asarray(grid.offsets_s, dtype=np.float64)
    gal, mm = model.background_rows(t_rows, f)
    h = model.bandpass(f)[None, :].astype(np.float32)
    events = model.events if events is None else events
    lo_t = t_rows[0] + min(off.min(), 0) - grid.dwell_s
    hi_t = t_rows[-1] + max(off.max(), 0) + grid.dwell_s
    subs = []
    for e in events:
        if not (e.r_t1 > lo_t and e.r_t0 < hi_t and e.r_f1 > f[0] - grid.df_hz and e.r_f0 < f[-1] + grid.df_hz):
            continue
        ia = np.searchsorted(t_rows, e.r_t0 - off.max() - grid.dwell_s)
        ib = np.searchsorted(t_rows, e.r_t1 - off.min() + grid.dwell_s)
        ca = np.searchsorted(f, e.r_f0 - grid.df_hz)
        cb = np.searchsorted(f, e.r_f1 + grid.df_hz)
        if ia < ib and ca < cb:
            subs.append((e, ia, ib, ca, cb))
    fade = None
    own = {}
    for e, ia, ib, ca, cb in subs:
        if e.cls == "fadeout":
            a = e.absorption_db(t_rows[ia:ib, None] + off[None, ca:cb], f[None, ca:cb])
            if fade is None:
                fade = np.zeros_like(gal)
            fade[ia:ib, ca:cb] += a
            own[id(e)] = a
    if fade is not None:
        fade = (10 ** (-fade / 10)).astype(np.float32)
        background = h * (fade * gal + mm) + np.float32(RECEIVER_NOISE_K)
    else:
        background = h * (gal + mm) + np.float32(RECEIVER_NOISE_K)
    total = background.copy()
    for e, ia, ib, ca, cb in subs:
        if e.cls == "fadeout":
            if peaks is not None:     # this fadeout's own dip, whatever others overlap it
                g, m = gal[ia:ib, ca:cb], mm[ia:ib, ca:cb]
                b0 = h[:, ca:cb] * (g + m) + RECEIVER_NOISE_K
                b1 = h[:, ca:cb] * (g * 10 ** (-own[id(e)] / 10) + m) + RECEIVER_NOISE_K
                _track(peaks, e, b1 / b0, t_rows[ia:ib, None] + off[None, ca:cb], f[ca:cb], low=True)
            continue
        tt = t_rows[ia:ib, None] + off[None, ca:cb]
        ff = f[None, ca:cb]
        p = e.shape(tt, ff, grid.dwell_s, grid.df_hz) * e.scale
        if e.path == "sky":
            p = p * model.source_propagation(e.source, t_rows[ia:ib, None], ff)
            if fade is not None:
                p = p * fade[ia:ib, ca:cb]
        if e.path != "rx":
            p = h[:, ca:cb] * p
        total[ia:ib, ca:cb] += p
        if peaks is not None:
            _track(peaks, e, 1.0 + p / background[ia:ib, ca:cb], tt, f[ca:cb])
    return total, background


def _track(peaks, e, ratio, tt, f, low=False):
    k = int(np.argmin(ratio) if low else np.argmax(ratio))
    i, c = np.unravel_index(k, ratio.shape)
    r = float(ratio[i, c])
    cur = peaks.get(id(e))
    if cur is None or (r < cur[0] if low else r > cur[0]):
        peaks[id(e)] = [r, float(np.broadcast_to(tt, ratio.shape)[i, c]), float(f[c])]
