"""Independent reference computations for the tests.

Nothing here imports the project's lattice engine: the LLR is recomputed from
p0, p1 and the boundaries with the math module, and outcomes are found by
enumerating every 0/1 sequence. The simulation check runs
:mod:`service.stats.montecarlo`, which simulates paths unit by unit and shares no
lattice code with the exact engine.
"""
from __future__ import annotations

import itertools
import math

import numpy as np


def llr_step(p0: float, p1: float) -> tuple[float, float]:
    """(up, down): LLR change for a nonconforming and for a conforming unit (Wald 1947, ch. 5)."""
    return math.log(p1 / p0), math.log((1 - p1) / (1 - p0))


def enumerate_outcomes(p0, p1, upper, lower, horizon, cap=None, cut=0.0, tol=1e-9, visit=1):
    """All 0/1 sequences of length ``horizon``: (n at stop or 0, flagged?, d at stop).

    Stopping is decided on a running sum of the per-unit LLR terms, a different
    computation from the project's count formula; the boundaries are looked at
    after every ``visit`` units and at the cap.
    """
    up, down = llr_step(p0, p1)
    outcomes = []
    for seq in itertools.product((0, 1), repeat=horizon):
        total, d = 0.0, 0
        result = (0, False, None)
        for i, x in enumerate(seq, start=1):
            total += up if x else down
            d += x
            if i % visit and i != cap:
                continue
            if total >= upper - tol:
                result = (i, True, d)
                break
            if total <= lower + tol:
                result = (i, False, d)
                break
            if cap is not None and i == cap:
                result = (i, total >= cut - tol, d)
                break
        outcomes.append((seq, result))
    return outcomes


def brute_force_figures(p0, p1, upper, lower, horizon, rates, cap=None, cut=0.0, visit=1):
    """P(flag by horizon), P(clear by horizon), E[N; stopped by horizon] per rate."""
    outcomes = enumerate_outcomes(p0, p1, upper, lower, horizon, cap, cut, visit=visit)
    rates = np.asarray(rates, dtype=float)
    flag = np.zeros(rates.size)
    clear = np.zeros(rates.size)
    asn = np.zeros(rates.size)
    flag_by_n = np.zeros((rates.size, horizon + 1))
    for seq, (n, flagged, _) in outcomes:
        k = sum(seq)
        prob = rates ** k * (1 - rates) ** (horizon - k)   # of the whole sequence
        if n == 0:
            continue
        if flagged:
            flag += prob
            flag_by_n[:, n] += prob
        else:
            clear += prob
        asn += prob * n
    return flag, clear, asn, flag_by_n


def assert_near_simulation(plan, rates, exact, seed, paths=20_000):
    """Check an exact result of ``plan`` at ``rates`` against a seeded Monte Carlo.

    Seeded Monte Carlo (numpy.random.default_rng(seed)), ``paths`` paths per rate, the
    boundaries looked at as the plan looks at them: P(flag) and ASN must lie within 4
    standard errors of the simulated ones, which keeps a false failure below 1e-4 per
    comparison (normal approximation).
    """
    from service.stats.montecarlo import simulate
    rng = np.random.default_rng(seed)
    for i, p in enumerate(rates):
        mc = simulate(plan, p, paths, rng)
        assert mc.open_paths == 0, (p, mc.open_paths)
        assert abs(mc.p_flag - exact.p_flag[i]) <= 4 * mc.se_p_flag, (p, mc, exact.p_flag[i])
        assert abs(mc.asn - exact.asn[i]) <= 4 * mc.se_asn, (p, mc, exact.asn[i])


def assert_equals_enumeration(plan, exact, rates, horizon, cap=None, cut=0.0, visit=1):
    """Check an exact result of ``plan`` at ``rates`` against :func:`brute_force_figures`.

    P(flag), P(clear), ASN and P(flag at n) for n <= ``horizon`` over every 0/1 sequence of
    ``horizon`` units (use a capped plan with ``horizon`` = cap for all four to be whole).
    Tolerance: sums of at most 2**13 positive terms in float64 (1e-12; 1e-10 for the ASN,
    whose terms are multiplied by n).
    """
    flag, clear, asn, flag_by_n = brute_force_figures(
        plan.p0, plan.p1, plan.upper_llr, plan.lower_llr, horizon, rates, cap=cap, cut=cut,
        visit=visit)
    np.testing.assert_allclose(exact.p_flag, flag, atol=1e-12)
    np.testing.assert_allclose(exact.p_clear, clear, atol=1e-12)
    np.testing.assert_allclose(exact.asn, asn, atol=1e-10)
    np.testing.assert_allclose(exact.flag_by_n[:, :horizon + 1], flag_by_n, atol=1e-12)
