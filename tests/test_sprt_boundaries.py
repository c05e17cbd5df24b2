"""The SPRT lines against handbook and textbook worked examples."""
import math

import numpy as np
import pytest

from service.stats import CLEARED, FLAGGED, MONITORING, SprtPlan


def test_nist_handbook_lines():
    # NIST/SEMATECH e-Handbook of Statistical Methods, section 6.2.6: p1 = 0.01,
    # p2 = 0.10, alpha = 0.05, beta = 0.10 -> h1 = 0.939, h2 = 1.205, s = 0.0397
    # (inputs from memory; the lines themselves are closed-form).
    plan = SprtPlan.wald(0.01, 0.10, 0.05, 0.10)
    assert plan.h1 == pytest.approx(0.939, abs=5e-4)
    assert plan.h2 == pytest.approx(1.205, abs=5e-4)
    assert plan.s == pytest.approx(0.0397, abs=5e-5)


def test_nist_handbook_numbers_at_24_units():
    # Same handbook example: at n = 24 the acceptance number is 0, the rejection number 3.
    plan = SprtPlan.wald(0.01, 0.10, 0.05, 0.10)
    assert int(plan.acceptance_numbers(24)) == 0
    assert int(plan.rejection_numbers(24)) == 3
    # and no acceptance is possible before n = 24 (-0.939 + 0.0397 n < 0 for n <= 23)
    assert int(plan.acceptance_numbers(23)) == -1


def test_textbook_lines_two_vs_five_percent():
    # "Statistik", 15th ed., Oldenbourg, chapter on quality control: p 0.02 vs 0.05,
    # alpha = beta = 0.10 gives the lines 0.033 n -/+ 2.32.
    plan = SprtPlan.wald(0.02, 0.05, 0.10, 0.10)
    assert plan.s == pytest.approx(0.033, abs=5e-4)
    assert plan.h1 == pytest.approx(2.32, abs=5e-3)
    assert plan.h2 == pytest.approx(2.32, abs=5e-3)


def test_wald_boundaries_closed_form():
    # Wald (1947), eq. 3.2: a = ln((1-beta)/alpha), b = ln(beta/(1-alpha)).
    plan = SprtPlan.wald(0.03, 0.09, 0.05, 0.20)
    assert plan.upper_llr == pytest.approx(math.log(0.8 / 0.05), rel=1e-15)
    assert plan.lower_llr == pytest.approx(math.log(0.2 / 0.95), rel=1e-15)


def test_llr_from_counts_matches_sum_of_unit_terms():
    # LLR = sum of ln(f1/f0) per unit (definition of the SPRT statistic).
    plan = SprtPlan.wald(0.02, 0.08, 0.05, 0.10)
    rng = np.random.default_rng(7)
    units = rng.random(500) < 0.05
    total = 0.0
    for n, x in enumerate(units, start=1):
        total += math.log(0.08 / 0.02) if x else math.log(0.92 / 0.98)
        assert plan.llr(n, int(units[:n].sum())) == pytest.approx(total, abs=1e-9)


def test_decision_numbers_agree_with_decide():
    plan = SprtPlan.wald(0.04, 0.12, 0.05, 0.10)
    n = np.arange(1, 400)
    acc, rej = plan.acceptance_numbers(n), plan.rejection_numbers(n)
    for k, a, r in zip(n.tolist(), acc.tolist(), rej.tolist()):
        for d in range(0, k + 1):
            state = plan.decide(k, d)
            if d <= a:
                assert state == CLEARED
            elif d >= r:
                assert state == FLAGGED
            else:
                assert state == MONITORING


def test_point_on_the_line_counts_as_crossing():
    # A lattice point exactly on a boundary crosses it (closed inequalities).
    plan = SprtPlan.wald(0.1, 0.3, 0.05, 0.10)
    n, d = 10, 4
    exact_on = plan.with_boundaries(plan.llr(n, d), plan.lower_llr)
    assert exact_on.decide(n, d) == FLAGGED
    on_lower = plan.with_boundaries(plan.upper_llr, plan.llr(n, 0))
    assert on_lower.decide(n, 0) == CLEARED


def test_cap_uses_cut_rule():
    plan = SprtPlan.wald(0.02, 0.08, 0.05, 0.10, max_units=40, cut_llr=0.0)
    # at 40 units, LLR(40, 1) = 1.6067 - 40*0.0632 < 0 -> cleared; d = 2 -> positive LLR
    assert plan.decide(39, 1) == MONITORING
    assert plan.decide(40, 1) == CLEARED
    assert plan.llr(40, 2) > 0
    assert plan.decide(40, 2) == FLAGGED


@pytest.mark.parametrize("args, argument", [
    ((0.1, 0.05, 0.05, 0.1), "p1"),
    ((0.0, 0.05, 0.05, 0.1), "p0"),
    ((0.01, 1.0, 0.05, 0.1), "p1"),
    ((0.01, 0.05, 0.6, 0.5), "beta"),
    ((0.01, 0.05, -0.1, 0.1), "alpha"),
    ((0.01, 0.05, 0.05, float("nan")), "beta"),
])
def test_bad_plans_name_the_argument(args, argument):
    from service.stats import PlanInputError
    with pytest.raises(PlanInputError) as info:
        SprtPlan.wald(*args)
    assert info.value.argument == argument


def test_bad_cap_named():
    from service.stats import PlanInputError
    with pytest.raises(PlanInputError) as info:
        SprtPlan.wald(0.01, 0.05, 0.05, 0.1, max_units=0)
    assert info.value.argument == "max_units"
