"""How a day of interference is planned for one station: the P.372 categories'
transmitters and neighbourhood (``plan_rfi_day``), the 'site' category's every kind at
once (``plan_site_day``), and the logging computer's spurs (``plan_spurs``). The kinds
themselves, and how each draws itself, are in ``interference``.

``level(fc, excess_db)`` sizes narrowband signals (K x kHz for ``excess_db`` above an
archive channel's typical background); ``t_ref`` (K) is that background at 20 MHz
referred to the antenna, for broadband interference.
"""

from __future__ import annotations

import math

import numpy as np

from rxlog.sim.events import DAY_S, Event, Site, random_times
from rxlog.sim.interference import (AMATEUR_BANDS, BROADCAST_BANDS, KEY_SLOT_S, LOCAL_RFI, MARITIME_BANDS,
                                    TIME_SIGNALS_MHZ, Spur, carrier, chirp, impulses, switched_noise)

# --- the P.372 categories -----------------------------------------------------------------


def plan_rfi_day(rng, t_day: float, category: str, site: Site, level, t_ref: float) -> list[Event]:
    """The interference of one UTC day from ``t_day``, drawn from ``rng`` in a fixed order:
    distant transmitters, then the neighbourhood of a station of this category."""
    if category == "site":
        return plan_site_day(rng, t_day, site, level, t_ref)
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
                        rng.uniform(5, 30), 0.0, kind="narrowband_burst")
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
    out += _local_carriers(rng, t_day, loc["carriers"], site, level)
    return out


def _local_carriers(rng, t_day, n, site, level):
    """Steady carriers from the neighbourhood (a device's oscillator), minutes to hours."""
    out = []
    for _ in range(n):
        fc = rng.uniform(site.fmin - 1e6, site.fmax + 1e6)
        t = t_day + rng.uniform(0, DAY_S)
        out.append(carrier(rng, level, "local carrier", fc, rng.uniform(50, 3e3), t, t + rng.uniform(600, 6 * 3600),
                           rng.uniform(3, 20), 0.5, path="local"))
    return out


def plan_spurs(rng, start: float, end: float, site: Site, level) -> list[Event]:
    """Up to four harmonics of the logging computer's clock in or near the band, all run long."""
    clock = rng.uniform(3.5e6, 12e6)
    out = []
    k = np.arange(1, 20)
    for fc in (k * clock)[(k * clock > site.fmin - 1.2e6) & (k * clock < site.fmax + 1.2e6)][:4]:
        p = dict(fc=fc, p_khz=level(fc, rng.uniform(2, 12)))
        out.append(Spur("rfi", start, end, fc - 50, fc + 50, drift_mhz_s=0.0, path="rx", source="local", params=p,
                        rfi_kind="spur", reason=f"local spur (computer clock harmonic), {fc / 1e6:.4f} MHz"))
    return out


# --- the 'site' category: a quiet club site, every kind at once -----------------------------
# Rates, durations and levels below are common practice (what a club sees on an ordinary
# day at a quiet site; no published table) unless a source is named. Hours are local mean
# solar time; the weights give the relative chance of each hour.
DAYTIME = [1] * 7 + [4] * 14 + [1] * 3          # transmitters and operators: busiest 07-21 h
WAKING = [0.3] * 6 + [1] * 17 + [0.5]           # the neighbours' appliances: any hour, fewest at night
EVENING = [0] * 16 + [1] * 4 + [0] * 4          # lights go on 16-20 h
NIGHT = [2] * 5 + [0.1] * 14 + [2] * 5           # distant storms heard 19-05 h (no D-layer absorption)
AFTERNOON = [0] * 12 + [2, 3, 3, 2, 1, 1] + [0] * 6   # local summer thunderstorms 12-18 h

BROADCAST_SHARE = 0.15      # of a broadcast band's 5-kHz channels that carry some station that day
DATA_SESSIONS = 25          # data traffic sessions per maritime band per day
VOICE_QSOS = 20             # voice contacts per amateur band per day
ELSEWHERE = 0.25            # per allocation's worth, the extra sessions anywhere in the band
#                             (out-of-band stations, harmonics of lower-frequency transmitters)
NIGHT_STORMS = 1.2          # thunderstorms heard per night (scaled 0.6-1.4 from winter to summer)
AFTERNOON_STORMS = 1.5      # local afternoon storms per summer day (none in winter)
CLICKS_PER_H = 0.5          # single clicks (switches, thermostats) per waking hour


