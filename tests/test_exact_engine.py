"""The exact engine against brute-force enumeration, simulation and Wald's inequalities."""
import math

import numpy as np
import pytest

from service.stats import SprtPlan, run_exact

from .reference import assert_equals_enumeration, assert_near_simulation, brute_force_figures


@pytest.mark.parametrize("plan_args, cap", [
    ((0.05, 0.30, 0.05, 0.10), 12),
    ((0.10, 0.40, 0.10, 0.10), 13),
    ((0.02, 0.25, 0.05, 0.20), 11),
])
def test_capped_plan_equals_enumeration_of_all_sequences(plan_args, cap):
    # Brute force: every one of the 2**cap sequences, each stopped by a running LLR sum.
    plan = SprtPlan.wald(*plan_args, max_units=cap, cut_llr=0.0)
    rates = [0.0, plan_args[0], 0.15, plan_args[1], 0.6, 1.0]
    # tolerance: sums of at most 2**13 positive terms in float64 (tests/reference.py)
    assert_equals_enumeration(plan, run_exact(plan, rates), rates, cap, cap=cap, cut=0.0)


def test_untruncated_plan_matches_enumeration_up_to_a_horizon():
    # The untruncated engine's per-n flag probabilities equal those of all
    # sequences of 14 units, for every n <= 14.
    plan = SprtPlan.wald(0.05, 0.35, 0.05, 0.10)
    rates = [0.05, 0.2, 0.35]
    _, _, _, flag_by_n = brute_force_figures(plan.p0, plan.p1, plan.upper_llr,
                                             plan.lower_llr, 14, rates)
    ex = run_exact(plan, rates)
    np.testing.assert_allclose(ex.flag_by_n[:, :15], flag_by_n, atol=1e-12)


def test_cut_rule_other_than_zero_equals_enumeration():
    plan = SprtPlan.wald(0.05, 0.30, 0.05, 0.10, max_units=10, cut_llr=1.0)
    rates = [0.05, 0.3]
    flag, clear, asn, _ = brute_force_figures(plan.p0, plan.p1, plan.upper_llr,
                                              plan.lower_llr, 10, rates, cap=10, cut=1.0)
    ex = run_exact(plan, rates)
    np.testing.assert_allclose(ex.p_flag, flag, atol=1e-12)
    np.testing.assert_allclose(ex.asn, asn, atol=1e-10)


@pytest.mark.parametrize("plan_args, cap, seed", [
    ((0.02, 0.08, 0.05, 0.10), None, 11),
    ((0.04, 0.12, 0.05, 0.10), 150, 12),
    ((0.01, 0.10, 0.05, 0.10), None, 13),
    ((0.20, 0.35, 0.02, 0.05), None, 14),
])
def test_exact_within_four_standard_errors_of_simulation(plan_args, cap, seed):
    # Seeded Monte Carlo, 20,000 paths per rate; 4 standard errors keeps a
    # false failure below 1e-4 per comparison (tests/reference.py).
    plan = SprtPlan.wald(*plan_args, max_units=cap)
    rates = [plan.p0, 0.5 * (plan.p0 + plan.p1), plan.p1]
    assert_near_simulation(plan, rates, run_exact(plan, rates), seed)


def test_issue_reference_plan_figures():
    # p0 0.01, p1 0.10, alpha 0.05, beta 0.10 (the handbook plan): exact alpha'
    # 0.02205, beta' 0.09958, ASN 30.21 at p0 and 22.37 at p1 (project's
    # acceptance values; confirmed above by enumeration and simulation).
    ex = run_exact(SprtPlan.wald(0.01, 0.10, 0.05, 0.10), [0.01, 0.10])
    assert ex.p_flag[0] == pytest.approx(0.02205, abs=1e-5)
    assert ex.p_clear[1] == pytest.approx(0.09958, abs=1e-5)
    assert ex.asn[0] == pytest.approx(30.21, abs=5e-3)
    assert ex.asn[1] == pytest.approx(22.37, abs=5e-3)
    assert ex.residual.max() < 1e-12


@pytest.mark.parametrize("plan_args", [
    (0.01, 0.10, 0.05, 0.10), (0.02, 0.08, 0.05, 0.10), (0.04, 0.12, 0.01, 0.20),
    (0.3, 0.5, 0.1, 0.1), (0.001, 0.01, 0.05, 0.05),
])
def test_wald_inequalities_hold_for_exact_risks(plan_args):
    # Wald (1947), section 3.2: alpha' <= (1 - beta') / A and beta' <= B (1 - alpha').
    plan = SprtPlan.wald(*plan_args)
    ex = run_exact(plan, [plan.p0, plan.p1])
    alpha_x, beta_x = ex.p_flag[0], ex.p_clear[1]
    A, B = math.exp(plan.upper_llr), math.exp(plan.lower_llr)
    assert alpha_x <= (1 - beta_x) / A + 1e-12
    assert beta_x <= B * (1 - alpha_x) + 1e-12


