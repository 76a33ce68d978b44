"""Features measured on each event, one function per path: what the classification reads.

Every event gets start, end and peak time; fmin, fmax; peak excess (dB) and SNR;
integrated excess; a drift rate from a weighted fit of arrival time against frequency
using the true sampling time of each channel (rxlog.detect.drift), with its error;
duration at fixed frequency (``run_s``); bandwidth, and the morphology the rules need
(instantaneous width, whole rows lit at once, sweep sub-bands filled).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from rxlog.constants import MAD_TO_SIGMA
from rxlog.detect.components import Component
from rxlog.detect.drift import fit_drift, profile_arrivals
from rxlog.detect.grid import Grid
from rxlog.detect.impulses import Storm
from rxlog.detect.settings import DWELL_DARK, DWELL_LIT, PULSE_DARK, Settings

# ------------------------------------------------------------------------------------
# Bursts (the fine path, and SumThreshold lines)
# ------------------------------------------------------------------------------------

@dataclass
class _Core:
    """The half-maximum core of an event: per row (the rows, their channel range and
    width in MHz, their peak excess) and per channel (the channels, each cell's channel
    index among them, their peak excess), and the median run of rows at fixed frequency."""

    urows: np.ndarray
    rmin: np.ndarray
    rmax: np.ndarray
    width: np.ndarray
    rw: np.ndarray
    ucols: np.ndarray
    cinv: np.ndarray
    col_pk: np.ndarray
    run: float


def fine_features(g: Grid, s: Settings, c: Component, has_sk: bool, smooth_ch: int) -> dict:
    """Features of a burst (or a line) from the fine path's cells: ``has_sk`` when the
    spectra carry spectral kurtosis, ``smooth_ch`` the smoothing box's width in channels."""
    cad = g.cadence
    rows, cols = c.rows, c.cols
    t = g.t0 + rows * cad + g.offsets[cols]
    ex, raw = c.values["ex"], c.values["raw"]
    ipk = int(np.argmax(ex))
    fmin = float(g.f_mhz[cols.min()] - g.chan_mhz / 2)
    fmax = float(g.f_mhz[cols.max()] + g.chan_mhz / 2)
    bw = fmax - fmin
    lo_c, hi_c = int(cols.min()), int(cols.max())
    truncated = ((lo_c == 0 or g.always[lo_c - 1]) and (hi_c == g.n_chan - 1 or g.always[hi_c + 1]))
    core = _core(g, rows, cols, ex)
    full_rows = float(np.sum(core.rw * (core.width >= 0.8 * bw)) / max(core.rw.sum(), 1e-12))
    lin = np.power(10.0, raw.astype(np.float64) / 10.0) - 1.0
    d = _drift(g, s, c, lin, core, 0.5 * (fmin + fmax))
    return {
        "path": "fine", "sign": 1,
        "start": float(t.min()), "end": float(t.max() + cad), "peak": float(t[ipk] + cad / 2),
        "fmin": fmin, "fmax": fmax, "fc_mhz": 0.5 * (fmin + fmax),
        "peak_excess_db": float(ex[ipk]), "snr": float(c.values["sig"].max()),
        "integrated_excess": float(lin.sum() * cad * g.chan_mhz),
        "run_s": core.run * cad,
        "span_s": float(t.max() + cad - t.min()),
        "bandwidth_mhz": bw, "inst_bw_mhz": float(np.median(core.width[core.rw >= 0.5 * core.rw.max()])),
        "full_rows": full_rows, "n_rows": int(len(core.urows)),
        "sk_fraction": float(np.mean(c.values["sk"] > 0)) if has_sk else None,
        "bursty": False, "truncated": bool(truncated),
        "one_subband": _fills_one_subband(g, lo_c, hi_c, smooth_ch),
        "n_dwells": int(len(np.unique(g.sb_id[core.ucols]))) if g.n_sub > 1 else 2,
        "subband_rows": len(core.urows) <= 10 and all(_fills_one_subband(g, int(a), int(b), smooth_ch)
                                                      for a, b in zip(core.rmin, core.rmax)),
        "pulse_share": _pulse_share(g, c), "dwell_rows": _dwell_rows(g, c),
        **d,
    }


