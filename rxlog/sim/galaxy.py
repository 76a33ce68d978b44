"""The Galactic background at the simulated station: a sketch of the Galactic sky at
~20 MHz, weighted by the dipole's beam per zenith-angle ring as the sky turns, and
brought down through the ionosphere ring by ring.
"""

from __future__ import annotations

import functools

import erfa
import numpy as np

from rxlog.constants import TT_MINUS_TAI_S, UNIX_EPOCH_JD
from rxlog.sim.antenna import dipole_beam, p372_temperature
from rxlog.sim.ionosphere import d_absorption_db, f2_transmission, sec_layer

# TT - UTC since 2017-01-01: 37 leap seconds (IERS Bulletin C) + TT - TAI. Only the
# precession term of GMST uses TT, where a second's error is microarcseconds.
TT_MINUS_UTC_S = 37.0 + TT_MINUS_TAI_S

# ITU-R P.372 (Radio noise), median Galactic noise Fa = 52 - 23 log10(f/MHz) in dB above
# k T0 b. Constants from memory of P.372-14.
GALACTIC_P372 = (52.0, 23.0)


def local_sidereal_deg(t_unix, lon_deg: float):
    """Local mean sidereal time in degrees: ERFA's GMST (IAU 2006, ``erfa.gmst06``) plus
    the longitude, with UT1 taken as UTC (|UT1-UTC| < 0.9 s, i.e. < 0.004 deg) and TT as
    UTC + 69.184 s --
    plenty for a background that changes over hours.
    """
    days = np.asarray(t_unix, dtype=np.float64) / 86400.0
    gmst = erfa.gmst06(UNIX_EPOCH_JD, days, UNIX_EPOCH_JD, days + TT_MINUS_UTC_S / 86400.0)
    return np.mod(np.degrees(gmst) + lon_deg, 360.0)


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

def icrs_to_galactic_deg(ra_deg, dec_deg):
    """Galactic longitude and latitude (degrees) of ICRS directions (``erfa.icrs2g``, the
    Hipparcos definition of the Galactic frame, as astropy uses it)."""
    l, b = erfa.icrs2g(np.radians(ra_deg), np.radians(dec_deg))
    return np.mod(np.degrees(l), 360.0), np.degrees(b)


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


def galactic_background(t, f_hz, lat_deg: float, lon_deg: float, sun_alt_deg, fof2_hz, r12):
    """Galactic background through the ionosphere (K), (n_times, n_freq), at times ``t``
    for a station at lat/lon, given the Sun's altitude, foF2 (Hz) and R12 at those times."""
    w, ring_z = _sky_rings(round(lat_deg, 3))
    lst = local_sidereal_deg(t, lon_deg)
    k = np.floor(lst).astype(int)
    a = (lst - k)[:, None]
    wr = w[k] * (1 - a) + w[k + 1] * a                       # (n, rings)
    sec_f = sec_layer(ring_z, 300.0)
    sec_d = sec_layer(ring_z, 80.0)
    f = np.asarray(f_hz, dtype=np.float64)[None, :]
    l_d = d_absorption_db(f, sun_alt_deg[:, None], r12[:, None])    # (n, F)
    out = np.zeros((len(t), f.shape[1]))
    for r in range(N_RINGS):
        trans = f2_transmission(f, fof2_hz[:, None] * sec_f[r]) * 10 ** (-l_d * sec_d[r] / 10)
        out += wr[:, r:r + 1] * trans
    return out * p372_temperature(f, *GALACTIC_P372)
