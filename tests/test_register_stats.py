"""Exact figures of open cycles conditioned on their (n, d), and the register-level alpha.

Outside checks: enumeration of every 0/1 continuation (LLR as a running sum of
per-unit terms, Wald 1947 ch. 5, not the project's count formula), the exact
engine started at (0, 0), seeded simulation (numpy.random.default_rng), and the
closed forms of Bonferroni and Šidák (1967, JASA 62:626-633).
"""
import itertools
import math

import numpy as np
import pytest

from service.stats import SprtPlan, run_exact
from service.stats.register import QUANTILES, conditioned, register_alpha

from .reference import llr_step


def _open_states(plan, n_max):
    out = []
    for n in range(n_max + 1):
        for d in range(n + 1):
            if plan.decide(n, d) == "monitoring":
                out.append((n, d))
    return out


def _enumerate_from(plan, n0, d0, cap, rates, tol=1e-9):
    """P(flag), P(clear), E[further], P(further <= m) for every m, by all 2**(cap-n0) paths."""
    up, down = llr_step(plan.p0, plan.p1)
    start = d0 * up + (n0 - d0) * down          # running-sum form of the start LLR
    rates = np.asarray(rates, dtype=float)
    horizon = cap - n0
    flag = np.zeros(rates.size)
    clear = np.zeros(rates.size)
    further = np.zeros(rates.size)
    pmf = np.zeros((rates.size, horizon + 1))
    for seq in itertools.product((0, 1), repeat=horizon):
        total = start
        for i, x in enumerate(seq, start=1):
            total += up if x else down
            if total >= plan.upper_llr - tol:
                flagged = True
                break
            if total <= plan.lower_llr + tol:
                flagged = False
                break
            if n0 + i == cap:
                flagged = total >= plan.cut_llr - tol
                break
        k = sum(seq[:i])
        prob = rates ** k * (1 - rates) ** (i - k)    # of the stopped prefix
        # each prefix is reached by 2**(horizon-i) full sequences: count it once
        prob = prob / 2 ** (horizon - i)
        (flag if flagged else clear)[:] += prob
        further += prob * i
        pmf[:, i] += prob
    return flag, clear, further, np.cumsum(pmf, axis=1)


@pytest.mark.slow
@pytest.mark.parametrize("args, cap", [((0.10, 0.30, 0.10, 0.10), 13),
                                       ((0.05, 0.30, 0.05, 0.10), 12)])
def test_every_open_state_equals_enumeration_of_its_continuations(args, cap):
    plan = SprtPlan.wald(*args, max_units=cap, cut_llr=0.0)
    states = _open_states(plan, 7)
    assert len(states) > 8            # the check covers many states, not just (0, 0)
    rates = [plan.p0, 0.2, plan.p1]
    fig = conditioned(plan, [s[0] for s in states], [s[1] for s in states], rates)
    for k, (n0, d0) in enumerate(states):
        flag, clear, further, cdf = _enumerate_from(plan, n0, d0, cap, rates)
        # tolerance: sums of at most 2**13 positive terms in float64
        np.testing.assert_allclose(fig.p_flag[:, k], flag, atol=1e-12)
        np.testing.assert_allclose(fig.p_clear[:, k], clear, atol=1e-12)
        np.testing.assert_allclose(fig.further[:, k], further, atol=1e-10)
        for q in QUANTILES:
            want = np.argmax(cdf >= q - 1e-12, axis=1)
            np.testing.assert_array_equal(fig.quantiles[q][:, k], want)
    np.testing.assert_allclose(fig.residual, 0.0)


@pytest.mark.parametrize("args, cap", [((0.02, 0.06, 0.05, 0.05), None),
                                       ((0.02, 0.06, 0.05, 0.05), 300),
                                       ((0.10, 0.25, 0.05, 0.10), None)])
def test_state_zero_equals_the_exact_engine(args, cap):
    # Started at (0, 0), the conditioned figures are the plan's own exact figures.
    plan = SprtPlan.wald(*args, max_units=cap)
    rates = [plan.p0, plan.p1, 0.5 * (plan.p0 + plan.p1)]
    ex = run_exact(plan, rates)
    fig = conditioned(plan, [0, 0], [0, 0], rates)
    for k in (0, 1):
        np.testing.assert_allclose(fig.p_flag[:, k], ex.p_flag, atol=1e-12)
        np.testing.assert_allclose(fig.p_clear[:, k], ex.p_clear, atol=1e-12)
        # tolerance: E[N] is a sum of ~3000 terms of size up to ~1
        np.testing.assert_allclose(fig.further[:, k], ex.asn, rtol=1e-10)
        for q in QUANTILES:
            np.testing.assert_array_equal(fig.quantiles[q][:, k], ex.quantile(q))


def test_mixed_states_equal_one_state_at_a_time():
    # The front-mixture shortcut against running each state on its own.
    plan = SprtPlan.wald(0.02, 0.06, 0.05, 0.05)
    states = [(0, 0), (10, 1), (37, 2), (80, 4), (80, 3), (150, 5), (10, 1)]
    n, d = zip(*states)
    rates = [plan.p0, plan.p1]
    together = conditioned(plan, n, d, rates)
    for k, (a, b) in enumerate(states):
        alone = conditioned(plan, [a], [b], rates)
        np.testing.assert_allclose(together.p_flag[:, k], alone.p_flag[:, 0], atol=1e-12)
        np.testing.assert_allclose(together.further[:, k], alone.further[:, 0], rtol=1e-10)
        for q in QUANTILES:
            np.testing.assert_array_equal(together.quantiles[q][:, k], alone.quantiles[q][:, 0])


