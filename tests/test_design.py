"""The design() entry point and its JSON contract."""
import ast
from pathlib import Path

import pytest

from service.stats import design
from service.stats.fixed_sample import fixed_sample_plan

REQUIRED = {
    "plan": {"p0", "p1", "alpha", "beta", "max_units", "cut_llr"},
    "boundaries": {"upper_llr", "lower_llr", "h1", "h2", "s"},
    "exact": {"alpha", "beta", "asn_p0", "asn_p1", "asn_max", "p_at_asn_max", "residual"},
    "wald": {"alpha", "beta", "asn_p0", "asn_p1"},
    "fixed_sample": {"exact_n", "critical_count", "normal_n"},
}


def test_contract_keys_and_curve():
    d = design(0.02, 0.08, 0.05, 0.10).to_dict()
    for section, keys in REQUIRED.items():
        assert keys <= set(d[section]), section
    curve = d["curve"]
    assert len(curve) >= 41
    assert curve[0]["p"] == 0.0 and curve[-1]["p"] >= 2 * 0.08 - 1e-15
    assert all({"p", "p_flag", "p_clear", "asn"} <= set(c) for c in curve)
    assert [c["p"] for c in curve] == sorted(c["p"] for c in curve)
    assert d["plan"]["max_units"] is None


def test_asn_max_is_the_peak_of_the_curve():
    d = design(0.02, 0.08, 0.05, 0.10).to_dict()
    assert d["exact"]["asn_max"] >= max(c["asn"] for c in d["curve"]) - 1e-12
    assert 0.02 < d["exact"]["p_at_asn_max"] < 0.08


def test_suggested_cap_is_three_times_fixed_n():
    # NIST/SEMATECH e-Handbook, section 6.2.6: a common truncation is three times
    # the sample size of the equivalent single sampling plan.
    d = design(0.01, 0.10, 0.05, 0.10).to_dict()
    assert d["fixed_sample"]["suggested_max_units"] == 3 * fixed_sample_plan(
        0.01, 0.10, 0.05, 0.10).exact_n


def test_wald_figures_for_wald_boundaries_are_nominal():
    d = design(0.04, 0.12, 0.05, 0.10).to_dict()
    assert d["wald"]["alpha"] == pytest.approx(0.05, rel=1e-12)
    assert d["wald"]["beta"] == pytest.approx(0.10, rel=1e-12)
    # Wald (1947) eq. 5.2: E[N | p0] = ((1-alpha) b + alpha a) / (p0 g1 - (1-p0) g2)
    b = d["boundaries"]
    ez = 0.04 * b["g1"] - 0.96 * b["g2"]
    expect = (0.95 * b["lower_llr"] + 0.05 * b["upper_llr"]) / ez
    assert d["wald"]["asn_p0"] == pytest.approx(expect, rel=1e-12)


def test_capped_plan_has_no_residual():
    d = design(0.04, 0.12, 0.05, 0.10, max_units=150).to_dict()
    assert d["exact"]["residual"] == 0.0
    assert d["plan"]["max_units"] == 150
    assert max(r["n"] for r in d["decision_numbers"]) <= 150


def test_stats_core_imports_only_numpy_and_scipy():
    # numpy and scipy, plus pure standard-library helpers (no I/O, clock, logging, settings)
    allowed = {"numpy", "scipy", "math", "dataclasses", "__future__", "typing", "functools"}
    for path in Path("service/stats").glob("*.py"):
        tree = ast.parse(path.read_text())
        for node in ast.walk(tree):
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom):
                if node.level:
                    continue
                names = [node.module]
            else:
                continue
            for name in names:
                assert name.split(".")[0] in allowed, f"{path}: imports {name}"


def test_wald_oc_passes_through_its_design_points():
    # Wald (1947), section 5.2: h = 1 gives p = p0 with L = 1 - alpha; h = -1 gives
    # p = p1 with L = beta; h = 0 gives p = s with L = a / (a - b).
    from service.stats import SprtPlan
    from service.stats import wald
    plan = SprtPlan.wald(0.03, 0.11, 0.07, 0.15)
    L = wald.p_clear_at(plan, [plan.p0, plan.p1, plan.s])
    assert L[0] == pytest.approx(0.93, abs=1e-9)
    assert L[1] == pytest.approx(0.15, abs=1e-9)
    assert L[2] == pytest.approx(plan.upper_llr / (plan.upper_llr - plan.lower_llr), abs=1e-9)
    p2, L2 = wald.oc_at_h(plan, 2.0)
    assert wald.p_clear_at(plan, [p2])[0] == pytest.approx(L2, abs=1e-9)
