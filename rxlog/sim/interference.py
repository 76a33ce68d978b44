"""Interference at the simulated station, kind by kind -- how each draws itself on any
grid: ITU-R P.372 man-made noise by environmental category, narrowband transmissions
(broadcast and time-signal carriers, utility and amateur voice and data), ionosonde
sweeps, broadband impulses (sferics, arcing, fences, appliance clicks), switched
broadband noise (appliances, power supplies, LED drivers, inverters) and the logging
computer's own spurs. How a day of it is planned for a station is in
``interference_plan``.

Levels are set by ``level(fc, excess_db)``: the power (K x kHz) that puts a narrow
signal ``excess_db`` above the typical background of an archive channel, and, for
broadband interference, by ``t_ref``: the typical background at 20 MHz referred to the
antenna (K); the sky model knows both.
"""

from __future__ import annotations

import numpy as np
from scipy.special import ndtr

from rxlog.errors import RxlogError
from rxlog.sim.antenna import p372_temperature
from rxlog.sim.events import Event, Site

# ITU-R P.372 (Radio noise), median man-made noise figure Fam = c - d log10(f/MHz) in dB
# above k T0 b, for the environmental categories of its man-made noise table. Constants
# from memory of P.372-14.
MANMADE_P372 = {"quiet-rural": (53.6, 28.6), "rural": (67.2, 27.7),
                "residential": (72.5, 27.7), "city": (76.8, 27.7)}
# The categories a simulation can choose: P.372's, and 'site', a quiet club site where
# real interference still comes and goes (every kind in ``interference_plan.plan_site_day``
# over the quiet-rural man-made floor).
MANMADE_FLOOR = dict(MANMADE_P372, site=MANMADE_P372["quiet-rural"])
RFI_CATEGORIES = tuple(MANMADE_FLOOR)

# Local interference per category (rates per hour unless stated). Common practice: no
# published table; the order of magnitude follows P.372's ranking of the categories.
# 'site' plans its neighbourhood itself (``interference_plan``); only its floor's night
# drop is read here.
LOCAL_RFI = {
    #               arcing/h  appliance impulses/h  fence prob.  local carriers  night drop (dB)
    "quiet-rural": dict(arcing=0.05, impulses=0.2, fence=0.3, carriers=0, night_db=0.0),
    "rural":       dict(arcing=0.3, impulses=1.0, fence=0.6, carriers=2, night_db=2.0),
    "residential": dict(arcing=1.0, impulses=4.0, fence=0.1, carriers=6, night_db=3.0),
    "city":        dict(arcing=2.0, impulses=10.0, fence=0.0, carriers=15, night_db=4.0),
    "site":        dict(arcing=0.0, impulses=0.0, fence=0.0, carriers=1, night_db=0.0),
}

# ITU Radio Regulations allocations near the band, MHz (from memory): broadcasting,
# amateur, maritime mobile; standard-frequency carriers.
BROADCAST_BANDS = [(13.57, 13.87), (15.1, 15.8), (17.48, 17.9), (18.9, 19.02), (21.45, 21.85), (25.67, 26.1)]
AMATEUR_BANDS = [(14.0, 14.35), (18.068, 18.168), (21.0, 21.45), (24.89, 24.99)]
MARITIME_BANDS = [(16.36, 17.41), (22.0, 22.855)]
TIME_SIGNALS_MHZ = (15.0, 20.0, 25.0)
KEY_SLOT_S = 0.5            # keying of voice and data is drawn in slots of this length


def check_rfi_category(rfi: str) -> str:
    """``rfi`` when it names an interference category; RxlogError otherwise."""
    if rfi not in MANMADE_FLOOR:
        raise RxlogError(f"rfi category {rfi!r}: expected one of {', '.join(RFI_CATEGORIES)} "
                         "(ITU-R P.372 man-made noise categories, or site: a quiet club site with "
                         "every kind of interference)")
    return rfi


def manmade_noise(t, f_hz, category: str, lon_deg: float):
    """ITU-R P.372 median man-made noise (K), (n_times, n_freq), for the category, lower at
    local night (by the category's night drop, deepest at 03 h local mean solar time)."""
    c, d = MANMADE_FLOOR[category]
    base = p372_temperature(np.asarray(f_hz, dtype=np.float64), c, d)[None, :]
    solar_hour = np.mod((np.asarray(t) / 3600.0) + lon_deg / 15.0, 24.0)
    night = 0.5 * (1 + np.cos(2 * np.pi * (solar_hour - 3.0) / 24.0))   # 1 at 03 h local, 0 at 15 h
    drop = LOCAL_RFI[category]["night_db"] * night
    return base * 10 ** (-drop[:, None] / 10)