def _pulse_share(g: Grid, c: Component) -> float | None:
    """Share of the event's unsmoothed excess (dB, positive part) in pieces lit for one
    time step only, a piece being a row of a coarse channel (``slow_freq_mhz``): its mean
    excess over the observed cells, with the same coarse channel in the steps before and
    after under PULSE_DARK of it. Pieces outside the event (and beyond what the buffer
    held around it) count as dark, and so do pieces masked as impulses (a pulse of the
    same bunch). A piece is lit 4 noise units above the background (the noise per cell
    from the observed cells just around the event, over the root of its cells) and at a
    quarter of the event's brightest pieces. None when nothing is lit."""
    rows, cols = c.rows, c.cols
    ar, ac, av = c.around if c.around is not None else (rows[:0], cols[:0], {k: v[:0] for k, v in c.values.items()})
    r = np.concatenate([rows, ar]).astype(np.int64)
    raw = np.concatenate([c.values["raw"], av["raw"]]).astype(np.float64)
    seen = np.concatenate([c.values["unseen"], av["unseen"]]) == 0
    inside = np.arange(len(r)) < len(rows)
    gr = g.groups[np.concatenate([cols, ac])].astype(np.int64)
    key = (r - r.min() + 1) * (g.n_groups + 1) + gr
    ukey, inv = np.unique(key, return_inverse=True)
    n = np.bincount(inv, seen.astype(np.float64))
    mean = np.bincount(inv, np.where(seen, raw, 0.0)) / np.maximum(n, 1.0)
    own = np.bincount(inv, inside.astype(np.float64)) > 0          # pieces of the event itself
    around_seen = seen & ~inside
    noise = MAD_TO_SIGMA * float(np.median(np.abs(raw[around_seen]))) if around_seen.sum() >= 16 else 0.0

    def at(k):
        i = np.clip(np.searchsorted(ukey, k), 0, len(ukey) - 1)
        return np.where(ukey[i] == k, mean[i], 0.0)

    pos = np.where(own & (n > 0), np.clip(mean, 0.0, None), 0.0)
    if pos.max(initial=0.0) <= 0:
        return None
    lit = (pos >= 0.25 * float(np.percentile(pos[pos > 0], 99))) & (pos >= 4.0 * noise / np.sqrt(np.maximum(n, 1.0)))
    if not lit.any():
        return None
    step = g.n_groups + 1
    dark = (at(ukey - step) <= PULSE_DARK * mean) & (at(ukey + step) <= PULSE_DARK * mean)
    return float(pos[lit & dark].sum() / pos[lit].sum())


def _dwell_rows(g: Grid, c: Component) -> float | None:
    """For a sweeping receiver: the share of the event's rows (weighted by their peak,
    unsmoothed excess) lit in whole sweep dwells and nothing else. In such a row every
    sub-band is either lit (DWELL_LIT of its peak or more in three eighths of it in four)
    or dark (under DWELL_DARK of it in three eighths in four), and one at least is lit: a
    pulse shorter than a dwell lights every channel sampled with it at once and none
    sampled a dwell earlier or later, whereas a natural burst's edges fall anywhere.
    None without a sweep."""
    if g.n_sub < 2:
        return None
    rows, cols = c.rows, c.cols
    seen = c.values["unseen"] == 0
    raw = np.where(seen, c.values["raw"], 0.0).astype(np.float64)
    nq = len(g.q_start)
    q = np.searchsorted(g.q_start, cols, side="right") - 1
    r = rows - rows.min()
    key = r * nq + q
    ukey, inv = np.unique(key, return_inverse=True)
    mean = np.bincount(inv, raw) / np.maximum(np.bincount(inv, seen.astype(np.float64)), 1.0)
    ur, uq = ukey // nq, ukey % nq
    n_rows = int(r.max()) + 1
    row_pk = np.zeros(n_rows)
    np.maximum.at(row_pk, ur, mean)
    sb = g.q_owner[uq]
    per_sb = np.bincount(g.q_owner, minlength=g.n_sub).astype(np.float64)
    lit = np.zeros((n_rows, g.n_sub))
    on = np.zeros((n_rows, g.n_sub))
    np.add.at(lit, (ur, sb), (mean >= DWELL_LIT * row_pk[ur]).astype(np.float64))
    np.add.at(on, (ur, sb), (mean > DWELL_DARK * row_pk[ur]).astype(np.float64))
    whole = lit >= 0.75 * per_sb[None, :]
    partial = (on > 0.25 * per_sb[None, :]) & ~whole
    aligned = whole.any(axis=1) & ~partial.any(axis=1) & (row_pk > 0)
    w = np.clip(row_pk, 0.0, None)
    return float(w[aligned].sum() / w.sum()) if w.sum() > 0 else None


