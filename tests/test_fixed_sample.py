"""Fixed-sample comparison against scipy.stats.binom and statsmodels."""
import math

import numpy as np
import pytest
from scipy.stats import binom, norm
from statsmodels.stats.proportion import binom_test

from service.stats.fixed_sample import fixed_sample_plan, normal_n

PLANS = [(0.01, 0.10, 0.05, 0.10), (0.02, 0.08, 0.05, 0.10), (0.04, 0.12, 0.05, 0.10),
         (0.025, 0.065, 0.05, 0.10), (0.3, 0.5, 0.01, 0.01)]


@pytest.mark.parametrize("p0, p1, alpha, beta", PLANS)
def test_exact_plan_is_the_smallest_binomial_test(p0, p1, alpha, beta):
    fx = fixed_sample_plan(p0, p1, alpha, beta)
    n, c = fx.exact_n, fx.critical_count
    # statsmodels' one-sided exact binomial test: P(X >= c | n, p0) is the p-value of c.
    assert binom_test(c, n, p0, alternative="larger") <= alpha
    assert c == 0 or binom_test(c - 1, n, p0, alternative="larger") > alpha
    assert binom.sf(c - 1, n, p1) >= 1 - beta
    # no smaller n works with any critical count (scipy.stats.binom by brute force)
    for m in range(1, n):
        k = np.arange(m + 2)
        ok = (binom.sf(k - 1, m, p0) <= alpha) & (binom.sf(k - 1, m, p1) >= 1 - beta)
        assert not ok.any(), (m, k[ok])


def test_normal_approximation_formula():
    # Fleiss, Levin & Paik (2003), section 4.2: n = ((z_a sqrt(p0 q0) + z_b sqrt(p1 q1)) / (p1-p0))^2
    p0, p1, alpha, beta = 0.01, 0.10, 0.05, 0.10
    root = (norm.ppf(0.95) * math.sqrt(0.0099) + norm.ppf(0.90) * math.sqrt(0.09)) / 0.09
    assert normal_n(p0, p1, alpha, beta) == math.ceil(root ** 2) == 38
