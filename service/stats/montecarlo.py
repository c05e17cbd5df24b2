"""Seeded Monte Carlo of a Bernoulli SPRT, vectorised over paths.

Used as an outside check on the exact engine and as the baseline it is
measured against: it only approaches the exact figures, with standard error
sqrt(P (1-P) / paths) for a probability and sd(N) / sqrt(paths) for E[N].
The LLR is recomputed here from the plan's p0, p1 and boundaries, so this
module shares no lattice code with :mod:`service.stats.exact`.

References
----------
.. [1] A. Wald, "Sequential Analysis", Wiley, 1947, ch. 5 (the test simulated).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .sprt import BOUNDARY_TOL, SprtPlan


@dataclass(frozen=True)
class MonteCarloResult:
    """Simulated figures at one rate: estimates and their standard errors."""

    p: float
    paths: int
    p_flag: float
    p_clear: float
    asn: float
    se_p_flag: float
    se_asn: float
    open_paths: int


def simulate(plan: SprtPlan, p: float, paths: int, rng: np.random.Generator,
             max_steps: int = 1_000_000, chunk: int = 32) -> MonteCarloResult:
    """Run ``paths`` independent audits of ``plan`` at true rate ``p``.

    The boundaries are checked after every ``plan.visit_units`` units and at the cap.
    """
    g1 = math.log(plan.p1 / plan.p0)
    g2 = math.log((1.0 - plan.p0) / (1.0 - plan.p1))
    upper, lower = plan.upper_llr - BOUNDARY_TOL, plan.lower_llr + BOUNDARY_TOL
    cap = plan.max_units if plan.max_units is not None else max_steps
    cut = plan.cut_llr - BOUNDARY_TOL
    n_stop = np.zeros(paths, dtype=np.int64)
    flagged = np.zeros(paths, dtype=bool)
    alive = np.arange(paths)
    d_now = np.zeros(paths, dtype=np.int64)
    n_now = 0
    steps = np.arange(1, chunk + 1)
    visit = int(getattr(plan, "visit_units", 1) or 1)
    while alive.size and n_now < cap:
        k = min(chunk, cap - n_now)
        hits = rng.random((alive.size, k)) < p
        d_path = d_now[alive, None] + np.cumsum(hits, axis=1)
        n_path = n_now + steps[:k]
        llr = d_path * (g1 + g2) - n_path * g2
        up, down = llr >= upper, llr <= lower
        if visit > 1:   # the boundaries are looked at after every visit only (and the cap)
            look = (n_path % visit == 0) | (n_path == cap)
            up &= look
            down &= look
        if n_now + k == cap and plan.max_units is not None:
            inside = ~up[:, -1] & ~down[:, -1]
            last_up = llr[:, -1] >= cut
            up[:, -1] |= inside & last_up
            down[:, -1] |= inside & ~last_up
        stop = up | down
        done = stop.any(axis=1)
        first = np.argmax(stop, axis=1)
        idx = alive[done]
        n_stop[idx] = n_now + 1 + first[done]
        flagged[idx] = up[done, first[done]]
        d_now[alive] = d_path[:, -1]
        alive = alive[~done]
        n_now += k
    finished = np.ones(paths, dtype=bool)
    finished[alive] = False
    pf = flagged.mean()
    return MonteCarloResult(
        p=float(p), paths=paths, p_flag=float(pf),
        p_clear=float((finished & ~flagged).mean()),
        asn=float(n_stop[finished].mean()) if finished.any() else math.nan,
        se_p_flag=float(math.sqrt(max(pf * (1 - pf), 1e-300) / paths)),
        se_asn=float(n_stop[finished].std(ddof=1) / math.sqrt(finished.sum()))
        if finished.sum() > 1 else math.nan,
        open_paths=int(alive.size))