def plan_site_day(rng, t_day: float, site: Site, level, t_ref: float) -> list[Event]:
    """Every kind of interference a quiet club site hears, for the UTC day from ``t_day``:
    broadcasters on their schedules, time signals, data and voice bursts, chirp sounders,
    sferics, clicks, switched broadband noise and a local carrier (spurs come from
    ``plan_spurs``)."""
    out = _site_broadcast(rng, t_day, site, level)
    out += _plan_time_signals(rng, t_day, level)
    out += _site_data(rng, t_day, site, level)
    out += _site_voice(rng, t_day, site, level)
    out += _site_sounders(rng, t_day, site, level)
    out += _site_sferics(rng, t_day, site, t_ref)
    out += _site_clicks(rng, t_day, site, t_ref)
    out += _site_switched(rng, t_day, site, t_ref)
    out += _local_carriers(rng, t_day, LOCAL_RFI["site"]["carriers"], site, level)
    return out


def _at_local_hours(rng, t_day: float, n: int, weights, lon_deg: float) -> np.ndarray:
    """``n`` times within the UTC day from ``t_day`` whose local mean solar hours follow
    ``weights`` (24 relative chances, from 00 h)."""
    w = np.asarray(weights, dtype=np.float64)
    h = rng.choice(24, size=n, p=w / w.sum()) + rng.uniform(0.0, 1.0, n)
    return t_day + np.mod(h - lon_deg / 15.0, 24.0) * 3600.0


def _log_uniform(rng, lo, hi, n=None):
    return np.exp(rng.uniform(math.log(lo), math.log(hi), n))


def _in_band(lo_mhz, hi_mhz, site: Site) -> bool:
    return hi_mhz * 1e6 > site.fmin and lo_mhz * 1e6 < site.fmax


def _places(bands, per_band, site: Site):
    """(lo, hi, sessions per day) in MHz: each allocation in the band, and the whole band
    for the stations outside the allocations."""
    inside = [(lo, hi, per_band) for lo, hi in bands if _in_band(lo, hi, site)]
    return inside + [(site.fmin / 1e6, site.fmax / 1e6, ELSEWHERE * per_band * max(len(inside), 1))]


def _site_broadcast(rng, t_day, site, level):
    """Short-wave broadcasters: a station on a 5-kHz channel keeps schedules of whole hours
    that start and stop on the hour, and fades deeply and selectively over two propagation
    modes 0.5-3 ms apart with Doppler spreads up to 0.5 Hz (the ranges of ITU-R F.1487's
    quiet to moderate HF channels, from memory). The path's MUF decides when it is heard,
    so the higher bands are heard mostly by day."""
    out = []
    for lo, hi in BROADCAST_BANDS:
        if not _in_band(lo, hi, site):
            continue
        slots = np.arange(math.ceil(lo * 200), math.floor(hi * 200) + 1) / 200.0 * 1e6
        for fc in slots[rng.uniform(size=len(slots)) < BROADCAST_SHARE]:
            t = t_day + 3600.0 * rng.integers(0, 24)
            while t < t_day + DAY_S:
                d = 3600.0 * rng.integers(1, 4)
                e = carrier(rng, level, "broadcast AM", fc, 9e3, t, t + d, rng.uniform(10, 40), 0.67)
                modes = rng.uniform(0.5e-3, 3e-3) * (np.arange(8) % 2)           # two modes, four paths each
                e.params.update(fade_nu=rng.uniform(-0.5, 0.5, 8), fade_ph=rng.uniform(0, 2 * np.pi, 8),
                                fade_tau=modes + rng.normal(0.0, 5e-5, 8))
                out.append(e)
                t += d + 3600.0 * rng.integers(1, 8)
    return out


def _site_data(rng, t_day, site, level):
    """Maritime and utility data (ARQ links, ALE soundings, selective calls): sessions of
    5-60 min of keyed bursts 1-30 s long, seconds to minutes apart, 0.5-3 kHz wide; mostly
    in the maritime allocations by day, some anywhere."""
    out = []
    for lo, hi, n in _places(MARITIME_BANDS, DATA_SESSIONS, site):
        for t in _at_local_hours(rng, t_day, rng.poisson(n), DAYTIME, site.lon):
            d = float(_log_uniform(rng, 300, 3600))
            e = carrier(rng, level, "data bursts", rng.uniform(lo, hi) * 1e6, rng.uniform(0.5e3, 3e3), t, t + d,
                        rng.uniform(8, 30), 0.0, kind="narrowband_burst")
            e.params["keying"] = _keyed_bursts(rng, d)
            out.append(e)
    return out


def _keyed_bursts(rng, d: float) -> np.ndarray:
    """Data keying per slot: bursts of 1-30 s at full power, 5 s to 3 min apart."""
    key = np.zeros(int(d / KEY_SLOT_S) + 2)
    t = float(_log_uniform(rng, 1.0, 60.0))
    while t < d:
        on = float(_log_uniform(rng, 1.0, 30.0))
        key[int(t / KEY_SLOT_S):int((t + on) / KEY_SLOT_S) + 1] = 1.0
        t += on + float(_log_uniform(rng, 5.0, 180.0))
    return key


