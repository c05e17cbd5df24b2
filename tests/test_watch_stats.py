"""The watch chart's exact run lengths (Brook & Evans 1972 Markov chain) against a closed form
solved by hand, Feller's runs formula, Page's identity on the project's exact SPRT engine,
brute-force enumeration of all sequences and a seeded simulation."""
import itertools
import math
from dataclasses import dataclass

import numpy as np
import pytest

from service.stats import PlanInputError, SprtPlan
from service.stats.exact import PathCounts
from service.stats.watch import (arl, chart_weight, design_watch, signal_within,
                                 smallest_limit, step)


def _arl_m2_by_hand(t: int, p: float) -> float:
    # Solved by hand (first-step analysis): with m = 2 the chart is a walk +1 w.p. p, -1 w.p.
    # q = 1 - p, held at 0. The time T_i to go from i to i + 1 has E T_0 = 1/p and
    # p E T_i = 1 + q E T_{i-1}, so E T_i = (1/p) sum_{k<=i} rho**k with rho = q/p, and
    # ARL = sum_{i<t} E T_i = (t - rho (1 - rho**t) / (1 - rho)) / (p (1 - rho)).
    rho = (1.0 - p) / p
    return (t - rho * (1.0 - rho ** t) / (1.0 - rho)) / (p * (1.0 - rho))


@pytest.mark.parametrize("t, p", [(1, 0.3), (2, 0.3), (3, 0.3), (5, 0.3), (8, 0.4), (12, 0.45)])
def test_markov_arl_equals_hand_solved_walk(t, p):
    # tolerance: a banded LU solve of at most 12 equations, relative 1e-12
    assert arl(2, t, p) == pytest.approx(_arl_m2_by_hand(t, p), rel=1e-12)


@pytest.mark.parametrize("p", [0.1, 0.25, 0.5])
def test_two_in_a_row_equals_fellers_run_formula(p):
    # m = 2, t = 2 signals on two nonconforming units in a row. W. Feller, "An Introduction to
    # Probability Theory and Its Applications", vol. I, 3rd ed., 1968, XIII.7: the mean waiting
    # time for a run of r successes is (1 - p**r) / (q p**r); r = 2 gives (1 + p) / p**2.
    assert arl(2, 2, p) == pytest.approx((1 - p ** 2) / ((1 - p) * p ** 2), rel=1e-12)


@dataclass(frozen=True)
class _IntegerWalk(SprtPlan):
    """The exact engine's plan on the chart's own walk: LLR(n, d) = m d - n (g1 = m - 1, g2 = 1),
    clearing at LLR <= 0 (the chart is back at zero and starts afresh) and flagging at >= t."""

    m: int = 2

    @property
    def g1(self) -> float:
        return float(self.m - 1)

    @property
    def g2(self) -> float:
        return 1.0


def _page_arl(m: int, t: int, p: float) -> float:
    # E. S. Page, Biometrika 41 (1954) 100-115: the CUSUM is a string of sequential tests
    # started at 0, each ending at <= 0 (restart) or >= t (signal), so ARL = E[N] / P(signal).
    # Both figures from the project's exact path-count engine on that walk.
    plan = _IntegerWalk(p0=0.1, p1=0.2, alpha=0.05, beta=0.05, upper_llr=float(t),
                        lower_llr=0.0, m=m)
    s = PathCounts(plan).summary([p])
    assert s.residual[0] < 1e-12
    return float(s.asn[0] / s.p_flag[0])


@pytest.mark.parametrize("m, t, p", [(2, 5, 0.3), (3, 7, 0.1), (14, 50, 0.04), (14, 50, 0.12),
                                     (23, 62, 0.02), (23, 62, 0.08), (5, 3, 0.2)])
def test_markov_arl_equals_pages_identity_on_the_exact_engine(m, t, p):
    # tolerance: the engine stops with < 1e-12 of the mass open; ARLs up to ~2,200, relative 1e-8
    assert arl(m, t, p) == pytest.approx(_page_arl(m, t, p), rel=1e-8)


def _simulate_run_lengths(m, t, p, runs, seed):
    """Seeded vectorised simulation of the chart from 0: run length of each of ``runs`` charts."""
    rng = np.random.default_rng(seed)
    s = np.zeros(runs, dtype=np.int64)
    length = np.zeros(runs, dtype=np.int64)
    alive = np.arange(runs)
    n = 0
    while alive.size:
        n += 1
        x = rng.random(alive.size) < p
        s[alive] = np.maximum(0, s[alive] + m * x - 1)
        hit = s[alive] >= t
        length[alive[hit]] = n
        alive = alive[~hit]
    return length


