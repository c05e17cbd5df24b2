"""Warnings, the cut rule at any size, calibration both ways, chosen rates, mid-p estimate."""
import math

import numpy as np
import pytest
from scipy.optimize import brentq
from scipy.stats import binom

from service.stats import PlanInputError, SprtPlan, design, run_exact
from service.stats.calibrate import calibrate
from service.stats.inference import infer


def codes(d):
    return [w["code"] for w in d["warnings"]]


def test_a_plan_on_target_has_an_empty_warning_list():
    d = design(0.02, 0.08, 0.05, 0.10).to_dict()
    assert d["warnings"] == [] and d["exact"]["complete"] is True
    assert d["fixed_sample"]["saving_p0"] is not None


def test_tiny_cap_warns_and_claims_no_saving():
    # Issue 12: a cap of 5 units gives exact beta' 0.70-ish, far above beta; no saving claimed.
    d = design(0.02, 0.08, 0.05, 0.10, max_units=5).to_dict()
    assert "beta_above_target" in codes(d)
    assert d["exact"]["beta"] > 0.5
    assert d["fixed_sample"]["saving_p0"] is None and d["fixed_sample"]["saving_p1"] is None
    assert all(w["message"] for w in d["warnings"])


def test_alpha_above_target_when_the_exact_risk_exceeds_it():
    d = design(0.02, 0.08, 0.05, 0.10, max_units=20).to_dict()
    assert d["exact"]["alpha"] > 0.05 * (1 + 1e-9)
    assert "alpha_above_target" in codes(d)


def test_incomplete_plan_has_no_exact_claims_and_null_quantiles():
    # stopped far before the residual target: probability is still open at p0 and p1
    d = design(0.005, 0.01, 0.05, 0.10, max_steps=400).to_dict()
    assert codes(d)[0] == "incomplete"
    assert d["exact"]["complete"] is False and d["exact"]["residual_p0_p1"] > 1e-9
    assert d["exact"]["units_p0"]["q99"] is None          # never reached: null, not -1
    assert d["fixed_sample"]["saving_p0"] is None
    # curve points still open are marked on the curve
    assert any(not c["complete"] for c in d["curve"])


def test_curve_points_open_at_the_limit_are_marked_not_warned():
    d = design(0.02, 0.08, 0.05, 0.10).to_dict()
    assert all(c["complete"] for c in d["curve"])


@pytest.mark.slow
def test_long_plan_completes_to_the_residual():
    # Issue 12: p0 0.001, p1 0.0015, alpha = beta = 0.01 (ASN about 48,000) must reach a
    # residual below 1e-12 at p0 and p1 within the unit limit. Wald (1947) eq. 5.2 gives the
    # order of E[N | p0] (about 45,000 without overshoot).
    from service.stats.exact import PathCounts
    plan = SprtPlan.wald(0.001, 0.0015, 0.01, 0.01)
    counts = PathCounts(plan)
    res = counts.summary([plan.p0, plan.p1])
    assert res.residual.max() < 1e-12
    np.testing.assert_allclose(res.p_flag + res.p_clear, 1.0, atol=1e-11)
    assert 40_000 < res.asn[0] < 60_000


def _figures_by_decide(plan, p):
    """Forward recursion over (n, d) that asks SprtPlan.decide() at every point (no lattice
    arithmetic of the engine): P(flag), P(clear), E[N] at rate p for a capped plan."""
    open_ = {0: 1.0}
    flag = clear = units = 0.0
    for n in range(1, plan.max_units + 1):
        nxt = {}
        for d, pr in open_.items():
            nxt[d] = nxt.get(d, 0.0) + pr * (1 - p)
            nxt[d + 1] = nxt.get(d + 1, 0.0) + pr * p
        open_ = {}
        for d, pr in nxt.items():
            state = plan.decide(n, d)
            if state == "flagged":
                flag += pr
                units += n * pr
            elif state == "cleared":
                clear += pr
                units += n * pr
            else:
                open_[d] = pr
    assert not open_
    return flag, clear, units


