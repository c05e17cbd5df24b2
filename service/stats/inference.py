"""Exact inference after a sequential decision: stagewise p-value, confidence interval and
median-unbiased estimate of the rate.

The sample space of a stopped cycle is ordered stagewise (Jennison and Turnbull 2000, section
8.4; Siegmund 1985, section 3.3): a flag at an earlier look is more extreme (upward) than a flag
at a later one; then, for a capped plan, the outcomes of the final look ordered by their count d
(larger d more extreme); then clears, from the latest look down to the first. Within one look,
a larger d is more extreme. With that order,

    p_up(p)   = P_p(outcome at least as extreme upward as the one observed),
    p_down(p) = P_p(outcome at least as extreme downward),

the p-value for H0 (rate = p0) is p_up(p0); the two-sided 100*level % interval is
[p_L, p_U] with p_up(p_L) = (1 - level)/2 and p_down(p_U) = (1 - level)/2 (the
Clopper-Pearson construction carried to the sequential sample space); the median-unbiased
estimate solves p_up(p) = 1/2.

For a discrete outcome that estimate is median-unbiased on one side only: P(estimate > p)
<= 1/2 at every rate, but P(estimate < p) can be far above 1/2 (clearing at the first
chance, often the most likely outcome, has p_up = 1 and gets the estimate 0). Beside it the
mid-p median-unbiased estimate (Hirji, Tsiatis and Mehta 1989) solves
p_up(p) - P_p(observed)/2 = 1/2, the average of the upward and downward medians' equations;
it lies between the two one-sided medians and is less pulled down by early clears (it is
still 0 for a clear at the very first chance, where no outcome is more extreme downward).

The looks are the records in receipt order (a record of m units is one look after m more
units); only the looks up to the observed decision enter these sums, so the future is not
needed. The number of unit paths reaching each (look, d) without stopping does not depend on
the rate, so it is counted once (in logarithms) and every rate is evaluated from it.

References
----------
.. [1] C. Jennison and B. W. Turnbull, "Group Sequential Methods with Applications to
       Clinical Trials", Chapman & Hall/CRC, 2000, ch. 8 (stagewise ordering, exact
       p-values and confidence intervals after a group sequential test).
.. [2] D. Siegmund, "Sequential Analysis: Tests and Confidence Intervals", Springer, 1985,
       ch. 3.
.. [3] C. J. Clopper and E. S. Pearson, "The use of confidence or fiducial limits
       illustrated in the case of the binomial", Biometrika 26 (1934), 404-413.
.. [4] K. F. Hirji, A. A. Tsiatis and C. R. Mehta, "Median unbiased estimation for
       binary data", The American Statistician 43 (1989), 7-11 (the mid-p version).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq
from scipy.special import gammaln, logsumexp

from .sprt import BOUNDARY_TOL, SprtPlan

_EPS = 1e-12


def _log_choose(m: int) -> np.ndarray:
    j = np.arange(m + 1)
    return gammaln(m + 1) - gammaln(j + 1) - gammaln(m - j + 1)


@dataclass(frozen=True)
class StopPoint:
    look: int          # 1-based look index (record number among the evidence)
    n: int
    d: int
    flag: bool
    log_count: float


def _convolve_log(logk: np.ndarray, lc: np.ndarray) -> np.ndarray:
    """``out[t] = log sum_{i + j = t} exp(logk[i] + lc[j])`` in memory linear in the sizes.

    The shorter of the two arrays is walked one entry at a time and each step adds a
    shifted copy of the longer one with :func:`numpy.logaddexp`, so memory is
    ``O(len(logk) + len(lc))`` and time ``O(len(logk) * len(lc))``; no
    ``len(logk) x len(lc)`` grid is ever built.
    """
    short, long_ = (logk, lc) if logk.size <= lc.size else (lc, logk)
    out = np.full(logk.size + lc.size - 1, -np.inf)
    width = long_.size
    for i, v in enumerate(short.tolist()):
        if v == -np.inf:
            continue
        part = out[i:i + width]
        np.logaddexp(part, long_ + v, out=part)
    return out


class LookCounts:
    """Log-counts of unit paths that stop at each (look, d), for given look sizes.

    A look of ``m`` units moves the count from d to d + j in C(m, j) ways; after each look
    the plan's boundaries (and, at or beyond the cap, the cut rule) decide. Memory is linear
    in the number of units: the open counts are convolved with the binomial coefficients
    without a two-dimensional grid (:func:`_convolve_log`), and the stop points are kept as
    flat arrays (``look``, ``n``, ``d``, ``flag``, ``log_count``).
    """

    def __init__(self, plan: SprtPlan, sizes: list[int]):
        if any(int(m) < 1 for m in sizes):
            raise ValueError("every look holds at least one unit")
        self.plan = plan
        self.sizes = [int(m) for m in sizes]
        self.open_at_end: tuple[int, np.ndarray, np.ndarray] | None = None
        self._run()

    def _run(self) -> None:
        plan = self.plan
        d0 = 0
        logk = np.array([0.0])
        n = 0
        looks, ns, ds, flags, ks = [], [], [], [], []
        d = np.array([0])
        for look, m in enumerate(self.sizes, start=1):
            logk = _convolve_log(logk, _log_choose(m))
            d = np.arange(d0, d0 + logk.size)
            n += m
            llr = plan.llr(n, d)
            up = llr >= plan.upper_llr - BOUNDARY_TOL
            down = llr <= plan.lower_llr + BOUNDARY_TOL
            if plan.max_units is not None and n >= plan.max_units:
                cut = llr >= plan.cut_llr - BOUNDARY_TOL
                up, down = up | (~down & cut), down | (~up & ~cut)
            finite = logk > -np.inf
            for flag, mask in ((True, up), (False, down)):
                sel = mask & finite
                count = int(sel.sum())
                if count:
                    looks.append(np.full(count, look))
                    ns.append(np.full(count, n))
                    ds.append(d[sel])
                    flags.append(np.full(count, flag))
                    ks.append(logk[sel])
            keep = ~(up | down)
            d, logk = d[keep], logk[keep]
            if d.size == 0:
                break
            d0 = int(d[0])
            # between two parallel lines the open d form one run; should they ever not,
            # the gaps are filled with zero paths so that index i still means d0 + i
            if d.size != int(d[-1]) - d0 + 1:
                full = np.full(int(d[-1]) - d0 + 1, -np.inf)
                full[d - d0] = logk
                logk = full
                d = np.arange(d0, d0 + full.size)
        self.open_at_end = (n, d, logk)
        cat = lambda parts, kind: (np.concatenate(parts) if parts
                                   else np.zeros(0, dtype=kind))
        self.look = cat(looks, np.int64)
        self.n = cat(ns, np.int64)
        self.d = cat(ds, np.int64)
        self.flag = cat(flags, bool)
        self.log_count = cat(ks, float)

    @property
    def points(self) -> list[StopPoint]:
        """The stop points as objects (convenient for small plans; the arrays are the data)."""
        return [StopPoint(int(a), int(b), int(c), bool(f), float(k)) for a, b, c, f, k in
                zip(self.look, self.n, self.d, self.flag, self.log_count)]

    def select(self, mask: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(n, d, log_count) of the stop points where ``mask`` holds."""
        return self.n[mask], self.d[mask], self.log_count[mask]

    def mass(self, points, p) -> np.ndarray:
        """Probability of the given stop points at each rate in ``p``.

        ``points`` is a list of :class:`StopPoint` or an ``(n, d, log_count)`` triple of
        arrays (see :meth:`select`).
        """
        p = np.clip(np.atleast_1d(np.asarray(p, dtype=float)), 0.0, 1.0)
        if isinstance(points, tuple):
            n, d, k = points
        else:
            n = np.array([s.n for s in points], dtype=np.int64)
            d = np.array([s.d for s in points], dtype=np.int64)
            k = np.array([s.log_count for s in points], dtype=float)
        return _mass(n, d, k, p)


