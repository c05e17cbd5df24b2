"""Exact inference after the stop, against outside references."""
import itertools

import numpy as np
import pytest
from scipy.stats import binom
from statsmodels.stats.proportion import proportion_confint

from service.stats import SprtPlan, run_exact
from service.stats.inference import LookCounts, infer

PLAN = SprtPlan.wald(0.02, 0.08, 0.05, 0.10)


def path_to_decision(plan, seq):
    for k in range(1, len(seq) + 1):
        if plan.decide(k, sum(seq[:k])) != "monitoring":
            return seq[:k]
    raise AssertionError("no decision")


@pytest.mark.parametrize("seq", [
    [1, 1, 1],
    [0] * 10 + [1] + [0] * 5 + [1] + [0] * 3 + [1, 1],
    [0] * 30 + [1] + [0] * 2 + [1, 0, 1] + [0] * 20 + [1, 1, 1],
])
def test_flag_p_value_is_the_sum_of_exact_per_n_flag_probabilities(seq):
    seq = path_to_decision(PLAN, seq)
    n = len(seq)
    res = infer(PLAN, [1] * n, seq)
    assert res.decision == "flagged"
    # independent: the untruncated engine's P(flag at exactly k | p0), summed for k <= n
    per_n = run_exact(PLAN, [PLAN.p0]).flag_by_n[0]
    assert res.p_value == pytest.approx(per_n[:n + 1].sum(), rel=1e-10)


def test_clear_p_value_is_one_minus_earlier_clears():
    seq = path_to_decision(PLAN, [0] * 20 + [1] + [0] * 80)
    res = infer(PLAN, [1] * len(seq), seq)
    assert res.decision == "cleared"
    per_n = run_exact(PLAN, [PLAN.p0]).clear_by_n[0]
    # stagewise: every flag and every later clear is more extreme upward
    assert res.p_value == pytest.approx(1 - per_n[:len(seq)].sum(), rel=1e-10)


@pytest.mark.parametrize("units, bad", [(1, 0), (1, 1), (5, 0), (5, 2), (20, 3), (40, 9)])
def test_cap_of_one_unit_reduces_to_the_binomial(units, bad):
    # With a cap of 1 unit the first record decides: the outcome is a fixed-sample binomial
    # count, so the p-value is the binomial tail (scipy.stats.binom) and the interval is
    # Clopper-Pearson (statsmodels proportion_confint, method="beta").
    plan = SprtPlan.wald(0.02, 0.08, 0.05, 0.10, max_units=1)
    res = infer(plan, [units], [bad], level=0.95)
    assert res.at_cap or plan.decide(units, bad) != "monitoring"
    assert res.p_value == pytest.approx(binom.sf(bad - 1, units, 0.02), rel=1e-9, abs=1e-15)
    low, high = proportion_confint(bad, units, alpha=0.05, method="beta")
    assert res.ci_low == pytest.approx(low, abs=1e-8)
    assert res.ci_high == pytest.approx(high, abs=1e-8)


def test_group_looks_against_enumeration_of_unit_sequences():
    # Records of several units: enumerate every 0/1 sequence of the 9 units in looks of
    # 2, 3, 1, 3 and decide after each record with a running LLR sum.
    plan = SprtPlan.wald(0.1, 0.4, 0.1, 0.2)
    sizes = [2, 3, 1, 3]
    counts = LookCounts(plan, sizes)
    for p in (0.1, 0.25, 0.4):
        flag_at = np.zeros(len(sizes) + 1)
        for seq in itertools.product((0, 1), repeat=sum(sizes)):
            prob = p ** sum(seq) * (1 - p) ** (len(seq) - sum(seq))
            n = d = 0
            for look, m in enumerate(sizes, start=1):
                n, d = n + m, d + sum(seq[n:n + m])
                if plan.llr(n, d) >= plan.upper_llr - 1e-9:
                    flag_at[look] += prob
                    break
                if plan.llr(n, d) <= plan.lower_llr + 1e-9:
                    break
        engine = np.zeros(len(sizes) + 1)
        for s in counts.points:
            if s.flag:
                engine[s.look] += counts.mass([s], p)[0]
        np.testing.assert_allclose(engine, flag_at, atol=1e-12)


def test_intervals_nest_and_hold_the_estimate():
    seq = path_to_decision(PLAN, [0] * 10 + [1] + [0] * 5 + [1] + [0] * 3 + [1, 1])
    res = {lv: infer(PLAN, [1] * len(seq), seq, level=lv) for lv in (0.90, 0.95, 0.99)}
    assert res[0.99].ci_low < res[0.95].ci_low < res[0.90].ci_low
    assert res[0.90].ci_high < res[0.95].ci_high < res[0.99].ci_high
    for r in res.values():
        assert r.ci_low < r.estimate_median_unbiased < r.ci_high
    assert res[0.95].estimate_naive == pytest.approx(3 / len(seq))


def test_not_a_decision_is_refused():
    with pytest.raises(ValueError, match="do not end in a decision"):
        infer(PLAN, [1, 1], [1, 0])
    with pytest.raises(ValueError, match="already decided"):
        infer(PLAN, [1, 1, 1, 1], [1, 1, 1, 0])


def simulate_outcomes(plan, p, cycles, rng):
    out = []
    for _ in range(cycles):
        seq = []
        while True:
            seq.append(int(rng.random() < p))
            if plan.decide(len(seq), sum(seq)) != "monitoring":
                break
        out.append(seq)
    return out


@pytest.mark.parametrize("true_rate, seed", [(0.02, 101), (0.05, 102), (0.08, 103)])
def test_interval_coverage_and_median_unbiasedness_by_simulation(true_rate, seed):
    # 2,000 simulated cycles (seeded); coverage must reach the nominal 95 % less three
    # standard errors (3 * sqrt(0.95 * 0.05 / 2000) = 0.0146).
    rng = np.random.default_rng(seed)
    counts = LookCounts(PLAN, [1] * 3000)
    cache, cover, above, below = {}, 0, 0, 0
    cycles = 2000
    for seq in simulate_outcomes(PLAN, true_rate, cycles, rng):
        key = (len(seq), sum(seq))
        if key not in cache:
            cache[key] = infer(PLAN, [1] * len(seq), seq, 0.95, counts=counts)
        r = cache[key]
        cover += r.ci_low <= true_rate <= r.ci_high
        above += r.estimate_median_unbiased > true_rate
        below += r.estimate_median_unbiased < true_rate
    assert cover / cycles >= 0.95 - 3 * np.sqrt(0.95 * 0.05 / cycles)
    # median-unbiased: above the true rate in about half of the cycles. With few
    # nonconforming units the outcome space is coarse (at 0.02 almost half the cycles clear
    # with d = 0, estimate 0), so there only the one-sided bound P(above) <= 1/2 applies.
    se = np.sqrt(0.25 / cycles)
    assert above / cycles <= 0.5 + 3 * se
    if true_rate >= 0.05:
        assert abs(above / cycles - 0.5) <= 0.05
