"""Choosing *which facility* to audit from past results leaves each facility's error rates
as the plan's exact ones (the optional skipping theorem: J. L. Doob, "Stochastic
Processes", Wiley, 1953; the chapter, III, from memory).

A seeded simulation (numpy.random.default_rng) runs 24 facilities week by week under one
budget, the visits chosen by the dashboard's own score (service.program.visit_scores /
allocate), 4,000 times. Each facility's share of runs ending flagged must equal the
plan's exact alpha' (the exact engine, Wald 1947 appendix A.2; enumeration-checked in
test_exact_engine.py) within 4 standard errors: with 24 facilities the chance that a
correct rule fails somewhere is about 24 x 6.3e-5 = 1.5e-3, and the seed fixes it.

The second test shows the check has teeth: if the *units* audited are chosen using
information related to their outcome (at a facility leaning toward a flag the inspector
picks units that look well kept, half as often nonconforming), the same check fails.
"""
import math

import numpy as np
import pytest

from service.program import VisitInputs, allocate, visit_scores
from service.stats import SprtPlan, run_exact
from service.stats.sprt import BOUNDARY_TOL

PLAN = SprtPlan.wald(0.02, 0.06, 0.05, 0.05)
RUNS = 4000
BUDGET = 60
PER_VISIT = 20
STALE_DAYS = 14.0


def run_program(rates, runs, seed, unit_rate=None):
    """Simulate the program until every facility of every run is decided.

    Returns flagged (runs, F) and the number of weeks taken. ``unit_rate(rate, position)``
    may change the rate of the units chosen at a visit (the broken rule).
    """
    rng = np.random.default_rng(seed)
    F = len(rates)
    size = runs * F
    rate = np.tile(np.asarray(rates, dtype=float), runs)
    group = np.repeat(np.arange(runs), F)
    n = np.zeros(size, dtype=np.int64)
    d = np.zeros(size, dtype=np.int64)
    age = np.zeros(size)
    open_ = np.ones(size, dtype=bool)
    flagged = np.zeros(size, dtype=bool)
    g1, g2 = PLAN.g1, PLAN.g2
    full = lambda v: np.full(size, v)    # noqa: E731
    weeks = 0
    while open_.any():
        weeks += 1
        assert weeks < 20000, "the visit rule starves some facility"
        x = VisitInputs(n=n, d=d, upper=full(PLAN.upper_llr), lower=full(PLAN.lower_llr),
                        g1=full(g1), g2=full(g2), age_days=age, stale_days=full(STALE_DAYS),
                        watch_high=np.zeros(size, dtype=bool))
        s = visit_scores(x, PER_VISIT)
        score = np.where(open_, s.score, -np.inf)
        give = allocate(s.units, score, BUDGET, group=group)
        visited = give > 0
        p_now = rate if unit_rate is None else unit_rate(rate, s.position)
        for k in range(PER_VISIT):
            idx = np.flatnonzero((give > k) & open_)
            if idx.size == 0:
                break
            bad = rng.random(idx.size) < p_now[idx]
            n[idx] += 1
            d[idx] += bad
            llr = d[idx] * (g1 + g2) - n[idx] * g2
            up = llr >= PLAN.upper_llr - BOUNDARY_TOL
            down = llr <= PLAN.lower_llr + BOUNDARY_TOL
            flagged[idx[up]] = True
            open_[idx[up | down]] = False
        age = np.where(visited, 0.0, age + 7.0)
    return flagged.reshape(runs, F), weeks


@pytest.mark.slow
def test_each_facility_keeps_the_plans_exact_error_rates_under_the_visit_ranking():
    rates = [PLAN.p0] * 20 + [PLAN.p1] * 4
    exact = run_exact(PLAN, [PLAN.p0, PLAN.p1])
    alpha_x, beta_x = float(exact.p_flag[0]), float(exact.p_clear[1])
    assert abs(alpha_x - 0.0345) < 5e-5        # the plan's exact alpha' (exact engine)
    flagged, weeks = run_program(rates, RUNS, seed=1953)
    assert weeks > 20                           # many weeks: the ranking really chose
    se_a = math.sqrt(alpha_x * (1 - alpha_x) / RUNS)
    se_b = math.sqrt(beta_x * (1 - beta_x) / RUNS)
    rate_flag = flagged.mean(axis=0)
    for f in range(20):
        assert abs(rate_flag[f] - alpha_x) < 4 * se_a, (f, rate_flag[f], alpha_x)
    for f in range(20, 24):
        assert abs((1 - rate_flag[f]) - beta_x) < 4 * se_b, (f, 1 - rate_flag[f], beta_x)
    pooled = flagged[:, :20].mean()
    assert abs(pooled - alpha_x) < 4 * math.sqrt(alpha_x * (1 - alpha_x) / (20 * RUNS))


@pytest.mark.slow
def test_choosing_units_by_outcome_related_information_breaks_it():
    # At a facility leaning toward a flag the inspector picks the units that look well
    # kept: their nonconforming rate is half the facility's. The facility's outcomes are no
    # longer i.i.d. at its rate, and its false-flag rate drops well below alpha'.
    def well_kept_units(rate, position):
        return np.where(position > 0.5, rate / 2, rate)

    rates = [PLAN.p0] * 20
    alpha_x = float(run_exact(PLAN, [PLAN.p0]).p_flag[0])
    flagged, _ = run_program(rates, 2000, seed=1954, unit_rate=well_kept_units)
    pooled = flagged.mean()
    se = math.sqrt(alpha_x * (1 - alpha_x) / flagged.size)
    assert pooled < alpha_x - 4 * se
