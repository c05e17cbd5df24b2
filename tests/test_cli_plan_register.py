"""`seqaudit plan --register-size K --register-false-flags F` as a user runs it."""
import json
import math

import numpy as np

from service.stats import SprtPlan, run_exact
from service.stats.montecarlo import simulate

from .test_cli_plan import run


def test_register_json_block_and_the_plan_at_alpha_per_facility():
    out = run("plan", "--p0", "0.02", "--p1", "0.06", "--alpha", "0.05", "--beta", "0.05",
              "--register-size", "500", "--register-false-flags", "0.5", "--json")
    assert out.returncode == 0, out.stderr
    d = json.loads(out.stdout)
    reg = d["register"]
    assert reg["size"] == 500 and reg["false_flags"] == 0.5
    # Bonferroni: F / K; Šidák (1967, JASA 62:626-633): 1 - (1 - F)^(1/K)
    assert reg["alpha_per_facility"] == 0.5 / 500
    assert math.isclose(reg["alpha_sidak"], 1 - 0.5 ** (1 / 500), rel_tol=1e-12)
    # the plan's own figures are those of alpha_per_facility
    assert d["plan"]["alpha"] == 0.001
    # the two ASNs by the exact engine run here on Wald's plans (Wald 1947, appendix A.2)
    for alpha, key in ((0.05, "asn_p0_original"), (0.001, "asn_p0_register")):
        ex = run_exact(SprtPlan.wald(0.02, 0.06, alpha, 0.05), [0.02])
        assert math.isclose(reg[key], float(ex.asn[0]), rel_tol=1e-9)
    assert reg["asn_p0_register"] > reg["asn_p0_original"]    # a stricter alpha costs audits
    assert d["exact"]["alpha"] <= 0.001                          # Wald's bound alpha' <= alpha/(1-beta)


def test_register_workload_by_simulation():
    # Seeded simulation of the register plan (service.stats.montecarlo, numpy default_rng):
    # mean units at p0 within 4 standard errors of the exact ASN printed by the command.
    out = run("plan", "--p0", "0.02", "--p1", "0.06", "--alpha", "0.05", "--beta", "0.05",
              "--register-size", "100", "--register-false-flags", "2", "--json")
    reg = json.loads(out.stdout)["register"]
    assert reg["alpha_sidak"] is None                 # F >= 1: no probability to bound
    sim = simulate(SprtPlan.wald(0.02, 0.06, 0.02, 0.05), 0.02, 20000, np.random.default_rng(11))
    assert abs(sim.asn - reg["asn_p0_register"]) < 4 * sim.se_asn


def test_register_options_are_checked():
    out = run("plan", "--p0", "0.02", "--p1", "0.06", "--alpha", "0.05", "--beta", "0.05",
              "--register-size", "5")
    assert out.returncode == 2 and "go together" in out.stderr
    out = run("plan", "--p0", "0.02", "--p1", "0.06", "--alpha", "0.05", "--beta", "0.05",
              "--register-size", "5", "--register-false-flags", "5")
    assert out.returncode == 2 and "strictly between 0 and the register size" in out.stderr
    out = run("plan", "--p0", "0.02", "--p1", "0.06", "--alpha", "0.05", "--beta", "0.05",
              "--register-size", "0", "--register-false-flags", "1")
    assert out.returncode == 2
