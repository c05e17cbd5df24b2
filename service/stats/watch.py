"""Continued surveillance after a clear: the Bernoulli CUSUM in its integer form.

After a facility is cleared, every later unit feeds the chart of Reynolds and
Stoumbos [1]_. With X = 1 for a nonconforming unit, the chart for a shift from
p0 to p1 accumulates the per-unit LLR ``r2 X - r1`` where

    r1 = -ln((1 - p1) / (1 - p0)),   r2 = ln(p1 (1 - p0) / (p0 (1 - p1))).

Dividing by r1 and rounding the ratio m = round(r2 / r1) gives the integer form

    S' = max(0, S + m X - 1),   signal when S' >= t,

whose state space is the integers 0..t-1, so its run-length distribution is
exactly that of a finite Markov chain (Brook and Evans [2]_): with Q the t x t
matrix of moves between the non-signal states, the average run length from
state i is the i-th entry of L solving (I - Q) L = 1. The limit ``t`` is the
smallest integer whose in-control ARL (at p0) reaches the ARL the agency
accepts; h = t / m is the same limit on the scale of r2 / r1 units.

References
----------
.. [1] M. R. Reynolds Jr. and Z. G. Stoumbos, "A CUSUM chart for monitoring a
       proportion when inspecting continuously", Journal of Quality Technology
       31(1), 1999, 87-108.
.. [2] D. Brook and D. A. Evans, "An approach to the probability distribution
       of cusum run length", Biometrika 59(3), 1972, 539-549.
.. [3] E. S. Page, "Continuous inspection schemes", Biometrika 41, 1954,
       100-115 (ARL = E[N] / P(signal) over the sequential tests a CUSUM
       restarts at zero).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.linalg import solve_banded

from .sprt import PlanInputError, check_rates

#: Largest t * m the exact ARL is computed for (memory of the banded solve,
#: 8 bytes per cell); plans beyond it are refused with a clear message.
MAX_CELLS = 20_000_000
#: Longest horizon of :func:`signal_within` (one numpy step per unit).
MAX_HORIZON = 200_000


def chart_weight(p0: float, p1: float) -> tuple[int, float, float]:
    """(m, r1, r2) of the integer chart for a shift from ``p0`` to ``p1``.

    r1 = -ln((1-p1)/(1-p0)), r2 = ln(p1(1-p0)/(p0(1-p1))), m = round(r2/r1)
    (Reynolds and Stoumbos 1999, section 3). Raises :class:`PlanInputError`
    when m < 2 (a nonconforming unit would not raise the chart).
    """
    check_rates(p0, p1, 0.05, 0.05)
    r1 = -math.log((1.0 - p1) / (1.0 - p0))
    r2 = math.log(p1 * (1.0 - p0) / (p0 * (1.0 - p1)))
    m = int(round(r2 / r1))
    if m < 2:
        raise PlanInputError("p1", f"the watch chart needs r2/r1 >= 1.5 (got {r2 / r1:.3f} "
                             f"for p0={p0}, p1={p1}); rates this high are out of its range")
    return m, r1, r2


def step(s: int, m: int, nonconforming: bool) -> int:
    """One unit of the integer chart: max(0, s + m X - 1)."""
    return max(0, s + (m if nonconforming else 0) - 1)


def _check_chart(m: int, t: int) -> None:
    if isinstance(m, bool) or not isinstance(m, (int, np.integer)) or m < 2:
        raise PlanInputError("m", f"m must be a whole number >= 2, got {m!r}")
    if isinstance(t, bool) or not isinstance(t, (int, np.integer)) or t < 1:
        raise PlanInputError("t", f"t must be a whole number >= 1, got {t!r}")
    if int(t) * int(m) > MAX_CELLS:
        raise PlanInputError("arl0", f"the chart's limit t={t} with m={m} is beyond what is "
                             f"computed exactly (t*m <= {MAX_CELLS}); lower arl0 or move p1")


def arl_vector(m: int, t: int, p: float) -> np.ndarray:
    """Average run length from each state 0..t-1 at rate ``p`` (Brook and Evans 1972).

    Solves (I - Q) L = 1 where, from state i, a nonconforming unit (probability
    p) moves to i + m - 1 (a signal when that is >= t) and a conforming one to
    max(i - 1, 0). I - Q has one band below the diagonal and m - 1 above, so
    the banded LU solve costs O(t m).
    """
    _check_chart(m, t)
    t, m = int(t), int(m)
    p = float(p)
    if not 0.0 < p <= 1.0:
        raise PlanInputError("p", f"the rate must lie in (0, 1], got {p}")
    q = 1.0 - p
    lower = min(1, t - 1)
    upper = min(m - 1, t - 1)
    ab = np.zeros((lower + upper + 1, t))
    ab[upper, :] = 1.0                       # the diagonal
    ab[upper, 0] -= q                        # state 0 stays at 0 on a conforming unit
    if lower:
        ab[upper + 1, :-1] = -q              # A[i, i-1] = -q for i >= 1
    if m - 1 <= t - 1:
        # A[i, i+m-1] = -p for i + m - 1 < t; stored at ab[upper + i - j, j], j = i + m - 1
        ab[upper - (m - 1), m - 1:] = -p
    return solve_banded((lower, upper), ab, np.ones(t))


def arl(m: int, t: int, p: float, start: int = 0) -> float:
    """Exact average number of units to a signal from state ``start`` at rate ``p``."""
    return float(arl_vector(m, t, p)[start])


def signal_within(m: int, t: int, p: float, units: int, start: int = 0) -> float:
    """Exact P(signal within ``units`` units) from state ``start`` at rate ``p``.

    Propagates the state distribution through the same chain, one unit at a
    time: O(units * t).
    """
    _check_chart(m, t)
    t, m, units = int(t), int(m), int(units)
    if not 0 <= units <= MAX_HORIZON:
        raise PlanInputError("audits", f"the horizon must lie in 0..{MAX_HORIZON} units, "
                             f"got {units}")
    q = 1.0 - p
    v = np.zeros(t)
    v[start] = 1.0
    cut = t - m + 1                          # states i >= cut signal on a nonconforming unit
    for _ in range(units):
        new = np.zeros(t)
        new[:-1] += q * v[1:]
        new[0] += q * v[0]
        if cut > 0:
            new[m - 1:] += p * v[:cut]
        v = new
    return float(max(0.0, 1.0 - v.sum()))


def smallest_limit(m: int, p0: float, arl0: float) -> int:
    """Smallest integer t with in-control ARL(m, t, p0) >= ``arl0``.

    The ARL grows with t (a higher limit can only be reached later), so the
    search doubles t until the target is met and then bisects.
    """
    if isinstance(arl0, bool) or not isinstance(arl0, (int, float, np.integer, np.floating)) \
            or not math.isfinite(arl0) or arl0 < 1:
        raise PlanInputError("arl0", f"arl0 must be a finite number >= 1, got {arl0!r}")
    hi = 1
    while arl(m, hi, p0) < arl0:
        hi *= 2
        if hi * m > MAX_CELLS:
            raise PlanInputError("arl0", f"arl0={arl0} needs a limit beyond what is computed "
                                 f"exactly (t*m <= {MAX_CELLS}) for p0={p0}, m={m}")
    lo = hi // 2                              # ARL(lo) < arl0 (or lo = 0)
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if arl(m, mid, p0) >= arl0:
            hi = mid
        else:
            lo = mid
    return hi


@dataclass(frozen=True)
class WatchDesign:
    """The chart watching a cleared facility, with its exact figures.

    Attributes
    ----------
    p0, p1 : float
        In-control rate and the rate the chart is tuned to detect.
    arl0 : float
        In-control ARL the agency asked for.
    m, t : int
        Integer weight and limit: S' = max(0, S + m X - 1), signal at S' >= t.
    arl_p0, arl_p1 : float
        Exact ARLs (units from S = 0) at p0 and p1.
    audits : int
        Units in the horizon for ``false_alarm_probability`` (a year's audits).
    false_alarm_probability : float
        Exact P(a signal within ``audits`` units | p0).
    """

    p0: float
    p1: float
    arl0: float
    m: int
    t: int
    r1: float
    r2: float
    arl_p0: float
    arl_p1: float
    audits: int
    false_alarm_probability: float

    @property
    def h(self) -> float:
        """The limit on the scale of the chart's unit step: t / m."""
        return self.t / self.m

    def to_dict(self) -> dict:
        return {"p0": self.p0, "p1": self.p1, "arl0": self.arl0, "m": self.m, "t": self.t,
                "h": self.h, "arl_p0": self.arl_p0, "arl_p1": self.arl_p1,
                "false_alarm_within": {"audits": self.audits,
                                       "probability": self.false_alarm_probability}}


def design_watch(p0: float, p1: float, arl0: float, audits: int) -> WatchDesign:
    """The integer Bernoulli CUSUM for p0 -> p1 whose exact in-control ARL is at least ``arl0``.

    Parameters
    ----------
    p0, p1 : float
        In-control rate and rate to detect, 0 < p0 < p1 < 1.
    arl0 : float
        Smallest acceptable in-control ARL (average units between false alarms).
    audits : int
        Horizon (units) of the reported false-alarm probability.
    """
    m, r1, r2 = chart_weight(p0, p1)
    if isinstance(audits, bool) or not isinstance(audits, (int, np.integer)) \
            or not 1 <= audits <= MAX_HORIZON:
        raise PlanInputError("audits", f"audits must be a whole number in 1..{MAX_HORIZON}, "
                             f"got {audits!r}")
    t = smallest_limit(m, p0, arl0)
    return WatchDesign(p0=float(p0), p1=float(p1), arl0=float(arl0), m=m, t=t, r1=r1, r2=r2,
                       arl_p0=arl(m, t, p0), arl_p1=arl(m, t, p1), audits=int(audits),
                       false_alarm_probability=signal_within(m, t, p0, int(audits)))
