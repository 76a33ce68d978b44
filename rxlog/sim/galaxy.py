"""The Galactic background at the simulated station: a sketch of the Galactic sky at
~20 MHz, weighted by the dipole's beam per zenith-angle ring as the sky turns, and
brought down through the ionosphere ring by ring.
"""

from __future__ import annotations

import functools

import numpy as np

from rxlog.sim.antenna import dipole_beam, p372_temperature
from rxlog.sim.ionosphere import d_absorption_db, f2_transmission, sec_layer
from rxlog.sky.timescales import J2000_UNIX

# ITU-R P.372 (Radio noise), median Galactic noise Fa = 52 - 23 log10(f/MHz) in dB above
# k T0 b. Constants from memory of P.372-14.
GALACTIC_P372 = (52.0, 23.0)


def local_sidereal_deg(t_unix, lon_deg: float):
    """Local mean sidereal time in degrees.

    GMST from the Earth rotation angle (IERS Conventions 2010, eq. 5.15) plus the
    polynomial of eq. 5.32 to first order, with UT1 taken as UTC (|UT1-UTC| < 0.9 s,
    i.e. < 0.004 deg) -- plenty for a background that changes over hours.
    """
    t = np.asarray(t_unix, dtype=np.float64)
    du = (t - J2000_UNIX) / 86400.0                       # days of UT1 from J2000.0
    frac = np.mod(du, 1.0)
    era = 360.0 * np.mod(0.7790572732640 + 0.00273781191135448 * du + frac, 1.0)
    tc = du / 36525.0
    gmst = era + (0.014506 + 4612.156534 * tc) / 3600.0
    return np.mod(gmst + lon_deg, 360.0)


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
