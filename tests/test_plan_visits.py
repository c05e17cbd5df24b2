"""Plans looked at once per visit of K units: brute force, simulation, the issue's example."""
import numpy as np
import pytest

from service.stats import SprtPlan, design, run_exact
from service.stats.inference import LookCounts

from .reference import assert_equals_enumeration, assert_near_simulation, brute_force_figures


@pytest.mark.parametrize("plan_args, cap, visit, cut", [
    ((0.05, 0.30, 0.05, 0.10), 12, 3, 0.0),
    ((0.10, 0.40, 0.10, 0.10), 13, 4, 0.0),     # the cap (13) is not a multiple of K
    ((0.02, 0.25, 0.05, 0.20), 12, 2, 1.0),
    ((0.05, 0.30, 0.05, 0.10), 11, 5, -0.5),
])
def test_grouped_looks_equal_enumeration_of_all_sequences(plan_args, cap, visit, cut):
    # Brute force: each of the 2**cap unit sequences, its LLR summed unit by unit and looked
    # at after every K units and at the cap (tests/reference.py, independent of the engine).
    plan = SprtPlan.wald(*plan_args, max_units=cap, cut_llr=cut, visit_units=visit)
    rates = [0.0, plan_args[0], 0.15, plan_args[1], 0.6, 1.0]
    ex = run_exact(plan, rates)
    # tolerance: sums of at most 2**13 positive terms in float64 (tests/reference.py)
    assert_equals_enumeration(plan, ex, rates, cap, cap=cap, cut=cut, visit=visit)
    # decisions happen at looks only
    looks = [n for n in range(cap + 1) if n % visit == 0 or n == cap]
    off = np.setdiff1d(np.arange(ex.stop_by_n.shape[1]), looks)
    assert np.all(ex.stop_by_n[:, off] == 0.0)


def test_untruncated_grouped_plan_equals_enumeration_up_to_a_horizon():
    # per-look flag probabilities of all sequences of 15 units, looks every 3 units
    plan = SprtPlan.wald(0.05, 0.35, 0.05, 0.10, visit_units=3)
    rates = [0.05, 0.2, 0.35]
    _, _, _, flag_by_n = brute_force_figures(plan.p0, plan.p1, plan.upper_llr,
                                             plan.lower_llr, 15, rates, visit=3)
    ex = run_exact(plan, rates)
    np.testing.assert_allclose(ex.flag_by_n[:, :16], flag_by_n, atol=1e-12)


@pytest.mark.parametrize("plan_args, cap, visit, seed", [
    ((0.02, 0.08, 0.05, 0.10), None, 25, 21),
    ((0.04, 0.12, 0.05, 0.10), 150, 20, 22),
    ((0.01, 0.10, 0.05, 0.10), None, 7, 23),
])
def test_grouped_looks_within_four_standard_errors_of_simulation(plan_args, cap, visit, seed):
    # Seeded Monte Carlo (numpy.random.default_rng), 20,000 paths per rate, boundaries checked
    # every K units; 4 standard errors keep a false failure below 1e-4 per comparison
    # (tests/reference.py).
    plan = SprtPlan.wald(*plan_args, max_units=cap, visit_units=visit)
    rates = [plan.p0, 0.5 * (plan.p0 + plan.p1), plan.p1]
    assert_near_simulation(plan, rates, run_exact(plan, rates), seed)


def test_grouped_engine_equals_the_look_by_look_convolution():
    # A second, independent computation in the project: inference.LookCounts convolves each
    # look with the binomial coefficients C(K, j) (no unit-by-unit lattice).
    plan = SprtPlan.wald(0.02, 0.08, 0.05, 0.10, max_units=300, visit_units=25)
    counts = LookCounts(plan, [25] * 12)
    rates = np.array([0.02, 0.05, 0.08])
    ex = run_exact(plan, rates)
    flags = [s for s in counts.points if s.flag]
    clears = [s for s in counts.points if not s.flag]
    np.testing.assert_allclose(counts.mass(flags, rates), ex.p_flag, atol=1e-12)
    np.testing.assert_allclose(counts.mass(clears, rates), ex.p_clear, atol=1e-12)


def test_one_unit_visits_are_the_unit_plan():
    # K = 1 is the plan looked at after every unit: identical figures (same engine path), and
    # the handbook figures of test_exact_engine still hold.
    a = design(0.01, 0.10, 0.05, 0.10).to_dict()
    b = design(0.01, 0.10, 0.05, 0.10, visit_units=1).to_dict()
    assert a["exact"] == b["exact"]
    # NIST/SEMATECH e-Handbook 6.2.6 plan, exact figures (project's acceptance values, checked
    # by enumeration and simulation in test_exact_engine)
    assert a["exact"]["alpha"] == pytest.approx(0.02205, abs=1e-5)
    assert a["exact"]["asn_p0"] == pytest.approx(30.21, abs=5e-3)


def test_issue_example_dispensers_with_25_unit_records():
    # Issue 12 (outside statistical review): the dispensers plan of config/seqaudit.toml
    # (p0 0.02, p1 0.08, alpha 0.05, beta 0.10, no cap) with 25-unit records has true
    # alpha' about 0.012, beta' about 0.040 and about 93 units expected at p0 (two figures).
    d = design(0.02, 0.08, 0.05, 0.10, visit_units=25).to_dict()
    assert d["exact"]["alpha"] == pytest.approx(0.012, abs=5e-4)
    assert d["exact"]["beta"] == pytest.approx(0.040, abs=5e-4)
    assert d["exact"]["asn_p0"] == pytest.approx(93, abs=0.5)
    assert d["plan"]["visit_units"] == 25
    # quantiles and the earliest decisions are multiples of the visit
    for q in d["exact"]["units_p0"].values():
        assert q % 25 == 0
    assert d["exact"]["first_flag_units"] == 25 and d["exact"]["first_clear_units"] == 50
    assert all(r["n"] % 25 == 0 for r in d["decision_numbers"])


def test_earliest_decisions_by_enumeration():
    # The fewest units after which a flag (clear) is possible: the first n at which some
    # sequence stops flagged (cleared) in the brute-force enumeration.
    from .reference import enumerate_outcomes
    for visit, cap in ((1, 12), (3, 12), (5, 12)):
        res = design(0.05, 0.30, 0.05, 0.10, max_units=cap, visit_units=visit).to_dict()
        outcomes = enumerate_outcomes(0.05, 0.30, res["boundaries"]["upper_llr"],
                                      res["boundaries"]["lower_llr"], cap, cap=cap, visit=visit)
        flag_n = min(n for _, (n, f, _) in outcomes if n and f)
        clear_n = min(n for _, (n, f, _) in outcomes if n and not f)
        assert res["exact"]["first_flag_units"] == flag_n
        assert res["exact"]["first_clear_units"] == clear_n
