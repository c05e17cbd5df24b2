"""The register forecast (service.program.forecast): totals, per-cycle rows and weeks.

Outside checks: enumeration of every continuation on a small capped plan, and a
seeded path-by-path simulation (numpy.random.default_rng) for the weeks.
"""
import math

import numpy as np
import pytest

from service.program import OpenCycle, forecast, forecast_columns
from service.stats import SprtPlan

from .test_register_stats import _enumerate_from, _simulate_from


def _cycles():
    small = SprtPlan.wald(0.10, 0.30, 0.10, 0.10, max_units=12)
    states = [(0, 0), (3, 1), (3, 1), (5, 1), (2, 0)]
    return small, [OpenCycle(f"F{i}", 1, "small", small, n, d) for i, (n, d) in enumerate(states)]


def test_totals_are_sums_of_enumerated_per_cycle_figures():
    plan, cycles = _cycles()
    out = forecast(cycles)
    want_ff = want_missed = want_a0 = want_a1 = 0.0
    for c, row in zip(cycles, out["cycles"]):
        flag, clear, further, cdf = _enumerate_from(plan, c.n, c.d, 12, [plan.p0, plan.p1])
        # tolerance: sums of at most 2**12 positive terms in float64
        assert row["p_flag_p0"] == pytest.approx(flag[0], abs=1e-12)
        assert row["p_clear_p1"] == pytest.approx(clear[1], abs=1e-12)
        assert row["further_p0"] == pytest.approx(further[0], abs=1e-10)
        assert row["further_p1_q90"] == int(np.argmax(cdf[1] >= 0.9 - 1e-12))
        want_ff += flag[0]
        want_missed += clear[1]
        want_a0 += further[0]
        want_a1 += further[1]
    t = out["totals"]
    assert t["open_cycles"] == 5
    assert t["expected_false_flags"] == pytest.approx(want_ff, abs=1e-11)
    assert t["expected_missed"] == pytest.approx(want_missed, abs=1e-11)
    assert t["expected_audits_p0"] == pytest.approx(want_a0, abs=1e-9)
    assert t["expected_audits_p1"] == pytest.approx(want_a1, abs=1e-9)


def test_two_plans_are_grouped_without_mixing_their_figures():
    a = SprtPlan.wald(0.02, 0.06, 0.05, 0.05)
    b = SprtPlan.wald(0.05, 0.15, 0.05, 0.10)
    cycles = [OpenCycle("A", 1, "a", a, 10, 1), OpenCycle("B", 1, "b", b, 10, 1)]
    both = forecast(cycles)["cycles"]
    alone = [forecast([c])["cycles"][0] for c in cycles]
    assert both == alone
    assert both[0]["p_flag_p0"] != both[1]["p_flag_p0"]


@pytest.mark.slow
def test_weeks_agree_with_a_path_by_path_simulation():
    # The forecast draws further audits from the exact laws; here every cycle's walk is
    # simulated unit by unit instead, with the same queue (fewest expected audits first).
    plan = SprtPlan.wald(0.02, 0.06, 0.05, 0.05)
    states = [(0, 0)] * 6 + [(50, 2)] * 5 + [(120, 4)] * 4 + [(30, 0)] * 5
    cycles = [OpenCycle(f"F{i}", 1, "x", plan, n, d) for i, (n, d) in enumerate(states)]
    budget, runs = 60, 2000
    out = forecast(cycles, budget=budget, runs=runs, seed=3)
    rng = np.random.default_rng(4)
    for r, p in ((0, plan.p0), (1, plan.p1)):
        expected = np.array([row[f"further_p{r}"] for row in out["cycles"]])
        order = np.argsort(expected, kind="stable")
        draws = np.stack([_simulate_from(plan, n, d, p, runs, rng)[1] for n, d in states], axis=1)
        total = np.cumsum(draws[:, order], axis=1)
        for share, key in ((0.5, "weeks_50"), (0.9, "weeks_90")):
            k = math.ceil(share * len(states))
            weeks = np.ceil(total[:, k - 1] / budget)
            got = out["weeks"][f"p{r}"]
            se = math.hypot(got[f"{key}_se"], weeks.std(ddof=1) / math.sqrt(runs))
            assert abs(got[key] - weeks.mean()) < 4 * se
            assert got[f"{key}_se"] > 0


