"""CML geometry, DE, distance and Io phase against Meeus's low-accuracy methods.

Reference: J. Meeus, Astronomical Algorithms, 2nd ed. (Willmann-Bell 1998), ch. 43
(physical ephemeris of Jupiter, low-accuracy method) and ch. 44 (Galilean satellites,
low-accuracy method), both for the worked-example instant 1992 December 16, 0h UT.
The formulas below are transcribed from memory, as are the few example results used;
they are independent of rxlog's ERFA/E5 computation, so agreement checks both. Meeus's
chapter 43 gives System I and II, not III: the IAU System I/II rotations (W1 = 67.1 +
877.900 d, W2 = 43.3 + 870.270 d, from memory) turn rxlog's System III CML into I and II
at the same light-departure time. Tolerances are the low-accuracy methods' level (a few
hundredths to tenths of a degree).
"""

import datetime as dt
import warnings

import numpy as np
from astropy.time import Time

from rxlog.sky.tags import compute_tags

SITE = (47.5, 8.7, 450.0)
EXAMPLE = dt.datetime(1992, 12, 16, 0, 0, tzinfo=dt.timezone.utc).timestamp()


def _s(x):
    return np.sin(np.radians(x))


def _c(x):
    return np.cos(np.radians(x))


def meeus_low_accuracy(jde):
    """Meeus ch. 43 and 44 low-accuracy formulas (from memory); d counted from J2000 TD."""
    d = jde - 2451545.0
    V = 172.74 + 0.00111588 * d
    M = 357.529 + 0.9856003 * d
    N = 20.020 + 0.0830853 * d + 0.329 * _s(V)
    J = 66.115 + 0.9025179 * d - 0.329 * _s(V)
    A = 1.915 * _s(M) + 0.020 * _s(2 * M)
    B = 5.555 * _s(N) + 0.168 * _s(2 * N)
    K = J + A - B
    R = 1.00014 - 0.01671 * _c(M) - 0.00014 * _c(2 * M)
    r = 5.20872 - 0.25208 * _c(N) - 0.00611 * _c(2 * N)
    delta = np.sqrt(r * r + R * R - 2 * r * R * _c(K))
    psi = np.degrees(np.arcsin(R / delta * _s(K)))
    w1 = 210.98 + 877.8169088 * (d - delta / 173) + psi - B
    w2 = 187.23 + 870.1869088 * (d - delta / 173) + psi - B
    lam = 34.35 + 0.083091 * d + 0.329 * _s(V) + B
    ds = 3.12 * _s(lam + 42.8)
    de = ds - 2.22 * _s(psi) * _c(lam + 22) - 1.30 * (r - delta) / delta * _s(lam - 100.5)
    u1 = 163.8069 + 203.4058646 * (d - delta / 173) + psi - B
    u2 = 358.4140 + 101.2916335 * (d - delta / 173) + psi - B
    u1 = u1 + 0.473 * _s(2 * (u1 - u2))
    r1 = 5.9057 - 0.0244 * _c(2 * (u1 - u2))
    return {"delta": delta, "w1": w1 % 360, "w2": w2 % 360, "de": de,
            "io_phase": (u1 + 180.0) % 360.0, "r1": r1}


def _angle_diff(a, b):
    return (np.asarray(a) - np.asarray(b) + 180.0) % 360.0 - 180.0


def _times():
    rng = np.random.default_rng(43)
    return np.concatenate([[EXAMPLE], np.sort(rng.uniform(315_532_800.0, 2_208_988_800.0, 60))])  # 1980-2040


def _tdb_days(t_unix):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # ERFA's "dubious year" past the leap-second table
        return Time(t_unix, format="unix", scale="utc").tdb.jd - 2451545.0


def test_system_i_ii_de_and_distance_match_meeus_ch43_low_accuracy():
    t = _times()
    tags = compute_tags(t, *SITE)
    ref = meeus_low_accuracy(_tdb_days(t) + 2451545.0)
    d_ret = _tdb_days(t) - tags["light_time_s"] / 86400.0
    w3 = 284.95 + 870.5360000 * d_ret
    w1 = tags["cml3_deg"] + (67.1 + 877.900 * d_ret) - w3
    w2 = tags["cml3_deg"] + (43.3 + 870.270 * d_ret) - w3
    assert np.abs(_angle_diff(w1, ref["w1"])).max() <= 0.2
    assert np.abs(_angle_diff(w2, ref["w2"])).max() <= 0.2
    assert np.abs(tags["de_deg"] - ref["de"]).max() <= 0.1
    # the low-accuracy orbit leaves out Saturn's perturbations (the great inequality,
    # ~0.3 deg of Jupiter's longitude): ~0.01 au
    assert np.abs(tags["jupiter_distance_au"] - ref["delta"]).max() <= 0.01
    # light time is the distance at the speed of light (173.14 au/day)
    assert np.allclose(tags["light_time_s"], tags["jupiter_distance_au"] * 499.004784, rtol=1e-6)


def test_worked_example_1992_dec_16_de():
    # Meeus example 43.a: DE = -2.48 deg (from memory)
    tags = compute_tags([EXAMPLE], *SITE)
    assert abs(tags["de_deg"][0] - (-2.48)) <= 0.05


def test_io_phase_matches_meeus_ch44_low_accuracy():
    t = _times()
    ref = meeus_low_accuracy(_tdb_days(t) + 2451545.0)
    tags = compute_tags(t, *SITE)
    assert np.abs(_angle_diff(tags["io_phase_deg"], ref["io_phase"])).max() <= 0.5


def test_worked_example_1992_dec_16_io_position():
    # Meeus example 44.a (low accuracy): Io at X1 = -3.44, Y1 = +0.21 Jupiter radii, X
    # positive west, Y positive north (from memory). With u1 = Io phase - 180 deg,
    # X1 = r1 sin u1 and Y1 = -r1 cos u1 sin DE; 0.05 radii in X is ~0.5 deg of phase.
    tags = compute_tags([EXAMPLE], *SITE)
    r1 = meeus_low_accuracy(_tdb_days([EXAMPLE]) + 2451545.0)["r1"][0]
    u1 = np.radians(tags["io_phase_deg"][0] - 180.0)
    assert abs(r1 * np.sin(u1) - (-3.44)) <= 0.05
    assert abs(-r1 * np.cos(u1) * np.sin(np.radians(tags["de_deg"][0])) - 0.21) <= 0.02