@pytest.mark.parametrize("m, t, p, seed", [(23, 62, 0.08, 1), (14, 50, 0.12, 2), (3, 7, 0.1, 3),
                                           (14, 20, 0.04, 4)])
def test_markov_arl_within_four_standard_errors_of_simulation(m, t, p, seed):
    # 20,000 seeded charts; the standard error of the mean run length is sd / sqrt(20,000);
    # 4 standard errors makes a false failure about 1 in 16,000 per case.
    rl = _simulate_run_lengths(m, t, p, 20_000, seed)
    se = rl.std(ddof=1) / math.sqrt(rl.size)
    assert abs(rl.mean() - arl(m, t, p)) < 4 * se


def test_signal_within_equals_enumeration_of_all_sequences():
    # Brute force: all 2**14 sequences of 14 units, each run through the chart by `step`.
    m, t, p, n = 3, 4, 0.2, 14
    total = 0.0
    for seq in itertools.product((0, 1), repeat=n):
        s, hit = 0, False
        for x in seq:
            s = step(s, m, bool(x))
            if s >= t:
                hit = True
                break
        if hit:
            d = sum(seq)
            total += p ** d * (1 - p) ** (n - d)
    # tolerance: a sum of 2**14 positive terms in float64
    assert signal_within(m, t, p, n) == pytest.approx(total, abs=1e-12)


def test_signal_within_short_horizons_by_hand():
    # By hand, m = 3, t = 4, from 0: the first signal is possible at unit 2 (two nonconforming
    # units: 0 -> 2 -> 4), so P(RL <= 1) = 0 and P(RL <= 2) = p**2.
    p = 0.2
    assert signal_within(3, 4, p, 1) == 0.0
    assert signal_within(3, 4, p, 2) == pytest.approx(p ** 2, rel=1e-12)


def test_signal_within_a_year_agrees_with_simulation():
    # 20,000 seeded charts of the dispensers-like design; binomial standard error, 4 SE.
    w = design_watch(0.02, 0.08, 500, 250)
    rl = _simulate_run_lengths(w.m, w.t, 0.02, 20_000, 7)
    frac = float((rl <= 250).mean())
    prob = w.false_alarm_probability
    assert abs(frac - prob) < 4 * math.sqrt(prob * (1 - prob) / rl.size)


def test_chart_weight_by_hand():
    # By hand from Reynolds & Stoumbos (1999): p0 = 0.02, p1 = 0.08 gives
    # r1 = -ln(0.92/0.98) = 0.0631789, r2 = ln(0.08*0.98/(0.02*0.92)) = 1.4494733, r2/r1 = 22.94.
    m, r1, r2 = chart_weight(0.02, 0.08)
    assert m == 23
    assert r1 == pytest.approx(0.0631789, abs=1e-7)
    assert r2 == pytest.approx(1.4494733, abs=1e-7)
    assert chart_weight(0.04, 0.12)[0] == 14     # r2/r1 = 1.18562/0.08701 = 13.63


@pytest.mark.parametrize("p0, p1, arl0", [(0.02, 0.08, 2000), (0.04, 0.12, 500), (0.01, 0.03, 10_000),
                                          (0.2, 0.4, 50)])
def test_limit_is_the_smallest_meeting_the_target(p0, p1, arl0):
    w = design_watch(p0, p1, arl0, 100)
    assert w.arl_p0 >= arl0
    assert w.t == 1 or arl(w.m, w.t - 1, p0) < arl0
    assert w.arl_p1 < w.arl_p0
    assert w.h == w.t / w.m
    assert w.to_dict()["false_alarm_within"] == {"audits": 100,
                                                 "probability": w.false_alarm_probability}


def test_arl_below_one_over_p0_gives_the_lowest_limit():
    # t = 1 signals at the first nonconforming unit: a geometric run length, ARL = 1/p0.
    assert smallest_limit(23, 0.02, 10) == 1
    assert arl(23, 1, 0.02) == pytest.approx(50.0, rel=1e-12)


@pytest.mark.parametrize("args, argument", [
    ((0.5, 0.9, 100, 10), "p1"),           # r2/r1 = ln 9 / ln 5 = 1.37 rounds to m = 1
    ((0.02, 0.08, 0.5, 10), "arl0"),
    ((0.02, 0.08, float("nan"), 10), "arl0"),
    ((0.02, 0.08, 1e300, 10), "arl0"),
    ((0.02, 0.08, 100, 0), "audits"),
    ((0.08, 0.02, 100, 10), "p1"),
])
def test_bad_inputs_name_the_argument(args, argument):
    with pytest.raises(PlanInputError) as err:
        design_watch(*args)
    assert err.value.argument == argument
