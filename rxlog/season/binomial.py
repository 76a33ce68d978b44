"""Binomial confidence intervals for occurrence rates from small counts.

Wilson (1927), "Probable inference, the law of succession, and statistical inference",
J. Am. Stat. Assoc. 22, 209: the score interval, which stays inside [0, 1] and keeps
its coverage near the nominal level for counts of a few, where the normal
approximation p +- z sqrt(p(1-p)/n) does not.
"""

from __future__ import annotations

import numpy as np

Z95 = 1.959963984540054     # two-sided 95 %: the standard normal's 0.975 quantile


def wilson_interval(k, n, z: float = Z95) -> tuple[np.ndarray, np.ndarray]:
    """Lower and upper bounds of the Wilson score interval for k successes in n trials.

    Arrays of any shape (k and n may be fractional: exposure in units of a trial);
    NaN where n is 0.
    """
    k = np.asarray(k, dtype=np.float64)
    n = np.asarray(n, dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        p = k / n
        z2 = z * z
        centre = (p + z2 / (2 * n)) / (1 + z2 / n)
        half = z / (1 + z2 / n) * np.sqrt(p * (1 - p) / n + z2 / (4 * n * n))
    # exact ends at k = 0 and k = n, where the formula leaves rounding residue (~1e-17)
    lo = np.where(n > 0, np.where(k <= 0, 0.0, np.clip(centre - half, 0.0, 1.0)), np.nan)
    hi = np.where(n > 0, np.where(k >= n, 1.0, np.clip(centre + half, 0.0, 1.0)), np.nan)
    return lo, hi
