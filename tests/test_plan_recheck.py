"""Imperfect re-checks: Rogan-Gladen mapping, the plan on apparent rates, misread simulation."""
import numpy as np
import pytest

from service.stats import PlanInputError, Recheck, SprtPlan, design, run_exact
from service.stats.sprt import BOUNDARY_TOL


def test_rogan_gladen_formula():
    # Rogan and Gladen (1978), Am. J. Epidemiol. 107:71-76: p* = Se p + (1 - Sp)(1 - p) and
    # p = (p* + Sp - 1) / (Se + Sp - 1). By hand: 0.9 * 0.02 + 0.02 * 0.98 = 0.0376.
    rc = Recheck(0.90, 0.98)
    assert rc.apparent(0.02) == pytest.approx(0.0376, abs=1e-15)
    assert rc.apparent(0.0) == pytest.approx(0.02, abs=1e-15)       # 1 - Sp
    assert rc.apparent(1.0) == pytest.approx(0.90, abs=1e-15)       # Se
    grid = np.linspace(0, 1, 11)
    np.testing.assert_allclose(rc.true_rate(rc.apparent(grid)), grid, atol=1e-14)
    # an apparent rate below 1 - Sp maps below 0: clipped, and the interval says so
    assert rc.true_rate(0.01) == 0.0
    assert rc.true_rate(0.01, clip=False) == pytest.approx((0.01 + 0.98 - 1) / 0.88)
    lo, hi, clipped = rc.true_interval(0.01, 0.05)
    assert lo == 0.0 and hi == pytest.approx((0.05 - 0.02) / 0.88) and clipped


@pytest.mark.parametrize("se, sp", [(0.5, 0.5), (0.3, 0.6), (0.0, 1.0), (1.2, 0.9),
                                    (float("nan"), 0.9)])
def test_uninformative_or_invalid_recheck_is_refused(se, sp):
    with pytest.raises(PlanInputError):
        design(0.02, 0.08, 0.05, 0.10, sensitivity=se, specificity=sp)


def test_plan_on_apparent_rates_equals_ordinary_plan_with_p0_star_p1_star():
    rc = Recheck(0.90, 0.98)
    a = design(0.02, 0.06, 0.05, 0.05, sensitivity=0.90, specificity=0.98).to_dict()
    b = design(rc.apparent(0.02), rc.apparent(0.06), 0.05, 0.05).to_dict()
    for key in ("alpha", "beta", "asn_p0", "asn_p1", "asn_max", "first_flag_units",
                "first_clear_units"):
        assert a["exact"][key] == pytest.approx(b["exact"][key], rel=1e-12, abs=1e-15), key
    assert a["boundaries"]["upper_llr"] == b["boundaries"]["upper_llr"]
    assert a["recheck"]["apparent_p0"] == pytest.approx(0.0376)
    # the curve's axis is the true rate: the point at true p0 carries alpha'
    pt = next(c for c in a["curve"] if c["p"] == pytest.approx(0.02))
    assert pt["p_flag"] == pytest.approx(a["exact"]["alpha"], rel=1e-12)
    assert pt["apparent_p"] == pytest.approx(0.0376)
    assert a["plan"]["p0"] == 0.02 and a["plan"]["sensitivity"] == 0.90


def test_ignoring_the_recheck_error_flags_compliant_facilities_about_half_the_time():
    # Issue 12: p0 0.02, p1 0.06, alpha = beta = 0.05, Se 0.90, Sp 0.98: a plan built on the
    # uncorrected rates flags a facility at true p0 "about half the time instead of 5 %".
    d = design(0.02, 0.06, 0.05, 0.05, sensitivity=0.90, specificity=0.98).to_dict()
    assert 0.4 < d["recheck"]["uncorrected_alpha"] < 0.6
    naive = SprtPlan.wald(0.02, 0.06, 0.05, 0.05)
    direct = run_exact(naive, [Recheck(0.9, 0.98).apparent(0.02)])
    assert d["recheck"]["uncorrected_alpha"] == pytest.approx(direct.p_flag[0], rel=1e-12)
    assert d["exact"]["alpha"] <= 0.05 and d["exact"]["beta"] <= 0.05


@pytest.mark.parametrize("true_rate, seed", [(0.02, 31), (0.06, 32)])
def test_misread_simulation_matches_exact_figures_at_the_true_rate(true_rate, seed):
    # Seeded simulation (numpy.random.default_rng): draw the true outcome of each unit, then
    # misread it (a nonconforming unit is recorded with probability Se, a conforming one as
    # nonconforming with probability 1 - Sp), run the plan on what was recorded. 20,000 paths,
    # 4 standard errors (false failure below 1e-4 per comparison).
    se, sp = 0.90, 0.98
    res = design(0.02, 0.06, 0.05, 0.05, sensitivity=se, specificity=sp, rates=[true_rate])
    plan, d = res.plan, res.to_dict()
    exact = d["at_rates"][0]
    rng = np.random.default_rng(seed)
    paths, horizon = 20_000, 4000
    flagged = np.zeros(paths, dtype=bool)
    n_stop = np.zeros(paths, dtype=np.int64)
    alive = np.arange(paths)
    d_now = np.zeros(paths, dtype=np.int64)
    n_now, chunk = 0, 200
    while alive.size and n_now < horizon:
        truth = rng.random((alive.size, chunk)) < true_rate
        u = rng.random((alive.size, chunk))
        recorded = np.where(truth, u < se, u >= sp)
        dd = d_now[alive, None] + np.cumsum(recorded, axis=1)
        nn = n_now + np.arange(1, chunk + 1)
        llr = dd * np.log(plan.p1 / plan.p0) + (nn - dd) * np.log((1 - plan.p1) / (1 - plan.p0))
        up = llr >= plan.upper_llr - BOUNDARY_TOL
        down = llr <= plan.lower_llr + BOUNDARY_TOL
        stop = up | down
        done = stop.any(axis=1)
        first = np.argmax(stop, axis=1)
        idx = alive[done]
        flagged[idx] = up[done, first[done]]
        n_stop[idx] = n_now + 1 + first[done]
        d_now[alive] = dd[:, -1]
        alive = alive[~done]
        n_now += chunk
    assert alive.size == 0
    pf = flagged.mean()
    se_pf = np.sqrt(pf * (1 - pf) / paths)
    assert abs(pf - exact["p_flag"]) <= 4 * se_pf
    assert abs(n_stop.mean() - exact["asn"]) <= 4 * n_stop.std(ddof=1) / np.sqrt(paths)
