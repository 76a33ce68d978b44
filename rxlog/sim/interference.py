"""Interference at the simulated station: ITU-R P.372 man-made noise by environmental
category, distant transmitters (broadcast, time signals, utility, amateur SSB,
ionosondes), the neighbourhood's impulses and carriers, and the logging computer's own
spurs -- how each draws itself, and how a day of it is planned for one station.

Levels are set by ``level(fc, excess_db)``: the power (K x kHz) that puts a narrow
signal ``excess_db`` above the typical background of an archive channel (the sky model
knows that background).
"""

from __future__ import annotations

import math

import numpy as np

from rxlog.errors import RxlogError
from rxlog.sim.antenna import p372_temperature
from rxlog.sim.events import DAY_S, Event, Site, random_times

# ITU-R P.372 (Radio noise), median man-made noise figure Fam = c - d log10(f/MHz) in dB
# above k T0 b, for the environmental categories of its man-made noise table. Constants
# from memory of P.372-14.
MANMADE_P372 = {"quiet-rural": (53.6, 28.6), "rural": (67.2, 27.7),
                "residential": (72.5, 27.7), "city": (76.8, 27.7)}
RFI_CATEGORIES = tuple(MANMADE_P372)

# Local interference per category (rates per hour unless stated). Common practice: no
# published table; the order of magnitude follows P.372's ranking of the categories.
LOCAL_RFI = {
    #               arcing/h  appliance impulses/h  fence prob.  local carriers  night drop (dB)
    "quiet-rural": dict(arcing=0.05, impulses=0.2, fence=0.3, carriers=0, night_db=0.0),
    "rural":       dict(arcing=0.3, impulses=1.0, fence=0.6, carriers=2, night_db=2.0),
    "residential": dict(arcing=1.0, impulses=4.0, fence=0.1, carriers=6, night_db=3.0),
    "city":        dict(arcing=2.0, impulses=10.0, fence=0.0, carriers=15, night_db=4.0),
}

# ITU Radio Regulations allocations near the band, MHz (from memory): broadcasting,
# amateur, maritime mobile; standard-frequency carriers.
BROADCAST_BANDS = [(13.57, 13.87), (15.1, 15.8), (17.48, 17.9), (18.9, 19.02), (21.45, 21.85), (25.67, 26.1)]
AMATEUR_BANDS = [(14.0, 14.35), (18.068, 18.168), (21.0, 21.45), (24.89, 24.99)]
MARITIME_BANDS = [(16.36, 17.41), (22.0, 22.855)]
TIME_SIGNALS_MHZ = (15.0, 20.0, 25.0)


def check_rfi_category(rfi: str) -> str:
    """``rfi`` when it names a P.372 man-made noise category; RxlogError otherwise."""
    if rfi not in MANMADE_P372:
        raise RxlogError(f"rfi category {rfi!r}: expected one of {', '.join(RFI_CATEGORIES)} "
                         "(ITU-R P.372 man-made noise categories)")
    return rfi


def manmade_noise(t, f_hz, category: str, lon_deg: float):
    """ITU-R P.372 median man-made noise (K), (n_times, n_freq), for the category, lower at
    local night (by the category's night drop, deepest at 03 h local mean solar time)."""
    c, d = MANMADE_P372[category]
    base = p372_temperature(np.asarray(f_hz, dtype=np.float64), c, d)[None, :]
    solar_hour = np.mod((np.asarray(t) / 3600.0) + lon_deg / 15.0, 24.0)
    night = 0.5 * (1 + np.cos(2 * np.pi * (solar_hour - 3.0) / 24.0))   # 1 at 03 h local, 0 at 15 h
    drop = LOCAL_RFI[category]["night_db"] * night
    return base * 10 ** (-drop[:, None] / 10)


