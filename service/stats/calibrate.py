"""Boundaries tuned so that the exact risks meet alpha and beta.

Wald's boundaries ignore the overshoot: for an untruncated plan looked at
after every unit the exact risks come out below alpha and beta, and
calibration moves the boundaries inward until the risks bind, which shortens
the plan. With a cap (cut rule) or with looks only every K units the exact
risks of Wald's boundaries can exceed the targets instead; then calibration
has to move a boundary outward and the plan gets longer. The result says
which happened and why.

The search first takes Newton steps on (a, b) using Wald's approximations
alpha' ~ (1 - beta') e**-a and beta' ~ (1 - alpha') e**b (slopes -1 and +1 of
the log risks), which reach the targets in a few exact evaluations for long
plans; it keeps the shortest feasible pair seen. If no step is feasible it
searches a grid on both sides of Wald's boundaries (narrower and wider, since
with a cut rule wider boundaries can make the risks worse). For cheap plans
(short lattices) each boundary is then pushed by bisection as far as the risks
allow, the other held fixed (both risks are monotone in each boundary: a lower
a can only add flags, a higher b can only add clears).

References
----------
.. [1] A. Wald, "Sequential Analysis", Wiley, 1947, section 3.2 (the
       approximations and inequalities above).
.. [2] C. Jennison and B. W. Turnbull, "Group Sequential Methods with
       Applications to Clinical Trials", 2000, ch. 19 (boundaries computed so
       that exact error rates attain their targets).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from .exact import MAX_STEPS, PathCounts
from .sprt import SprtPlan

_BISECTIONS = 20
_MIN_GAP = 1e-6
_NEWTON_STEPS = 8
#: aim a little inside the targets so that a step lands on the feasible side
_AIM = 1.0 - 2e-4
#: plans whose evaluation needs at most this many units are polished by bisection
_CHEAP_UNITS = 3000


@dataclass(frozen=True)
class Calibration:
    """Calibrated plan, its exact figures, and those of Wald's boundaries beside it."""

    plan: SprtPlan
    alpha: float
    beta: float
    asn_p0: float
    asn_p1: float
    evaluations: int
    wald_alpha: float = math.nan
    wald_beta: float = math.nan
    wald_asn_p0: float = math.nan
    wald_asn_p1: float = math.nan

    @property
    def compared_with_wald(self) -> str:
        """"shorter", "longer" or "same": max(E[N | p0], E[N | p1]) against Wald's boundaries."""
        new, old = max(self.asn_p0, self.asn_p1), max(self.wald_asn_p0, self.wald_asn_p1)
        if new < old * (1 - 1e-9):
            return "shorter"
        if new > old * (1 + 1e-9):
            return "longer"
        return "same"

    @property
    def reason(self) -> str:
        target = self.plan.alpha, self.plan.beta
        wald = (f"Wald's boundaries give exact alpha' {self.wald_alpha:.4g} and beta' "
                f"{self.wald_beta:.4g} against the targets {target[0]:g} and {target[1]:g}")
        meets = (self.wald_alpha <= target[0] * (1 + 1e-9)
                 and self.wald_beta <= target[1] * (1 + 1e-9))
        how = self.compared_with_wald
        if meets and how == "shorter":
            return (wald + ": they are conservative (Wald's formulas ignore the overshoot of "
                    "the boundaries), so calibration moved them inward until the exact risks "
                    "bind, and the plan needs fewer units.")
        if not meets:
            why = ("the cap decides open cycles by the cut rule" if self.plan.max_units
                   is not None else "looks come only every few units")
            return (wald + f": they miss a target here ({why}), so calibration had to move "
                    "a boundary outward to meet the risks, and the plan needs "
                    + ("more" if how == "longer" else "no fewer") + " units.")
        return (wald + ": they already meet the risks and no boundary could move inward "
                "without breaking one, so the plan is " + how + ".")


