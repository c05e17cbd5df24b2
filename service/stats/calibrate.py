"""Boundaries tuned so that the exact risks meet alpha and beta.

Wald's boundaries are conservative: the exact risks usually come out below
alpha and beta, so the plan audits more units than it must. Calibration moves
the upper boundary a down and the lower boundary b up until the exact risks
bind, which shortens the plan. Both risks are monotone in each boundary (a
lower a can only add flags, a higher b can only add clears), so each boundary is
found by bisection with the other held fixed, alternating until neither moves.
Both orders of the alternation are tried and the one with the smaller
max(E[N | p0], E[N | p1]) is kept.

The start a = ln(1/alpha), b = ln(beta) always meets the risks of an
untruncated plan by Wald's inequalities alpha' <= (1 - beta') / A and
beta' <= B (1 - alpha').

References
----------
.. [1] A. Wald, "Sequential Analysis", Wiley, 1947, section 3.2 (the
       inequalities above).
.. [2] C. Jennison and B. W. Turnbull, "Group Sequential Methods with
       Applications to Clinical Trials", 2000, ch. 19 (boundaries computed so
       that exact error rates attain their targets).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from .exact import PathCounts
from .sprt import SprtPlan

_BISECTIONS = 20
_MIN_GAP = 1e-6


@dataclass(frozen=True)
class Calibration:
    plan: SprtPlan
    alpha: float
    beta: float
    asn_p0: float
    asn_p1: float
    evaluations: int


class _Search:
    def __init__(self, plan: SprtPlan):
        self.plan = plan
        self.evaluations = 0
        self._memo: dict[tuple[float, float], tuple[float, float, float, float]] = {}

    def figures(self, a: float, b: float) -> tuple[float, float, float, float]:
        """(alpha', beta', ASN p0, ASN p1) for boundaries (a, b)."""
        key = (a, b)
        if key not in self._memo:
            self.evaluations += 1
            res = PathCounts(self.plan.with_boundaries(a, b)).evaluate(
                [self.plan.p0, self.plan.p1])
            self._memo[key] = (float(res.p_flag[0]), float(res.p_clear[1]),
                               float(res.asn[0]), float(res.asn[1]))
        return self._memo[key]

    def feasible(self, a: float, b: float) -> bool:
        alpha_x, beta_x, _, _ = self.figures(a, b)
        return alpha_x <= self.plan.alpha and beta_x <= self.plan.beta

    def lowest_a(self, a: float, b: float) -> float:
        """Smallest upper boundary keeping alpha' <= alpha, given b (a is feasible)."""
        lo, hi = max(b, 0.0) + _MIN_GAP, a
        if self.figures(lo, b)[0] <= self.plan.alpha:
            return lo
        for _ in range(_BISECTIONS):
            mid = 0.5 * (lo + hi)
            if self.figures(mid, b)[0] <= self.plan.alpha:
                hi = mid
            else:
                lo = mid
        return hi

    def highest_b(self, a: float, b: float) -> float:
        """Largest lower boundary keeping beta' <= beta, given a (b is feasible)."""
        lo, hi = b, min(a, 0.0) - _MIN_GAP
        if self.figures(a, hi)[1] <= self.plan.beta:
            return hi
        for _ in range(_BISECTIONS):
            mid = 0.5 * (lo + hi)
            if self.figures(a, mid)[1] <= self.plan.beta:
                lo = mid
            else:
                hi = mid
        return lo

    def descend(self, a: float, b: float, a_first: bool) -> tuple[float, float]:
        for _ in range(20):
            old = (a, b)
            if a_first:
                a = self.lowest_a(a, b)
                b = self.highest_b(a, b)
            else:
                b = self.highest_b(a, b)
                a = self.lowest_a(a, b)
            if abs(a - old[0]) < 1e-9 and abs(b - old[1]) < 1e-9:
                break
        return a, b


def _feasible_start(search: _Search) -> tuple[float, float]:
    plan = search.plan
    candidates = [(plan.upper_llr, plan.lower_llr),
                  (math.log(1.0 / plan.alpha), math.log(plan.beta))]
    a, b = candidates[-1]
    for _ in range(6):
        a, b = a + 2.0, b - 2.0
        candidates.append((a, b))
    for a, b in candidates:
        if search.feasible(a, b):
            return a, b
    raise ValueError(
        f"no boundaries meet alpha={plan.alpha} and beta={plan.beta} within "
        f"max_units={plan.max_units}; raise max_units or drop the cap")


def calibrate(plan: SprtPlan) -> Calibration:
    """Boundaries with exact alpha' <= alpha and beta' <= beta and a short plan.

    Parameters
    ----------
    plan : SprtPlan
        Supplies p0, p1, alpha, beta, the cap and the cut rule; its boundaries
        are the first candidate tried.

    Returns
    -------
    Calibration
        The plan with the chosen boundaries and its exact figures at p0, p1.

    Raises
    ------
    ValueError
        If a capped plan cannot meet the risks with any boundaries.
    """
    search = _Search(plan)
    start = _feasible_start(search)
    best = None
    for a_first in (True, False):
        a, b = search.descend(*start, a_first=a_first)
        alpha_x, beta_x, asn0, asn1 = search.figures(a, b)
        score = max(asn0, asn1)
        if best is None or score < best[0] - 1e-12:
            best = (score, a, b)
    _, a, b = best
    alpha_x, beta_x, asn0, asn1 = search.figures(a, b)
    return Calibration(plan=plan.with_boundaries(a, b), alpha=alpha_x, beta=beta_x,
                       asn_p0=asn0, asn_p1=asn1, evaluations=search.evaluations)