class Carrier(Event):
    """A narrowband transmission: power ``p_khz`` (K x kHz) spread over [f_lo, f_hi],
    optionally a carrier line holding ``line_share`` of it; Rayleigh-like fading for
    sky-wave signals, speech-like keying for voice, on/off within its schedule."""

    def shape(self, t, f, dwell, df):
        p = self.params
        on = (t >= self.t_start) & (t < self.t_end)
        level = p["p_khz"] * 1e3 / df
        fc = p["fc"]
        share = p.get("line_share", 0.0)
        spread = _band_overlap(f, df, self.f_lo, self.f_hi) * (1 - share)
        line = share * (np.abs(f - fc) <= df / 2)
        out = level * (spread + line) * on
        t1 = t[:, :1]                    # one sub-band: the offsets across a narrow signal are equal
        if p.get("fade"):
            out = out * _fading(t1, p["fade_nu"], p["fade_ph"])
        if p.get("keying") is not None:
            slot = np.clip(((t1 - self.t_start) / 0.5).astype(np.int64), 0, len(p["keying"]) - 1)
            out = out * p["keying"][slot]
        return out


class Chirp(Event):
    """An ionosonde sweep at ``rate`` Hz/s through the band; each cell gets the share of
    its integration time the chirp spent inside the cell's bin."""

    def shape(self, t, f, dwell, df):
        p = self.params
        r = p["rate"]
        t_a = p["t0"] + (f - df / 2 - p["f0"]) / r
        t_b = p["t0"] + (f + df / 2 - p["f0"]) / r
        lo = np.minimum(t_a, t_b)
        hi = np.maximum(t_a, t_b)
        ov = np.clip(np.minimum(hi, t + dwell / 2) - np.maximum(lo, t - dwell / 2), 0, None)
        return p["p_khz"] * 1e3 / df * ov / dwell


class Impulses(Event):
    """Broadband impulses (sferics, arcing, fence pulses): each pulse is ``t_imp`` K for
    ``width`` s; a cell gets the pulses that fall in its integration window, averaged."""

    def shape(self, t, f, dwell, df):
        p = self.params
        times = p["times"]
        t = np.broadcast_to(t, np.broadcast(t, f).shape)
        cols, inv = np.unique(t[0] - t[0, 0], return_inverse=True)   # channels sampled together
        first = np.searchsorted(t[0] - t[0, 0], cols)
        tc = t[:, first]
        n = (np.searchsorted(times, tc + dwell / 2) - np.searchsorted(times, tc - dwell / 2)).astype(np.float32)
        return p["t_imp"] * p["width"] / dwell * n[:, inv.ravel()] * (f / 20e6) ** -1.5


class Spur(Event):
    """A steady narrow line from the logging computer itself (its clocks' harmonics)."""

    def shape(self, t, f, dwell, df):
        p = self.params
        return p["p_khz"] * 1e3 / df * (np.abs(f - p["fc"]) <= df / 2) * np.ones_like(t)


def _fading(t, freqs_hz, phases):
    """Rayleigh-like fading from a sum of sinusoids (Jakes 1974): |sum exp(i(2 pi nu t + phi))|^2 / n."""
    z = np.zeros(np.shape(t), dtype=np.complex128)
    for nu, ph in zip(freqs_hz, phases):       # a handful of terms
        z += np.exp(1j * (2 * np.pi * nu * t + ph))
    return (np.abs(z) ** 2 / len(freqs_hz))


def _band_overlap(f, df, lo, hi):
    """Fraction of [lo, hi] that falls in each bin [f - df/2, f + df/2]."""
    width = max(hi - lo, 1e-9)
    a = np.maximum(f - df / 2, lo)
    b = np.minimum(f + df / 2, hi)
    return np.clip(b - a, 0.0, None) / width


# --- planning ------------------------------------------------------------------------------

def plan_rfi_day(rng, t_day: float, category: str, site: Site, level) -> list[Event]:
    """The interference of one UTC day from ``t_day``, drawn from ``rng`` in a fixed order:
    distant transmitters, then the neighbourhood of a station of this P.372 category."""
    out = _plan_broadcast(rng, t_day, level)
    out += _plan_time_signals(rng, t_day, level)
    out += _plan_utility(rng, t_day, level)
    out += _plan_amateur(rng, t_day, level)
    out += _plan_ionosondes(rng, t_day, site, level)
    out += _plan_local(rng, t_day, category, site, level)
    return out