def _site_voice(rng, t_day, site, level):
    """Single-sideband voice contacts: overs of 15 s to 2 min from the two stations in turn
    (the far one often not heard here), speech keying the power in syllables, 2.4-2.8 kHz
    wide above the dial frequency; mostly in the amateur allocations by day, some anywhere."""
    out = []
    for lo, hi, n in _places(AMATEUR_BANDS, VOICE_QSOS, site):
        for t in _at_local_hours(rng, t_day, rng.poisson(n), DAYTIME, site.lon):
            d = float(_log_uniform(rng, 180, 1800))
            bw = rng.uniform(2.4e3, 2.8e3)
            f_dial = rng.uniform(lo, hi - 0.003) * 1e6
            e = carrier(rng, level, "voice (SSB)", f_dial + 300 + bw / 2, bw, t, t + d, rng.uniform(5, 30), 0.0,
                        kind="narrowband_burst")
            e.params["keying"] = _overs(rng, d)
            out.append(e)
    return out


def _overs(rng, d: float) -> np.ndarray:
    """Voice keying per slot: alternate overs of 15-120 s (the far station at its own
    level, unheard half the time), 1-5 s apart; within an over 70 % of the slots carry
    a syllable at 0.3-1 of full power."""
    n = int(d / KEY_SLOT_S) + 2
    key = np.zeros(n)
    far = 0.0 if rng.uniform() < 0.5 else float(rng.lognormal(-0.5, 0.7))
    t, turn = 0.0, 0
    while t < d:
        over = rng.uniform(15.0, 120.0)
        a, b = int(t / KEY_SLOT_S), min(n, int((t + over) / KEY_SLOT_S))
        amp = (rng.uniform(size=b - a) < 0.7) * rng.uniform(0.3, 1.0, b - a)
        key[a:b] = amp * (1.0 if turn % 2 == 0 else far)
        t += over + rng.uniform(1.0, 5.0)
        turn += 1
    return key


def _site_sounders(rng, t_day, site, level):
    """Distant chirp sounders sweeping up at 100 kHz/s (common practice), one to three,
    each every 5, 10, 15 or 30 min at its own minute; heard while the path is open."""
    out = []
    for _ in range(1 + rng.integers(0, 3)):
        period = float(rng.choice([300.0, 600.0, 900.0, 1800.0]))
        off = rng.uniform(0, period)
        excess = rng.uniform(8, 25)
        for t0 in t_day + off + period * np.arange(int(DAY_S / period)):
            out.append(chirp(t0, 1e5, excess, site, level))
    return out


def _summer(t: float, lat_deg: float) -> float:
    """How far into the warm half of the year: 1 at the local midsummer (about 21 June in
    the north), 0 from the autumn to the spring equinox."""
    doy = (t / 86400.0) % 365.2425           # from 1 January 1970
    north = math.cos(2 * math.pi * (doy - 171.0) / 365.2425)
    return max(0.0, north if lat_deg >= 0 else -north)


def _site_sferics(rng, t_day, site, t_ref):
    """Sferics of thunderstorms, mostly at night (the D layer no longer absorbs distant
    storms) and on summer afternoons (local convection). A storm is active 0.5-3 h and
    flashes at a peak rate of 2-10 a minute, rising and falling over its life. A flash is
    1 + Poisson(2.5) return strokes ~80 ms apart (3-5 strokes a flash, interstroke
    intervals of tens of ms: Rakov & Uman 2003, *Lightning: Physics and Effects*, ch. 4;
    from memory), each ~1 ms long, the later ones weaker, at every frequency with power
    falling as f^-2 (the return stroke's field spectrum falls as 1/f at HF; from memory).
    A flash's energy, in units of ``t_ref`` x 1 s (a 1-s integration of the background),
    follows dN/dq ~ q^-1.5 from 0.01 to 30: mostly barely visible, a few far above."""
    s = _summer(t_day + DAY_S / 2, site.lat)
    starts = list(_at_local_hours(rng, t_day, rng.poisson(NIGHT_STORMS * (0.6 + 0.8 * s)), NIGHT, site.lon))
    starts += list(_at_local_hours(rng, t_day, rng.poisson(AFTERNOON_STORMS * s), AFTERNOON, site.lon))
    out = []
    width = 1e-3
    for t0 in starts:
        d = float(_log_uniform(rng, 1800, 10800))
        peak_rate = rng.uniform(2, 10) / 60.0
        near = rng.lognormal(0.0, 0.7)                     # a nearer or farther storm
        n = rng.poisson(peak_rate * d * 2 / math.pi)       # rate ~ sin(pi x) over the storm's life
        flashes = t0 + d * np.arccos(1 - 2 * rng.uniform(size=n)) / math.pi
        for tf in np.sort(flashes):
            k = 1 + rng.poisson(2.5)
            times = tf + np.concatenate([[0.0], np.cumsum(rng.lognormal(math.log(0.08), 0.6, k - 1))])
            weights = np.concatenate([[1.0], rng.uniform(0.1, 0.6, k - 1)])
            q = near * _power_law(rng, 1.5, 0.01, 30.0)
            out.append(impulses("sferic (lightning flash)", times, t_ref * q / width, width, site,
                                weights=weights, slope=2.0))
    return out