class _Search:
    def __init__(self, plan: SprtPlan, max_steps: int = MAX_STEPS):
        self.plan = plan
        self.max_steps = max_steps
        self.evaluations = 0
        self.units = 0
        self._memo: dict[tuple[float, float], tuple[float, float, float, float]] = {}

    def figures(self, a: float, b: float) -> tuple[float, float, float, float]:
        """(alpha', beta', ASN p0, ASN p1) for boundaries (a, b)."""
        key = (a, b)
        if key not in self._memo:
            self.evaluations += 1
            counts = PathCounts(self.plan.with_boundaries(a, b), max_steps=self.max_steps)
            res = counts.summary([self.plan.p0, self.plan.p1])
            self.units = max(self.units, counts.n)
            self._memo[key] = (float(res.p_flag[0]), float(res.p_clear[1]),
                               float(res.asn[0]), float(res.asn[1]))
        return self._memo[key]

    def feasible(self, a: float, b: float) -> bool:
        alpha_x, beta_x, _, _ = self.figures(a, b)
        return alpha_x <= self.plan.alpha and beta_x <= self.plan.beta

    def score(self, a: float, b: float) -> float:
        _, _, asn0, asn1 = self.figures(a, b)
        return max(asn0, asn1)

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


def _newton(search: _Search, a: float, b: float):
    """Newton steps on the log risks (slopes -1 in a, +1 in b); the best feasible pair."""
    plan = search.plan
    best = None
    la, lb = math.log(plan.alpha * _AIM), math.log(plan.beta * _AIM)
    for _ in range(_NEWTON_STEPS):
        alpha_x, beta_x, _, _ = search.figures(a, b)
        if search.feasible(a, b) and (best is None or search.score(a, b) < search.score(*best)):
            best = (a, b)
        da = (math.log(alpha_x) - la) if alpha_x > 0 else -1.0
        db = -(math.log(beta_x) - lb) if beta_x > 0 else 1.0
        if abs(da) < 1e-3 and abs(db) < 1e-3:
            break
        a_new, b_new = a + max(min(da, 3.0), -3.0), b + max(min(db, 3.0), -3.0)
        if a_new - b_new < 10 * _MIN_GAP:
            break
        a, b = a_new, b_new
    return best


def _feasible_start(search: _Search) -> tuple[float, float]:
    """A feasible pair on either side of Wald's boundaries (a cut rule can make wider
    boundaries worse, so narrower ones are tried as well)."""
    plan = search.plan
    a0, b0 = plan.upper_llr, plan.lower_llr
    candidates = [(a0, b0), (math.log(1.0 / plan.alpha), math.log(plan.beta))]
    for step in (1.0, 2.0, 4.0, 8.0):
        for da, db in ((step, -step), (step, 0.0), (0.0, -step), (-step / 2, -step),
                       (step, step / 2), (-step / 2, 0.0), (0.0, step / 2)):
            candidates.append((a0 + da, b0 + db))
    found = [c for c in candidates if c[0] - c[1] > 10 * _MIN_GAP and search.feasible(*c)]
    if not found:
        raise ValueError(
            f"no boundaries meet alpha={plan.alpha} and beta={plan.beta} within "
            f"max_units={plan.max_units}; raise max_units or drop the cap")
    return min(found, key=lambda c: search.score(*c))


def calibrate(plan: SprtPlan, max_steps: int = MAX_STEPS) -> Calibration:
    """Boundaries with exact alpha' <= alpha and beta' <= beta, as tight as found.

    Parameters
    ----------
    plan : SprtPlan
        Supplies p0, p1, alpha, beta, the cap, the cut rule and the visit size;
        its boundaries are the first candidate tried.
    max_steps : int
        Unit limit of the exact engine for untruncated plans.

    Returns
    -------
    Calibration
        The plan with the chosen boundaries, its exact figures at p0, p1, and
        those of the starting (Wald's) boundaries.

    Raises
    ------
    ValueError
        If no boundaries tried meet the risks (e.g. a cap far too small).
    """
    search = _Search(plan, max_steps)
    a_w, b_w = plan.upper_llr, plan.lower_llr
    wald = search.figures(a_w, b_w)
    best = _newton(search, a_w, b_w)
    if best is None:
        best = _feasible_start(search)
    if search.units <= _CHEAP_UNITS:
        for a_first in (True, False):
            a, b = search.descend(*best, a_first=a_first)
            if search.feasible(a, b) and search.score(a, b) < search.score(*best) - 1e-12:
                best = (a, b)
    a, b = best
    alpha_x, beta_x, asn0, asn1 = search.figures(a, b)
    return Calibration(plan=plan.with_boundaries(a, b), alpha=alpha_x, beta=beta_x,
                       asn_p0=asn0, asn_p1=asn1, evaluations=search.evaluations,
                       wald_alpha=wald[0], wald_beta=wald[1], wald_asn_p0=wald[2],
                       wald_asn_p1=wald[3])
