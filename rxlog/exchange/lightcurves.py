"""Clock offsets refined from Type III light curves in partners' dynamic spectra.

When partners share dynamic spectra (FITS), the Type III bursts seen by two or more
stations are cross-correlated channel by channel on a fine time grid, each channel at
its true sampling time (row time plus the per-channel sweep offset). Each burst gives
one lag between two stations' clocks.
"""

from __future__ import annotations

import math
import warnings
from pathlib import Path

import numpy as np

from rxlog.errors import RxlogError
from rxlog.exchange.timing import CLS, Events
from rxlog.spectrum import DynamicSpectrum

# Light-curve refinement (our choices): 50-ms grid, ±10 s around the event, lags up to
# ±2 s beyond the event-based estimate, frequency bins of at least 0.25 MHz.
LC_STEP_S = 0.05
LC_PAD_S = 10.0
LC_MAX_LAG_S = 2.0
LC_BIN_MHZ = 0.25
LC_MIN_CORR = 0.3          # mean normalised correlation at the peak to accept a lag


def load_spectra(spectra, names: list[str], notices: list[str]) -> dict[int, list]:
    """station name -> list of DynamicSpectrum (or FITS paths / folders of them) -> by station index."""
    # Loaded only when spectra are given: the archive brings astropy.io.fits, slow to import.
    from rxlog.archive.read import read_spectrum_fits

    out: dict[int, list] = {}
    for name, items in (spectra or {}).items():
        if name not in names:
            notices.append(f"spectra given for {name!r}, which has no event list here; ignored")
            continue
        if isinstance(items, (str, Path, DynamicSpectrum)):
            items = [items]
        got = []
        for item in items:
            if isinstance(item, DynamicSpectrum):
                got.append(item)
                continue
            p = Path(item)
            files = sorted(q for q in p.rglob("*") if q.name.endswith((".fits", ".fits.fz", ".fit"))) \
                if p.is_dir() else [p]
            for f in files:
                try:
                    got.append(read_spectrum_fits(f))
                except RxlogError as e:
                    notices.append(f"{e}; spectra skipped")
        if got:
            out[names.index(name)] = got
    return out


def _covering(specs: list, t0: float, t1: float):
    """The first spectrum that spans [t0, t1] whole, or None."""
    for s in specs:
        if s.t0 <= t0 and s.t_end >= t1:
            return s
    return None


def light_curves(spec, t_first: float, n_steps: int, step_s: float, edges_mhz: np.ndarray) -> np.ndarray:
    """Excess power (dB above each channel's median in the span) on a fine time grid, per frequency bin.

    Grid times are ``t_first + k * step_s`` in the station's clock. Each channel is
    interpolated linearly at its true sampling times (row time plus the channel's sweep
    offset), then channels are averaged within each bin of ``edges_mhz``. Flagged cells
    (RFI, gaps) count as no signal. Returns (n_steps, n_bins); NaN-free.
    """
    f_mhz = spec.freq_hz / 1e6
    sel = np.flatnonzero((f_mhz >= edges_mhz[0]) & (f_mhz < edges_mhz[-1]))
    n_bins = len(edges_mhz) - 1
    if len(sel) == 0:
        return np.zeros((n_steps, n_bins))
    off = spec.chan_offset_s[sel].astype(float)
    cad = spec.cadence_s
    t_last = t_first + (n_steps - 1) * step_s
    i0 = max(int(math.floor((t_first - spec.t0 - off.max()) / cad)) - 1, 0)
    i1 = min(int(math.ceil((t_last - spec.t0 - off.min()) / cad)) + 2, spec.n_time)
    if i1 - i0 < 2:
        return np.zeros((n_steps, n_bins))
    P = spec.power_db[i0:i1, sel].astype(float)
    P[spec.flags[i0:i1, sel] != 0] = np.nan
    with np.errstate(all="ignore"):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            bg = np.nanmedian(P, axis=0)
    x = np.nan_to_num(P - bg, nan=0.0)
    tau = t_first + step_s * np.arange(n_steps)
    u = (tau[:, None] - spec.t0 - off[None, :]) / cad - i0
    j = np.floor(u).astype(np.int64)
    fr = u - j
    n_rows = i1 - i0
    valid = (j >= 0) & (j + 1 < n_rows)
    jc = np.clip(j, 0, n_rows - 2)
    col = np.arange(len(sel))[None, :]
    v = np.where(valid, x[jc, col] * (1.0 - fr) + x[jc + 1, col] * fr, 0.0)
    b = np.searchsorted(edges_mhz, f_mhz[sel], side="right") - 1
    sums = np.zeros((n_steps, n_bins))
    cnts = np.zeros((n_steps, n_bins))
    np.add.at(sums.T, b, v.T)
    np.add.at(cnts.T, b, valid.T.astype(float))
    return np.divide(sums, cnts, out=np.zeros_like(sums), where=cnts > 0)