def _mass(n: np.ndarray, d: np.ndarray, k: np.ndarray, p: np.ndarray) -> np.ndarray:
    if n.size == 0:
        return np.zeros(p.size)
    with np.errstate(divide="ignore", invalid="ignore"):
        lp = np.where(d > 0, d * np.log(p[:, None]), 0.0)
        lq = np.where(n - d > 0, (n - d) * np.log1p(-p[:, None]), 0.0)
    return np.exp(k + lp + lq).sum(axis=1)


@dataclass(frozen=True)
class SequentialInference:
    """Inference for one decided cycle.

    Attributes
    ----------
    decision : "flagged" or "cleared"
    n, d : units and nonconforming units at the decision
    p_value : stagewise p-value for H0 (rate = p0), one-sided upward
    ci_level, ci_low, ci_high : exact two-sided interval for the rate
    estimate_median_unbiased : rate with p_up = 1/2 (one-sided for discrete outcomes)
    estimate_mid_p : rate with p_up - P(observed)/2 = 1/2 (Hirji, Tsiatis and Mehta 1989)
    estimate_naive : d / n (biased after a sequential stop)
    at_cap : decided at the cap by the cut rule
    """

    decision: str
    n: int
    d: int
    looks: int
    p_value: float
    ci_level: float
    ci_low: float
    ci_high: float
    estimate_median_unbiased: float
    estimate_naive: float
    at_cap: bool
    estimate_mid_p: float = float("nan")

    def to_dict(self) -> dict:
        return dict(self.__dict__)