def test_degenerate_rates_are_deterministic():
    # At p = 0 every unit conforms: the plan clears at the first n with -n g2 <= b.
    plan = SprtPlan.wald(0.02, 0.08, 0.05, 0.10)
    ex = run_exact(plan, [0.0, 1.0])
    n_clear = math.ceil(-plan.lower_llr / plan.g2 - 1e-9)
    assert ex.p_clear[0] == 1.0 and ex.asn[0] == n_clear
    n_flag = math.ceil(plan.upper_llr / plan.g1 - 1e-9)
    assert ex.p_flag[1] == 1.0 and ex.asn[1] == n_flag


def test_quantiles_and_sd_from_distribution():
    plan = SprtPlan.wald(0.02, 0.08, 0.05, 0.10)
    ex = run_exact(plan, [0.02])
    dist = ex.stop_by_n[0]
    n = np.arange(dist.size)
    cdf = np.cumsum(dist)
    for q in (0.5, 0.9, 0.99):
        k = int(ex.quantile(q)[0])
        assert cdf[k] >= q - 1e-12 and cdf[k - 1] < q
    mean = (dist * n).sum()
    assert ex.sd[0] == pytest.approx(math.sqrt((dist * (n - mean) ** 2).sum()), rel=1e-9)


def test_curve_vectorised_equals_one_rate_at_a_time():
    plan = SprtPlan.wald(0.04, 0.12, 0.05, 0.10, max_units=200)
    rates = np.linspace(0, 0.24, 9)
    together = run_exact(plan, rates)
    for i, p in enumerate(rates):
        alone = run_exact(plan, [p])
        assert alone.p_flag[0] == pytest.approx(together.p_flag[i], abs=1e-13)
        assert alone.asn[0] == pytest.approx(together.asn[i], abs=1e-10)


def test_long_untruncated_plan_still_reaches_the_residual():
    # close rates (ASN in the thousands): the recursion must run long enough that less than
    # 1e-12 stays open at p0, p1 and near s, the slowest rate (the engine's contract)
    plan = SprtPlan.wald(0.005, 0.01, 0.05, 0.10)
    ex = run_exact(plan, [plan.p0, plan.s, plan.p1])
    assert ex.residual.max() < 1e-12
    np.testing.assert_allclose(ex.p_flag + ex.p_clear, 1.0, atol=1e-11)
    assert ex.asn[1] > ex.asn[0] > 100


@pytest.mark.parametrize("plan_args, cap", [
    ((0.01, 0.10, 0.05, 0.10), None), ((0.02, 0.08, 0.05, 0.10), 300),
    ((0.005, 0.01, 0.05, 0.10), None), ((0.05, 0.2, 0.05, 0.1), 50), ((0.1, 0.3, 0.01, 0.02), None),
])
def test_column_sweeps_equal_the_unit_by_unit_recursion(plan_args, cap, monkeypatch):
    # Plans looked at after every unit with small s advance by cumulative sums along each
    # count d; the unit-by-unit recursion (two vector operations a unit) is a different
    # computation of the same counts. Both are checked against enumeration above; here against
    # each other on longer plans (tolerance: sums of up to 1e5 positive terms, relative 1e-10).
    from service.stats.exact import PathCounts
    plan = SprtPlan.wald(*plan_args, max_units=cap)
    rates = [0.0, plan.p0, plan.s, plan.p1, min(1.0, 2 * plan.p1)]
    sweep = PathCounts(plan)
    assert sweep._columns_usable()
    a = sweep.evaluate(rates)
    monkeypatch.setattr(PathCounts, "_columns_usable", lambda self: False)
    b = run_exact(plan, rates)
    np.testing.assert_allclose(a.p_flag, b.p_flag, rtol=1e-10, atol=1e-13)
    np.testing.assert_allclose(a.asn, b.asn, rtol=1e-10)
    width = min(a.flag_by_n.shape[1], b.flag_by_n.shape[1])
    np.testing.assert_allclose(a.flag_by_n[:, :width], b.flag_by_n[:, :width], atol=1e-13)
