"""The sky and the station behind rxlog's simulator: what a decametric station at a real
site receives between 16 and 24 MHz, and the list of everything that was put there.

Power is carried as antenna temperature in kelvin at the receiver input (a power
spectral density of k_B T watts per hertz). Three paths add up in each cell:

    T = H(f) * (F(t, f) * T_sky + T_local) + T_rx

- ``T_sky``: what comes down through the ionosphere -- the Galactic background, the Sun,
  Jupiter, and distant transmitters; ``F`` is the extra absorption of a short-wave
  fadeout. Daytime D-layer absorption and the F2-layer cut-off act on each direction.
- ``T_local``: interference from the neighbourhood (ITU-R P.372 man-made noise, its
  impulses and local carriers), arriving through the antenna but not the ionosphere.
- ``H``: the station's band-pass filter and cable ripple; ``T_rx`` the receiver's own
  noise and the logging computer's spurs, added after it.

Every phenomenon that is not background is an ``Event``: it knows its class (the event
store's vocabulary), its extent for the truth table, and how to draw itself on any grid
of times and frequencies (``events``; the sources in ``sources`` and ``interference``,
the background in ``galaxy``, ``ionosphere`` and ``antenna``). Solar bursts and Jovian
storms are planned per UTC day from the seed alone, so two stations simulated with one
seed hear one sky (each when its own Sun or Jupiter is up); interference is planned per
station. ``SkyModel`` puts them together for one station and one span of time.
"""

from __future__ import annotations

import math
import zlib

import numpy as np

from rxlog.errors import RxlogError
from rxlog.sim.antenna import RECEIVER_NOISE_K, bandpass, dipole_beam, p372_temperature
from rxlog.sim.events import DAY_S, EPISODE_KINDS, EVENT_CLASSES, Event, Site
from rxlog.sim.galaxy import GALACTIC_P372, galactic_background
from rxlog.sim.interference import MANMADE_FLOOR, check_rfi_category, inject_rfi, manmade_noise
from rxlog.sim.interference_plan import plan_rfi_day, plan_spurs
from rxlog.sim.ionosphere import d_absorption_db, f2_transmission, fof2_mhz, sec_layer, solar_r12
from rxlog.sim.sources import inject_natural, mark_episode, plan_solar_day, plan_storms, storm_from_schedule
from rxlog.sky.tags import station_tags
from rxlog.spectrum import channel_grid
from rxlog.timeutil import parse_iso

NODE_S = 60.0               # slow quantities (geometry, background) are computed on this grid

_ALL = frozenset(EVENT_CLASSES)


def station_seed(name: str) -> int:
    """A stable integer for a station name (crc32; Python's hash() changes between runs)."""
    return zlib.crc32(name.encode("utf-8"))


