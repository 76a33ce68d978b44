"""The Sun and Jupiter in the simulated sky: solar Type II, III and IV bursts, short-wave
fadeouts and Jovian decametric storms -- how each draws itself, and how they are planned
per UTC day from the seed alone, so two stations simulated with one seed hear one sky
(each while its own Sun or Jupiter is up).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.ndimage import gaussian_filter

from rxlog.constants import EARTH_RADIUS_KM
from rxlog.errors import RxlogError
from rxlog.sim.antenna import flux_to_kelvin
from rxlog.sim.events import DAY_S, Event, Site, random_times
from rxlog.sim.ionosphere import solar_r12
from rxlog.timeutil import iso, parse_iso

# Alvarez & Haddock (1973, Solar Physics 29, 197): Type III drift df/dt = -0.01 f^1.84
# (MHz/s, f in MHz), applied here to the time of peak intensity at each frequency.
AH_A, AH_B = 0.01, 1.84

# Jovian source regions: storm chance per passage while in the box, upper frequency
# limit of the emission (MHz), arc shape and the share of S-burst storms. Approximate,
# after Carr, Desch & Alexander (1983) and Zarka's reviews; from memory.
REGION_STORMS = {
    "Io-A": dict(p=0.30, fmax=38.0, vertex="late", s_share=0.15),
    "Io-B": dict(p=0.45, fmax=39.5, vertex="early", s_share=0.5),
    "Io-C": dict(p=0.25, fmax=32.0, vertex="late", s_share=0.1),
    "Io-D": dict(p=0.15, fmax=22.0, vertex="early", s_share=0.05),
    "non-Io-A": dict(p=0.10, fmax=26.0, vertex="late", s_share=0.05),
}
OTHER_REGION = dict(p=0.15, fmax=30.0, vertex="early", s_share=0.1)
# Natural solar events per day at R12 = 100 (scaled by R12 / 100 and the event rate), and
# the stream of the seed each class draws from.
SOLAR_PLAN = (("solar_iii", 31, 8.0), ("solar_ii", 32, 0.15), ("solar_iv", 33, 0.08), ("fadeout", 34, 0.3))


class TypeIII(Event):
    """Fast-drift solar burst: peak time at f follows Alvarez & Haddock (1973); Gaussian
    rise and exponential decay with an e-folding time ~ 2 s x (20 MHz / f) (from memory)."""

    def t_peak(self, f_hz):
        f = np.asarray(f_hz) / 1e6
        fr = self.params["f_ref_mhz"]
        return self.params["t_ref"] + (f ** -0.84 - fr ** -0.84) / (0.84 * AH_A)

    @staticmethod
    def tau(f_hz):
        return 2.0 * 20e6 / np.asarray(f_hz)

    def shape(self, t, f, dwell, df):
        p = self.params
        tp = self.t_peak(f)
        tau = self.tau(f)
        x = t - tp
        prof = np.where(x < 0, np.exp(-0.5 * (x / (0.35 * tau)) ** 2), np.exp(-np.clip(x, 0, None) / tau))
        fm = f / 1e6
        spec = (fm / 20.0) ** -1.0 * _edge(f, p["f_end"], p["f_start"])
        spec = spec * (1.0 + 0.25 * np.sin(2 * np.pi * fm / p["ripple_mhz"] + p["ripple_ph"]))
        return flux_to_kelvin(p["s20"], f, 0.0) * spec * prof


def _edge(f, lo, hi, soft=0.04):
    """1 inside [lo, hi] with soft (4 %) tanh edges."""
    return 0.25 * (1 + np.tanh((f - lo) / (soft * lo))) * (1 + np.tanh((hi - f) / (soft * hi)))


class TypeII(Event):
    """Slow-drift solar burst: fundamental and harmonic lanes f = f0 exp(-(t - t0)/Ts),
    optionally each split in two parallel lanes ``split`` x f apart (band splitting) and
    patchy (emission in patches of ~10 s and a few hundred kHz along the lane)."""

    def lanes(self, t):
        p = self.params
        ff = p["f0"] * np.exp(-(t - p["t0"]) / p["ts"])
        return ff, 2.0 * ff

    def shape(self, t, f, dwell, df):
        p = self.params
        ff, fh = self.lanes(t)
        if p.get("split"):
            lane = p["sf"] * _split_lane(f, ff, p["w"], p["split"]) + p["sh"] * _split_lane(f, fh, p["w"], p["split"])
        else:
            lane = p["sf"] * np.exp(-0.5 * ((f - ff) / (p["w"] * ff)) ** 2) + \
                p["sh"] * np.exp(-0.5 * ((f - fh) / (p["w"] * fh)) ** 2)
        x = t - p["t0"]
        env = np.clip(x / 30.0, 0, 1) * np.exp(-np.clip(x - 30.0, 0, None) / p["decay"]) * (x < p["dur"])
        mod = _smooth_mod(t, p["periods"], p["phases"], 0.6)
        if p.get("patch") is not None:        # patches ride on the lane: indexed by log(f / lane)
            near = np.where(np.abs(f - ff) < np.abs(f - fh), np.log(f / ff), np.log(f / fh))
            mod = mod * _bilinear(p["patch"], x / PATCH_DT_S, (near + PATCH_HALF) / PATCH_DX)
        return flux_to_kelvin(1.0, f, 0.0) * lane * env * mod


def _split_lane(f, fl, w, split):
    """Two parallel lanes at fl (1 +- split / 2), each of relative rms width ``w``."""
    up, lo = fl * (1 + split / 2), fl * (1 - split / 2)
    return 0.5 * (np.exp(-0.5 * ((f - up) / (w * up)) ** 2) + np.exp(-0.5 * ((f - lo) / (w * lo)) ** 2))


# Patchy Type II emission: a patch field on 5-s x 0.005 (relative frequency) cells,
# smoothed over two cells each way, over +-30 % of the lane frequency.
PATCH_DT_S, PATCH_DX, PATCH_HALF = 5.0, 0.005, 0.3


class TypeIV(Event):
    """Broadband solar continuum: rise over minutes, optionally a plateau of ``hold`` s,
    decay over tens of minutes."""

    def shape(self, t, f, dwell, df):
        p = self.params
        x = t - p["t0"]
        if p.get("hold"):
            x = x - np.clip(x - p["rise"], 0.0, p["hold"])       # the plateau holds the peak
        env = np.where(x < p["rise"], 0.5 * (1 - np.cos(np.pi * np.clip(x, 0, None) / p["rise"])),
                       np.exp(-np.clip(x - p["rise"], 0, None) / p["decay"]))
        env = env * (x >= 0)
        spec = (f / 20e6) ** p["alpha"]
        mod = _smooth_mod(t, p["periods"], p["phases"], 0.2)
        return flux_to_kelvin(p["s20"], f, 0.0) * spec * env * mod


class Fadeout(Event):
    """Short-wave fadeout: a flare's X-rays deepen the D layer; non-deviative absorption
    scales as f^-2. Linear onset over minutes, exponential recovery."""

    def envelope(self, t):
        p = self.params
        x = t - p["t0"]
        return np.where(x < p["rise"], np.clip(x, 0, None) / p["rise"],
                        np.exp(-np.clip(x - p["rise"], 0, None) / p["decay"])) * (x >= 0)

    def absorption_db(self, t, f):
        """Extra absorption (dB) of the sky path; drawn as a factor, not as a power."""
        return self.scale * self.params["a20"] * self.envelope(t) * (20e6 / f) ** 2


class JovianStorm(Event):
    """A Jovian decametric storm: nested arcs (vertex-early or -late) of emission whose
    fine structure is an L-burst pattern -- exponentially distributed intensity from a
    smooth complex random field (strong interplanetary scintillation), sheared so the
    patches drift. S-burst storms carry the same mean power; their millisecond bursts are
    drawn in the IQ domain (``sburst_trains``)."""

    def shape(self, t, f, dwell, df):
        p = self.params
        fm = f / 1e6
        x = t - self.t_start
        dur = self.t_end - self.t_start
        env = np.clip(x / 120.0, 0, 1) * np.clip((dur - x) / 120.0, 0, 1)
        spec = np.clip(1.0 - (fm / p["fmax"]) ** 4, 0.0, None)
        sign = 1.0 if p["vertex"] == "early" else -1.0
        arcs = np.zeros(np.broadcast(t, f).shape)
        for tv, fv, kap, sig, amp in p["arcs"]:          # tens of arcs, each on its own span
            ta = tv + sign * kap * (fm - fv) ** 2
            arcs = arcs + amp * np.exp(-0.5 * ((t - ta) / sig) ** 2)
        arcs = 0.35 + arcs
        mod = self.modulation(t - p["shift_s"], fm)
        return flux_to_kelvin(p["s20"], f, 0.0) * env * spec * arcs * mod

    def modulation(self, t, fm):
        p = self.params
        grid = p["mod"]                       # (n_t, n_f) exponential intensities, mean 1
        ts = (t - self.t_start - (fm - p["mod_f0"]) / p["slope"]) / p["mod_dt"]
        fs = (fm - p["mod_f0"]) / p["mod_df"]
        return _bilinear(grid, ts, fs)


def _bilinear(grid, y, x):
    ny, nx = grid.shape
    y = np.clip(y, 0, ny - 1.001)
    x = np.clip(x, 0, nx - 1.001)
    iy = y.astype(np.int64)
    ix = x.astype(np.int64)
    fy = y - iy
    fx = x - ix
    g00 = grid[iy, ix]
    g01 = grid[iy, ix + 1]
    g10 = grid[iy + 1, ix]
    g11 = grid[iy + 1, ix + 1]
    return (g00 * (1 - fx) + g01 * fx) * (1 - fy) + (g10 * (1 - fx) + g11 * fx) * fy


def _smooth_mod(t, periods, phases, depth):
    """A positive slow modulation with mean ~1: exp(depth * sum sin / sqrt(n)); the sum
    has variance 1/2, so exp(-depth^2 / 4) takes out the lognormal mean."""
    s = np.zeros(np.shape(t))
    for p, ph in zip(periods, phases):
        s = s + np.sin(2 * np.pi * t / p + ph)
    return np.exp(depth * s / math.sqrt(len(periods)) - depth ** 2 / 4)

# --- planning ------------------------------------------------------------------------------

def plan_solar_day(seed: int, day: int, include, rate: float, site: Site) -> list[Event]:
    """Solar bursts and fadeouts of UTC day number ``day`` for the classes in ``include``,
    each class from its own stream of the seed; rates follow R12 and scale with ``rate``."""
    t_day = day * DAY_S
    act = float(solar_r12(t_day + DAY_S / 2)) / 100.0
    planners = {"solar_iii": plan_type3, "solar_ii": plan_type2, "solar_iv": plan_type4, "fadeout": plan_fadeouts}
    out = []
    for cls, stream, per_day in SOLAR_PLAN:
        if cls in include:
            out += planners[cls](np.random.default_rng([seed, day, stream]), t_day, per_day * act * rate, site)
    return out


def plan_type3(rng, t_day, per_day, site: Site):
    """Groups of Type III bursts: a Poisson number of groups a day, each of a few bursts."""
    out = []
    for tg in random_times(rng, t_day, rng.poisson(per_day)):
        n = 1 + rng.poisson(3)
        level = _powerlaw(rng, 1.8, 100.0, 1e5)
        group = [make_type3(rng, tb, level * rng.lognormal(0, 0.5), site)
                 for tb in tg + np.sort(rng.uniform(0, rng.uniform(10, 180), n))]
        group = [e for e in group if e is not None]
        mark_episode(group, "type_iii_group" if len(group) > 1 else "isolated_burst", tg)
        out += group
    return out


def mark_episode(events, kind: str, t: float, episode: str = "", sequence: str = ""):
    """Mark ``events`` as one true episode of ``kind`` (``episode`` id, by default the kind
    and the time ``t``), part of the flare ``sequence`` when one is given."""
    for e in events:
        e.episode = episode or f"{kind} {iso(t)[:19]}Z"
        e.episode_kind, e.sequence = kind, sequence


def make_type3(rng, t_ref, s20, site: Site, f_start=None, f_end=None):
    """A Type III burst of ``s20`` sfu at 20 MHz peaking there at ``t_ref``, drifting from
    f_start down to f_end (Hz; drawn when not given); None when it misses the band."""
    f_start = f_start if f_start is not None else math.exp(rng.uniform(math.log(18e6), math.log(200e6)))
    f_end = f_end if f_end is not None else f_start / rng.uniform(2.0, 100.0)
    lo, hi = max(f_end, site.fmin), min(f_start, site.fmax)
    if lo >= hi:
        return None
    p = dict(t_ref=t_ref, f_ref_mhz=20.0, s20=s20, f_start=f_start, f_end=f_end,
             ripple_mhz=rng.uniform(2, 8), ripple_ph=rng.uniform(0, 2 * np.pi))
    e = TypeIII("solar_iii", 0, 0, lo, hi, source="sun", params=p,
                reason=f"Type III, {s20:.0f} sfu at 20 MHz")
    e.t_start = float(e.t_peak(hi) - 2 * 0.35 * e.tau(hi))
    e.t_end = float(e.t_peak(lo) + math.log(10) * e.tau(lo))
    e.r_t0 = float(e.t_peak(hi) - 4 * 0.35 * e.tau(hi))
    e.r_t1 = float(e.t_peak(lo) + 7 * e.tau(lo))
    e.r_f0, e.r_f1 = max(lo * 0.85, site.fmin - 2e6), min(hi * 1.15, site.fmax + 2e6)
    e.drift_mhz_s = -AH_A * (0.5 * (lo + hi) / 1e6) ** AH_B
    mark_episode([e], "isolated_burst", t_ref)
    return e


def plan_type2(rng, t_day, per_day, site: Site):
    """Type II bursts at a Poisson number of times a day."""
    return [make_type2(rng, t, _powerlaw(rng, 1.6, 50.0, 5000.0), site)
            for t in random_times(rng, t_day, rng.poisson(per_day))]


def make_type2(rng, t0, s_f, site: Site, drift20=None, f0=None, duration=None, split_mhz=None, patchy=False):
    """A Type II burst from ``t0``: lanes of ``s_f`` sfu starting at f0 (Hz), drifting at
    drift20 (MHz/s at 20 MHz; both drawn when not given), lasting ``duration`` s (drawn,
    3-15 min, when not given); with ``split_mhz`` each lane is split in two that far apart
    at 20 MHz, each a third of that wide (rms); ``patchy``: emission in patches. None when
    it misses the band."""
    drift20 = drift20 if drift20 is not None else -math.exp(rng.uniform(math.log(0.03), math.log(0.4)))
    ts = 20.0 / abs(drift20)
    f0 = f0 if f0 is not None else rng.uniform(12e6, 40e6)
    dur = rng.uniform(180, 900)
    dur = dur if duration is None else float(duration)
    p = dict(t0=t0, ts=ts, f0=f0, sf=s_f, sh=s_f * rng.uniform(0.3, 1.0), w=0.035, dur=dur,
             decay=dur / 2, periods=rng.uniform(20, 120, 3), phases=rng.uniform(0, 2 * np.pi, 3))
    if split_mhz:
        p.update(split=split_mhz / 20.0, w=split_mhz / 20.0 / 3)
    if patchy:
        p["patch"] = _scintillation(rng, int(dur / PATCH_DT_S) + 8, int(2 * PATCH_HALF / PATCH_DX) + 2, 2.0, 2.0)
    e = TypeII("solar_ii", 0, 0, 0, 0, source="sun", params=p, reason=f"Type II, {s_f:.0f} sfu")
    tt = np.linspace(t0, t0 + dur, 400)
    ff, fh = e.lanes(tt)
    inb = lambda x: (x > site.fmin) & (x < site.fmax)
    m = inb(ff) | inb(fh)
    if not m.any():
        return None
    fs = np.concatenate([ff[inb(ff)], fh[inb(fh)]])
    e.t_start, e.t_end = float(tt[m][0]), float(tt[m][-1])
    e.f_lo, e.f_hi = float(fs.min()), float(fs.max())
    e.r_t0, e.r_t1 = t0, t0 + dur
    e.r_f0, e.r_f1 = site.fmin - 2e6, site.fmax + 2e6
    e.drift_mhz_s = -0.5 * (e.f_lo + e.f_hi) / 1e6 / ts
    if split_mhz:                            # the split lanes reach beyond the lane centres
        e.f_lo, e.f_hi = e.f_lo * (1 - p["split"] / 2), e.f_hi * (1 + p["split"] / 2)
    mark_episode([e], "type_ii", t0)
    return e


def plan_type4(rng, t_day, per_day, site: Site):
    """Type IV continua at a Poisson number of times a day."""
    return [make_type4(rng, t, _powerlaw(rng, 1.6, 20.0, 1000.0), site)
            for t in random_times(rng, t_day, rng.poisson(per_day))]


def make_type4(rng, t0, s20, site: Site, duration=None):
    """A Type IV continuum of ``s20`` sfu at 20 MHz from ``t0``; given a ``duration`` (s),
    it holds its peak after the rise and decays over 10 min (e-folding) to end there (a
    tenth of the peak)."""
    rise, decay = rng.uniform(300, 900), rng.uniform(1200, 5400)
    p = dict(t0=t0, rise=rise, decay=decay, s20=s20, alpha=rng.uniform(-1, 1),
             periods=rng.uniform(60, 600, 3), phases=rng.uniform(0, 2 * np.pi, 3))
    if duration is not None:
        p["decay"] = decay = 600.0
        p["hold"] = max(0.0, float(duration) - rise - decay * math.log(10))
    hold = p.get("hold", 0.0)
    e = TypeIV("solar_iv", t0, t0 + rise + hold + decay * math.log(10), site.fmin, site.fmax, source="sun",
               params=p, reason=f"Type IV continuum, {s20:.0f} sfu")
    e.r_t1 = t0 + rise + hold + 7 * decay
    e.r_f0, e.r_f1 = site.fmin - 2e6, site.fmax + 2e6
    mark_episode([e], "type_iv", t0)
    return e


def plan_fadeouts(rng, t_day, per_day, site: Site):
    """Short-wave fadeouts at a Poisson number of times a day."""
    return [make_fadeout(rng, t, math.exp(rng.uniform(math.log(1.0), math.log(10.0))), site)
            for t in random_times(rng, t_day, rng.poisson(per_day))]


def make_fadeout(rng, t0, a20, site: Site, duration=None):
    """A fadeout from ``t0`` with ``a20`` dB of extra vertical absorption at 20 MHz at its
    depth; given a ``duration`` (s), it recovers (to a tenth of its depth) by then."""
    rise, decay = rng.uniform(120, 600), rng.uniform(600, 2400)
    if duration is not None:
        decay = max(60.0, float(duration) - rise) / math.log(10)
    p = dict(t0=t0, rise=rise, decay=decay, a20=a20)
    e = Fadeout("fadeout", t0, t0 + rise + decay * math.log(10), site.fmin, site.fmax, source="sun",
                params=p, reason=f"short-wave fadeout, {a20:.1f} dB vertical at 20 MHz")
    e.r_t1 = t0 + rise + 9 * decay
    e.r_f0, e.r_f1 = 0.0, 1e12
    mark_episode([e], "fadeout", t0)
    return e


def plan_storms(rng, passages, rate: float, seed: int, site: Site):
    """Jovian storms during the (region, start, end) passages of one day: each passage
    draws its chance, length, start, kind and flux from ``rng`` in a fixed order."""
    out = []
    for region, a, b in passages:
        spec = REGION_STORMS.get(region, OTHER_REGION)
        p = 1 - (1 - spec["p"]) ** rate
        u = rng.uniform(size=6)      # fixed draws per passage: the plan stays put when rates change
        if u[0] >= p:
            continue
        dur = min(b - a, float(np.exp(math.log(2400.0) + 0.6 * (u[1] - 0.5) * 3)))
        t0 = a + u[2] * (b - a - dur)
        s_burst = u[3] < spec["s_share"]
        s20 = math.exp(math.log(5.0) + u[4] * math.log(300.0 / 5.0))
        e = make_storm(np.random.default_rng([seed, int(t0), 36]), t0, t0 + dur, region, s20, s_burst, site)
        if e is not None:
            out.append(e)
    return out


def storm_from_schedule(i, s, seed: int, site: Site):
    """The storm of ``jupiter_schedule[i]``: dict(start=..., end=..., region=..., s20=..., s_bursts=...)."""
    try:
        t0 = s["start"] if isinstance(s["start"], (int, float)) else parse_iso(s["start"])
        t1 = s["end"] if isinstance(s["end"], (int, float)) else parse_iso(s["end"])
    except (KeyError, ValueError, TypeError) as e:
        raise RxlogError(f"jupiter_schedule[{i}]: {e}; expected dict(start=ISO or POSIX s, end=..., "
                         "region='Io-B', s20=flux in sfu)") from None
    if not t1 > t0:
        raise RxlogError(f"jupiter_schedule[{i}]: end must be after start")
    region = s.get("region", "Io-B")
    rng = np.random.default_rng([seed, int(t0), 36])
    return make_storm(rng, t0, t1, region, float(s.get("s20", 60.0)), bool(s.get("s_bursts", False)), site)


def make_storm(rng, t0, t1, region, s20, s_bursts, site: Site):
    """A Jovian storm from ``region`` over [t0, t1] of ``s20`` sfu at 20 MHz, of S-bursts
    or L-bursts; None when the region's emission stays below the band."""
    spec = REGION_STORMS.get(region, OTHER_REGION)
    fmax_em = spec["fmax"]
    lo, hi = site.fmin, min(site.fmax, fmax_em * 1e6 * 0.98)
    if lo >= hi:
        return None
    dur = t1 - t0
    n_arcs = max(1, int(dur / 90.0))
    arcs = [(t0 + rng.uniform(0, dur), rng.uniform(lo / 1e6 - 4, hi / 1e6 + 4), rng.uniform(1.0, 4.0),
             rng.uniform(10, 40), rng.lognormal(0, 0.5)) for _ in range(n_arcs)]
    mod_dt, mod_df = 0.5, 0.2
    n_t = int(dur / mod_dt) + 8
    f0m, f1m = site.fmin / 1e6 - 3, site.fmax / 1e6 + 3
    n_f = int((f1m - f0m) / mod_df) + 2
    mod = _scintillation(rng, n_t, n_f, sigma_t=1.0 / mod_dt, sigma_f=0.6 / mod_df)
    # interplanetary scintillation pattern moves at the solar-wind speed (~400 km/s):
    # stations a few hundred km apart see it ~0.3-1 s apart
    ang = rng.uniform(0, 2 * np.pi)
    x, y = _station_xy_km(site.lat, site.lon)
    shift = (x * math.cos(ang) + y * math.sin(ang)) / 400.0
    p = dict(fmax=fmax_em, vertex=spec["vertex"], arcs=arcs, s20=s20, mod=mod, mod_dt=mod_dt,
             mod_df=mod_df, mod_f0=f0m, slope=rng.choice([-1, 1]) * rng.uniform(1.0, 5.0),
             shift_s=shift, s_bursts=s_bursts, s_drift=-rng.uniform(10, 25), s_rate=rng.uniform(10, 60))
    cls = "jovian_s" if s_bursts else "jovian_l"
    e = JovianStorm(cls, t0, t1, lo, hi, source="jupiter", region=region, params=p,
                    reason=f"Jovian {region} storm, {'S' if s_bursts else 'L'}-bursts, {s20:.0f} sfu")
    e.r_f0, e.r_f1 = site.fmin - 2e6, site.fmax + 2e6
    if s_bursts:
        e.drift_mhz_s = p["s_drift"]
    mark_episode([e], "jovian_storm", t0)
    return e


