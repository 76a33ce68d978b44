"""Jupiter seen from the Earth: light time, the Earth's jovicentric longitudes and
declination (DE), the System III central meridian longitude (CML) and Io's phase.

- CML III: west longitude of the sub-Earth point in System III (1965), from the IAU
  WGCCRE 2015 rotation of Jupiter (Archinal et al. 2018, Celest. Mech. Dyn. Astr. 130:22,
  Table 1), evaluated at the time the light left Jupiter. The periodic pole terms of that
  table (< 0.003 deg) are left out.
- Io phase: Io's orbital angle from superior geocentric conjunction, increasing with its
  motion (0 deg behind Jupiter, 90 deg near eastern elongation, 180 deg in transit).
  Io's longitude is the mean longitude of Lieske's E5 theory (Lieske 1998, A&A Suppl.
  129, 205; as tabulated in Meeus, Astronomical Algorithms, 2nd ed., ch. 44) plus its
  largest periodic term, 0.47259 sin 2(l1 - l2) (Io's forced eccentricity). The terms
  left out sum to less than 0.1 deg. E5 longitudes are broken longitudes: from the
  B1950 equinox along the B1950 ecliptic to the node of Jupiter's orbit, along the
  orbit to the node of Jupiter's equator, then along the equator.
- DE: jovicentric declination of the Earth, from the same IAU pole. Distance and light
  time: Earth centre to Jupiter at the light-departure time.
"""

from __future__ import annotations

import functools
import math

import erfa
import numpy as np

from rxlog.constants import AU_LIGHT_S
from rxlog.sky.timescales import J2000_JD

E5_EPOCH_JD = 2443000.5             # 1976 Aug 10.0 TDT, epoch of Lieske's E5 theory
B1950_JD = 2433282.4235             # Besselian epoch B1950.0 (Lieske 1979)

# IAU WGCCRE 2015, Jupiter (Archinal et al. 2018, Table 1); T in Julian centuries and
# d in days from J2000 TDB. W is System III (1965).
JUP_POLE_RA0, JUP_POLE_RA1 = 268.056595, -0.006499
JUP_POLE_DEC0, JUP_POLE_DEC1 = 64.495303, 0.002413
JUP_W0, JUP_W_RATE = 284.95, 870.5360000

# Lieske E5 mean longitudes of Io and Europa, degrees and degrees/day from E5_EPOCH_JD
# (Meeus, Astronomical Algorithms 2nd ed., ch. 44, high-accuracy method). These E5
# values are from memory; the tests check the result against PyEphem and Meeus's
# low-accuracy method (agreement ~0.1 deg).
IO_L0, IO_RATE = 106.07719, 203.488955790
EUROPA_L0, EUROPA_RATE = 175.73161, 101.374724735
IO_FORCED_TERM = 0.47259            # deg, coefficient of sin 2(l1 - l2)
# E5's frame (same source, from memory): node of Jupiter's equator on its orbit, counted
# as a broken longitude from the B1950 equinox, and the equator's inclination to the
# orbit. The frame's pole they give agrees with the IAU 2015 pole within 0.003 deg.
E5_PSI, E5_I = 316.5182, 3.120262
JUPITER_PERIOD_D = 4332.59          # sidereal period, days (mean motion 0.0830912 deg/day)