@pytest.mark.parametrize("cut", [1e20, -1e20, 1e19, 9.3e18, -3.0, 3.0, 1e300])
def test_any_finite_cut_gives_the_figures_decide_produces(cut):
    # Issue 12: --p0 0.05 --p1 0.2 --alpha 0.05 --beta 0.1 --max-units 50 --cut-llr 1e20 was
    # reported as alpha' 0.0725 while the plan decide() runs has 0.0291.
    plan = SprtPlan.wald(0.05, 0.2, 0.05, 0.1, max_units=50, cut_llr=cut)
    ex = run_exact(plan, [0.05, 0.2])
    for i, p in enumerate((0.05, 0.2)):
        f, c, u = _figures_by_decide(plan, p)
        assert ex.p_flag[i] == pytest.approx(f, abs=1e-12)
        assert ex.p_clear[i] == pytest.approx(c, abs=1e-12)
        assert ex.asn[i] == pytest.approx(u, abs=1e-9)
    if cut == 1e20:
        assert ex.p_flag[0] == pytest.approx(0.0291, abs=1e-4)   # issue 12's figure


@pytest.mark.parametrize("cut", [math.inf, -math.inf, math.nan])
def test_non_finite_cut_is_refused(cut):
    with pytest.raises(PlanInputError) as err:
        design(0.05, 0.2, 0.05, 0.1, max_units=50, cut_llr=cut)
    assert err.value.argument == "cut_llr"


@pytest.mark.parametrize("args, cap, cut", [((0.02, 0.08, 0.05, 0.10), 20, 0.0),
                                            ((0.05, 0.2, 0.05, 0.1), 20, 0.0),
                                            ((0.05, 0.2, 0.05, 0.1), 30, 1.5),
                                            ((0.05, 0.2, 0.05, 0.1), 30, -2.0)])
def test_decision_numbers_at_the_cap_follow_decide(args, cap, cut):
    d = design(*args, max_units=cap, cut_llr=cut).to_dict()
    plan = SprtPlan.wald(*args, max_units=cap, cut_llr=cut)
    rows = {r["n"]: r for r in d["decision_numbers"]}
    assert max(rows) == cap and rows[cap]["at_cap"]
    for n, row in rows.items():
        states = [plan.decide(n, x) for x in range(n + 1)]
        clear = [x for x, s in enumerate(states) if s == "cleared"]
        flag = [x for x, s in enumerate(states) if s == "flagged"]
        assert row["accept"] == (max(clear) if clear else None), n
        assert row["reject"] == (min(flag) if flag else None), n


def test_decision_table_reaches_the_first_clear_of_a_long_plan():
    # p0 0.005, p1 0.01: the first clear needs hundreds of units (-b / g2)
    d = design(0.005, 0.01, 0.05, 0.10).to_dict()
    first = d["exact"]["first_clear_units"]
    plan = SprtPlan.wald(0.005, 0.01, 0.05, 0.10)
    assert first == math.ceil(-plan.lower_llr / plan.g2 - 1e-9)
    assert d["decision_numbers"][-1]["n"] >= first
    assert any(r["n"] == first and r["accept"] == 0 for r in d["decision_numbers"])


def test_chosen_rates_equal_the_engine_at_those_rates():
    d = design(0.02, 0.08, 0.05, 0.10, rates=[0.05, 0.02]).to_dict()
    at = d["at_rates"]
    assert [r["p"] for r in at] == [0.05, 0.02]
    ex = run_exact(SprtPlan.wald(0.02, 0.08, 0.05, 0.10), [0.05])
    assert at[0]["p_flag"] == pytest.approx(ex.p_flag[0], rel=1e-12)
    # the design's recursion runs further (for its curve): E[N] differs by the tail left open
    # at 1e-12 times the units still to come (a few hundred), so 1e-8 absolute
    assert at[0]["asn"] == pytest.approx(ex.asn[0], abs=1e-8)
    assert at[0]["units_q50"] == int(ex.quantile(0.5)[0])
    assert at[1]["p_flag"] == pytest.approx(d["exact"]["alpha"], rel=1e-12)
    with pytest.raises(PlanInputError):
        design(0.02, 0.08, 0.05, 0.10, rates=[1.5])


