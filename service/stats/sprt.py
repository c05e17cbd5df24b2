"""Wald's sequential probability ratio test for a Bernoulli rate.

The test compares H0: rate = p0 against H1: rate = p1 (p0 < p1). After n units
of which d were nonconforming, the log-likelihood ratio is

    LLR(n, d) = d * ln(p1/p0) - (n - d) * ln((1-p0)/(1-p1))
              = d * (g1 + g2) - n * g2,

with g1 = ln(p1/p0) and g2 = ln((1-p0)/(1-p1)). The test flags (accepts H1)
when LLR >= a and clears (accepts H0) when LLR <= b, where Wald's boundaries are
a = ln((1-beta)/alpha) and b = ln(beta/(1-alpha)).

References
----------
.. [1] A. Wald, "Sequential Analysis", Wiley, 1947, ch. 5.
.. [2] NIST/SEMATECH e-Handbook of Statistical Methods, section 6.2.6,
       "What is Sequential Sampling?" (the same plan as two parallel lines in
       the (n, d) plane: d = -h1 + s n and d = h2 + s n).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, replace
from functools import cached_property

import numpy as np

#: Lattice LLR values within this distance of a boundary count as on it, so
#: that a point lying exactly on a line is not lost to rounding.
BOUNDARY_TOL = 1e-9

MONITORING = "monitoring"
FLAGGED = "flagged"
CLEARED = "cleared"


class PlanInputError(ValueError):
    """A plan parameter out of range; ``argument`` names it."""

    def __init__(self, argument: str, message: str):
        super().__init__(message)
        self.argument = argument

    def __reduce__(self):
        # so the error crosses a process boundary intact (the heavy pool's workers)
        return (type(self), (self.argument, str(self)))


def _whole(name: str, value, low: int) -> None:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise PlanInputError(name, f"{name} must be a whole number, got {value!r}")
    if value < low:
        raise PlanInputError(name, f"{name} must be at least {low}, got {value}")


def check_rates(p0: float, p1: float, alpha: float, beta: float,
                max_units: int | None = None, cut_llr: float = 0.0,
                visit_units: int = 1) -> None:
    """Raise :class:`PlanInputError` naming the first argument that is out of range."""
    for name, value in (("p0", p0), ("p1", p1), ("alpha", alpha), ("beta", beta)):
        if isinstance(value, bool) or not isinstance(value, (int, float, np.floating)) \
                or not math.isfinite(value):
            raise PlanInputError(name, f"{name} must be a finite number, got {value!r}")
        if not 0.0 < value < 1.0:
            raise PlanInputError(name, f"{name} must lie strictly between 0 and 1, got {value}")
    if p0 >= p1:
        raise PlanInputError("p1", f"p1 must be larger than p0, got p0={p0} and p1={p1}")
    if alpha + beta >= 1.0:
        raise PlanInputError("beta", f"alpha + beta must be below 1, got alpha={alpha} and "
                             f"beta={beta}")
    if max_units is not None:
        _whole("max_units", max_units, 1)
    _whole("visit_units", visit_units, 1)
    if isinstance(cut_llr, bool) or not isinstance(cut_llr, (int, float, np.floating)) \
            or not math.isfinite(cut_llr):
        raise PlanInputError("cut_llr", f"cut_llr must be a finite number, got {cut_llr!r}")


@dataclass(frozen=True)
class SprtPlan:
    """A Bernoulli SPRT with boundaries on the LLR scale.

    Parameters
    ----------
    p0, p1 : float
        Tolerated rate and rate worth acting on, ``0 < p0 < p1 < 1``.
    alpha, beta : float
        Nominal risks the boundaries were derived for.
    upper_llr, lower_llr : float
        Boundaries in use, ``lower_llr < 0 < upper_llr`` for Wald's choice;
        calibration may move them.
    max_units : int or None
        Optional cap N: an open cycle is decided at N units.
    cut_llr : float
        Decision at the cap: flag iff LLR(N, d) >= cut_llr.
    visit_units : int
        Units per visit K: the figures of :mod:`service.stats.exact` look at
        the boundaries after every K units (and at the cap). :meth:`decide`
        does not use it; the service decides on each record's totals.
    """

    p0: float
    p1: float
    alpha: float
    beta: float
    upper_llr: float
    lower_llr: float
    max_units: int | None = None
    cut_llr: float = 0.0
    visit_units: int = 1

    @classmethod
    def wald(cls, p0: float, p1: float, alpha: float, beta: float,
             max_units: int | None = None, cut_llr: float = 0.0,
             visit_units: int = 1) -> "SprtPlan":
        """Plan with Wald's boundaries a = ln((1-beta)/alpha), b = ln(beta/(1-alpha))."""
        check_rates(p0, p1, alpha, beta, max_units, cut_llr, visit_units)
        return cls(p0=float(p0), p1=float(p1), alpha=float(alpha), beta=float(beta),
                   upper_llr=math.log((1.0 - beta) / alpha),
                   lower_llr=math.log(beta / (1.0 - alpha)),
                   max_units=None if max_units is None else int(max_units),
                   cut_llr=float(cut_llr), visit_units=int(visit_units))

    def with_boundaries(self, upper_llr: float, lower_llr: float) -> "SprtPlan":
        if not lower_llr < upper_llr:
            raise ValueError("lower_llr must be below upper_llr")
        return replace(self, upper_llr=float(upper_llr), lower_llr=float(lower_llr))

    # -- the LLR per unit -------------------------------------------------
    @cached_property
    def g1(self) -> float:
        """LLR added by a nonconforming unit, ln(p1/p0)."""
        return math.log(self.p1 / self.p0)

    @cached_property
    def g2(self) -> float:
        """LLR removed by a conforming unit, ln((1-p0)/(1-p1))."""
        return math.log((1.0 - self.p0) / (1.0 - self.p1))

    @cached_property
    def g12(self) -> float:
        """g1 + g2, the LLR's slope in ``d`` (computed once: the LLR is evaluated per record)."""
        return self.g1 + self.g2

    def llr(self, n, d):
        """LLR after ``n`` units with ``d`` nonconforming, from the counts."""
        return d * self.g12 - n * self.g2

    # -- the same plan in the (n, d) plane ---------------------------------
    @property
    def h1(self) -> float:
        """Intercept of the acceptance line d = -h1 + s n."""
        return -self.lower_llr / (self.g1 + self.g2)

    @property
    def h2(self) -> float:
        """Intercept of the rejection line d = h2 + s n."""
        return self.upper_llr / (self.g1 + self.g2)

    @property
    def s(self) -> float:
        """Common slope of both lines, g2 / (g1 + g2)."""
        return self.g2 / (self.g1 + self.g2)

    def acceptance_numbers(self, n):
        """Largest d at which n units clear (LLR <= b), or -1 where none can.

        Works on arrays of n; computed from the LLR of the counts so that it
        agrees exactly with :meth:`decide`.
        """
        n = np.asarray(n, dtype=np.int64)
        G, g2 = self.g1 + self.g2, self.g2
        lim = self.lower_llr + BOUNDARY_TOL
        # clipped in floating point first, so that no level overflows int64
        d = np.clip(np.floor((lim + n * g2) / G), -2, n + 2).astype(np.int64)
        d = np.where(d * G - n * g2 > lim, d - 1, d)       # rounding up by the floor
        d = np.where((d + 1) * G - n * g2 <= lim, d + 1, d)  # rounding down
        return np.clip(d, -1, n)

    def rejection_numbers(self, n):
        """Smallest d at which n units flag (LLR >= a), or n + 1 where none can."""
        return self._first_count_reaching(n, self.upper_llr)

    def cut_numbers(self, n):
        """Smallest d with LLR(n, d) >= cut_llr (the flag rule at the cap)."""
        return self._first_count_reaching(n, self.cut_llr)

    def cap_numbers(self, n):
        """(clear if d <=, flag if d >=) at the cap as :meth:`decide` rules there.

        At the cap every count is decided: LLR >= a flags, LLR <= b clears, and
        what lies between flags iff LLR >= cut_llr. Returns arrays (acc, rej)
        with rej = acc + 1; acc is -1 where nothing clears and rej is n + 1
        where nothing flags.
        """
        n = np.asarray(n, dtype=np.int64)
        acc, rej = self.acceptance_numbers(n), self.rejection_numbers(n)
        rej_cap = np.minimum(rej, np.maximum(acc + 1, self.cut_numbers(n)))
        return rej_cap - 1, rej_cap

    def _first_count_reaching(self, n, level: float):
        """Smallest d with LLR(n, d) >= level (within the tolerance), clipped to [0, n + 1]."""
        n = np.asarray(n, dtype=np.int64)
        G, g2 = self.g1 + self.g2, self.g2
        lim = level - BOUNDARY_TOL
        # clipped in floating point first, so that a level of any finite size (a cut of
        # 1e20, say) cannot overflow int64 and reverse the rule
        d = np.clip(np.ceil((lim + n * g2) / G), -1, n + 2).astype(np.int64)
        d = np.where(d * G - n * g2 < lim, d + 1, d)          # rounding down by the ceil
        d = np.where((d - 1) * G - n * g2 >= lim, d - 1, d)   # rounding up
        return np.clip(d, 0, n + 1)

    # -- the decision --------------------------------------------------------
    def decide(self, n: int, d: int) -> str:
        """State after ``n`` units with ``d`` nonconforming.

        Returns ``"flagged"`` (LLR >= a), ``"cleared"`` (LLR <= b), or at the cap
        the cut rule; otherwise ``"monitoring"``.
        """
        value = self.llr(n, d)
        if value >= self.upper_llr - BOUNDARY_TOL:
            return FLAGGED
        if value <= self.lower_llr + BOUNDARY_TOL:
            return CLEARED
        if self.max_units is not None and n >= self.max_units:
            return FLAGGED if value >= self.cut_llr - BOUNDARY_TOL else CLEARED
        return MONITORING