def test_weeks_are_reproducible_from_the_seed():
    _, cycles = _cycles()
    a = forecast(cycles, budget=5, runs=200, seed=9)["weeks"]
    b = forecast(cycles, budget=5, runs=200, seed=9)["weeks"]
    assert a == b and a["runs"] == 200


def _weeks_as_first_written(laws, size, expected, budget, runs, seed, shares=(0.5, 0.9)):
    """The weeks as first written (draws run by run over every cycle, then the running sum
    over all cycles), kept to show that the faster arrangement gives the same figures."""
    rng = np.random.default_rng(seed)
    out = {}
    for r in (0, 1):
        draws = np.empty((runs, size), dtype=np.int64)
        for idx_a, fig in laws:
            m = idx_a.size
            states = np.tile(np.arange(m), runs)
            draws[:, idx_a] = fig.draw_many(r, states, rng.random(runs * m)).reshape(runs, m)
        order = np.argsort(expected[r], kind="stable")
        total = np.cumsum(draws[:, order], axis=1)
        row = {}
        for s in shares:
            k = max(1, math.ceil(s * size))
            weeks = np.ceil(total[:, k - 1] / budget)
            row[f"weeks_{round(s * 100)}"] = float(weeks.mean())
            row[f"weeks_{round(s * 100)}_se"] = float(weeks.std(ddof=1) / math.sqrt(runs))
        out[f"p{r}"] = row
    return out


@pytest.mark.parametrize("shares", [(0.5, 0.9), (0.9, 0.1, 0.5, 0.5)])
def test_weeks_equal_the_first_arrangement_exactly(shares):
    # two plans, seeded states (many cycles sharing a state), figures equal to the last bit
    from service.stats.register import conditioned
    from service.program import weeks_to_decide
    rng = np.random.default_rng(15)
    plans = [SprtPlan.wald(0.02, 0.06, 0.05, 0.05), SprtPlan.wald(0.05, 0.15, 0.05, 0.10)]
    which = rng.integers(0, 2, 400)
    laws, expected = [], [np.zeros(400), np.zeros(400)]
    for g, plan in enumerate(plans):
        idx = np.flatnonzero(which == g)
        n = rng.integers(0, 40, idx.size)
        lo = np.maximum(plan.acceptance_numbers(n) + 1, 0)     # open: lo <= d < hi
        hi = np.minimum(plan.rejection_numbers(n), n + 1)
        d = lo + (rng.random(idx.size) * (hi - lo)).astype(np.int64)
        fig = conditioned(plan, n, d, [plan.p0, plan.p1], keep_distribution=True)
        expected[0][idx], expected[1][idx] = fig.further
        laws.append((idx, fig))
    got = weeks_to_decide(laws, 400, expected, 30, runs=50, seed=4, shares=shares)
    want = _weeks_as_first_written(laws, 400, expected, 30, 50, 4, shares)
    assert {r: got[r] for r in ("p0", "p1")} == want


def test_weeks_do_not_depend_on_the_order_plans_are_given_in():
    a = SprtPlan.wald(0.02, 0.06, 0.05, 0.05)
    b = SprtPlan.wald(0.05, 0.15, 0.05, 0.10)
    keys = ["b", "a", "a", "b", "a"]
    n, d = [10, 40, 3, 0, 25], [1, 0, 0, 0, 1]
    run = lambda plans: forecast_columns(  # noqa: E731
        list("VWXYZ"), [1] * 5, keys, plans, n, d, budget=4, runs=60, seed=2)["weeks"]
    assert run({"a": a, "b": b}) == run({"b": b, "a": a})