def _plan_broadcast(rng, t_day, level):
    """Broadcast: 5 kHz raster, schedules of half an hour to three hours on the half hour."""
    out = []
    for lo, hi in BROADCAST_BANDS:
        slots = np.arange(math.ceil(lo * 200), math.floor(hi * 200) + 1) / 200.0 * 1e6
        for fc in slots[rng.uniform(size=len(slots)) < 0.2]:
            t = t_day + 1800 * rng.integers(0, 48)
            while t < t_day + DAY_S:
                d = 1800 * rng.integers(1, 7)
                if rng.uniform() < 0.5:
                    out.append(carrier(rng, level, "broadcast AM", fc, 9e3, t, t + d, rng.uniform(10, 40), 0.67))
                t += d + 1800 * rng.integers(0, 12)
    return out


def _plan_time_signals(rng, t_day, level):
    """Standard-frequency and time-signal carriers, continuous."""
    return [carrier(rng, level, "time-signal carrier", fmhz * 1e6, 1e3, t_day, t_day + DAY_S, 20.0, 0.9)
            for fmhz in TIME_SIGNALS_MHZ]


def _plan_utility(rng, t_day, level):
    """Maritime / utility: CW and data, sessions of minutes."""
    out = []
    for lo, hi in MARITIME_BANDS:
        for _ in range(rng.poisson(12)):
            t = t_day + rng.uniform(0, DAY_S)
            fc = rng.uniform(lo, hi) * 1e6
            out.append(carrier(rng, level, "utility data", fc, rng.uniform(0.3e3, 3e3), t,
                               t + rng.uniform(120, 3600), rng.uniform(8, 30), 0.0))
    return out


def _plan_amateur(rng, t_day, level):
    """Amateur SSB contacts: keyed speech."""
    out = []
    for lo, hi in AMATEUR_BANDS:
        for _ in range(rng.poisson(8)):
            t = t_day + rng.uniform(0, DAY_S)
            d = rng.uniform(300, 1800)
            e = carrier(rng, level, "amateur SSB", rng.uniform(lo, hi - 0.003) * 1e6 + 1.35e3, 2.7e3, t, t + d,
                        rng.uniform(5, 30), 0.0)
            e.params["keying"] = (rng.uniform(size=int(d / 0.5) + 2) < 0.55) * rng.uniform(0.3, 1.0, int(d / 0.5) + 2)
            out.append(e)
    return out


def _plan_ionosondes(rng, t_day, site, level):
    """Ionosondes: a sweep every 15 min from each of one or two distant sounders."""
    out = []
    for k in range(1 + int(rng.uniform() < 0.5)):
        off = rng.uniform(0, 900)
        rate = 1e5 * rng.choice([-1.0, 1.0])
        p_khz_db = rng.uniform(10, 25)
        for t0 in t_day + off + 900.0 * np.arange(96):
            out.append(chirp(t0, rate, p_khz_db, site, level))
    return out


def _plan_local(rng, t_day, category, site, level):
    """The neighbourhood, by category: power-line arcing, appliance impulses, an electric
    fence, local carriers."""
    out = []
    loc = LOCAL_RFI[category]
    mains = 120.0 if site.lon < -30 else 100.0
    for t in random_times(rng, t_day, rng.poisson(loc["arcing"] * 24)):
        k = np.arange(0, rng.uniform(10, 300), 1 / mains)      # a pulse each half cycle of the mains
        times = t + k + rng.normal(0, 2e-4, k.size)
        out.append(impulses("power-line arcing", np.sort(times), rng.uniform(1e5, 3e6), 1e-4, site))
    for t in random_times(rng, t_day, rng.poisson(loc["impulses"] * 24 + 2.0)):
        out.append(impulses("broadband impulse", np.array([t]), math.exp(rng.uniform(math.log(1e8), math.log(3e10))),
                            2e-4, site))
    if rng.uniform() < loc["fence"]:
        period = rng.uniform(1.0, 1.5)
        times = t_day + rng.uniform(0, period) + period * np.arange(int(DAY_S / period))
        out.append(impulses("electric fence", times, rng.uniform(3e7, 3e8), 3e-4, site))
    for _ in range(loc["carriers"]):
        fc = rng.uniform(site.fmin - 1e6, site.fmax + 1e6)
        t = t_day + rng.uniform(0, DAY_S)
        e = carrier(rng, level, "local carrier", fc, rng.uniform(50, 3e3), t, t + rng.uniform(600, 6 * 3600),
                    rng.uniform(3, 20), 0.5, path="local")
        out.append(e)
    return out