def _power_law(rng, index, lo, hi):
    """A draw from dN/dq ~ q^-index between lo and hi."""
    a = 1.0 - index
    return (lo ** a + rng.uniform() * (hi ** a - lo ** a)) ** (1.0 / a)


def _site_clicks(rng, t_day, site, t_ref):
    """Single clicks from switches and thermostats nearby: a broadband impulse of a
    fraction of a millisecond, its energy 0.05-5 times a 1-s integration of the background,
    power falling as f^-1."""
    out = []
    for t in np.sort(_at_local_hours(rng, t_day, rng.poisson(CLICKS_PER_H * 24 * 0.7), WAKING, site.lon)):
        q = float(_log_uniform(rng, 0.05, 5.0))
        out.append(impulses("click (switch or thermostat)", np.array([t]), t_ref * q / 2e-4, 2e-4, site, slope=1.0))
    return out


def _site_switched(rng, t_day, site, t_ref):
    """The neighbours' switched broadband noise, each switching on and off within a time
    step: evening LED lighting (flat, 1-5 h), switch-mode chargers and power supplies
    (a comb of 40-150 kHz harmonics, 15 min-3 h), appliances used for minutes (flat,
    3-30 min, any hour), a cycling inverter appliance (a heat pump: on 5-20 min every
    30-90 min for a few hours, 15-40 kHz comb) and, some days, a solar inverter from
    after sunrise to before sunset (16-20 kHz comb). Each raises the band by 0.2-5 dB,
    its spectrum falling as f^-1.5..-3 like the sky behind it, so the rise in dB is
    about even across the band."""
    lon = site.lon
    out = []

    def add(what, t0, t1, lo_db, hi_db, f_sw=None):
        x = float(_log_uniform(rng, lo_db, hi_db))
        out.append(switched_noise(what, t0, t1, t_ref * (10 ** (x / 10) - 1), rng.uniform(1.5, 3.0), site,
                                  f_sw=f_sw, tooth_hz=rng.uniform(1e3, 4e3)))

    if rng.uniform() < 0.7:
        t0 = _at_local_hours(rng, t_day, 1, EVENING, lon)[0]
        add("LED lighting", t0, t0 + rng.uniform(3600, 5 * 3600), 0.3, 1.5)
    for t0 in _at_local_hours(rng, t_day, rng.poisson(2.0), WAKING, lon):
        add("switch-mode power supply", t0, t0 + float(_log_uniform(rng, 900, 3 * 3600)), 0.5, 4.0,
            f_sw=rng.uniform(40e3, 150e3))
    for t0 in _at_local_hours(rng, t_day, rng.poisson(3.0), WAKING, lon):
        add("appliance", t0, t0 + float(_log_uniform(rng, 180, 1800)), 0.5, 5.0)
    if rng.uniform() < 0.5:
        t = _at_local_hours(rng, t_day, 1, WAKING, lon)[0]
        end, f_sw = t + rng.uniform(2, 8) * 3600, rng.uniform(15e3, 40e3)
        while t < end:
            on = rng.uniform(300, 1200)
            add("heat pump", t, t + on, 0.2, 1.5, f_sw=f_sw)
            t += on + rng.uniform(1800, 5400)
    if rng.uniform() < 0.3:
        rise, sets = _daylight_hours(t_day + DAY_S / 2, site.lat)
        if sets - rise > 2.5:
            t0 = t_day + np.mod(rise + rng.uniform(0.5, 1.0) - lon / 15.0, 24.0) * 3600
            add("solar inverter", t0, t0 + (sets - rise - rng.uniform(1.0, 2.0)) * 3600, 0.5, 3.0,
                f_sw=rng.uniform(16e3, 20e3))
    return out


def _daylight_hours(t: float, lat_deg: float) -> tuple[float, float]:
    """Local mean solar hours of sunrise and sunset: the Sun's declination from Cooper
    (1969), 23.45 sin(2 pi (284 + n) / 365), and the hour angle of a horizon crossing;
    good to a quarter of an hour (the equation of time and refraction are left out)."""
    n = (t / 86400.0) % 365.2425 + 1
    dec = math.radians(23.45 * math.sin(2 * math.pi * (284 + n) / 365))
    c = -math.tan(math.radians(lat_deg)) * math.tan(dec)
    h = math.degrees(math.acos(min(1.0, max(-1.0, c)))) / 15.0
    return 12.0 - h, 12.0 + h
