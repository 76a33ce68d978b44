"""Wilson score intervals against scipy.stats.binomtest(k, n).proportion_ci(method="wilson")
(scipy >= 1.7; Wilson 1927, J. Am. Stat. Assoc. 22, 209, without continuity correction)."""

import numpy as np
import pytest
from scipy.stats import binomtest

from rxlog.season.binomial import wilson_interval


@pytest.mark.parametrize("k,n", [(0, 1), (0, 10), (1, 10), (3, 7), (5, 5), (12, 150), (400, 1000), (999, 1000)])
def test_wilson_interval_matches_scipy(k, n):
    ref = binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
    lo, hi = wilson_interval(k, n)
    assert abs(float(lo) - ref.low) < 1e-9 and abs(float(hi) - ref.high) < 1e-9


def test_wilson_interval_is_nan_without_trials_and_works_on_arrays():
    lo, hi = wilson_interval(np.array([0.0, 2.0, 0.0]), np.array([0.0, 4.0, 3.0]))
    assert np.isnan(lo[0]) and np.isnan(hi[0])
    assert 0 < lo[1] < 0.5 < hi[1] < 1 and lo[2] == 0.0 and 0 < hi[2] < 1