def _core(g: Grid, rows: np.ndarray, cols: np.ndarray, ex: np.ndarray) -> _Core:
    """Morphology from the half-maximum core: per row (instantaneous width, and whether
    the row spans nearly the whole event band at once, as an impulse does) and per
    channel (duration at fixed frequency)."""
    urows, inv = np.unique(rows, return_inverse=True)
    row_pk = np.zeros(len(urows)); np.maximum.at(row_pk, inv, ex)
    core = ex >= 0.5 * row_pk[inv]
    rmin = np.full(len(urows), np.iinfo(np.int64).max); rmax = np.full(len(urows), -1)
    np.minimum.at(rmin, inv[core], cols[core]); np.maximum.at(rmax, inv[core], cols[core])
    width = (rmax - rmin + 1) * g.chan_mhz
    rw = np.clip(row_pk, 0, None)
    ucols, cinv = np.unique(cols, return_inverse=True)
    col_pk = np.zeros(len(ucols)); np.maximum.at(col_pk, cinv, ex)
    ccore = ex >= 0.5 * col_pk[cinv]
    run = _row_runs_median(rows[ccore], cols[ccore])
    return _Core(urows, rmin, rmax, width, rw, ucols, cinv, col_pk, run)


def _drift(g: Grid, s: Settings, c: Component, lin: np.ndarray, core: _Core, fc: float) -> dict:
    """Drift at the event's centre frequency ``fc``, where it is reported.

    Short events: arrival times from the light curve per bin (see profile_arrivals),
    which takes masked steps as missing samples; longer ones from the peak step. The
    steps just before and after the event count too: the quiet sample before a burst
    that rises within one step pins its peak as well as any inside it.
    """
    cad = g.cadence
    rows, cols, ex = c.rows, c.cols, c.values["ex"]
    # Only cells actually observed count: the smoothing carries values into masked cells
    # (a pulse's dwell) from channels sampled at another moment.
    observed = c.values["unseen"] == 0
    bin_mhz = max(s.smooth_freq_mhz / 2, g.chan_mhz)
    sweep = g.n_sub > 1
    pr, pc, pl, po = rows, cols, lin, observed
    if c.around is not None and len(c.around[0]):
        ar, ac, av = c.around
        pr, pc = np.concatenate([rows, ar]), np.concatenate([cols, ac])
        pl = np.concatenate([lin, np.power(10.0, av["raw"].astype(np.float64) / 10.0) - 1.0])
        po = np.concatenate([observed, av["unseen"] == 0])
    pa = profile_arrivals(pr, pc, pl, po, g.t0 + pr * cad + g.offsets[pc] + cad / 2,
                          g.f_mhz, g.sb_id, bin_mhz, cad)
    if pa is not None and len(pa[0]) >= 3:
        return fit_drift(pa[0], pa[1], pa[2], bin_mhz, cad, fc_mhz=fc, dwell=pa[3] if sweep else None)
    t_arr, w_arr = _peak_arrivals(g, rows, ex, observed, core)
    return fit_drift(t_arr, g.f_mhz[core.ucols], w_arr, bin_mhz, cad, fc_mhz=fc,
                     dwell=g.sb_id[core.ucols] if sweep else None)


