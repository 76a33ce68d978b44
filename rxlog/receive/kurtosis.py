"""Spectral kurtosis: the estimator of Nita & Gary (2010) and its scatter for Gaussian noise.

From M power samples, per FFT bin, S1 = sum P and S2 = sum P^2; for single-frame powers
SK = (M+1)/(M-1) (M S2 / S1^2 - 1) (PASP 122, 595), in general (powers that are sums of
N frames) the form of MNRAS 406, L60. Expectation 1 for Gaussian noise, 0 for a steady
carrier, above 1 for intermittent signals.
"""

from __future__ import annotations

import numpy as np


def spectral_kurtosis(s1, s2, m, n: int = 1, d: float = 1.0):
    """Generalised spectral kurtosis estimator (Nita & Gary 2010, MNRAS 406, L60, eq. 8).

    ``s1``, ``s2``: sums of M power values and of their squares, each power itself the
    sum of ``n`` FFT powers (n = 1: single frames, the PASP 122, 595 form);
    ``d`` = 1 for complex voltages. Expectation 1 for Gaussian noise; the scatter for
    n = 1 is sqrt(4 M^2 / ((M - 1)(M + 2)(M + 3))) (PASP 122, 595).
    """
    s1 = np.asarray(s1, dtype=np.float64)
    m = np.asarray(m, dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        return (m * n * d + 1) / (m - 1) * (m * np.asarray(s2, dtype=np.float64) / (s1 * s1) - 1)


def sk_sigma(m) -> np.ndarray:
    """Standard deviation of SK for Gaussian noise from M single-frame powers (Nita & Gary 2010, PASP)."""
    m = np.asarray(m, dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.sqrt(4 * m * m / ((m - 1) * (m + 2) * (m + 3)))