class Carrier(Event):
    """A narrowband transmission: power ``p_khz`` (K x kHz) spread over [f_lo, f_hi],
    optionally a carrier line holding ``line_share`` of it; Rayleigh-like fading for
    sky-wave signals (selective across the signal when its paths' delays ``fade_tau`` are
    given), speech-like or data keying in 0.5-s slots, on/off within its schedule."""

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
        if p.get("fade_tau") is not None:
            cols = np.flatnonzero(np.any(out != 0, axis=0))     # the few channels the signal reaches
            f_cols = np.clip(np.broadcast_to(f, out.shape)[0, cols], self.f_lo, self.f_hi)
            out[:, cols] *= _selective_fading(t1, f_cols[None, :], p["fade_nu"], p["fade_ph"], p["fade_tau"])
        elif p.get("fade"):
            out = out * _fading(t1, p["fade_nu"], p["fade_ph"])
        if p.get("keying") is not None:
            slot = np.clip(((t1 - self.t_start) / KEY_SLOT_S).astype(np.int64), 0, len(p["keying"]) - 1)
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
    """Broadband impulses (sferics, arcing, fence pulses, appliance clicks): each pulse is
    ``t_imp`` K (times its ``weights`` entry, when given) for ``width`` s, its power
    falling as f^-``slope`` (1.5 unless given); a cell gets the pulses that fall in its
    integration window, averaged over it."""

    def shape(self, t, f, dwell, df):
        p = self.params
        times = p["times"]
        t = np.broadcast_to(t, np.broadcast(t, f).shape)
        cols, inv = np.unique(t[0] - t[0, 0], return_inverse=True)   # channels sampled together
        first = np.searchsorted(t[0] - t[0, 0], cols)
        tc = t[:, first]
        a, b = np.searchsorted(times, tc - dwell / 2), np.searchsorted(times, tc + dwell / 2)
        if "weights" in p:
            cum = np.concatenate([[0.0], np.cumsum(p["weights"])])
            n = (cum[b] - cum[a]).astype(np.float32)
        else:
            n = (b - a).astype(np.float32)
        return p["t_imp"] * p["width"] / dwell * n[:, inv.ravel()] * (f / 20e6) ** -p.get("slope", 1.5)


class SwitchedNoise(Event):
    """Broadband noise switched on at ``t_start`` and off at ``t_end`` (an appliance, a
    switch-mode power supply, an LED driver, a solar inverter): ``t_k`` K at 20 MHz
    falling as f^-``slope``, flat or, with a switching frequency ``f_sw``, a comb of its
    harmonics over a pedestal. A cell gets the share of its integration time the noise
    was on, so the noise rises and falls within one time step."""

    def shape(self, t, f, dwell, df):
        p = self.params
        on = np.clip(np.minimum(t + dwell / 2, self.t_end) - np.maximum(t - dwell / 2, self.t_start), 0.0, None)
        spec = p["t_k"] * (f / 20e6) ** -p["slope"]
        if p.get("f_sw"):
            spec = spec * _comb(f, df, p["f_sw"], p["tooth_hz"], p["comb_share"])
        return spec * (on / dwell)


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


def _selective_fading(t, f, freqs_hz, phases, delays_s):
    """Rayleigh-like fading that differs across frequency: paths of Doppler ``nu`` and
    delay ``tau`` summed, |sum exp(i(2 pi (nu t - f tau) + phi))|^2 / n, so frequencies
    more than ~1/delay apart fade independently (selective fading; Watterson, Juroshek &
    Bensema 1970 model HF paths this way)."""
    z = np.zeros(np.broadcast(t, f).shape, dtype=np.complex128)
    for nu, ph, tau in zip(freqs_hz, phases, delays_s):     # a handful of paths
        z += np.exp(1j * (2 * np.pi * (nu * t - f * tau) + ph))
    return np.abs(z) ** 2 / len(freqs_hz)