def _peak_arrivals(g: Grid, rows: np.ndarray, ex: np.ndarray, observed: np.ndarray, core: _Core):
    """Arrival time and weight per channel of the event: the time of its (smoothed)
    peak among observed cells, interpolated between time steps by the parabola through
    the peak step and its neighbours. (A centroid would be pulled late by the decay,
    which is longer at lower frequency for a Type III, and a leading edge is quantised
    to whole steps wherever a sweep samples many channels at once.)"""
    cad = g.cadence
    ucols, cinv, col_pk = core.ucols, core.cinv, core.col_pk
    key = cinv.astype(np.int64) * (int(rows.max()) + 3) + (rows - int(rows.min()) + 1)
    order = np.argsort(key)
    skey, sex = key[order], ex[order]
    ex_obs = np.where(observed, ex, -np.inf)
    obs_pk = np.full(len(ucols), -np.inf)
    np.maximum.at(obs_pk, cinv, ex_obs)
    has_obs = np.isfinite(obs_pk)
    pk_idx = np.full(len(ucols), -1)
    is_pk = observed & (ex_obs >= obs_pk[cinv])
    pk_idx[cinv[is_pk]] = np.flatnonzero(is_pk)
    is_any = ex >= col_pk[cinv]                      # channels seen nowhere: their peak
    fallback = np.full(len(ucols), -1)
    fallback[cinv[is_any]] = np.flatnonzero(is_any)
    pk_idx = np.where(has_obs, pk_idx, fallback)
    kp = key[pk_idx]

    def at(k):
        i = np.searchsorted(skey, k)
        i = np.clip(i, 0, len(skey) - 1)
        return np.where(skey[i] == k, sex[i], np.nan)

    e0, em, ep = ex[pk_idx], at(kp - 1), at(kp + 1)
    em = np.where(np.isfinite(em), em, 0.0)
    ep = np.where(np.isfinite(ep), ep, 0.0)
    den = em - 2 * e0 + ep
    delta = np.where(den < 0, np.clip(0.5 * (em - ep) / np.where(den < 0, den, -1.0), -0.5, 0.5), 0.0)
    t_arr = g.t0 + (rows[pk_idx] + delta) * cad + g.offsets[ucols] + cad / 2
    return t_arr, np.clip(np.where(has_obs, obs_pk, 0.0), 0, None) ** 2


def _row_runs_median(rows: np.ndarray, cols: np.ndarray) -> float:
    """Median over channels of the longest run of consecutive rows of the event there."""
    order = np.lexsort((rows, cols))
    r, c = rows[order], cols[order]
    new = np.ones(len(r), dtype=bool)
    new[1:] = (c[1:] != c[:-1]) | (r[1:] != r[:-1] + 1)
    run_id = np.cumsum(new) - 1
    run_len = np.bincount(run_id)
    run_col = c[new]
    longest = np.zeros(int(c.max()) + 1, dtype=np.int64)
    np.maximum.at(longest, run_col, run_len)
    return float(np.median(longest[np.unique(c)]))