def _powerlaw(rng, index, lo, hi):
    """A draw from dN/dS ~ S^-index between lo and hi."""
    a = 1.0 - index
    u = rng.uniform()
    return (lo ** a + u * (hi ** a - lo ** a)) ** (1.0 / a)


def _scintillation(rng, n_t, n_f, sigma_t, sigma_f):
    """Exponentially distributed intensity (mean 1) on a grid: |z|^2 of a smoothed complex
    Gaussian field, as for strong scintillation."""
    re = gaussian_filter(rng.standard_normal((n_t, n_f)), (sigma_t, sigma_f), mode="wrap")
    im = gaussian_filter(rng.standard_normal((n_t, n_f)), (sigma_t, sigma_f), mode="wrap")
    i = re * re + im * im
    return (i / i.mean()).astype(np.float32)


def _station_xy_km(lat, lon):
    """Rough local position of a station on the Earth's surface (km), for pattern shifts."""
    return EARTH_RADIUS_KM * math.radians(lon) * math.cos(math.radians(lat)), EARTH_RADIUS_KM * math.radians(lat)


def inject_natural(cls: str, spec: dict, rng, t: float, site: Site):
    """The solar event or Jovian storm an injection of class ``cls`` asks for, at unit flux
    (the caller scales it to the asked peak excess); None when it misses the band."""
    if cls == "solar_iii":
        f_start = spec.get("fmax_mhz", 60.0) * 1e6
        f_end = spec.get("fmin_mhz", 5.0) * 1e6
        return make_type3(rng, t, 1.0, site, f_start=f_start, f_end=f_end)
    if cls == "solar_ii":
        return make_type2(rng, t, 1.0, site, drift20=spec.get("drift_mhz_s"), f0=spec.get("fmax_mhz", 23.0) * 1e6,
                          duration=spec.get("duration_s"), split_mhz=spec.get("split_mhz"),
                          patchy=bool(spec.get("patchy", False)))
    if cls == "solar_iv":
        return make_type4(rng, t, 1.0, site, duration=spec.get("duration_s"))
    if cls == "fadeout":
        return make_fadeout(rng, t, 1.0, site, duration=spec.get("duration_s"))
    d = float(spec.get("duration_s", 1800.0))
    return make_storm(rng, t, t + d, spec.get("region", "Io-B"), 1.0, cls == "jovian_s", site)
