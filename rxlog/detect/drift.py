"""Drift rates: arrival time against frequency, and the Type III drift law.

An event's drift comes from the time it arrives at each frequency. Short events take
their arrivals from a light-curve fit per frequency bin (``profile_arrivals``), which
treats masked steps as missing samples; longer ones from the peak step (see
rxlog.detect.features). ``fit_drift`` then fits arrival time against frequency: a
Theil-Sen first cut, weighted least squares and outlier rounds, whole sweep dwells left
out when they sit off the line. ``ah_drift`` is the decametric Type III law the
classification compares with.
"""

from __future__ import annotations

import itertools
import math

import numpy as np

from rxlog.constants import MAD_TO_SIGMA

# Alvarez & Haddock 1973 (Solar Physics 29, 197): Type III drift df/dt = -0.01 f^1.84 MHz/s.
AH_COEFF, AH_INDEX = 0.01, 1.84

# Shapes tried for a fast burst's light curve at one frequency: a Gaussian rise of
# RISE_FRACTIONS x the e-folding time of an exponential decay, the decay DECAY_S long at
# 20 MHz and scaling as 1/f (the usual description of a decametric Type III's profile;
# values from memory), the rise scaling with it or not. The arrival time is the peak of
# the best fitting shape.
DECAY_S = (0.5, 0.9, 1.5, 2.5, 4.0, 6.0)
RISE_FRACTIONS = (0.25, 0.5)
PROFILE_MAX_ROWS = 40
# A bin's weight in the drift fit falls when shifting its fitted curve by a third of a step
# costs less than this share of the curve's power (its peak is not pinned down).
PROFILE_CONTRAST = 0.05


def ah_drift(f_mhz):
    """Type III drift rate (MHz/s, negative) at f MHz after Alvarez & Haddock 1973."""
    return -AH_COEFF * np.asarray(f_mhz, dtype=np.float64) ** AH_INDEX


# ------------------------------------------------------------------------------------
# Arrival time against frequency
# ------------------------------------------------------------------------------------

def fit_drift(t: np.ndarray, f_mhz: np.ndarray, w: np.ndarray, bin_mhz: float,
              cadence_s: float, fc_mhz: float | None = None, dwell: np.ndarray | None = None) -> dict:
    """Drift rate from a weighted fit of arrival time against frequency.

    Cells are binned in frequency (``bin_mhz``); each bin's arrival time is the
    excess-weighted mean of its cells' true times, and its weight the bin's total, capped
    at the median bin's. A line t = a + s (f - fc) (a quadratic when the bins span more
    than 2 MHz, so the slope is the local one at fc, by default the weighted centre of
    the bins) is fitted by weighted least squares, leaving out bins far off the curve
    (see ``_first_cut`` and ``_refit``); the slope's error comes from the residual scatter.
    Drift = 1/s MHz/s, error s_err/s^2.
    ``resolved`` is False when the arrival spread across the band is under half a
    time step or under three standard errors: then the event is simultaneous at this
    resolution (drift None).
    """
    out = {"drift": None, "drift_err": None, "dtdf": 0.0, "dtdf_err": math.inf,
           "resolved": False, "spread_s": 0.0, "n_bins": 0}
    w = np.clip(np.asarray(w, dtype=np.float64), 0, None)
    if w.sum() <= 0:
        return out
    b = np.floor((f_mhz - f_mhz.min()) / max(bin_mhz, 1e-9)).astype(np.int64)
    nb = int(b.max()) + 1
    W = np.bincount(b, weights=w, minlength=nb)
    ok = W > 0
    if ok.sum() < 3:
        out["n_bins"] = int(ok.sum())
        return out
    tb = np.bincount(b, weights=w * t, minlength=nb)[ok] / W[ok]
    fb = np.bincount(b, weights=w * f_mhz, minlength=nb)[ok] / W[ok]
    # A bin's weight saturates at the median: past some signal to noise its arrival time
    # is as good as the time step allows, and one strong narrow signal inside the event
    # must not outweigh the rest of it.
    Wb = np.minimum(W[ok], np.median(W[ok]))
    Wb = Wb / Wb.mean()
    fc = float(np.sum(Wb * fb) / np.sum(Wb)) if fc_mhz is None else float(fc_mhz)
    x = fb - fc
    span = float(np.ptp(fb))
    deg = 2 if (span > 2.0 and len(fb) >= 8) else 1
    A = np.stack([x ** k for k in range(deg + 1)], axis=1)
    db = None
    if dwell is not None:
        # the sweep dwell of each bin (``dwell``: its id per input cell)
        db = np.bincount(b, weights=np.asarray(dwell, dtype=np.float64) * w, minlength=nb)[ok] / W[ok]
        db = np.round(db).astype(np.int64)
    keep, allowed = _first_cut(tb, fb, cadence_s, deg, db)
    fit = _refit(A, tb, Wb, keep, allowed, cadence_s, deg)
    if fit is None:
        return out
    coef, cov0, r_all, keep = fit
    resid = r_all[keep]
    dof = max(int(keep.sum()) - (deg + 1), 1)
    s2 = float(np.sum(Wb[keep] * resid ** 2) / dof)
    # Arrival times are quantised by the time step: never claim better than that.
    s2 = max(s2, cadence_s ** 2 / 12.0 / max(int(keep.sum()), 1))
    s_err = math.sqrt(max(cov0[1, 1] * s2, 0.0))
    s = float(coef[1])
    spread = abs(s) * span
    out.update(dtdf=s, dtdf_err=s_err, spread_s=spread, n_bins=int(len(tb)))
    if spread >= 0.5 * cadence_s and abs(s) >= 3.0 * s_err and s != 0.0:
        out.update(drift=1.0 / s, drift_err=s_err / s ** 2, resolved=True)
    return out