def _fills_one_subband(g: Grid, lo_c: int, hi_c: int, smooth_ch: int) -> bool:
    """The event spans the whole usable part of one sweep sub-band and nothing else,
    as a short signal caught by one dwell does (edges within 50 kHz, plus the half
    width of the frequency smoothing, which spreads a lit dwell past its edges)."""
    if g.n_sub < 2:
        return False
    b = g.sb_id[(lo_c + hi_c) // 2]
    usable = np.flatnonzero(~g.always[g.sb_start[b]:g.sb_stop[b]]) + g.sb_start[b]
    if len(usable) == 0:
        return False
    tol = max(2, int(round(0.05 / g.chan_mhz)))
    spread = tol + smooth_ch // 2
    return (usable[0] - spread <= lo_c <= usable[0] + tol) and (usable[-1] - tol <= hi_c <= usable[-1] + spread)


# ------------------------------------------------------------------------------------
# Impulse storms
# ------------------------------------------------------------------------------------

def impulse_features(g: Grid, st: Storm) -> dict:
    """Features of an impulse storm: its span, the sub-bands it lit, its strongest impulse."""
    def t_of(row, sb):
        return g.t0 + row * g.cadence + float(g.offsets[g.sb_start[sb]])

    start, end = t_of(st.first, st.first_sb), t_of(st.last, st.last_sb) + g.cadence
    fmin = float(g.f_mhz[g.sb_start[st.sb_lo]] - g.chan_mhz / 2)
    fmax = float(g.f_mhz[g.sb_stop[st.sb_hi] - 1] + g.chan_mhz / 2)
    db = st.peak_db
    return {"path": "impulse", "sign": 1, "start": start, "end": end,
            "peak": t_of(st.peak_row, st.peak_sb) + g.cadence / 2, "fmin": fmin, "fmax": fmax,
            "fc_mhz": 0.5 * (fmin + fmax), "peak_excess_db": db, "snr": st.peak,
            "integrated_excess": float((10 ** (db / 10) - 1) * g.cadence * (fmax - fmin)),
            "run_s": g.cadence, "span_s": end - start, "bandwidth_mhz": fmax - fmin,
            "inst_bw_mhz": fmax - fmin, "full_rows": 1.0, "n_rows": len(st.rows),
            "n_impulses": st.n, "sk_fraction": None, "bursty": False, "drift": None, "drift_err": None,
            "dtdf": 0.0, "dtdf_err": math.inf, "resolved": False, "spread_s": 0.0, "n_bins": 0}


# ------------------------------------------------------------------------------------
# Long events (the slow path)
# ------------------------------------------------------------------------------------

def slow_features(g: Grid, s: Settings, c: Component, sign: int) -> dict | None:
    """Features of a long event on coarse channels (``sign`` -1: a drop), or None when it
    is shorter than ``slow_min_s`` or, for a drop, covers under half the coarse channels
    outside the static mask."""
    rows, cols = c.rows, c.cols
    span_blocks = int(rows.max() - rows.min() + 1)
    if span_blocks * g.block_s < s.slow_min_s:
        return None
    if sign < 0:
        # The negative branch looks for fadeouts, which darken the whole band; a drop
        # over a few coarse channels is the slow baseline's own wobble beside a strong
        # event, not a phenomenon, and is not reported.
        if len(np.unique(cols)) < 0.5 * (~g.g_always).sum():
            return None
    edges = np.flatnonzero(np.isin(g.groups, np.unique(cols)))
    fmin = float(g.f_mhz[edges.min()] - g.chan_mhz / 2)
    fmax = float(g.f_mhz[edges.max()] + g.chan_mhz / 2)
    ex = c.values["ex"]
    ipk = int(np.argmax(sign * ex))
    start = g.t0 + rows.min() * g.block_s
    end = g.t0 + (rows.max() + 1) * g.block_s
    # "bursty": the excess changes a lot from block to block (L-burst storms) rather
    # than rising and falling smoothly (continua).
    prof = np.bincount(rows - rows.min(), weights=sign * ex) / np.maximum(np.bincount(rows - rows.min()), 1)
    rough = float(np.median(np.abs(np.diff(prof))) / max(np.median(prof), 1e-6)) if len(prof) > 3 else 0.0
    gmhz = s.slow_freq_mhz
    # Drift on the coarse grid: the block of peak excess in each coarse channel (a slow
    # Type II lane crosses the band in minutes; a continuum or fadeout shows none).
    ucols, cinv = np.unique(cols, return_inverse=True)
    pk = np.full(len(ucols), -np.inf); np.maximum.at(pk, cinv, sign * ex)
    at_pk = (sign * ex) >= pk[cinv]
    first = np.full(len(ucols), np.iinfo(np.int64).max); np.minimum.at(first, cinv[at_pk], rows[at_pk])
    g_f = np.array([g.f_mhz[g.groups == k].mean() for k in ucols])   # a few dozen groups
    d = fit_drift(g.t0 + (first + 0.5) * g.block_s, g_f, np.clip(pk, 0, None) ** 2,
                  gmhz, g.block_s)
    lin = np.power(10.0, ex.astype(np.float64) / 10.0) - 1.0
    return {
        "path": "slow", "sign": sign,
        "start": float(start), "end": float(end), "peak": float(g.t0 + (rows[ipk] + 0.5) * g.block_s),
        "fmin": fmin, "fmax": fmax, "fc_mhz": 0.5 * (fmin + fmax),
        "peak_excess_db": float(ex[ipk]), "snr": float(np.abs(c.values["sig"]).max()),
        "integrated_excess": float(lin.sum() * g.block_s * gmhz),
        "run_s": float(np.median(np.bincount(cols)[np.unique(cols)]) * g.block_s),
        "span_s": float(end - start), "bandwidth_mhz": fmax - fmin, "inst_bw_mhz": fmax - fmin,
        "full_rows": 1.0, "n_rows": span_blocks, "sk_fraction": None,
        "bursty": rough > 0.3, "texture": float(np.median(c.values["tx"])), **d,
    }