class SkyModel:
    """Everything a station receives over [start, end): background and planned events.

    ``include``: event classes to generate naturally (default all of EVENT_CLASSES);
    ``event_rate`` scales the natural rates of solar bursts, fadeouts and Jovian storm
    chances; ``inject``: explicit events (see ``inject_event``); ``jupiter_schedule``:
    explicit Jovian storms, which then replace those from the ephemeris.
    """

    def __init__(self, cfg, start_unix: float, end_unix: float, seed: int = 0, rfi: str = "rural",
                 jupiter_schedule=None, include=None, inject=None, event_rate: float = 1.0):
        self.cfg = cfg
        st = cfg["station"]
        sp = cfg["spectra"]
        self.lat, self.lon = float(st["latitude_deg"]), float(st["longitude_deg"])
        self.name = st["name"]
        self.start, self.end = float(start_unix), float(end_unix)
        if not self.end > self.start:
            raise RxlogError(f"simulation span: end must be after start ({self.start} >= {self.end})")
        self.seed = int(seed)
        self.rfi = check_rfi_category(rfi)
        self.include = _ALL if include is None else frozenset(include)
        unknown = self.include - _ALL
        if unknown:
            raise RxlogError(f"include: unknown event class {sorted(unknown)[0]!r}; expected some of "
                             f"{', '.join(EVENT_CLASSES)}")
        if not event_rate >= 0:
            raise RxlogError(f"event_rate: expected a number >= 0, got {event_rate!r}")
        self.event_rate = float(event_rate)
        self.fmin, self.fmax = sp["fmin_mhz"] * 1e6, sp["fmax_mhz"] * 1e6
        self.site = Site(self.fmin, self.fmax, self.lat, self.lon)
        self.freq_hz = channel_grid(sp["fmin_mhz"], sp["fmax_mhz"], sp["channels"])
        self.sid = station_seed(self.name)
        # geometry on an absolute node grid: identical whatever the span asked for
        margin = 4 * 3600.0
        n0 = math.floor((self.start - margin) / NODE_S)
        n1 = math.ceil((self.end + margin) / NODE_S)
        self.node_t = np.arange(n0, n1 + 1) * NODE_S
        self.geo = station_tags(cfg, self.node_t)
        self.r12 = solar_r12(self.node_t)
        self.fof2 = fof2_mhz(self.geo["sun_alt_deg"], self.r12) * 1e6
        self.events: list[Event] = []
        self._plan(jupiter_schedule)
        for spec in inject or []:
            self.events.append(self.inject_event(spec))
        self.events.sort(key=lambda e: (e.t_start, e.f_lo))

    # ---- slow quantities ----
    def node_interp(self, key_or_array, t):
        arr = self.geo[key_or_array] if isinstance(key_or_array, str) else key_or_array
        return np.interp(t, self.node_t, arr)

    def bandpass(self, f_hz):
        """The station's band-pass H(f) (``antenna.bandpass``), kept for the last few grids."""
        f = np.asarray(f_hz, dtype=np.float64)
        key = (f.shape, float(f.flat[0]), float(f.flat[-1])) if f.ndim == 1 and f.size > 1 else None
        cache = self.__dict__.setdefault("_bp_cache", {})
        if key is not None and key in cache:
            return cache[key]
        h = bandpass(f, self.fmin, self.fmax, self.sid)
        if key is not None:
            if len(cache) >= 16:
                cache.clear()
            cache[key] = h
        return h

    def galactic(self, t_nodes, f_hz):
        """Galactic background through the ionosphere (K), (n_nodes, n_freq)."""
        return galactic_background(t_nodes, f_hz, self.lat, self.lon, self.node_interp("sun_alt_deg", t_nodes),
                                   self.node_interp(self.fof2, t_nodes), self.node_interp(self.r12, t_nodes))

    def manmade(self, t_nodes, f_hz):
        """ITU-R P.372 median man-made noise (K) for the category, lower at local night."""
        return manmade_noise(t_nodes, f_hz, self.rfi, self.lon)

    def source_propagation(self, source, t, f):
        """Beam gain and ionospheric transmission for the Sun or Jupiter, and the MUF
        gate for distant transmitters (M(3000)F2 ~ 3, common practice)."""
        if source == "local":
            return 1.0
        fof2 = self.node_interp(self.fof2, t)
        if source == "skywave":
            muf = 3.0 * fof2
            return f2_transmission(muf, f) ** 2
        alt = self.node_interp("sun_alt_deg" if source == "sun" else "jupiter_alt_deg", t)
        zen = 90.0 - alt
        sun = self.node_interp("sun_alt_deg", t)
        r12 = self.node_interp(self.r12, t)
        ld = d_absorption_db(f, sun, r12) * sec_layer(np.minimum(zen, 89.0), 80.0)
        return dipole_beam(zen) * f2_transmission(f, fof2 * sec_layer(np.minimum(zen, 89.0), 300.0)) * 10 ** (-ld / 10) * (alt > 0)

    def typical_background(self, f_hz):
        """A time-independent background (K) for sizing levels: P.372 Galactic + man-made + receiver."""
        c, d = MANMADE_FLOOR[self.rfi]
        return (p372_temperature(f_hz, *GALACTIC_P372) + p372_temperature(f_hz, c, d)) * self.bandpass(f_hz) + RECEIVER_NOISE_K

    def level_khz(self, fc, excess_db):
        """Power (K x kHz) that puts a narrow signal ``excess_db`` above the typical
        background of an archive channel."""
        df = self.freq_hz[1] - self.freq_hz[0]
        return float(self.typical_background(fc)) * 10 ** (excess_db / 10) * df / 1e3 / float(self.bandpass(fc))

    def broadband_ref(self) -> float:
        """The typical background at 20 MHz referred to the antenna (K): broadband
        interference is sized against it."""
        return float(self.typical_background(20e6)) / float(self.bandpass(20e6))

    def background_rows(self, t_rows, f_hz):
        """Galactic (through the ionosphere) and man-made background (K) at row times,
        linear between the absolute 60-s nodes (so any chunking gives the same values)."""
        f = np.asarray(f_hz, dtype=np.float64)
        key = (f.shape[0], float(f[0]), float(f[-1]))
        caches = self.__dict__.setdefault("_bg_caches", {})
        if key not in caches:
            if len(caches) >= 16:
                caches.clear()
            caches[key] = {}
        cache = caches[key]
        k = (np.asarray(t_rows) - self.node_t[0]) / NODE_S
        k0 = int(math.floor(k.min()))
        k1 = int(math.floor(k.max())) + 1
        need = [j for j in range(k0, k1 + 1) if j not in cache]
        if need:
            tn = self.node_t[0] + NODE_S * np.asarray(need, dtype=np.float64)
            g = self.galactic(tn, f)
            m = self.manmade(tn, f)
            for j, gj, mj in zip(need, g, m):
                cache[j] = (gj, mj)
            if len(cache) > 4096:
                for j in [j for j in cache if j < k0]:
                    del cache[j]
        gal_n = np.stack([cache[j][0] for j in range(k0, k1 + 1)])
        mm_n = np.stack([cache[j][1] for j in range(k0, k1 + 1)])
        i = np.clip(np.floor(k).astype(np.int64) - k0, 0, k1 - k0 - 1)
        a = (k - k0 - i)[:, None]
        a = a.astype(np.float32)
        gal_n = gal_n.astype(np.float32)
        mm_n = mm_n.astype(np.float32)
        gal = gal_n[i] + (gal_n[i + 1] - gal_n[i]) * a
        mm = mm_n[i] + (mm_n[i + 1] - mm_n[i]) * a
        return gal, mm

    # ---- planning ----
    def _days(self, lead_s):
        d0 = math.floor((self.start - lead_s) / DAY_S)
        d1 = math.floor(self.end / DAY_S)
        return range(d0, d1 + 1)

    def _keep(self, ev: Event) -> bool:
        return ev.r_t1 > self.start and ev.r_t0 < self.end

    def _plan(self, jupiter_schedule):
        """The natural events of every UTC day the span touches (solar, Jovian, then
        interference, each from its own stream of the seed), the scheduled storms and the
        spurs; kept where they are visible from this station within the span."""
        ev = []
        storms = jupiter_schedule is None and bool({"jovian_l", "jovian_s"} & self.include)
        for day in self._days(3 * 3600):
            t_day = day * DAY_S
            ev += plan_solar_day(self.seed, day, self.include, self.event_rate, self.site)
            if storms:
                ev += plan_storms(np.random.default_rng([self.seed, day, 35]), self._region_passages(t_day),
                                  self.event_rate, self.seed, self.site)
            if "rfi" in self.include:
                ev += plan_rfi_day(np.random.default_rng([self.seed, self.sid, day, 36]), t_day, self.rfi,
                                   self.site, self.level_khz, self.broadband_ref())
        if jupiter_schedule is not None:
            ev += [storm_from_schedule(i, s, self.seed, self.site) for i, s in enumerate(jupiter_schedule)]
        if "rfi" in self.include:
            ev += plan_spurs(np.random.default_rng([self.sid, 37]), self.start, self.end, self.site, self.level_khz)
        ev = [e for e in ev if e is not None]
        # solar events exist for this station only while its Sun is up
        self.events = [e for e in (self._clip_visible(e) for e in ev) if e is not None and self._keep(e)]

    def _clip_visible(self, e: Event):
        if e.source not in ("sun", "jupiter"):
            return e
        key = "sun_alt_deg" if e.source == "sun" else "jupiter_alt_deg"
        t = np.arange(e.t_start, e.t_end + NODE_S / 4, NODE_S / 4)
        up = self.node_interp(key, t) > 0.0
        if e.cls == "fadeout":
            return e if up[0] else None
        if not up.any():
            return None
        if not up.all():
            e.t_start, e.t_end = float(t[up][0]), float(min(t[up][-1], e.t_end))
        return e

    def _region_passages(self, t_day):
        """(region, start, end) intervals in which (CML, Io phase) lie in a source box,
        starting within this UTC day; geocentric to well under a node."""
        t = t_day - 4 * 3600 + np.arange(0, DAY_S + 8 * 3600 + 1, NODE_S)
        reg = station_tags(self.cfg, t)["source_region"]
        out = []
        i = 0
        while i < len(t):
            j = i
            while j + 1 < len(t) and reg[j + 1] == reg[i]:
                j += 1
            if reg[i] != "none" and t_day <= t[i] < t_day + DAY_S and i > 0 and j < len(t) - 1:
                out.append((str(reg[i]), float(t[i]), float(t[j] + NODE_S)))
            i = j + 1
        return out

    def inject_event(self, spec: dict) -> Event:
        """An explicit event from ``dict(class=..., t=POSIX s or ISO, peak_excess_db=...)``.

        Optional keys: fmin_mhz/fmax_mhz (Type III start/end frequencies), drift_mhz_s
        (Type II at 20 MHz, ionosonde), duration_s (Jovian storm, Type II, Type IV -- then
        a plateau --, fadeout, carrier), split_mhz and patchy (Type II: band-split lanes,
        patchy emission), kind ('carrier': a local transmitter, 'impulse', 'chirp': a
        distant ionosonde, for class rfi); for sky events episode (an id: events given one
        id are one true episode), episode_kind (one of EPISODE_KINDS; by default the
        class's: a solar_iii alone is an isolated_burst) and sequence (a flare's id). The
        event is placed as asked; its amplitude is set so the peak excess over the
        background equals ``peak_excess_db`` on the archive grid (negative for a fadeout).
        A solar burst needs the Sun up, a storm Jupiter, a chirp an open path.
        """
        cls, t, x = _injection(spec)
        rng = np.random.default_rng([self.seed, int(t), 38])
        if cls == "rfi":
            e = inject_rfi(spec, rng, t, self.site, self.level_khz)
        else:
            e = inject_natural(cls, spec, rng, t, self.site)
        if e is None:
            raise RxlogError(f"inject {cls}: the event falls outside the band")
        if cls != "rfi":
            kind = spec.get("episode_kind", e.episode_kind)
            if kind not in EPISODE_KINDS:
                raise RxlogError(f"inject {cls}: episode_kind {kind!r}: expected one of {', '.join(EPISODE_KINDS)}")
            mark_episode([e], kind, t, episode=str(spec.get("episode", "")), sequence=str(spec.get("sequence", "")))
        e.params["target_db"] = x
        e.reason = "injected " + e.reason
        return e


def _injection(spec: dict) -> tuple[str, float, float]:
    """Class, time (POSIX s) and peak excess (dB) of an injection; RxlogError naming the fault."""
    cls = spec.get("class")
    if cls not in _ALL:
        raise RxlogError(f"inject: class {cls!r}: expected one of {', '.join(EVENT_CLASSES)}")
    try:
        t = spec["t"] if isinstance(spec["t"], (int, float)) else parse_iso(spec["t"])
        x = float(spec["peak_excess_db"])
    except (KeyError, ValueError, TypeError) as err:
        raise RxlogError(f"inject {cls}: {err}; expected dict(class=..., t=ISO or POSIX s, "
                         "peak_excess_db=number)") from None
    if (cls == "fadeout") != (x < 0):
        raise RxlogError(f"inject {cls}: peak_excess_db {x}: a fadeout is a dip (negative), "
                         "every other event an excess (positive)")
    return cls, t, x