def _comb(f, df, f_sw, tooth_hz, share):
    """Spectral shape of switching noise, mean 1 over frequency: a pedestal (1 - share)
    and harmonics of ``f_sw`` (Gaussian teeth of rms width ``tooth_hz``) holding
    ``share``; each bin [f - df/2, f + df/2] gets the teeth's power that falls in it."""
    f = np.asarray(f, dtype=np.float64)
    k = np.round(f / f_sw)
    teeth = np.zeros(f.shape)
    for j in (-1.0, 0.0, 1.0):                  # the harmonics near each bin (tooth << f_sw)
        c = (k + j) * f_sw
        teeth = teeth + ndtr((f + df / 2 - c) / tooth_hz) - ndtr((f - df / 2 - c) / tooth_hz)
    return (1.0 - share) + share * teeth * (f_sw / df)


def _band_overlap(f, df, lo, hi):
    """Fraction of [lo, hi] that falls in each bin [f - df/2, f + df/2]."""
    width = max(hi - lo, 1e-9)
    a = np.maximum(f - df / 2, lo)
    b = np.minimum(f + df / 2, hi)
    return np.clip(b - a, 0.0, None) / width


def carrier(rng, level, what, fc, bw, t0, t1, excess_db, line_share, path="sky", kind="carrier") -> Carrier:
    """A transmission of ``bw`` Hz at ``fc`` over [t0, t1], ``excess_db`` above the typical
    background; a sky-wave one ('sky') fades, a local one ('local') does not. ``kind``:
    its interference kind ('narrowband_burst' once keyed)."""
    p = dict(fc=fc, p_khz=level(fc, excess_db), line_share=line_share)
    if path == "sky":
        p.update(fade=True, fade_nu=rng.uniform(0.005, 0.2, 6), fade_ph=rng.uniform(0, 2 * np.pi, 6))
    e = Carrier("rfi", t0, t1, fc - bw / 2, fc + bw / 2, drift_mhz_s=0.0, path=path,
                source="skywave" if path == "sky" else "local", params=p, rfi_kind=kind,
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
              params=p, rfi_kind="sweep", reason=f"ionosonde sweep, {rate / 1e3:+.0f} kHz/s")
    e.r_t0, e.r_t1 = e.t_start - 30, e.t_end + 30
    e.r_f0, e.r_f1 = site.fmin - 3e6, site.fmax + 3e6
    return e


def impulses(what, times, t_imp, width, site: Site, weights=None, slope=None) -> Impulses:
    """Broadband pulses of ``t_imp`` K (times ``weights``, one per pulse, when given) and
    ``width`` s at ``times`` (sorted POSIX s), power falling as f^-``slope`` (default
    1.5); one pulse is an 'impulse', more an 'impulse_train'."""
    p = dict(times=times, t_imp=t_imp, width=width)
    if weights is not None:
        p["weights"] = np.asarray(weights, dtype=np.float64)
    if slope is not None:
        p["slope"] = float(slope)
    e = Impulses("rfi", float(times[0]), float(times[-1] + width), site.fmin, site.fmax, drift_mhz_s=0.0,
                 path="local", source="local", params=p, rfi_kind="impulse" if len(times) == 1 else "impulse_train",
                 reason=what)
    e.r_t0, e.r_t1 = e.t_start - 5, e.t_end + 5
    e.r_f0, e.r_f1 = 0.0, 1e12
    return e


def switched_noise(what, t0, t1, t_k, slope, site: Site, f_sw=None, tooth_hz=2e3, comb_share=0.7) -> SwitchedNoise:
    """Broadband noise of ``t_k`` K at 20 MHz (falling as f^-``slope``) switched on over
    [t0, t1]; with ``f_sw`` (Hz) a comb of its harmonics (teeth ``tooth_hz`` rms wide)
    holding ``comb_share`` of the power."""
    p = dict(t_k=float(t_k), slope=float(slope), f_sw=f_sw, tooth_hz=float(tooth_hz), comb_share=float(comb_share))
    comb = f", comb of {f_sw / 1e3:.0f} kHz" if f_sw else ""
    e = SwitchedNoise("rfi", float(t0), float(t1), site.fmin, site.fmax, drift_mhz_s=0.0, path="local",
                      source="local", params=p, rfi_kind="switched_broadband",
                      reason=f"{what} switched on (broadband noise{comb})")
    e.r_t0, e.r_t1 = e.t_start - 5, e.t_end + 5
    e.r_f0, e.r_f1 = site.fmin - 3e6, site.fmax + 3e6
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
