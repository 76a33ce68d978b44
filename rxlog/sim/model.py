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
of times and frequencies. Solar bursts and Jovian storms are planned per UTC day from
the seed alone, so two stations simulated with one seed hear one sky (each when its own
Sun or Jupiter is up); interference is planned per station.
"""

from __future__ import annotations

import functools
import math
import zlib
from dataclasses import dataclass, field

import numpy as np

from rxlog.constants import C_M_S, EARTH_RADIUS_KM, K_B, SFU
from rxlog.errors import RxlogError
from rxlog.spectrum import channel_grid

T0_K = 290.0                # reference temperature of ITU-R P.372 noise figures
DAY_S = 86400.0
NODE_S = 60.0               # slow quantities (geometry, background) are computed on this grid

# ITU-R P.372 (Radio noise), median man-made noise figure Fam = c - d log10(f/MHz) in dB
# above k T0 b, for the environmental categories of its man-made noise table; and the
# median Galactic noise Fa = 52 - 23 log10(f/MHz). Constants from memory of P.372-14.
MANMADE_P372 = {"quiet-rural": (53.6, 28.6), "rural": (67.2, 27.7),
                "residential": (72.5, 27.7), "city": (76.8, 27.7)}
GALACTIC_P372 = (52.0, 23.0)
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

RECEIVER_NOISE_K = 5000.0   # receiver + feedline, referred to the input (NF ~ 12.8 dB); common practice
ANTENNA_GAIN_DBI = 5.0      # horizontal dipole ~0.15 wavelength over average ground, at zenith; common practice
DIPOLE_HEIGHT_WL = 0.15     # height above ground in wavelengths (the example station's antenna)

# Alvarez & Haddock (1973, Solar Physics 29, 197): Type III drift df/dt = -0.01 f^1.84
# (MHz/s, f in MHz), applied here to the time of peak intensity at each frequency.
AH_A, AH_B = 0.01, 1.84

EVENT_CLASSES = ("jovian_l", "jovian_s", "solar_iii", "solar_ii", "solar_iv", "fadeout", "rfi")

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

# ITU Radio Regulations allocations near the band, MHz (from memory): broadcasting,
# amateur, maritime mobile; standard-frequency carriers.
BROADCAST_BANDS = [(13.57, 13.87), (15.1, 15.8), (17.48, 17.9), (18.9, 19.02), (21.45, 21.85), (25.67, 26.1)]
AMATEUR_BANDS = [(14.0, 14.35), (18.068, 18.168), (21.0, 21.45), (24.89, 24.99)]
MARITIME_BANDS = [(16.36, 17.41), (22.0, 22.855)]
TIME_SIGNALS_MHZ = (15.0, 20.0, 25.0)

_ALL = frozenset(EVENT_CLASSES)


def check_rfi_category(rfi: str) -> str:
    if rfi not in MANMADE_P372:
        raise RxlogError(f"rfi category {rfi!r}: expected one of {', '.join(RFI_CATEGORIES)} "
                         "(ITU-R P.372 man-made noise categories)")
    return rfi


def p372_temperature(f_hz, c: float, d: float):
    """Noise temperature (K) of a P.372 noise figure Fa = c - d log10(f/MHz) dB above k T0 b."""
    return T0_K * 10.0 ** ((c - d * np.log10(np.asarray(f_hz) / 1e6)) / 10.0)


def station_seed(name: str) -> int:
    """A stable integer for a station name (crc32; Python's hash() changes between runs)."""
    return zlib.crc32(name.encode("utf-8"))


# --- time and sky geometry -----------------------------------------------------------------

def local_sidereal_deg(t_unix, lon_deg: float):
    """Local mean sidereal time in degrees.

    GMST from the Earth rotation angle (IERS Conventions 2010, eq. 5.15) plus the
    polynomial of eq. 5.32 to first order, with UT1 taken as UTC (|UT1-UTC| < 0.9 s,
    i.e. < 0.004 deg) -- plenty for a background that changes over hours.
    """
    t = np.asarray(t_unix, dtype=np.float64)
    du = (t - 946_728_000.0) / DAY_S                      # days of UT1 from J2000.0
    frac = np.mod(du, 1.0)
    era = 360.0 * np.mod(0.7790572732640 + 0.00273781191135448 * du + frac, 1.0)
    tc = du / 36525.0
    gmst = era + (0.014506 + 4612.156534 * tc) / 3600.0
    return np.mod(gmst + lon_deg, 360.0)


def solar_r12(t_unix):
    """Smoothed sunspot number from a plain 11-year cycle with its maximum in late 2024
    (cycle 25; peak ~160 from memory). Sets solar burst rates and the ionosphere."""
    year = 1970.0 + np.asarray(t_unix, dtype=np.float64) / (365.25 * DAY_S)
    return 10.0 + 150.0 * np.cos(np.pi * (year - 2024.8) / 11.0) ** 2


def fof2_mhz(sun_alt_deg, r12):
    """F2-layer critical frequency: ~3-4 MHz at night to 6-12 MHz at noon, rising with
    solar activity. A smooth stand-in for an ionospheric model; common practice."""
    cz = np.clip(np.sin(np.radians(sun_alt_deg)), 0.0, 1.0)
    night = 3.0 + 0.01 * r12
    day = 6.0 + 0.04 * r12
    return night + (day - night) * np.sqrt(cz)


def d_absorption_db(f_hz, sun_alt_deg, r12):
    """One-way vertical D-layer absorption (dB) at frequency f.

    The per-hop form of ITU-R P.533 / George & Bradley (1974), from memory:
    L = 677.2 (1 + 0.0037 R12) cos(0.881 chi)^1.3 / ((f + fH)^1.98 + 10.2) for a path that
    crosses the D layer twice; halved for the single crossing of a cosmic signal.
    """
    chi = np.radians(90.0 - np.asarray(sun_alt_deg, dtype=np.float64))
    c = np.cos(np.clip(0.881 * chi, 0.0, np.pi / 2))
    f = np.asarray(f_hz) / 1e6 + 1.2
    return 0.5 * 677.2 * (1.0 + 0.0037 * r12) * c ** 1.3 / (f ** 1.98 + 10.2)


def _sec_layer(zenith_deg, height_km):
    """sec of the incidence angle at a layer of the given height (spherical Earth)."""
    s = np.sin(np.radians(zenith_deg)) * EARTH_RADIUS_KM / (EARTH_RADIUS_KM + height_km)
    return 1.0 / np.sqrt(np.clip(1.0 - s * s, 1e-4, 1.0))


def _cutoff(f_hz, fc_hz):
    """Transmission through the F2 layer: waves below fc (foF2 sec i, the secant law) are
    reflected back up; a 3 % soft edge stands in for the refraction near it."""
    x = (np.asarray(f_hz) - fc_hz) / (0.03 * fc_hz)
    return 0.5 * (1.0 + np.tanh(x))


def dipole_beam(zenith_deg, az_deg=None):
    """Power pattern of a horizontal E-W dipole 0.15 wavelength over ground, 1 at zenith:
    element factor (1 - sin^2 z sin^2 az) times the ground-image factor sin^2(2 pi h cos z).
    Without an azimuth the element factor is averaged over azimuth."""
    z = np.radians(np.asarray(zenith_deg, dtype=np.float64))
    sz2 = np.sin(z) ** 2
    elem = 1.0 - 0.5 * sz2 if az_deg is None else 1.0 - sz2 * np.sin(np.radians(az_deg)) ** 2
    ground = np.sin(2 * np.pi * DIPOLE_HEIGHT_WL * np.cos(z)) ** 2
    g = elem * ground / np.sin(2 * np.pi * DIPOLE_HEIGHT_WL) ** 2
    return np.where(z < np.pi / 2, g, 0.0)


def flux_to_kelvin(s_sfu, f_hz, zenith_deg):
    """Antenna temperature (K) of a point source of flux S (sfu) seen at a zenith angle:
    T = S A_e / (2 k), A_e = G lambda^2 / (4 pi); one linear polarisation receives half
    of an unpolarised (or circularly polarised) wave."""
    lam = C_M_S / np.asarray(f_hz)
    ae = 10 ** (ANTENNA_GAIN_DBI / 10) * lam ** 2 / (4 * np.pi)
    return s_sfu * SFU * ae / (2 * K_B) * dipole_beam(zenith_deg)


# The Galactic sky at ~20 MHz as a two-component sketch: a smooth halo brighter toward
# the inner Galaxy and a disk of scale height ~12 deg. Not a sky survey; with the dipole
# beam it gives the few-dB daily swing seen at mid-latitudes. Mean over the sky = 1.
def _galactic_relative(l_deg, b_deg):
    l = np.radians(l_deg)
    b = np.radians(b_deg)
    halo = 1.0 + 0.45 * np.cos(l) * np.cos(b)
    disk = 3.5 * np.exp(-np.abs(np.degrees(b)) / 12.0) * (0.3 + 0.7 * np.exp(-(((np.degrees(l) + 180) % 360 - 180) / 60.0) ** 2))
    return halo + disk


N_RINGS = 18   # zenith-angle rings of 5 degrees

# ICRS -> Galactic rotation (the Hipparcos definition, ESA 1997 vol. 1 sec. 1.5.3, as astropy
# uses it; matrix from memory, checked against astropy in the tests).
_GALACTIC = np.array([[-0.0548755604162154, -0.8734370902348850, -0.4838350155487132],
                      [+0.4941094278755837, -0.4448296299600112, +0.7469822444972189],
                      [-0.8676661490190047, -0.1980763734312015, +0.4559837761750669]])


def icrs_to_galactic_deg(ra_deg, dec_deg):
    """Galactic longitude and latitude (degrees) of ICRS directions."""
    ra, dec = np.radians(ra_deg), np.radians(dec_deg)
    g = _GALACTIC @ np.stack([np.cos(dec) * np.cos(ra), np.cos(dec) * np.sin(ra), np.sin(dec)])
    return np.mod(np.degrees(np.arctan2(g[1], g[0])), 360.0), np.degrees(np.arcsin(np.clip(g[2], -1, 1)))


@functools.lru_cache(maxsize=8)
def _sky_rings(lat_deg: float):
    """Beam-weighted Galactic brightness per zenith-angle ring against local sidereal time.

    Returns (W, ring_zenith_deg): W[k, r] for LST = k degrees is the share of the
    beam-averaged sky temperature (relative units, full-sky mean 1) that arrives from
    ring r. Fibonacci points on the sphere, put in Galactic coordinates by
    ``icrs_to_galactic_deg``.
    """
    n = 4000
    i = np.arange(n) + 0.5
    dec = np.arcsin(1 - 2 * i / n)
    ra = np.mod(np.pi * (1 + 5 ** 0.5) * i, 2 * np.pi)
    t_rel = _galactic_relative(*icrs_to_galactic_deg(np.degrees(ra), np.degrees(dec)))
    t_rel = t_rel / t_rel.mean()
    phi = np.radians(lat_deg)
    w = np.zeros((361, N_RINGS))
    norm = np.zeros(361)
    # In blocks of LST rows: the whole 361 x 4000 grid at once held ~120 MB of temporaries.
    for k0 in range(0, 361, 40):
        lst = np.radians(np.arange(k0, min(361, k0 + 40), dtype=np.float64))[:, None]
        ha = lst - ra[None, :]
        sin_alt = np.sin(phi) * np.sin(dec) + np.cos(phi) * np.cos(dec) * np.cos(ha)
        alt = np.degrees(np.arcsin(np.clip(sin_alt, -1, 1)))
        az = np.degrees(np.arctan2(-np.cos(dec) * np.sin(ha),
                                   np.sin(dec) * np.cos(phi) - np.cos(dec) * np.sin(phi) * np.cos(ha)))
        zen = 90.0 - alt
        up_beam = dipole_beam(zen, az) * (alt > 0)
        ring = np.clip((zen / (90.0 / N_RINGS)).astype(int), 0, N_RINGS - 1)
        rows = slice(k0, k0 + lst.shape[0])
        for r in range(N_RINGS):   # 18 rings, once per latitude
            w[rows, r] = (up_beam * t_rel * (ring == r)).sum(axis=1)
        norm[rows] = up_beam.sum(axis=1)
    w /= norm[:, None]
    ring_z = (np.arange(N_RINGS) + 0.5) * 90.0 / N_RINGS
    return w, ring_z


# --- events --------------------------------------------------------------------------------

@dataclass
class Event:
    """One injected phenomenon. ``shape`` draws it (K, before propagation) on a grid."""
    cls: str
    t_start: float
    t_end: float
    f_lo: float
    f_hi: float
    drift_mhz_s: float = float("nan")
    path: str = "sky"           # 'sky' (through the ionosphere), 'local' (antenna), 'rx' (after the filter)
    source: str = "sun"         # 'sun', 'jupiter', 'skywave' (distant transmitter), 'local'
    reason: str = ""
    region: str = ""
    scale: float = 1.0
    # area actually drawn (wider than the truth extent)
    r_t0: float = 0.0
    r_t1: float = 0.0
    r_f0: float = 0.0
    r_f1: float = 0.0
    params: dict = field(default_factory=dict)

    def __post_init__(self):
        if not self.r_t1:
            self.r_t0, self.r_t1, self.r_f0, self.r_f1 = self.t_start, self.t_end, self.f_lo, self.f_hi

    def shape(self, t, f, dwell, df):
        """Excess antenna temperature (K) on a grid of times ``t`` and frequencies ``f``
        (broadcastable arrays), for cells integrating ``dwell`` s over bins ``df`` Hz wide."""
        raise NotImplementedError


def _fading(t, freqs_hz, phases):
    """Rayleigh-like fading from a sum of sinusoids (Jakes 1974): |sum exp(i(2 pi nu t + phi))|^2 / n."""
    z = np.zeros(np.shape(t), dtype=np.complex128)
    for nu, ph in zip(freqs_hz, phases):       # a handful of terms
        z += np.exp(1j * (2 * np.pi * nu * t + ph))
    return (np.abs(z) ** 2 / len(freqs_hz))


def _smooth_mod(t, periods, phases, depth):
    """A positive slow modulation with mean ~1: exp(depth * sum sin / sqrt(n)); the sum
    has variance 1/2, so exp(-depth^2 / 4) takes out the lognormal mean."""
    s = np.zeros(np.shape(t))
    for p, ph in zip(periods, phases):
        s = s + np.sin(2 * np.pi * t / p + ph)
    return np.exp(depth * s / math.sqrt(len(periods)) - depth ** 2 / 4)


def _band_overlap(f, df, lo, hi):
    """Fraction of [lo, hi] that falls in each bin [f - df/2, f + df/2]."""
    width = max(hi - lo, 1e-9)
    a = np.maximum(f - df / 2, lo)
    b = np.minimum(f + df / 2, hi)
    return np.clip(b - a, 0.0, None) / width


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
    """Slow-drift solar burst: fundamental and harmonic lanes f = f0 exp(-(t - t0)/Ts)."""

    def lanes(self, t):
        p = self.params
        ff = p["f0"] * np.exp(-(t - p["t0"]) / p["ts"])
        return ff, 2.0 * ff

    def shape(self, t, f, dwell, df):
        p = self.params
        ff, fh = self.lanes(t)
        lane = p["sf"] * np.exp(-0.5 * ((f - ff) / (p["w"] * ff)) ** 2) + \
            p["sh"] * np.exp(-0.5 * ((f - fh) / (p["w"] * fh)) ** 2)
        x = t - p["t0"]
        env = np.clip(x / 30.0, 0, 1) * np.exp(-np.clip(x - 30.0, 0, None) / p["decay"]) * (x < p["dur"])
        mod = _smooth_mod(t, p["periods"], p["phases"], 0.6)
        return flux_to_kelvin(1.0, f, 0.0) * lane * env * mod


class TypeIV(Event):
    """Broadband solar continuum: rise over minutes, decay over tens of minutes."""

    def shape(self, t, f, dwell, df):
        p = self.params
        x = t - p["t0"]
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


# --- the model -----------------------------------------------------------------------------

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
        self.freq_hz = channel_grid(sp["fmin_mhz"], sp["fmax_mhz"], sp["channels"])
        self.sid = station_seed(self.name)
        # geometry on an absolute node grid: identical whatever the span asked for
        margin = 4 * 3600.0
        n0 = math.floor((self.start - margin) / NODE_S)
        n1 = math.ceil((self.end + margin) / NODE_S)
        self.node_t = np.arange(n0, n1 + 1) * NODE_S
        from rxlog.sky.tags import station_tags
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
        f = np.asarray(f_hz, dtype=np.float64)
        key = (f.shape, float(f.flat[0]), float(f.flat[-1])) if f.ndim == 1 and f.size > 1 else None
        cache = self.__dict__.setdefault("_bp_cache", {})
        if key is not None and key in cache:
            return cache[key]
        h = self._bandpass(f)
        if key is not None:
            if len(cache) >= 16:
                cache.clear()
            cache[key] = h
        return h

    def _bandpass(self, f_hz):
        """H(f): the station's 4th-order Butterworth band-pass (band edges +-0.5 MHz) times
        a cable ripple of +-0.4 dB (standing wave of a ~20 m feedline, velocity 0.66);
        fixed per station name, the hardware does not change with the seed."""
        f = np.asarray(f_hz, dtype=np.float64)
        lo, hi = self.fmin - 0.5e6, self.fmax + 0.5e6
        f0 = math.sqrt(lo * hi)
        bw = hi - lo
        x = (f / f0 - f0 / np.maximum(f, 1.0)) * f0 / bw
        h = 1.0 / (1.0 + x ** 8)
        rng = np.random.default_rng([self.sid, 11])
        period = rng.uniform(4e6, 6e6)
        ph = rng.uniform(0, 2 * np.pi)
        ripple_db = 0.4 * np.sin(2 * np.pi * f / period + ph) + 0.15 * np.sin(2 * np.pi * f / (period / 2.7) + 2 * ph)
        return h * 10 ** (ripple_db / 10)

    def galactic(self, t_nodes, f_hz):
        """Galactic background through the ionosphere (K), (n_nodes, n_freq)."""
        w, ring_z = _sky_rings(round(self.lat, 3))
        lst = local_sidereal_deg(t_nodes, self.lon)
        k = np.floor(lst).astype(int)
        a = (lst - k)[:, None]
        wr = w[k] * (1 - a) + w[k + 1] * a                       # (n, rings)
        sun = self.node_interp("sun_alt_deg", t_nodes)
        fof2 = self.node_interp(self.fof2, t_nodes)
        r12 = self.node_interp(self.r12, t_nodes)
        sec_f = _sec_layer(ring_z, 300.0)
        sec_d = _sec_layer(ring_z, 80.0)
        f = np.asarray(f_hz, dtype=np.float64)[None, :]
        l_d = d_absorption_db(f, sun[:, None], r12[:, None])    # (n, F)
        out = np.zeros((len(t_nodes), f.shape[1]))
        for r in range(N_RINGS):
            trans = _cutoff(f, fof2[:, None] * sec_f[r]) * 10 ** (-l_d * sec_d[r] / 10)
            out += wr[:, r:r + 1] * trans
        return out * p372_temperature(f, *GALACTIC_P372)

    def manmade(self, t_nodes, f_hz):
        """ITU-R P.372 median man-made noise (K) for the category, lower at local night."""
        c, d = MANMADE_P372[self.rfi]
        base = p372_temperature(np.asarray(f_hz, dtype=np.float64), c, d)[None, :]
        solar_hour = np.mod((np.asarray(t_nodes) / 3600.0) + self.lon / 15.0, 24.0)
        night = 0.5 * (1 + np.cos(2 * np.pi * (solar_hour - 3.0) / 24.0))   # 1 at 03 h local, 0 at 15 h
        drop = LOCAL_RFI[self.rfi]["night_db"] * night
        return base * 10 ** (-drop[:, None] / 10)

    def source_propagation(self, source, t, f):
        """Beam gain and ionospheric transmission for the Sun or Jupiter, and the MUF
        gate for distant transmitters (M(3000)F2 ~ 3, common practice)."""
        if source == "local":
            return 1.0
        fof2 = self.node_interp(self.fof2, t)
        if source == "skywave":
            muf = 3.0 * fof2
            return _cutoff(muf, f) ** 2
        alt = self.node_interp("sun_alt_deg" if source == "sun" else "jupiter_alt_deg", t)
        zen = 90.0 - alt
        sun = self.node_interp("sun_alt_deg", t)
        r12 = self.node_interp(self.r12, t)
        ld = d_absorption_db(f, sun, r12) * _sec_layer(np.minimum(zen, 89.0), 80.0)
        return dipole_beam(zen) * _cutoff(f, fof2 * _sec_layer(np.minimum(zen, 89.0), 300.0)) * 10 ** (-ld / 10) * (alt > 0)

    def typical_background(self, f_hz):
        """A time-independent background (K) for sizing levels: P.372 Galactic + man-made + receiver."""
        c, d = MANMADE_P372[self.rfi]
        return (p372_temperature(f_hz, *GALACTIC_P372) + p372_temperature(f_hz, c, d)) * self.bandpass(f_hz) + RECEIVER_NOISE_K

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
        self._bg_cache = caches[key]
        k = (np.asarray(t_rows) - self.node_t[0]) / NODE_S
        k0 = int(math.floor(k.min()))
        k1 = int(math.floor(k.max())) + 1
        need = [j for j in range(k0, k1 + 1) if j not in self._bg_cache]
        if need:
            tn = self.node_t[0] + NODE_S * np.asarray(need, dtype=np.float64)
            g = self.galactic(tn, f)
            m = self.manmade(tn, f)
            for j, gj, mj in zip(need, g, m):
                self._bg_cache[j] = (gj, mj)
            if len(self._bg_cache) > 4096:
                for j in [j for j in self._bg_cache if j < k0]:
                    del self._bg_cache[j]
        gal_n = np.stack([self._bg_cache[j][0] for j in range(k0, k1 + 1)])
        mm_n = np.stack([self._bg_cache[j][1] for j in range(k0, k1 + 1)])
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
        ev = []
        inc = self.include
        rate = self.event_rate
        for day in self._days(3 * 3600):
            t_day = day * DAY_S
            r12 = float(solar_r12(t_day + DAY_S / 2))
            act = r12 / 100.0
            if "solar_iii" in inc:
                ev += self._plan_type3(np.random.default_rng([self.seed, day, 31]), t_day, 8.0 * act * rate)
            if "solar_ii" in inc:
                ev += self._plan_type2(np.random.default_rng([self.seed, day, 32]), t_day, 0.15 * act * rate)
            if "solar_iv" in inc:
                ev += self._plan_type4(np.random.default_rng([self.seed, day, 33]), t_day, 0.08 * act * rate)
            if "fadeout" in inc:
                ev += self._plan_fadeouts(np.random.default_rng([self.seed, day, 34]), t_day, 0.3 * act * rate)
            if jupiter_schedule is None and ({"jovian_l", "jovian_s"} & inc):
                ev += self._plan_storms(np.random.default_rng([self.seed, day, 35]), t_day)
            if "rfi" in inc:
                ev += self._plan_rfi(np.random.default_rng([self.seed, self.sid, day, 36]), t_day, r12)
        if jupiter_schedule is not None:
            for i, s in enumerate(jupiter_schedule):
                ev.append(self._storm_from_schedule(i, s))
        if "rfi" in inc:
            ev += self._plan_spurs(np.random.default_rng([self.sid, 37]))
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

    def _random_times(self, rng, t_day, n):
        return t_day + rng.uniform(0, DAY_S, n)

    def _plan_type3(self, rng, t_day, per_day):
        out = []
        for tg in self._random_times(rng, t_day, rng.poisson(per_day)):
            n = 1 + rng.poisson(3)
            level = _powerlaw(rng, 1.8, 100.0, 1e5)
            for tb in tg + np.sort(rng.uniform(0, rng.uniform(10, 180), n)):
                out.append(self.make_type3(rng, tb, level * rng.lognormal(0, 0.5)))
        return out

    def make_type3(self, rng, t_ref, s20, f_start=None, f_end=None):
        f_start = f_start if f_start is not None else math.exp(rng.uniform(math.log(18e6), math.log(200e6)))
        f_end = f_end if f_end is not None else f_start / rng.uniform(2.0, 100.0)
        lo, hi = max(f_end, self.fmin), min(f_start, self.fmax)
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
        e.r_f0, e.r_f1 = max(lo * 0.85, self.fmin - 2e6), min(hi * 1.15, self.fmax + 2e6)
        e.drift_mhz_s = -AH_A * (0.5 * (lo + hi) / 1e6) ** AH_B
        return e

    def _plan_type2(self, rng, t_day, per_day):
        return [self.make_type2(rng, t, _powerlaw(rng, 1.6, 50.0, 5000.0))
                for t in self._random_times(rng, t_day, rng.poisson(per_day))]

    def make_type2(self, rng, t0, s_f, drift20=None, f0=None):
        drift20 = drift20 if drift20 is not None else -math.exp(rng.uniform(math.log(0.03), math.log(0.4)))
        ts = 20.0 / abs(drift20)
        f0 = f0 if f0 is not None else rng.uniform(12e6, 40e6)
        dur = rng.uniform(180, 900)
        p = dict(t0=t0, ts=ts, f0=f0, sf=s_f, sh=s_f * rng.uniform(0.3, 1.0), w=0.035, dur=dur,
                 decay=dur / 2, periods=rng.uniform(20, 120, 3), phases=rng.uniform(0, 2 * np.pi, 3))
        e = TypeII("solar_ii", 0, 0, 0, 0, source="sun", params=p, reason=f"Type II, {s_f:.0f} sfu")
        tt = np.linspace(t0, t0 + dur, 400)
        ff, fh = e.lanes(tt)
        inb = lambda x: (x > self.fmin) & (x < self.fmax)
        m = inb(ff) | inb(fh)
        if not m.any():
            return None
        fs = np.concatenate([ff[inb(ff)], fh[inb(fh)]])
        e.t_start, e.t_end = float(tt[m][0]), float(tt[m][-1])
        e.f_lo, e.f_hi = float(fs.min()), float(fs.max())
        e.r_t0, e.r_t1 = t0, t0 + dur
        e.r_f0, e.r_f1 = self.fmin - 2e6, self.fmax + 2e6
        e.drift_mhz_s = -0.5 * (e.f_lo + e.f_hi) / 1e6 / ts
        return e

    def _plan_type4(self, rng, t_day, per_day):
        return [self.make_type4(rng, t, _powerlaw(rng, 1.6, 20.0, 1000.0))
                for t in self._random_times(rng, t_day, rng.poisson(per_day))]

    def make_type4(self, rng, t0, s20):
        rise, decay = rng.uniform(300, 900), rng.uniform(1200, 5400)
        p = dict(t0=t0, rise=rise, decay=decay, s20=s20, alpha=rng.uniform(-1, 1),
                 periods=rng.uniform(60, 600, 3), phases=rng.uniform(0, 2 * np.pi, 3))
        e = TypeIV("solar_iv", t0, t0 + rise + decay * math.log(10), self.fmin, self.fmax, source="sun",
                   params=p, reason=f"Type IV continuum, {s20:.0f} sfu")
        e.r_t1 = t0 + rise + 7 * decay
        e.r_f0, e.r_f1 = self.fmin - 2e6, self.fmax + 2e6
        return e

    def _plan_fadeouts(self, rng, t_day, per_day):
        return [self.make_fadeout(rng, t, math.exp(rng.uniform(math.log(1.0), math.log(10.0))))
                for t in self._random_times(rng, t_day, rng.poisson(per_day))]

    def make_fadeout(self, rng, t0, a20):
        rise, decay = rng.uniform(120, 600), rng.uniform(600, 2400)
        p = dict(t0=t0, rise=rise, decay=decay, a20=a20)
        e = Fadeout("fadeout", t0, t0 + rise + decay * math.log(10), self.fmin, self.fmax, source="sun",
                    params=p, reason=f"short-wave fadeout, {a20:.1f} dB vertical at 20 MHz")
        e.r_t1 = t0 + rise + 9 * decay
        e.r_f0, e.r_f1 = 0.0, 1e12
        return e

    def _region_passages(self, t_day):
        """(region, start, end) intervals in which (CML, Io phase) lie in a source box,
        starting within this UTC day; geocentric to well under a node."""
        from rxlog.sky.tags import station_tags
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

    def _plan_storms(self, rng, t_day):
        out = []
        rate = self.event_rate
        for region, a, b in self._region_passages(t_day):
            spec = REGION_STORMS.get(region, OTHER_REGION)
            p = 1 - (1 - spec["p"]) ** rate
            u = rng.uniform(size=6)      # fixed draws per passage: the plan stays put when rates change
            if u[0] >= p:
                continue
            dur = min(b - a, float(np.exp(math.log(2400.0) + 0.6 * (u[1] - 0.5) * 3)))
            t0 = a + u[2] * (b - a - dur)
            s_burst = u[3] < spec["s_share"]
            s20 = math.exp(math.log(5.0) + u[4] * math.log(300.0 / 5.0))
            e = self.make_storm(np.random.default_rng([self.seed, int(t0), 36]), t0, t0 + dur, region, s20, s_burst)
            if e is not None:
                out.append(e)
        return out

    def _storm_from_schedule(self, i, s):
        from rxlog.timeutil import parse_iso
        try:
            t0 = s["start"] if isinstance(s["start"], (int, float)) else parse_iso(s["start"])
            t1 = s["end"] if isinstance(s["end"], (int, float)) else parse_iso(s["end"])
        except (KeyError, ValueError, TypeError) as e:
            raise RxlogError(f"jupiter_schedule[{i}]: {e}; expected dict(start=ISO or POSIX s, end=..., "
                             "region='Io-B', s20=flux in sfu)") from None
        if not t1 > t0:
            raise RxlogError(f"jupiter_schedule[{i}]: end must be after start")
        region = s.get("region", "Io-B")
        rng = np.random.default_rng([self.seed, int(t0), 36])
        return self.make_storm(rng, t0, t1, region, float(s.get("s20", 60.0)), bool(s.get("s_bursts", False)))

    def make_storm(self, rng, t0, t1, region, s20, s_bursts):
        spec = REGION_STORMS.get(region, OTHER_REGION)
        fmax_em = spec["fmax"]
        lo, hi = self.fmin, min(self.fmax, fmax_em * 1e6 * 0.98)
        if lo >= hi:
            return None
        dur = t1 - t0
        n_arcs = max(1, int(dur / 90.0))
        arcs = [(t0 + rng.uniform(0, dur), rng.uniform(lo / 1e6 - 4, hi / 1e6 + 4), rng.uniform(1.0, 4.0),
                 rng.uniform(10, 40), rng.lognormal(0, 0.5)) for _ in range(n_arcs)]
        mod_dt, mod_df = 0.5, 0.2
        n_t = int(dur / mod_dt) + 8
        f0m, f1m = self.fmin / 1e6 - 3, self.fmax / 1e6 + 3
        n_f = int((f1m - f0m) / mod_df) + 2
        mod = _scintillation(rng, n_t, n_f, sigma_t=1.0 / mod_dt, sigma_f=0.6 / mod_df)
        # interplanetary scintillation pattern moves at the solar-wind speed (~400 km/s):
        # stations a few hundred km apart see it ~0.3-1 s apart
        ang = rng.uniform(0, 2 * np.pi)
        x, y = _station_xy_km(self.lat, self.lon)
        shift = (x * math.cos(ang) + y * math.sin(ang)) / 400.0
        p = dict(fmax=fmax_em, vertex=spec["vertex"], arcs=arcs, s20=s20, mod=mod, mod_dt=mod_dt,
                 mod_df=mod_df, mod_f0=f0m, slope=rng.choice([-1, 1]) * rng.uniform(1.0, 5.0),
                 shift_s=shift, s_bursts=s_bursts, s_drift=-rng.uniform(10, 25), s_rate=rng.uniform(10, 60))
        cls = "jovian_s" if s_bursts else "jovian_l"
        e = JovianStorm(cls, t0, t1, lo, hi, source="jupiter", region=region, params=p,
                        reason=f"Jovian {region} storm, {'S' if s_bursts else 'L'}-bursts, {s20:.0f} sfu")
        e.r_f0, e.r_f1 = self.fmin - 2e6, self.fmax + 2e6
        if s_bursts:
            e.drift_mhz_s = p["s_drift"]
        return e

    def _plan_rfi(self, rng, t_day, r12):
        out = []
        # broadcast: 5 kHz raster, schedules of half an hour to three hours on the half hour
        for lo, hi in BROADCAST_BANDS:
            slots = np.arange(math.ceil(lo * 200), math.floor(hi * 200) + 1) / 200.0 * 1e6
            for fc in slots[rng.uniform(size=len(slots)) < 0.2]:
                t = t_day + 1800 * rng.integers(0, 48)
                while t < t_day + DAY_S:
                    d = 1800 * rng.integers(1, 7)
                    if rng.uniform() < 0.5:
                        out.append(self._carrier(rng, "broadcast AM", fc, 9e3, t, t + d, rng.uniform(10, 40), 0.67))
                    t += d + 1800 * rng.integers(0, 12)
        # standard-frequency and time-signal carriers, continuous
        for fmhz in TIME_SIGNALS_MHZ:
            out.append(self._carrier(rng, "time-signal carrier", fmhz * 1e6, 1e3, t_day, t_day + DAY_S, 20.0, 0.9))
        # maritime / utility: CW and data, sessions of minutes
        for lo, hi in MARITIME_BANDS:
            for _ in range(rng.poisson(12)):
                t = t_day + rng.uniform(0, DAY_S)
                fc = rng.uniform(lo, hi) * 1e6
                out.append(self._carrier(rng, "utility data", fc, rng.uniform(0.3e3, 3e3), t,
                                         t + rng.uniform(120, 3600), rng.uniform(8, 30), 0.0))
        # amateur SSB contacts: keyed speech
        for lo, hi in AMATEUR_BANDS:
            for _ in range(rng.poisson(8)):
                t = t_day + rng.uniform(0, DAY_S)
                d = rng.uniform(300, 1800)
                e = self._carrier(rng, "amateur SSB", rng.uniform(lo, hi - 0.003) * 1e6 + 1.35e3, 2.7e3, t, t + d,
                                  rng.uniform(5, 30), 0.0)
                e.params["keying"] = (rng.uniform(size=int(d / 0.5) + 2) < 0.55) * rng.uniform(0.3, 1.0, int(d / 0.5) + 2)
                out.append(e)
        # ionosondes: a sweep every 15 min from each of one or two distant sounders
        for k in range(1 + int(rng.uniform() < 0.5)):
            off = rng.uniform(0, 900)
            rate = 1e5 * rng.choice([-1.0, 1.0])
            p_khz_db = rng.uniform(10, 25)
            for t0 in t_day + off + 900.0 * np.arange(96):
                out.append(self._chirp(t0, rate, p_khz_db))
        # local interference, by category
        loc = LOCAL_RFI[self.rfi]
        mains = 120.0 if self.lon < -30 else 100.0
        for t in self._random_times(rng, t_day, rng.poisson(loc["arcing"] * 24)):
            k = np.arange(0, rng.uniform(10, 300), 1 / mains)      # a pulse each half cycle of the mains
            times = t + k + rng.normal(0, 2e-4, k.size)
            out.append(self._impulses("power-line arcing", np.sort(times), rng.uniform(1e5, 3e6), 1e-4))
        for t in self._random_times(rng, t_day, rng.poisson(loc["impulses"] * 24 + 2.0)):
            out.append(self._impulses("broadband impulse", np.array([t]), math.exp(rng.uniform(math.log(1e8), math.log(3e10))), 2e-4))
        if rng.uniform() < loc["fence"]:
            period = rng.uniform(1.0, 1.5)
            times = t_day + rng.uniform(0, period) + period * np.arange(int(DAY_S / period))
            out.append(self._impulses("electric fence", times, rng.uniform(3e7, 3e8), 3e-4))
        for _ in range(loc["carriers"]):
            fc = rng.uniform(self.fmin - 1e6, self.fmax + 1e6)
            t = t_day + rng.uniform(0, DAY_S)
            e = self._carrier(rng, "local carrier", fc, rng.uniform(50, 3e3), t, t + rng.uniform(600, 6 * 3600),
                              rng.uniform(3, 20), 0.5, path="local")
            out.append(e)
        return out

    def _level_khz(self, fc, excess_db):
        """Power (K x kHz) that puts a narrow signal ``excess_db`` above the typical
        background of an archive channel."""
        df = self.freq_hz[1] - self.freq_hz[0]
        return float(self.typical_background(fc)) * 10 ** (excess_db / 10) * df / 1e3 / float(self.bandpass(fc))

    def _carrier(self, rng, what, fc, bw, t0, t1, excess_db, line_share, path="sky"):
        p = dict(fc=fc, p_khz=self._level_khz(fc, excess_db), line_share=line_share)
        if path == "sky":
            p.update(fade=True, fade_nu=rng.uniform(0.005, 0.2, 6), fade_ph=rng.uniform(0, 2 * np.pi, 6))
        e = Carrier("rfi", t0, t1, fc - bw / 2, fc + bw / 2, drift_mhz_s=0.0, path=path,
                    source="skywave" if path == "sky" else "local", params=p,
                    reason=f"{what}, {fc / 1e6:.4f} MHz")
        e.r_f0, e.r_f1 = fc - bw / 2 - 50e3, fc + bw / 2 + 50e3
        return e

    def _chirp(self, t0, rate, excess_db):
        f0 = 1e6 if rate > 0 else 30e6
        lo, hi = self.fmin, self.fmax
        t_lo, t_hi = t0 + (lo - f0) / rate, t0 + (hi - f0) / rate
        p = dict(t0=t0, f0=f0, rate=rate, p_khz=self._level_khz(20e6, excess_db))
        e = Chirp("rfi", min(t_lo, t_hi), max(t_lo, t_hi), lo, hi, drift_mhz_s=rate / 1e6, source="skywave",
                  params=p, reason=f"ionosonde sweep, {rate / 1e3:+.0f} kHz/s")
        e.r_t0, e.r_t1 = e.t_start - 30, e.t_end + 30
        e.r_f0, e.r_f1 = self.fmin - 3e6, self.fmax + 3e6
        return e

    def _impulses(self, what, times, t_imp, width):
        e = Impulses("rfi", float(times[0]), float(times[-1] + width), self.fmin, self.fmax, drift_mhz_s=0.0,
                     path="local", source="local", params=dict(times=times, t_imp=t_imp, width=width),
                     reason=what)
        e.r_t0, e.r_t1 = e.t_start - 5, e.t_end + 5
        e.r_f0, e.r_f1 = 0.0, 1e12
        return e

    def _plan_spurs(self, rng):
        clock = rng.uniform(3.5e6, 12e6)
        out = []
        k = np.arange(1, 20)
        for fc in (k * clock)[(k * clock > self.fmin - 1.2e6) & (k * clock < self.fmax + 1.2e6)][:4]:
            p = dict(fc=fc, p_khz=self._level_khz(fc, rng.uniform(2, 12)))
            out.append(Spur("rfi", self.start, self.end, fc - 50, fc + 50, drift_mhz_s=0.0, path="rx",
                            source="local", params=p, reason=f"local spur (computer clock harmonic), {fc / 1e6:.4f} MHz"))
        return out

    # ---- injection ----
    def inject_event(self, spec: dict) -> Event:
        """An explicit event from ``dict(class=..., t=POSIX s or ISO, peak_excess_db=...)``.

        Optional keys: fmin_mhz/fmax_mhz (Type III start/end frequencies), drift_mhz_s
        (Type II at 20 MHz, ionosonde), duration_s (Jovian storm, carrier), kind
        ('carrier': a local transmitter, 'impulse', 'chirp': a distant ionosonde, for class
        rfi). The event is placed as asked; its amplitude is set so the peak excess over
        the background equals ``peak_excess_db`` on the archive grid (negative for a
        fadeout). A solar burst needs the Sun up, a storm Jupiter, a chirp an open path.
        """
        from rxlog.timeutil import parse_iso
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
        rng = np.random.default_rng([self.seed, int(t), 38])
        if cls == "solar_iii":
            f_start = spec.get("fmax_mhz", 60.0) * 1e6
            f_end = spec.get("fmin_mhz", 5.0) * 1e6
            e = self.make_type3(rng, t, 1.0, f_start=f_start, f_end=f_end)
        elif cls == "solar_ii":
            e = self.make_type2(rng, t, 1.0, drift20=spec.get("drift_mhz_s"), f0=spec.get("fmax_mhz", 23.0) * 1e6)
        elif cls == "solar_iv":
            e = self.make_type4(rng, t, 1.0)
        elif cls == "fadeout":
            e = self.make_fadeout(rng, t, 1.0)
        elif cls in ("jovian_l", "jovian_s"):
            d = float(spec.get("duration_s", 1800.0))
            e = self.make_storm(rng, t, t + d, spec.get("region", "Io-B"), 1.0, cls == "jovian_s")
        else:
            kind = spec.get("kind", "impulse")
            if kind == "carrier":
                fc = spec.get("fmin_mhz", 20.5) * 1e6
                e = self._carrier(rng, "injected carrier", fc, 3e3, t, t + float(spec.get("duration_s", 600.0)), 0.0, 0.5,
                                  path="local")
            elif kind == "chirp":
                e = self._chirp(t, spec.get("drift_mhz_s", 0.1) * 1e6, 0.0)
            elif kind == "impulse":
                e = self._impulses("injected impulse", np.array([float(t)]), 1.0, 2e-4)
            else:
                raise RxlogError(f"inject rfi: kind {kind!r}: expected 'carrier', 'impulse' or 'chirp'")
        if e is None:
            raise RxlogError(f"inject {cls}: the event falls outside the band")
        e.params["target_db"] = x
        e.reason = "injected " + e.reason
        return e


def _powerlaw(rng, index, lo, hi):
    """A draw from dN/dS ~ S^-index between lo and hi."""
    a = 1.0 - index
    u = rng.uniform()
    return (lo ** a + u * (hi ** a - lo ** a)) ** (1.0 / a)


def _scintillation(rng, n_t, n_f, sigma_t, sigma_f):
    """Exponentially distributed intensity (mean 1) on a grid: |z|^2 of a smoothed complex
    Gaussian field, as for strong scintillation."""
    from scipy.ndimage import gaussian_filter
    re = gaussian_filter(rng.standard_normal((n_t, n_f)), (sigma_t, sigma_f), mode="wrap")
    im = gaussian_filter(rng.standard_normal((n_t, n_f)), (sigma_t, sigma_f), mode="wrap")
    i = re * re + im * im
    return (i / i.mean()).astype(np.float32)


def _station_xy_km(lat, lon):
    """Rough local position of a station on the Earth's surface (km), for pattern shifts."""
    return EARTH_RADIUS_KM * math.radians(lon) * math.cos(math.radians(lat)), EARTH_RADIUS_KM * math.radians(lat)


# --- drawing -------------------------------------------------------------------------------

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