def _simulate_from(plan, n0, d0, p, runs, rng, limit=20000):
    """(flagged?, further units) of ``runs`` seeded paths from (n0, d0) at rate p."""
    n = np.full(runs, n0)
    d = np.full(runs, d0)
    flagged = np.zeros(runs, dtype=bool)
    open_ = np.ones(runs, dtype=bool)
    for _ in range(limit):
        idx = np.flatnonzero(open_)
        if idx.size == 0:
            break
        d[idx] += rng.random(idx.size) < p
        n[idx] += 1
        llr = plan.llr(n[idx], d[idx])
        up = llr >= plan.upper_llr - 1e-9
        down = llr <= plan.lower_llr + 1e-9
        flagged[idx[up]] = True
        open_[idx[up | down]] = False
    assert not open_.any()
    return flagged, n - n0


@pytest.mark.slow
@pytest.mark.parametrize("state", [(0, 0), (40, 3), (120, 2)])
def test_conditioned_figures_match_a_seeded_simulation(state):
    plan = SprtPlan.wald(0.02, 0.06, 0.05, 0.05)
    rng = np.random.default_rng(20260415)
    fig = conditioned(plan, [state[0]], [state[1]], [plan.p0, plan.p1], keep_distribution=True)
    runs = 20000
    for row, p in enumerate((plan.p0, plan.p1)):
        flagged, further = _simulate_from(plan, *state, p, runs, rng)
        pf = fig.p_flag[row, 0]
        se = math.sqrt(pf * (1 - pf) / runs)
        assert abs(flagged.mean() - pf) < 4 * se       # 4 standard errors: two-sided ~6e-5
        se_n = further.std() / math.sqrt(runs)
        assert abs(further.mean() - fig.further[row, 0]) < 4 * se_n
        # inverse-transform draws from the exact law agree with the simulation too
        draws = fig.draw_further(row, 0, rng.random(runs))
        se_both = math.sqrt(se_n ** 2 + (draws.std() / math.sqrt(runs)) ** 2)
        assert abs(draws.mean() - further.mean()) < 4 * se_both
        assert abs(draws.mean() - fig.further[row, 0]) < 4 * draws.std() / math.sqrt(runs)


def test_draws_reproduce_the_exact_distribution_of_a_small_plan():
    # Exact pmf by enumeration vs the frequencies of 200,000 draws, cell by cell within 4 SE.
    plan = SprtPlan.wald(0.10, 0.30, 0.10, 0.10, max_units=12)
    fig = conditioned(plan, [0, 3], [0, 1], [plan.p0, plan.p1], keep_distribution=True)
    rng = np.random.default_rng(7)
    for k, (n0, d0) in enumerate([(0, 0), (3, 1)]):
        _, _, _, cdf = _enumerate_from(plan, n0, d0, 12, [plan.p0, plan.p1])
        for row in (0, 1):
            pmf = np.diff(np.r_[0.0, cdf[row]])
            draws = fig.draw_further(row, k, rng.random(200000))
            freq = np.bincount(draws, minlength=pmf.size)[:pmf.size] / draws.size
            se = np.sqrt(pmf * (1 - pmf) / draws.size)
            assert np.all(np.abs(freq - pmf) <= 4 * se + 1e-12)


def test_closed_states_are_refused():
    plan = SprtPlan.wald(0.10, 0.30, 0.10, 0.10)
    with pytest.raises(ValueError, match="not open"):
        conditioned(plan, [30], [0], [0.1])
    with pytest.raises(ValueError, match="0 <= d <= n"):
        conditioned(plan, [3], [4], [0.1])


def test_register_alpha_bonferroni_and_sidak_closed_forms():
    t = register_alpha(500, 1.0 / 4)
    # Bonferroni (1936): K * alpha = F exactly for the expected count
    assert t.alpha_per_facility * 500 == pytest.approx(0.25, rel=1e-15)
    # Šidák (1967, JASA 62:626-633): 1 - (1 - alpha)^K = F
    assert 1 - (1 - t.alpha_sidak) ** 500 == pytest.approx(0.25, rel=1e-12)
    assert t.alpha_sidak > t.alpha_per_facility      # Šidák is the less strict of the two
    assert register_alpha(500, 25).alpha_sidak is None
    assert register_alpha(500, 25).alpha_per_facility == pytest.approx(0.05)
    for bad in ((0, 1.0), (10, 0.0), (10, 10.0), (10, float("nan")), (2.5, 1.0)):
        with pytest.raises(ValueError):
            register_alpha(*bad)


def test_register_alpha_by_simulation():
    # Seeded simulation of independent registers: mean false flags = F (Bonferroni) and
    # P(any) = F (Šidák), both within 4 standard errors of 200,000 registers.
    rng = np.random.default_rng(15)
    K, F, runs = 200, 0.3, 200000
    t = register_alpha(K, F)
    flags = rng.binomial(K, t.alpha_per_facility, size=runs)
    assert abs(flags.mean() - F) < 4 * flags.std() / math.sqrt(runs)
    any_flag = rng.binomial(K, t.alpha_sidak, size=runs) > 0
    assert abs(any_flag.mean() - F) < 4 * math.sqrt(F * (1 - F) / runs)
