"""Invariants of the exact engine over random plans (hypothesis)."""
import numpy as np
from hypothesis import given, settings, strategies as st

from service.stats import SprtPlan, run_exact
from service.stats.calibrate import calibrate


@st.composite
def plans(draw, max_cap=400):
    p0 = draw(st.floats(0.005, 0.3))
    ratio = draw(st.floats(1.6, 6.0))
    p1 = min(p0 * ratio, 0.95)
    alpha = draw(st.floats(0.01, 0.2))
    beta = draw(st.floats(0.01, 0.3))
    cap = draw(st.one_of(st.none(), st.integers(1, max_cap)))
    cut = draw(st.floats(-2.0, 2.0))
    return SprtPlan.wald(p0, p1, alpha, beta, max_units=cap, cut_llr=cut)


@settings(max_examples=40, deadline=None)
@given(plans())
def test_mass_is_conserved_and_oc_rises_with_rate(plan):
    rates = np.linspace(0.0, 1.0, 26)
    ex = run_exact(plan, rates)
    total = ex.p_flag + ex.p_clear + ex.residual
    np.testing.assert_allclose(total, 1.0, atol=1e-9)
    assert np.all(np.diff(ex.p_flag) >= -1e-10)
    if plan.max_units is not None:
        assert ex.residual.max() == 0.0
        assert ex.stop_by_n.shape[1] <= plan.max_units + 1


@settings(max_examples=6, deadline=None)
@given(plans(max_cap=300).filter(lambda p: p.p1 / p.p0 > 2.5))
def test_calibrated_plans_meet_alpha_and_beta(plan):
    try:
        cal = calibrate(plan)
    except ValueError:
        assert plan.max_units is not None  # only a cap can make the risks unreachable
        return
    ex = run_exact(cal.plan, [plan.p0, plan.p1])
    assert ex.p_flag[0] <= plan.alpha
    assert ex.p_clear[1] <= plan.beta