@pytest.mark.parametrize("args, cap, cut", [((0.05, 0.2, 0.05, 0.1), 50, 1.5),
                                            ((0.02, 0.08, 0.05, 0.1), 150, -3.0),
                                            ((0.04, 0.12, 0.05, 0.1), 150, 3.0)])
def test_calibration_with_a_cut_finds_feasible_boundaries(args, cap, cut):
    # The former search only widened Wald's boundaries and reported none feasible for these.
    plan = SprtPlan.wald(*args, max_units=cap, cut_llr=cut)
    cal = calibrate(plan)
    check = run_exact(cal.plan, [plan.p0, plan.p1])      # independent re-evaluation
    assert check.p_flag[0] <= plan.alpha and check.p_clear[1] <= plan.beta
    assert cal.compared_with_wald in ("shorter", "longer", "same")
    wald = run_exact(plan, [plan.p0, plan.p1])
    longer = max(check.asn) > max(wald.asn)
    assert (cal.compared_with_wald == "longer") == longer
    assert ("outward" in cal.reason) == (wald.p_flag[0] > plan.alpha
                                         or wald.p_clear[1] > plan.beta)


def test_calibration_of_an_untruncated_plan_is_shorter_and_says_why():
    d = design(0.02, 0.08, 0.05, 0.10, calibrate=True).to_dict()
    assert d["calibration"]["compared_with_wald"] == "shorter"
    assert "inward" in d["calibration"]["reason"]
    assert d["exact"]["alpha"] <= 0.05 and d["exact"]["beta"] <= 0.10


def _binomial_mid_p_median(x, m):
    # Hirji, Tsiatis and Mehta (1989): P(X > x) + P(X = x)/2 = 1/2 (scipy.stats.binom)
    f = lambda p: binom.sf(x, m, p) + 0.5 * binom.pmf(x, m, p) - 0.5
    return 0.0 if f(1e-12) >= 0 else brentq(f, 1e-12, 1 - 1e-12, xtol=1e-13)


@pytest.mark.parametrize("units, bad", [(5, 0), (5, 2), (20, 3), (40, 9)])
def test_mid_p_estimate_reduces_to_the_binomial_one(units, bad):
    plan = SprtPlan.wald(0.02, 0.08, 0.05, 0.10, max_units=1)
    res = infer(plan, [units], [bad])
    assert res.estimate_mid_p == pytest.approx(_binomial_mid_p_median(bad, units), abs=1e-8)


def test_median_unbiased_estimate_is_one_sided_and_mid_p_lies_above_it():
    # Issue 12: for the handbook plan (NIST/SEMATECH 6.2.6: p0 0.01, p1 0.10, alpha 0.05,
    # beta 0.10) P(MUE < p0) at p0 is about 0.79, because clearing at the first chance gets
    # estimate 0. Exact: the probability of that first clear, (1 - p0)**n_c.
    plan = SprtPlan.wald(0.01, 0.10, 0.05, 0.10)
    n_c = math.ceil(-plan.lower_llr / plan.g2 - 1e-9)
    first = infer(plan, [1] * n_c, [0] * n_c)
    assert first.estimate_median_unbiased == 0.0
    assert (1 - 0.01) ** n_c > 0.75
    # a later clear: the mid-p estimate lies between the two one-sided medians
    seq = [0] * 10 + [1] + [0] * 40
    for k in range(1, len(seq) + 1):
        if plan.decide(k, sum(seq[:k])) != "monitoring":
            seq = seq[:k]
            break
    later = infer(plan, [1] * len(seq), seq)
    assert later.estimate_median_unbiased < later.estimate_mid_p < 0.10
