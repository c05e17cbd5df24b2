"""Calibrated boundaries meet alpha and beta exactly and shorten the plan."""
import pytest

from service.stats import SprtPlan, design, run_exact
from service.stats.calibrate import calibrate


@pytest.mark.parametrize("plan_args, cap", [
    ((0.01, 0.10, 0.05, 0.10), None),
    ((0.02, 0.08, 0.05, 0.10), None),
    ((0.04, 0.12, 0.05, 0.10), 150),
])
def test_calibrated_plan_meets_risks_and_is_shorter(plan_args, cap):
    wald = SprtPlan.wald(*plan_args, max_units=cap)
    cal = calibrate(wald)
    check = run_exact(cal.plan, [wald.p0, wald.p1])  # independent re-evaluation
    assert check.p_flag[0] <= wald.alpha
    assert check.p_clear[1] <= wald.beta
    base = run_exact(wald, [wald.p0, wald.p1])
    assert max(check.asn) <= max(base.asn) + 1e-9
    # the search is not idle: at least one boundary moved inward
    assert cal.plan.upper_llr < wald.upper_llr or cal.plan.lower_llr > wald.lower_llr


def test_cap_too_small_is_reported():
    with pytest.raises(ValueError, match="max_units"):
        calibrate(SprtPlan.wald(0.02, 0.08, 0.05, 0.10, max_units=5))


def test_design_reports_calibrated_boundaries():
    res = design(0.01, 0.10, 0.05, 0.10, calibrate=True).to_dict()
    assert res["plan"]["calibrated"] is True
    assert res["exact"]["alpha"] <= 0.05 and res["exact"]["beta"] <= 0.10
    assert res["boundaries"]["upper_llr"] < res["boundaries"]["wald_upper_llr"]
