"""The simulated station's antenna and front end: the dipole's beam, a point source's
flux as antenna temperature, ITU-R P.372 noise figures as temperatures, the band-pass
filter with its cable ripple, and the receiver's own noise.
"""

from __future__ import annotations

import functools
import math

import numpy as np

from rxlog.constants import C_M_S, K_B, SFU

T0_K = 290.0                # reference temperature of ITU-R P.372 noise figures
RECEIVER_NOISE_K = 5000.0   # receiver + feedline, referred to the input (NF ~ 12.8 dB); common practice
ANTENNA_GAIN_DBI = 5.0      # horizontal dipole ~0.15 wavelength over average ground, at zenith; common practice
DIPOLE_HEIGHT_WL = 0.15     # height above ground in wavelengths (the example station's antenna)


def p372_temperature(f_hz, c: float, d: float):
    """Noise temperature (K) of a P.372 noise figure Fa = c - d log10(f/MHz) dB above k T0 b."""
    return T0_K * 10.0 ** ((c - d * np.log10(np.asarray(f_hz) / 1e6)) / 10.0)


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


@functools.lru_cache(maxsize=64)
def _ripple(station_seed: int) -> tuple[float, float]:
    """Period (Hz) and phase of a station's cable ripple, drawn once per station."""
    rng = np.random.default_rng([station_seed, 11])
    return float(rng.uniform(4e6, 6e6)), float(rng.uniform(0, 2 * np.pi))


def bandpass(f_hz, fmin_hz: float, fmax_hz: float, station_seed: int):
    """H(f): the station's 4th-order Butterworth band-pass (band edges +-0.5 MHz) times
    a cable ripple of +-0.4 dB (standing wave of a ~20 m feedline, velocity 0.66);
    fixed per station (``station_seed``), the hardware does not change with the seed."""
    f = np.asarray(f_hz, dtype=np.float64)
    lo, hi = fmin_hz - 0.5e6, fmax_hz + 0.5e6
    f0 = math.sqrt(lo * hi)
    bw = hi - lo
    x = (f / f0 - f0 / np.maximum(f, 1.0)) * f0 / bw
    h = 1.0 / (1.0 + x ** 8)
    period, ph = _ripple(station_seed)
    ripple_db = 0.4 * np.sin(2 * np.pi * f / period + ph) + 0.15 * np.sin(2 * np.pi * f / (period / 2.7) + 2 * ph)
    return h * 10 ** (ripple_db / 10)
