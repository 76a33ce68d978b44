"""Physical constants, time-scale offsets and the MAD-to-sigma factor, each with its source.

Exact values are exact by definition; the others say how they were rounded.
"""

from __future__ import annotations

# --- physical constants ----------------------------------------------------------------

C_M_S = 299_792_458.0               # speed of light, m/s (SI definition, exact)
K_B = 1.380649e-23                  # Boltzmann constant, J/K (SI since 2019, exact)
AU_M = 149_597_870_700.0            # astronomical unit, m (IAU 2012 Resolution B2, exact)
AU_LIGHT_S = AU_M / C_M_S           # light time for 1 au, s (~499.005)
SFU = 1e-22                         # solar flux unit, W m^-2 Hz^-1 (definition)
# Mean radius of the Earth, rounded from the IUGG mean radius R1 = 6371.0088 km of
# GRS 80 (Moritz 2000, J. Geodesy 74, 128; value from memory): for spherical-Earth sketches.
EARTH_RADIUS_KM = 6371.0

# --- time scales -------------------------------------------------------------------------

TT_MINUS_TAI_S = 32.184             # IAU 1991 Resolution A4 (exact)
UNIX_EPOCH_JD = 2440587.5           # Julian date of 1970-01-01T00:00 UTC, the POSIX epoch (exact)
GPS_MINUS_TAI_S = -19.0             # GPS time = TAI - 19 s (IERS Conventions 2010, ch. 1; exact)

# --- robust statistics -------------------------------------------------------------------

# sigma = MAD_TO_SIGMA x median absolute deviation for Gaussian noise: 1 / Phi^-1(3/4)
# = 1.482602..., rounded (e.g. Rousseeuw & Croux 1993, JASA 88, 1273).
MAD_TO_SIGMA = 1.4826
