"""The post-stop inference in memory linear in the units: same figures as the grid algorithm
it replaced, and no quadratic allocation for a record of many units."""
import tracemalloc

import numpy as np
import pytest
from scipy.special import gammaln, logsumexp
from scipy.stats import binom

from service.stats import SprtPlan
from service.stats.inference import LookCounts, _convolve_log, infer
from service.stats.sprt import BOUNDARY_TOL

# the plans the inference tests and the demo configuration use (config/seqaudit.toml)
PLANS = {
    "dispensers": SprtPlan.wald(0.02, 0.08, 0.05, 0.10),
    "scales": SprtPlan.wald(0.04, 0.12, 0.05, 0.10),
    "scales_capped": SprtPlan.wald(0.04, 0.12, 0.05, 0.10, max_units=150),
    "cap_one": SprtPlan.wald(0.02, 0.08, 0.05, 0.10, max_units=1),
    "enumerated": SprtPlan.wald(0.1, 0.4, 0.1, 0.2),
}


def grid_points(plan, sizes):
    """A verbatim copy of the stop-point counting the service used before (a grid of
    (m + 1) x (width) log-counts per look, reduced with scipy's logsumexp): the reference
    the new code must reproduce. Returns (look, n, d, flag, log_count) tuples."""
    d = np.array([0])
    logk = np.array([0.0])
    n, points = 0, []
    for look, m in enumerate(sizes, start=1):
        j = np.arange(m + 1)
        lc = gammaln(m + 1) - gammaln(j + 1) - gammaln(m - j + 1)
        width = d.size + m
        grid = np.full((m + 1, width), -np.inf)
        for jj in range(m + 1):
            grid[jj, jj:jj + d.size] = logk + lc[jj]
        logk = logsumexp(grid, axis=0)
        d = np.arange(d[0], d[0] + width)
        n += m
        llr = plan.llr(n, d)
        up = llr >= plan.upper_llr - BOUNDARY_TOL
        down = llr <= plan.lower_llr + BOUNDARY_TOL
        if plan.max_units is not None and n >= plan.max_units:
            cut = llr >= plan.cut_llr - BOUNDARY_TOL
            up, down = up | (~down & cut), down | (~up & ~cut)
        for flag, mask in ((True, up), (False, down)):
            for dd, k in zip(d[mask].tolist(), logk[mask].tolist()):
                if k > -np.inf:
                    points.append((look, n, dd, flag, k))
        keep = ~(up | down)
        d, logk = d[keep], logk[keep]
        if d.size == 0:
            break
    return points


def decided_paths(plan, rng, cycles, max_size):
    """Seeded random cycles: record sizes 1..max_size, outcomes at a rate between p0 and p1,
    each cut at its decision."""
    out = []
    for _ in range(cycles):
        p = rng.uniform(plan.p0 / 2, plan.p1 * 1.5)
        sizes, bad, n, d = [], [], 0, 0
        while True:
            m = int(rng.integers(1, max_size + 1))
            b = int(rng.binomial(m, p))
            sizes.append(m)
            bad.append(b)
            n, d = n + m, d + b
            if plan.decide(n, d) != "monitoring":
                break
        out.append((sizes, bad))
    return out


@pytest.mark.parametrize("name", sorted(PLANS))
def test_stop_points_equal_the_grid_algorithm(name):
    plan = PLANS[name]
    rng = np.random.default_rng(11)
    for sizes, _ in decided_paths(plan, rng, 6, 12):
        new = LookCounts(plan, sizes)
        old = grid_points(plan, sizes)
        assert [(s.look, s.n, s.d, s.flag) for s in new.points] == [p[:4] for p in old]
        # log-counts up to ~1e3: summing in another order moves the last few bits only
        np.testing.assert_allclose(new.log_count, [p[4] for p in old], rtol=1e-12, atol=1e-9)


class GridCounts(LookCounts):
    """LookCounts whose stop points come from the old grid algorithm above."""

    def _run(self):
        pts = grid_points(self.plan, self.sizes)
        cols = list(zip(*pts)) if pts else [[]] * 5
        self.look, self.n, self.d = (np.array(c, dtype=np.int64) for c in cols[:3])
        self.flag = np.array(cols[3], dtype=bool)
        self.log_count = np.array(cols[4], dtype=float)


@pytest.mark.parametrize("name", sorted(PLANS))
def test_inference_figures_equal_the_grid_algorithm_to_1e9(name):
    # every figure of infer() with the new counts against the same figures from the old
    # grid algorithm, on seeded decided cycles of unit records and of group records
    plan = PLANS[name]
    rng = np.random.default_rng(2026)
    cases = decided_paths(plan, rng, 5, 1) + decided_paths(plan, rng, 5, 9)
    for sizes, bad in cases:
        new = infer(plan, sizes, bad)
        old = infer(plan, sizes, bad, counts=GridCounts(plan, sizes))
        assert new.decision == old.decision and new.at_cap == old.at_cap
        for field in ("p_value", "ci_low", "ci_high", "estimate_median_unbiased"):
            assert abs(getattr(new, field) - getattr(old, field)) <= 1e-9, (field, sizes, bad)


def test_convolution_matches_direct_sum():
    # out[t] = log sum_{i+j=t} exp(a_i + b_j), by a double loop in Python floats
    rng = np.random.default_rng(5)
    a, b = rng.normal(size=7) * 10, rng.normal(size=4) * 10
    a[2] = -np.inf
    expect = [np.logaddexp.reduce([a[i] + b[t - i] for i in range(a.size) if 0 <= t - i < b.size])
              for t in range(a.size + b.size - 1)]
    np.testing.assert_allclose(_convolve_log(a, b), expect, rtol=1e-13)
    np.testing.assert_allclose(_convolve_log(b, a), expect, rtol=1e-13)


def peak_bytes(fn):
    tracemalloc.start()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def test_one_record_of_many_units_needs_memory_linear_in_units():
    # The grid algorithm allocated (m + 1)^2 doubles for a first record of m units, 32 MB
    # at m = 2000 and 800 MB at m = 10,000 (several times that in temporaries). Linear
    # memory: a few arrays of m + 1 doubles, 16 kB each at m = 2000.
    plan = PLANS["dispensers"]
    m = 2000
    bad = 200                       # far above the upper line: flagged at once
    assert plan.decide(m, bad) == "flagged"
    peak = peak_bytes(lambda: infer(plan, [m], [bad]))
    assert peak < 2_000_000, peak
    # and it keeps growing linearly: 50 times the units, well under 50 times the memory cap
    peak_big = peak_bytes(lambda: infer(plan, [100_000], [10_000]))
    assert peak_big < 50 * 2_000_000, peak_big


def test_one_decisive_record_is_the_binomial_tail():
    # A cycle decided by its first record of m units: the outcome set is that record's
    # count alone, so the p-value is the binomial upper tail at p0 (scipy.stats.binom),
    # whatever m is.
    plan = PLANS["dispensers"]
    for m, bad in ((10_000, 800), (100_000, 8_000)):
        res = infer(plan, [m], [bad])
        assert res.decision == "flagged"
        expect = binom.sf(bad - 1, m, plan.p0)
        assert res.p_value == pytest.approx(expect, rel=1e-9, abs=1e-300)
