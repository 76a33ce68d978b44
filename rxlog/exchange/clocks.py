"""Clock offsets of the stations from matched events (and light-curve lags), by robust
weighted least squares.

Every event time is modelled as t = T_group + offset_station + noise; the group times
are eliminated exactly (a Schur complement), and Huber weights with scales measured per
class keep a few mismatches from pulling the answer. The offsets are only defined
relative to each other: they are quoted against the mean of the stations that agree with
each other (a station whose offset stands out is left out of that mean).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.sparse.csgraph import connected_components

from rxlog.constants import MAD_TO_SIGMA
from rxlog.exchange.timing import (
    N_CLS,
    SIGMA,
    SYSTEMATIC,
    Events,
    clock_time,
    member_sigma,
)

# An offset matters when it is larger than half of a typical 1-s archive cadence and
# significant (3 sigma): beyond that, events and spectra of different stations no
# longer line up sample for sample (our choice).
FLAG_OFFSET_S = 0.5
FLAG_SIGMAS = 3.0

HUBER_K = 1.345            # Huber's tuning constant for 95 % efficiency on Gaussian noise
REJECT_SIGMAS = 6.0        # residuals beyond this many (scaled) sigmas get no weight
MIN_SCALE_DOF = 8          # members of multi-station groups needed to measure a class's scale

LC_SIGMA_S = 0.1           # prior timing noise of one light-curve lag (rescaled by the data)
CCF = N_CLS                # group code of light-curve lags in the solver


@dataclass
class Solution:
    """Clock offsets fitted to the members of the groups."""

    offset: np.ndarray      # per station (NaN where no matches)
    cov: np.ndarray         # covariance in the zero-sum gauge of each connected set
    weight: np.ndarray      # final weight of each member (0: not used)
    resid: np.ndarray       # residual of each member, s
    component: np.ndarray   # connected set of each station (-1: unconnected)

    def offset_filled(self) -> np.ndarray:
        return np.nan_to_num(self.offset, nan=0.0)


def solve(grp, st, t, sig, kind, n_st, iterations=20) -> Solution:
    """Robust weighted least squares for t = T_grp + offset_st + noise, T eliminated exactly.

    ``kind`` groups members whose noise scale is measured together (the class, or
    light-curve lags). Returns offsets with sum zero within each connected set of stations.
    """
    n_grp = int(grp.max()) + 1 if len(grp) else 0
    w0 = np.where(np.isfinite(sig), 1.0 / sig ** 2, 0.0)
    size = np.bincount(grp, weights=(w0 > 0).astype(float), minlength=n_grp)
    w0 = np.where(size[grp] >= 2, w0, 0.0)
    robust = np.ones_like(w0)
    scale = np.ones(CCF + 1)
    o = np.zeros(n_st)
    pinv = np.zeros((n_st, n_st))
    resid = np.zeros_like(t)
    for it in range(iterations):
        w = w0 * robust
        U, inv_w, N = _normal_matrix(grp, st, w, n_grp, n_st)
        UT = np.zeros((n_grp, n_st))
        UT[grp, st] = w * t
        b = UT.sum(axis=0) - U.T @ (UT.sum(axis=1) * inv_w)
        pinv = np.linalg.pinv(N, rcond=1e-12, hermitian=True)
        o_new = pinv @ b
        t_grp = (UT.sum(axis=1) - U @ o_new) * inv_w
        resid = t - o_new[st] - t_grp[grp]
        # Residual variance of a member given its group's weighted mean (prior weights).
        W0 = np.bincount(grp, weights=w0, minlength=n_grp)
        var = np.where(w0 > 0, sig ** 2 - np.divide(1.0, W0, out=np.zeros_like(W0), where=W0 > 0)[grp], np.inf)
        z = resid / np.sqrt(np.maximum(var, 1e-12))
        for g in np.unique(kind[w0 > 0]):
            m = (kind == g) & (w0 > 0)
            if m.sum() >= MIN_SCALE_DOF:
                # The prior noise is a floor: cadence quantisation makes the residuals of
                # a pair take two values a cadence apart, whose MAD can be far smaller
                # than their spread; a scale below the prior would then reject the
                # minority value and bias the offset towards the majority one.
                scale[g] = max(MAD_TO_SIGMA * float(np.median(np.abs(z[m]))), 1.0)
        u = np.abs(z) / scale[kind]
        robust = np.where(u <= HUBER_K, 1.0, HUBER_K / np.maximum(u, 1e-12))
        robust[u > REJECT_SIGMAS] = 0.0
        converged = it > 0 and np.max(np.abs(o_new - o), initial=0.0) < 1e-5
        o = o_new
        if converged:
            break
    # Scales enter the weights: rebuild the normal matrix with measured scales for the covariance.
    _, _, N = _normal_matrix(grp, st, w0 * robust / scale[kind] ** 2, n_grp, n_st)
    cov = np.linalg.pinv(N, rcond=1e-12, hermitian=True)
    linked = np.abs(N) > 1e-12 * max(float(np.abs(N).max(initial=0.0)), 1e-300)
    n_comp, comp = connected_components(linked, directed=False)
    has = np.diag(N) > 0
    comp = np.where(has, comp, -1)
    offset = np.where(has, o, np.nan)
    return Solution(offset=offset, cov=cov, weight=w0 * robust, resid=resid, component=comp)


def _normal_matrix(grp, st, w, n_grp: int, n_st: int):
    """The members' weights as a group x station matrix U, 1 / (each group's weight), and
    the normal matrix of the offsets with the group times eliminated (Schur complement)."""
    U = np.zeros((n_grp, n_st))
    U[grp, st] = w
    W = U.sum(axis=1)
    inv_w = np.divide(1.0, W, out=np.zeros_like(W), where=W > 0)
    N = np.diag(U.sum(axis=0)) - (U * inv_w[:, None]).T @ U
    return U, inv_w, N


def reference_stations(sol: Solution, names: list[str]) -> list[int]:
    """Stations whose clocks agree: start from all with an offset, drop the most deviant
    while it stands out by more than FLAG_OFFSET_S and FLAG_SIGMAS sigma and more than
    two remain. Works in the largest connected set of stations."""
    comp = sol.component
    if (comp >= 0).sum() == 0:
        return []
    big = np.bincount(comp[comp >= 0]).argmax()
    ref = [int(i) for i in np.flatnonzero(comp == big)]
    while len(ref) > 2:
        worst, worst_u = None, 0.0
        for s in ref:
            others = [r for r in ref if r != s]
            a = np.zeros(len(names))
            a[s] = 1.0
            a[others] -= 1.0 / len(others)
            d = float(a @ sol.offset_filled())
            sd = math.sqrt(max(float(a @ sol.cov @ a), 0.0))
            if abs(d) > FLAG_OFFSET_S and abs(d) > FLAG_SIGMAS * sd and abs(d) / max(sd, 1e-9) > worst_u:
                worst, worst_u = s, abs(d) / max(sd, 1e-9)
        if worst is None:
            break
        ref.remove(worst)
    return sorted(ref, key=lambda i: names[i])


def relative_to(sol: Solution, ref: list[int]):
    """Offsets and their sigmas against the mean of the ``ref`` stations (same connected set only)."""
    n = len(sol.offset)
    off = np.full(n, np.nan)
    err = np.full(n, np.nan)
    if not ref:
        return off, err
    comp = sol.component[ref[0]]
    P = np.eye(n)
    P[:, ref] -= 1.0 / len(ref)
    o = P @ sol.offset_filled()
    C = P @ sol.cov @ P.T
    for s in range(n):
        if sol.component[s] == comp and comp >= 0:
            off[s] = o[s]
            err[s] = math.sqrt(max(C[s, s], 0.0))
    return off, err


def clock_fit(E: Events, grp, n_st: int, extra=None):
    """Clock offsets from the groups of two or more stations, optionally with light-curve lags."""
    sizes = np.bincount(grp)
    idx = np.flatnonzero(sizes[grp] >= 2)
    g = grp[idx]
    _, g = np.unique(g, return_inverse=True)
    n_g = int(g.max()) + 1 if len(g) else 0
    # Group class: the most common class among members; ties go to the better clock.
    counts = np.zeros((n_g, N_CLS))
    np.add.at(counts, (g, E.cls[idx]), 1.0)
    by_sigma = np.argsort(SIGMA, kind="stable")
    gcls = by_sigma[np.argmax(counts[:, by_sigma], axis=1)] if n_g else np.zeros(0, dtype=int)
    cls = gcls[g] if n_g else np.zeros(0, dtype=int)
    # Drifting bursts are timed at the lowest top frequency of the group.
    f_ref = np.full(n_g, np.inf)
    np.minimum.at(f_ref, g, E.fmax[idx])
    t = clock_time(E, idx, cls, f_ref[g] if n_g else np.zeros(0))
    sig = member_sigma(E, idx, cls)
    n_same = np.zeros((n_st, N_CLS))
    np.add.at(n_same, (E.station[idx], cls), 1.0)
    sig = np.sqrt(sig ** 2 + n_same[E.station[idx], cls] * SYSTEMATIC[cls] ** 2)
    # Work relative to each group's first member to keep float64 precision.
    order = np.argsort(g, kind="stable")
    starts = np.r_[0, np.flatnonzero(np.diff(g[order])) + 1] if n_g else np.zeros(0, dtype=int)
    t_rel = t - t[order][starts][g] if n_g else t
    st = E.station[idx]
    kind = cls.copy()
    grp_all, st_all, t_all, sig_all, kind_all = g, st, t_rel, sig, kind
    if extra is not None:
        la, lb, lag = extra
        k = len(lag)
        gl = n_g + np.arange(k)
        s_half = LC_SIGMA_S / math.sqrt(2.0)
        grp_all = np.concatenate([g, gl, gl])
        st_all = np.concatenate([st, la, lb])
        t_all = np.concatenate([t_rel, np.zeros(k), lag])
        sig_all = np.concatenate([sig, np.full(2 * k, s_half)])
        kind_all = np.concatenate([kind, np.full(2 * k, CCF)])
    if len(grp_all) == 0:
        empty = Solution(offset=np.full(n_st, np.nan), cov=np.zeros((n_st, n_st)), weight=np.zeros(0),
                         resid=np.zeros(0), component=np.full(n_st, -1))
        return empty, (idx, idx, np.zeros(0), np.zeros(0))
    sol = solve(grp_all, st_all, t_all, sig_all, kind_all, n_st)
    m = len(idx)
    return sol, (g, idx, sol.weight[:m], sol.resid[:m])
