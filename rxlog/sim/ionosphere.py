"""The ionosphere over the simulated station: solar activity, the F2-layer critical
frequency and its cut-off, and daytime D-layer absorption.

Smooth stand-ins for ionospheric models, good for a few dB: what the simulator needs is
a band that opens at night and a sky attenuated by day, not a propagation forecast.
"""

from __future__ import annotations

import numpy as np

from rxlog.constants import EARTH_RADIUS_KM


def solar_r12(t_unix):
    """Smoothed sunspot number from a plain 11-year cycle with its maximum in late 2024
    (cycle 25; peak ~160 from memory). Sets solar burst rates and the ionosphere."""
    year = 1970.0 + np.asarray(t_unix, dtype=np.float64) / (365.25 * 86400.0)
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


def sec_layer(zenith_deg, height_km):
    """sec of the incidence angle at a layer of the given height (spherical Earth)."""
    s = np.sin(np.radians(zenith_deg)) * EARTH_RADIUS_KM / (EARTH_RADIUS_KM + height_km)
    return 1.0 / np.sqrt(np.clip(1.0 - s * s, 1e-4, 1.0))


def f2_transmission(f_hz, fc_hz):
    """Transmission through the F2 layer: waves below fc (foF2 sec i, the secant law) are
    reflected back up; a 3 % soft edge stands in for the refraction near it."""
    x = (np.asarray(f_hz) - fc_hz) / (0.03 * fc_hz)
    return 0.5 * (1.0 + np.tanh(x))