def light_time(d_tdb: np.ndarray, earth: np.ndarray, sun: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Jupiter's barycentric position (au, (n, 3)) when the light reaching the geocentre
    at TDB days ``d_tdb`` left it, and that light time (s).

    ``earth`` and ``sun`` are barycentric positions (au) at d_tdb; ERFA's plan94 gives
    Jupiter from the Sun.
    """
    tau = np.zeros_like(d_tdb)
    for _ in range(3):  # Jupiter's light time from the geocentre; converges far below 1 us
        jup = erfa.plan94(J2000_JD, d_tdb - tau / 86400.0, 5)["p"] + sun
        tau = np.linalg.norm(jup - earth, axis=-1) * AU_LIGHT_S
    return jup, tau


def earth_from_jupiter(r: np.ndarray, d_ret: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The Earth seen from Jupiter, for Jupiter's geocentric vector ``r`` (au, ICRS) at
    light-departure TDB days ``d_ret``: longitude theta (rad) in Jupiter's IAU equator
    from its ICRF node, DE (rad), and the longitude lam_e5 (rad) in E5's frame."""
    theta, de = erfa.c2s(erfa.rxp(_icrs_to_jupiter_equator(d_ret), -r))
    lam_e5 = math.radians(E5_PSI) + erfa.c2s(erfa.rxp(_icrs_to_e5_equator(), -r))[0]
    return theta, de, lam_e5


def cml3_deg(d_ret: np.ndarray, theta: np.ndarray) -> np.ndarray:
    """CML III (deg) from the light-departure TDB days and the Earth's longitude theta."""
    return np.mod(JUP_W0 + np.mod(JUP_W_RATE * d_ret, 360.0) - np.degrees(theta), 360.0)


def io_phase_deg(d_ret: np.ndarray, lam_e5: np.ndarray) -> np.ndarray:
    """Io phase (deg) from the light-departure TDB days and the Earth's E5 longitude."""
    t5 = d_ret + (J2000_JD - E5_EPOCH_JD)
    l1 = IO_L0 + np.mod(IO_RATE * t5, 360.0)
    l2 = EUROPA_L0 + np.mod(EUROPA_RATE * t5, 360.0)
    io_lon = l1 + IO_FORCED_TERM * np.sin(np.radians(2.0 * (l1 - l2)))
    return np.mod(io_lon - np.degrees(lam_e5) - 180.0, 360.0)


@functools.cache
def _icrs_to_b1950_ecliptic() -> np.ndarray:
    """Rotation: J2000 mean equator (~ICRS) -> mean ecliptic and equinox of B1950.

    Obliquity at B1950 from the IAU 1980 formula (erfa.obl80) and IAU 1976 precession
    (Lieske et al. 1977, erfa.pmat76). FK4's equinox offset and the frame bias (< 1 arcsec)
    are ignored: they move Io's longitude origin by less than 0.0003 deg.
    """
    return erfa.rx(erfa.obl80(B1950_JD, 0.0), erfa.pmat76(B1950_JD, 0.0))


@functools.cache
def _icrs_to_e5_equator() -> np.ndarray:
    """Rotation from ICRS to E5's frame of Jupiter's equator (x toward the node of the
    equator on Jupiter's orbit), by E5's chain of broken longitudes (Meeus ch. 44): B1950
    ecliptic -> node of the orbit (Omega, inclination J) -> node of the equator on the
    orbit (psi, inclination I).

    Omega and J are those of Jupiter's mean orbit on the B1950 ecliptic, averaged from
    ERFA plan94 over one orbital period about J2000. The frame's pole agrees with the
    IAU 2015 pole within 0.003 deg; the drifts of psi (-2e-6 deg/day) and I move Io's
    longitude origin by less than 1e-4 deg over this century, so they are left out.
    """
    days = np.linspace(-JUPITER_PERIOD_D / 2, JUPITER_PERIOD_D / 2, 2048, endpoint=False)
    pv = erfa.plan94(J2000_JD, days, 5)
    normal = erfa.pn(erfa.pxp(pv["p"], pv["v"]))[1].mean(axis=0)     # pole of the mean orbit
    to_ecliptic = _icrs_to_b1950_ecliptic()
    h50 = erfa.pn(erfa.rxp(to_ecliptic, normal))[1]
    omega = math.atan2(h50[0], -h50[1])
    incl = math.acos(h50[2])
    psi, i_eq = math.radians(E5_PSI), math.radians(E5_I)
    return erfa.rx(i_eq, erfa.rz(psi - omega, erfa.rx(incl, erfa.rz(omega, to_ecliptic))))


def _icrs_to_jupiter_equator(d_tdb: np.ndarray) -> np.ndarray:
    """Rotations (n, 3, 3) from ICRS to Jupiter's IAU equator frame at TDB days from J2000:
    x toward the equator's ascending node on the ICRF equator (RA a0 + 90 deg), z the pole."""
    t = d_tdb / 36525.0
    ra0 = np.radians(JUP_POLE_RA0 + JUP_POLE_RA1 * t)
    dec0 = np.radians(JUP_POLE_DEC0 + JUP_POLE_DEC1 * t)
    return erfa.rx(np.pi / 2 - dec0, erfa.rz(np.pi / 2 + ra0, np.eye(3)))