def plan_spurs(rng, start: float, end: float, site: Site, level) -> list[Event]:
    """Up to four harmonics of the logging computer's clock in or near the band, all run long."""
    clock = rng.uniform(3.5e6, 12e6)
    out = []
    k = np.arange(1, 20)
    for fc in (k * clock)[(k * clock > site.fmin - 1.2e6) & (k * clock < site.fmax + 1.2e6)][:4]:
        p = dict(fc=fc, p_khz=level(fc, rng.uniform(2, 12)))
        out.append(Spur("rfi", start, end, fc - 50, fc + 50, drift_mhz_s=0.0, path="rx",
                        source="local", params=p, reason=f"local spur (computer clock harmonic), {fc / 1e6:.4f} MHz"))
    return out


def carrier(rng, level, what, fc, bw, t0, t1, excess_db, line_share, path="sky") -> Carrier:
    """A transmission of ``bw`` Hz at ``fc`` over [t0, t1], ``excess_db`` above the typical
    background; a sky-wave one ('sky') fades, a local one ('local') does not."""
    p = dict(fc=fc, p_khz=level(fc, excess_db), line_share=line_share)
    if path == "sky":
        p.update(fade=True, fade_nu=rng.uniform(0.005, 0.2, 6), fade_ph=rng.uniform(0, 2 * np.pi, 6))
    e = Carrier("rfi", t0, t1, fc - bw / 2, fc + bw / 2, drift_mhz_s=0.0, path=path,
                source="skywave" if path == "sky" else "local", params=p,
                reason=f"{what}, {fc / 1e6:.4f} MHz")
    e.r_f0, e.r_f1 = fc - bw / 2 - 50e3, fc + bw / 2 + 50e3
    return e


def chirp(t0, rate, excess_db, site: Site, level) -> Chirp:
    """An ionosonde sweep at ``rate`` Hz/s, at 1 MHz at ``t0`` going up (30 MHz going down),
    drawn while it crosses the band; ``excess_db`` sets its level at 20 MHz."""
    f0 = 1e6 if rate > 0 else 30e6
    lo, hi = site.fmin, site.fmax
    t_lo, t_hi = t0 + (lo - f0) / rate, t0 + (hi - f0) / rate
    p = dict(t0=t0, f0=f0, rate=rate, p_khz=level(20e6, excess_db))
    e = Chirp("rfi", min(t_lo, t_hi), max(t_lo, t_hi), lo, hi, drift_mhz_s=rate / 1e6, source="skywave",
              params=p, reason=f"ionosonde sweep, {rate / 1e3:+.0f} kHz/s")
    e.r_t0, e.r_t1 = e.t_start - 30, e.t_end + 30
    e.r_f0, e.r_f1 = site.fmin - 3e6, site.fmax + 3e6
    return e


def impulses(what, times, t_imp, width, site: Site) -> Impulses:
    """Broadband pulses of ``t_imp`` K and ``width`` s at ``times`` (sorted POSIX s)."""
    e = Impulses("rfi", float(times[0]), float(times[-1] + width), site.fmin, site.fmax, drift_mhz_s=0.0,
                 path="local", source="local", params=dict(times=times, t_imp=t_imp, width=width),
                 reason=what)
    e.r_t0, e.r_t1 = e.t_start - 5, e.t_end + 5
    e.r_f0, e.r_f1 = 0.0, 1e12
    return e


def inject_rfi(spec: dict, rng, t: float, site: Site, level) -> Event:
    """The interference an injection asks for (``kind``: carrier, impulse or chirp), at
    unit level; the caller scales it to the asked peak excess."""
    kind = spec.get("kind", "impulse")
    if kind == "carrier":
        fc = spec.get("fmin_mhz", 20.5) * 1e6
        return carrier(rng, level, "injected carrier", fc, 3e3, t, t + float(spec.get("duration_s", 600.0)), 0.0, 0.5,
                       path="local")
    if kind == "chirp":
        return chirp(t, spec.get("drift_mhz_s", 0.1) * 1e6, 0.0, site, level)
    if kind == "impulse":
        return impulses("injected impulse", np.array([float(t)]), 1.0, 2e-4, site)
    raise RxlogError(f"inject rfi: kind {kind!r}: expected 'carrier', 'impulse' or 'chirp'")