def lightcurve_lag(spec_a, spec_b, t0_a: float, t1_a: float, delta: float, f_lo: float, f_hi: float,
                   max_lag_s: float = LC_MAX_LAG_S, step_s: float = LC_STEP_S):
    """Clock offset of b minus a from one burst: cross-correlate light curves of [t0_a, t1_a] (a's
    clock) with b's around ``delta`` later. Returns (offset_b_minus_a, peak correlation) or None."""
    ch = max(float(np.median(np.diff(spec_a.freq_hz))) if spec_a.n_chan > 1 else 0.0,
             float(np.median(np.diff(spec_b.freq_hz))) if spec_b.n_chan > 1 else 0.0) / 1e6
    width = max(LC_BIN_MHZ, 2.0 * ch)
    n_bins = int((f_hi - f_lo) // width)
    if n_bins < 2:
        return None
    edges = f_lo + width * np.arange(n_bins + 1)
    n_a = int(round((t1_a - t0_a) / step_s)) + 1
    k = int(round(max_lag_s / step_s))
    a = light_curves(spec_a, t0_a, n_a, step_s, edges)
    b = light_curves(spec_b, t0_a + delta - k * step_s, n_a + 2 * k, step_s, edges)
    a = a - a.mean(axis=0)
    b = b - b.mean(axis=0)
    na = np.sqrt((a ** 2).sum(axis=0))
    nb = np.sqrt((b[k:k + n_a] ** 2).sum(axis=0))
    good = (na > 0) & (nb > 0)
    if good.sum() < 2:
        return None
    n_fft = 1 << int(math.ceil(math.log2(n_a + 2 * k + n_a)))
    fa = np.fft.rfft(a[:, good] / na[good], n=n_fft, axis=0)
    fb = np.fft.rfft(b[:, good] / nb[good], n=n_fft, axis=0)
    # c[l] = sum_tau a[tau] b[tau + l]: b lags a by (l - k) steps beyond delta.
    c = np.fft.irfft(np.conj(fa) * fb, n=n_fft, axis=0)[:2 * k + 1].sum(axis=1) / good.sum()
    m = int(np.argmax(c))
    if c[m] < LC_MIN_CORR:
        return None
    frac = 0.0
    if 0 < m < 2 * k:
        den = c[m - 1] - 2 * c[m] + c[m + 1]
        if den < 0:
            frac = 0.5 * (c[m - 1] - c[m + 1]) / den
    return delta + (m - k + frac) * step_s, float(c[m])


def refine_lags(E: Events, grp, spectra_by: dict[int, list], offsets: np.ndarray, err: np.ndarray,
                window_s: float):
    """Light-curve lags for every Type III group seen by two or more stations with spectra.

    Returns arrays (station_a, station_b, lag) with lag ~ offset_b - offset_a.
    """
    sa, sb, lags = [], [], []
    t3 = CLS["solar_iii"]
    order = np.argsort(grp, kind="stable")
    bounds = np.flatnonzero(np.diff(np.r_[-1, grp[order], -2]))
    for g0, g1 in zip(bounds[:-1], bounds[1:]):
        members = order[g0:g1]
        if len(members) < 2 or not np.any(E.cls[members] == t3):
            continue
        members = [int(i) for i in members if int(E.station[i]) in spectra_by]
        if len(members) < 2:
            continue
        members.sort(key=lambda i: -(E.snr[i] if np.isfinite(E.snr[i]) else 0.0))
        ia = members[0]
        a_st = int(E.station[ia])
        t0_a, t1_a = E.start[ia] - LC_PAD_S, E.end[ia] + LC_PAD_S
        spec_a = _covering(spectra_by[a_st], t0_a, t1_a)
        if spec_a is None:
            continue
        for ib in members[1:]:
            b_st = int(E.station[ib])
            d = offsets[b_st] - offsets[a_st]
            if not np.isfinite(d):
                d = E.start[ib] - E.start[ia]
            span = LC_MAX_LAG_S + 3.0 * float(np.nan_to_num(np.hypot(err[a_st], err[b_st]), nan=window_s))
            span = min(span, window_s)
            spec_b = _covering(spectra_by[b_st], t0_a + d - span, t1_a + d + span)
            if spec_b is None:
                continue
            f_lo = max(E.fmin[ia], E.fmin[ib], spec_a.freq_hz[0] / 1e6, spec_b.freq_hz[0] / 1e6)
            f_hi = min(E.fmax[ia], E.fmax[ib], spec_a.freq_hz[-1] / 1e6, spec_b.freq_hz[-1] / 1e6)
            got = lightcurve_lag(spec_a, spec_b, t0_a, t1_a, d, f_lo, f_hi, max_lag_s=span)
            if got is not None:
                sa.append(a_st)
                sb.append(b_st)
                lags.append(got[0])
    return np.array(sa, dtype=np.int64), np.array(sb, dtype=np.int64), np.array(lags, dtype=float)
