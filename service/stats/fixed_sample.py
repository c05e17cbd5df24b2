"""The fixed-sample test a sequential plan replaces.

The one-sided exact binomial test audits n units and flags when the count of
nonconforming units is at least c. The plan with the same risks is the smallest
n for which some c gives P(X >= c | n, p0) <= alpha and P(X >= c | n, p1) >=
1 - beta; for that n, c is the smallest count meeting the alpha condition.
The normal approximation gives

    n = ((z_{1-alpha} sqrt(p0 (1-p0)) + z_{1-beta} sqrt(p1 (1-p1))) / (p1 - p0))**2.

References
----------
.. [1] NIST/SEMATECH e-Handbook of Statistical Methods, section 6.2.3
       (single sampling plans for attributes).
.. [2] J. L. Fleiss, B. Levin and M. C. Paik, "Statistical Methods for Rates
       and Proportions", 3rd ed., Wiley, 2003, section 4.2 (sample size for one
       proportion, normal approximation).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.special import bdtrc, ndtri

#: Searched this far before giving up (a plan needing more is reported as such).
MAX_FIXED_N = 1_000_000


@dataclass(frozen=True)
class FixedSamplePlan:
    """Smallest single-sampling plan with the same risks.

    Attributes
    ----------
    exact_n, critical_count : int or None
        Units to audit and the nonconforming count that flags (None if no plan
        up to ``MAX_FIXED_N`` exists).
    alpha, power : float or None
        Its exact risk at p0 and chance to flag at p1.
    normal_n : int
        The normal-approximation sample size.
    """

    exact_n: int | None
    critical_count: int | None
    alpha: float | None
    power: float | None
    normal_n: int


def normal_n(p0: float, p1: float, alpha: float, beta: float) -> int:
    z_a, z_b = -ndtri(alpha), -ndtri(beta)
    root = (z_a * math.sqrt(p0 * (1 - p0)) + z_b * math.sqrt(p1 * (1 - p1))) / (p1 - p0)
    return max(1, math.ceil(root * root - 1e-9))


def _tail(c, n, p):
    """P(X >= c) for X ~ Binomial(n, p) (scipy.special.bdtrc is P(X > k))."""
    c = np.asarray(c)
    return np.where(c <= 0, 1.0, bdtrc(np.maximum(c - 1, 0), n, p))


def _critical_counts(n: np.ndarray, p0: float, alpha: float) -> np.ndarray:
    """Smallest c with P(X >= c | n, p0) <= alpha, for each n."""
    guess = n * p0 - ndtri(alpha) * np.sqrt(n * p0 * (1 - p0))
    c = np.clip(np.floor(guess).astype(np.int64), 0, n + 1)
    while True:  # walk from the normal guess to the exact count
        up = _tail(c, n, p0) > alpha
        down = ~up & (c > 0) & (_tail(c - 1, n, p0) <= alpha)
        if not (up.any() or down.any()):
            return c
        c = c + up - down


def fixed_sample_plan(p0: float, p1: float, alpha: float, beta: float) -> FixedSamplePlan:
    """Smallest exact one-sided binomial test with risks alpha and beta."""
    approx = normal_n(p0, p1, alpha, beta)
    start = 1
    while start <= MAX_FIXED_N:
        stop = min(MAX_FIXED_N, max(2 * start, start + 4 * approx + 64))
        n = np.arange(start, stop + 1)
        c = _critical_counts(n, p0, alpha)
        power = _tail(c, n, p1)
        ok = np.flatnonzero((power >= 1.0 - beta) & (c <= n))
        if ok.size:
            i = int(ok[0])
            return FixedSamplePlan(exact_n=int(n[i]), critical_count=int(c[i]),
                                   alpha=float(_tail(c[i], n[i], p0)),
                                   power=float(power[i]), normal_n=approx)
        start = stop + 1
    return FixedSamplePlan(None, None, None, None, approx)