class _Ordering:
    """p_up and p_down of the observed stop under the stagewise ordering."""

    def __init__(self, counts: LookCounts, observed: StopPoint, at_cap: bool):
        look, d, flag = counts.look, counts.d, counts.flag
        last = observed.look
        here = look == last
        if at_cap:
            # flags before the final look, then the final look by d (larger first)
            self.up = counts.select((flag & (look < last)) | (here & (d >= observed.d)))
        elif observed.flag:
            self.up = counts.select(flag & ((look < last) | (here & (d >= observed.d))))
        else:
            self.down = counts.select(~flag & ((look < last) | (here & (d < observed.d))))
            self.up = None
        self.counts, self.observed = counts, observed
        self.exact = (np.array([observed.n]), np.array([observed.d]),
                      np.array([observed.log_count]))

    def p_up(self, p) -> np.ndarray:
        if self.up is not None:
            return self.counts.mass(self.up, p)
        return 1.0 - self.counts.mass(self.down, p)

    def p_down(self, p) -> np.ndarray:
        return 1.0 - self.p_up(p) + self.counts.mass(self.exact, p)


def _root(fn, target: float, increasing: bool) -> float:
    """Where a monotone fn of the rate crosses target; 0 or 1 when it never does in (0, 1)."""
    f = lambda x: float(fn(x)[0]) - target
    a, b = _EPS, 1.0 - _EPS
    fa, fb = f(a), f(b)
    if increasing:
        if fa >= 0:
            return 0.0
        if fb <= 0:
            return 1.0
    else:
        if fa <= 0:
            return 0.0
        if fb >= 0:
            return 1.0
    return float(brentq(f, a, b, xtol=1e-13, rtol=1e-12, maxiter=300))


def infer(plan: SprtPlan, sizes: list[int], bad: list[int], level: float = 0.95,
          counts: LookCounts | None = None) -> SequentialInference:
    """Exact inference for a cycle whose evidence records have ``sizes`` units and ``bad``
    nonconforming units each (in receipt order), and which decided at its last record.

    ``counts`` may be a :class:`LookCounts` of the same plan built for a longer list of look
    sizes that starts with ``sizes`` (only looks up to the decision are used), so that many
    cycles with unit records can share one.

    Raises
    ------
    ValueError
        If the records do not end in a decision of ``plan``, or level is not in (0, 1).
    """
    if not 0.0 < level < 1.0:
        raise ValueError(f"level must lie strictly between 0 and 1, got {level}")
    if len(sizes) != len(bad) or not sizes:
        raise ValueError("sizes and bad must be equal-length, non-empty lists")
    n, d = int(sum(sizes)), int(sum(bad))
    if counts is None:
        counts = LookCounts(plan, sizes)
    elif counts.plan != plan or counts.sizes[:len(sizes)] != [int(m) for m in sizes]:
        raise ValueError("counts were built for another plan or other look sizes")
    # the observed path must not have stopped at an earlier look
    running_n = running_d = 0
    for m, b in zip(sizes[:-1], bad[:-1]):
        running_n, running_d = running_n + m, running_d + b
        llr = plan.llr(running_n, running_d)
        if (llr >= plan.upper_llr - BOUNDARY_TOL or llr <= plan.lower_llr + BOUNDARY_TOL
                or (plan.max_units is not None and running_n >= plan.max_units)):
            raise ValueError(f"the records already decided after {running_n} units")
    at = np.flatnonzero((counts.look == len(sizes)) & (counts.d == d))
    if at.size == 0:
        raise ValueError(f"the records ({n} units, {d} nonconforming) do not end in a decision")
    i = int(at[0])
    observed = StopPoint(len(sizes), int(counts.n[i]), d, bool(counts.flag[i]),
                         float(counts.log_count[i]))
    llr = plan.llr(n, d)
    at_cap = bool(plan.max_units is not None and n >= plan.max_units
                  and plan.lower_llr + BOUNDARY_TOL < llr < plan.upper_llr - BOUNDARY_TOL)
    order = _Ordering(counts, observed, at_cap or (plan.max_units is not None
                                                   and n >= plan.max_units))
    tail = (1.0 - level) / 2.0
    low = _root(order.p_up, tail, increasing=True)
    high = _root(order.p_down, tail, increasing=False)
    median = _root(order.p_up, 0.5, increasing=True)
    mid_p = _root(lambda x: order.p_up(x) - 0.5 * order.counts.mass(order.exact, x), 0.5,
                  increasing=True)
    return SequentialInference(
        decision="flagged" if observed.flag else "cleared", n=n, d=d, looks=len(sizes),
        p_value=float(min(max(order.p_up(plan.p0)[0], 0.0), 1.0)), ci_level=level,
        ci_low=low, ci_high=high, estimate_median_unbiased=median, estimate_naive=d / n,
        at_cap=at_cap, estimate_mid_p=mid_p)