def _first_cut(tb: np.ndarray, fb: np.ndarray, cadence_s: float, deg: int,
               db: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
    """Bins kept for the first fit, and the bins later rounds may take back.

    A signal crossing the event (an ionosonde sweep through a Type III) owns a minority
    of the bins and would bend a least-squares slope; the first cut is against a
    Theil-Sen line (the median of the pairwise slopes), which such a minority cannot
    bend: bins more than three robust sigmas (and a time step) off it are left out.
    ``db`` (the sweep dwell of each bin, or None): a sweep samples each sub-band at one
    moment, so a pulse or a missing step there moves all its bins together; a sub-band
    whose bins sit half a step or more off the line, while most of the event agrees, is
    left out whole, and later rounds never take it back. The cut stands only if it keeps
    at least half the bins and the curve's parameters + 2.
    """
    i, j = np.triu_indices(len(tb), 1)
    dx = fb[j] - fb[i]
    pair = np.abs(dx) > 1e-9
    keep = np.ones(len(tb), dtype=bool)
    allowed = np.ones(len(tb), dtype=bool)       # bins the later rounds may take back
    if pair.sum() >= 3:
        ts = float(np.median((tb[j] - tb[i])[pair] / dx[pair]))
        r0 = tb - ts * fb
        r0 = r0 - np.median(r0)
        cut = np.abs(r0) <= max(3.0 * MAD_TO_SIGMA * float(np.median(np.abs(r0))), cadence_s)
        if db is not None:
            for d in np.unique(db):
                sel = db == d
                if abs(float(np.median(r0[sel]))) >= 0.5 * cadence_s:
                    cut &= ~sel
        if cut.sum() >= max(deg + 3, 0.5 * len(tb)):
            keep = cut
            if db is not None:
                allowed = keep.copy()
    return keep, allowed


def _refit(A: np.ndarray, tb: np.ndarray, Wb: np.ndarray, keep: np.ndarray, allowed: np.ndarray,
           cadence_s: float, deg: int):
    """Weighted least squares, then up to three rounds leaving out bins more than three
    robust sigmas (and a time step) off the curve, never fewer than half the bins nor
    fewer than the curve's parameters + 2. Returns (coefficients, their unscaled
    covariance, residuals of all bins, the bins kept), or None for a singular fit."""
    for _ in range(4):
        AtW = A[keep].T * Wb[keep]
        try:
            cov0 = np.linalg.inv(AtW @ A[keep])
        except np.linalg.LinAlgError:
            return None
        coef = cov0 @ (AtW @ tb[keep])
        r_all = tb - A @ coef
        mad = MAD_TO_SIGMA * float(np.median(np.abs(r_all[keep])))
        new_keep = (np.abs(r_all) <= max(3.0 * mad, cadence_s)) & allowed
        if new_keep.sum() < max(deg + 3, 0.5 * len(tb)) or np.array_equal(new_keep, keep):
            break
        keep = new_keep
    return coef, cov0, r_all, keep


# ------------------------------------------------------------------------------------
# Arrival times from light curves
# ------------------------------------------------------------------------------------

def profile_arrivals(rows: np.ndarray, cols: np.ndarray, lin: np.ndarray, observed: np.ndarray,
                     t_cell: np.ndarray, f_mhz: np.ndarray, group: np.ndarray, bin_mhz: float,
                     cadence_s: float):
    """Arrival time per frequency bin from the light curve there, holes allowed.

    Cells (``rows``, ``cols``, linear excess ``lin``, sampled at ``t_cell``: the event's own
    and the quiet ones one step either side) are averaged per row in bins of ``bin_mhz``
    that never straddle two ``group`` ids (channels of one sweep dwell share their sample
    times). Each bin's curve, seen only where ``observed``, is fitted around its highest
    step by shapes of DECAY_S x RISE_FRACTIONS shifted in steps of 1/10 of the cadence
    (amplitude by least squares); the one shape that fits the whole event best is kept,
    and each bin's arrival is the peak of its best shift, refined by a parabola through
    the neighbouring shifts. A masked step (a pulse taken out) is then a missing sample,
    not a wrong peak. Returns (t, f, weight, group) per bin, weight the fitted amplitude
    squared, less where the peak is not pinned down (PROFILE_CONTRAST); None when the
    cells span more than PROFILE_MAX_ROWS steps (a storm, or a stream of millisecond
    spectra).
    """
    r0 = int(rows.min())
    n_rows = int(rows.max()) - r0 + 1
    if n_rows > PROFILE_MAX_ROWS or not observed.any():
        return None
    y, seen, F, G, t_bin = _bin_curves(rows - r0, cols, lin, observed, t_cell, f_mhz, group, bin_mhz, n_rows)
    nb = len(F)
    if nb == 0:
        return None
    toff = np.nanmedian(t_bin - (np.arange(n_rows) * cadence_s)[None, :], axis=1)
    pk = np.argmax(np.where(seen, y, -np.inf), axis=1)
    # the steps around each bin's highest one (6 s, at least 3 steps, either side)
    half = min(max(3, int(round(6.0 / cadence_s))), n_rows)
    j = np.arange(-half, half + 1)
    idx = pk[:, None] + j[None, :]
    inside = (idx >= 0) & (idx < n_rows)
    idx = np.clip(idx, 0, n_rows - 1)
    bi = np.arange(nb)[:, None]
    mw = inside & seen[bi, idx]
    yw = np.where(mw, y[bi, idx], 0.0)
    ts = toff[:, None] + idx * cadence_s                                  # (bins, window)
    t_pk = toff + pk * cadence_s
    shifts = np.arange(-15, 16) * (cadence_s / 10.0)                      # about the highest step
    yy = np.sum(yw * yw, axis=1)[:, None]
    best, best_amp = _best_shape(ts, t_pk, shifts, yw, mw, yy, F)
    if best is None:
        return None
    best_err = np.min(best, axis=1)
    k = np.argmin(best, axis=1)
    kk = np.clip(k, 1, len(shifts) - 2)
    e_m, e_0, e_p = best[np.arange(nb), kk - 1], best[np.arange(nb), kk], best[np.arange(nb), kk + 1]
    with np.errstate(invalid="ignore"):
        den = e_m - 2 * e_0 + e_p
        frac = np.where(np.isfinite(den) & (den > 0), np.clip(0.5 * (e_m - e_p) / np.where(den > 0, den, 1.0), -1, 1), 0.0)
    t_arr = t_pk + shifts[kk] + frac * (shifts[1] - shifts[0])
    # the curve must be seen on both sides of its highest step (else the peak is only bounded)
    before = np.any(mw & (j < 0)[None, :], axis=1)
    after = np.any(mw & (j > 0)[None, :], axis=1)
    good = np.isfinite(best_err) & (best_amp > 0) & before & after & (k > 0) & (k < len(shifts) - 1)
    pinned = _pinned(best, best_err, k, shifts, yy, cadence_s)
    good &= pinned > 0
    return t_arr[good], F[good], (best_amp ** 2 * pinned)[good], np.round(G[good]).astype(np.int64)


def _bin_curves(steps: np.ndarray, cols: np.ndarray, lin: np.ndarray, observed: np.ndarray,
                t_cell: np.ndarray, f_mhz: np.ndarray, group: np.ndarray, bin_mhz: float, n_rows: int):
    """Mean light curve per frequency bin (bins of ``bin_mhz`` within each ``group``):
    (curve (bins, n_rows), step observed, bin frequency, bin group, sample time per step,
    NaN where unobserved), for the bins with an observed step. ``steps``: row of each cell
    from the event's first."""
    fb = np.floor((f_mhz[cols] - f_mhz[cols].min()) / max(bin_mhz, 1e-9)).astype(np.int64)
    key = group[cols].astype(np.int64) * (int(fb.max()) + 1) + fb
    keys, kb = np.unique(key, return_inverse=True)
    nb = len(keys)
    idx = kb * n_rows + steps
    ok = observed & np.isfinite(lin)
    S = np.bincount(idx[ok], weights=lin[ok], minlength=nb * n_rows).reshape(nb, n_rows)
    N = np.bincount(idx[ok], minlength=nb * n_rows).reshape(nb, n_rows).astype(np.float64)
    T = np.bincount(idx[ok], weights=t_cell[ok], minlength=nb * n_rows).reshape(nb, n_rows)
    F = np.bincount(kb, weights=f_mhz[cols], minlength=nb) / np.maximum(np.bincount(kb, minlength=nb), 1)
    G = np.bincount(kb, weights=group[cols].astype(np.float64), minlength=nb) / np.maximum(np.bincount(kb, minlength=nb), 1)
    seen = N > 0
    y = np.where(seen, S / np.maximum(N, 1), 0.0)
    # sample time of each step in each bin (one per bin and step: same dwell)
    t_bin = np.where(seen, T / np.maximum(N, 1), np.nan)
    keep = seen.any(axis=1)                      # bins with an observed step
    return y[keep], seen[keep], F[keep], G[keep], t_bin[keep]


def _best_shape(ts: np.ndarray, t_pk: np.ndarray, shifts: np.ndarray, yw: np.ndarray, mw: np.ndarray,
                yy: np.ndarray, F: np.ndarray):
    """Residual sum of squares per bin and shift of the one shape (of DECAY_S x
    RISE_FRACTIONS, the rise scaling with the decay or not) that fits the whole event
    best, and each bin's amplitude at its best shift; (None, None) when none fits."""
    nb = len(F)
    # One shape for the whole event (its decay scaled as 1/f): the bins then differ only in
    # their shift, so a shape that suits the sampling badly moves every arrival alike.
    scale = (20.0 / np.clip(F, 1e-3, None))[:, None, None]
    x = ts[:, None, :] - (t_pk[:, None] + shifts[None, :])[:, :, None]       # (bins, shifts, window)
    neg = x < 0
    x2 = x * x
    best_total, best, best_amp = np.inf, None, None
    for tau, rho, a in itertools.product(DECAY_S, RISE_FRACTIONS, (1.0, 0.0)):
        tb = tau * scale
        tr = rho * tau * scale ** a          # a rise that scales with the decay, or not
        g = np.exp(np.where(neg, -0.5 * x2 / (tr * tr), -x / tb)) * mw[:, None, :]
        gg = np.sum(g * g, axis=2)
        gy = np.sum(g * yw[:, None, :], axis=2)
        amp = np.where(gg > 0, gy / np.maximum(gg, 1e-300), 0.0)
        err = np.where(amp > 0, yy - amp * gy, np.inf)                   # residual sum of squares
        e_min = np.min(err, axis=1)
        total = float(np.sum(np.where(np.isfinite(e_min), e_min, 0.0)))
        if total < best_total:
            best_total, best = total, err
            best_amp = amp[np.arange(nb), np.argmin(err, axis=1)]
    return best, best_amp


def _pinned(best: np.ndarray, best_err: np.ndarray, k: np.ndarray, shifts: np.ndarray, yy: np.ndarray,
            cadence_s: float) -> np.ndarray:
    """How well each bin's shift is pinned, 0-1: the best fit a third of a step or more
    away, against the best, in units of the curve's power, over PROFILE_CONTRAST. A hole
    at the peak can leave two shifts nearly as good (the peak before the hole, or in it)."""
    far = np.abs(shifts[None, :] - shifts[k][:, None]) >= cadence_s / 3.0
    with np.errstate(invalid="ignore"):
        contrast = (np.min(np.where(far, best, np.inf), axis=1) - best_err) / np.maximum(yy[:, 0], 1e-300)
    return np.clip(np.nan_to_num(contrast, nan=0.0, posinf=PROFILE_CONTRAST), 0.0, PROFILE_CONTRAST) / PROFILE_CONTRAST
