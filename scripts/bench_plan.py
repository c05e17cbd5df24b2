#!/usr/bin/env python
"""Exact plan design against a seeded vectorised Monte Carlo, in one run.

For each plan: the time of ``design()`` (boundaries, exact figures at p0 and p1,
41-point OC/ASN curve, worst-case ASN, fixed-sample comparison) against a
100,000-path Monte Carlo at p0 and p1 alone, the speed ratio, and how far the
Monte Carlo's estimates sit from the exact figures (its standard error is what
the exact engine avoids). Prints a table, then one JSON object.

In the same run (issue 12's speed goals):

- design() with its full curve against a plain single-rate numpy forward
  recursion of the probabilities over the same lattice, at the slowest rate
  (s, where the walk has no drift) and run to the same residual (1e-12): target
  design() at most 3x that one rate's time;
- calibration of a plan with ASN near 3,000 (p0 0.002, p1 0.004): target under
  5x its design time;
- `seqaudit plan` with bad input, which must answer before numpy is imported:
  target under 10x a bare `python -c pass` start (best of several runs each).

Run:  .venv/bin/python scripts/bench_plan.py [--paths N] [--repeat R] [--long]
Target: design() at least 10x faster than the Monte Carlo for the plan with
ASN near 120 (p0 0.025, p1 0.065, alpha 0.05, beta 0.10). ``--long`` adds the
plan p0 0.001, p1 0.0015, alpha = beta = 0.01 (ASN about 48,000) to the
recursion comparison (minutes on a loaded machine).
"""
from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from service.stats import design  # noqa: E402
from service.stats.calibrate import calibrate  # noqa: E402
from service.stats.exact import MAX_STEPS, RESIDUAL_TOL  # noqa: E402
from service.stats.montecarlo import simulate  # noqa: E402
from service.stats.sprt import SprtPlan  # noqa: E402

PLANS = [
    {"name": "handbook", "p0": 0.01, "p1": 0.10, "alpha": 0.05, "beta": 0.10},
    {"name": "asn-120", "p0": 0.025, "p1": 0.065, "alpha": 0.05, "beta": 0.10},
    {"name": "scales-capped", "p0": 0.04, "p1": 0.12, "alpha": 0.05, "beta": 0.10,
     "max_units": 150},
]
TARGET_RATIO = 10.0
RECURSION_PLANS = [
    {"name": "asn-120", "p0": 0.025, "p1": 0.065, "alpha": 0.05, "beta": 0.10},
    {"name": "asn-1300", "p0": 0.005, "p1": 0.01, "alpha": 0.05, "beta": 0.10},
]
LONG_PLAN = {"name": "asn-48000", "p0": 0.001, "p1": 0.0015, "alpha": 0.01, "beta": 0.01}
CALIBRATION_PLAN = {"name": "asn-3000", "p0": 0.002, "p1": 0.004, "alpha": 0.05, "beta": 0.10}
TARGET_DESIGN_VS_ONE_RATE = 3.0
TARGET_CALIBRATION = 5.0
TARGET_BAD_INPUT = 10.0


def one_rate_recursion(plan: SprtPlan, p: float, tol: float = RESIDUAL_TOL,
                       max_steps: int = MAX_STEPS) -> tuple[int, float, float]:
    """Plain forward recursion of P(open at (n, d)) at one rate over the plan's band, until
    less than ``tol`` is open: (units run, P(flag), E[N]). The baseline design() is timed
    against: the same lattice, one rate, no path counts."""
    prob, lo, hi, n = np.ones(1), 0, 0, 0
    flag = units = 0.0
    q = 1.0 - p
    while n < max_steps:
        ns = np.arange(n + 1, min(n + 4096, max_steps) + 1)
        acc = (plan.acceptance_numbers(ns) + 1).tolist()
        rej = (plan.rejection_numbers(ns) - 1).tolist()
        for i, m in enumerate(ns.tolist()):
            new = np.zeros(hi - lo + 2)
            new[:-1] = prob * q
            new[1:] += prob * p
            nl, nh = max(lo, acc[i]), min(hi + 1, rej[i])
            gone = new[:max(nl - lo, 0)].sum() + new[max(nh - lo + 1, 0):].sum()
            flag += new[max(nh - lo + 1, 0):].sum()
            units += m * gone
            prob, lo, hi, n = new[nl - lo:nh - lo + 1], nl, nh, m
            if hi < lo or (m % 64 == 0 and prob.sum() < tol):
                return n, flag, units
    return n, flag, units


def recursion_rows(plans, repeat):
    rows = []
    for spec in plans:
        kw = {k: v for k, v in spec.items() if k != "name"}
        t_design, res = best_of(lambda: design(**kw), repeat)
        plan = res.plan
        t_one, (steps, _, _) = best_of(lambda: one_rate_recursion(plan, plan.s), repeat)
        rows.append({"plan": spec["name"], **kw, "design_s": t_design, "one_rate_s": t_one,
                     "one_rate_units": steps, "ratio": t_design / t_one,
                     "residual": res.residual,
                     "met": t_design / t_one <= TARGET_DESIGN_VS_ONE_RATE})
    return rows


def calibration_row(repeat):
    kw = {k: v for k, v in CALIBRATION_PLAN.items() if k != "name"}
    t_design, res = best_of(lambda: design(**kw), repeat)
    wald = SprtPlan.wald(**kw)
    t_cal, cal = best_of(lambda: calibrate(wald), repeat)
    return {"plan": CALIBRATION_PLAN["name"], **kw, "design_s": t_design, "calibrate_s": t_cal,
            "ratio": t_cal / t_design, "evaluations": cal.evaluations,
            "asn_p0": float(res.exact.asn[0]), "calibrated_asn_p0": cal.asn_p0,
            "met": t_cal / t_design < TARGET_CALIBRATION}


def start_times(runs: int = 7):
    def best(cmd):
        times = []
        for _ in range(runs):
            start = time.perf_counter()
            subprocess.run(cmd, capture_output=True, check=False)
            times.append(time.perf_counter() - start)
        return min(times)
    bare = best([sys.executable, "-c", "pass"])
    bad = best([sys.executable, "-m", "service.cli", "plan", "--p0", "0.2", "--p1", "0.1",
                "--alpha", "0.05", "--beta", "0.1"])
    return {"bare_python_s": bare, "bad_plan_input_s": bad, "ratio": bad / bare,
            "met": bad / bare < TARGET_BAD_INPUT}


def best_of(fn, repeat):
    times, out = [], None
    for _ in range(repeat):
        start = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - start)
    return min(times), out


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--paths", type=int, default=100_000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--seed", type=int, default=20261201)
    ap.add_argument("--long", action="store_true", help="add the ASN 48,000 plan")
    args = ap.parse_args()
    rows = []
    for spec in PLANS:
        kw = {k: v for k, v in spec.items() if k != "name"}
        design(**kw)  # warm caches and imports once
        t_exact, res = best_of(lambda: design(**kw), args.repeat)
        rng = np.random.default_rng(args.seed)
        t_mc, mc = best_of(lambda: [simulate(res.plan, p, args.paths, rng)
                                    for p in (res.plan.p0, res.plan.p1)], args.repeat)
        ex = res.to_dict()["exact"]
        rows.append({
            "plan": spec["name"], **kw,
            "design_s": t_exact, "monte_carlo_s": t_mc, "ratio": t_mc / t_exact,
            "exact_alpha": ex["alpha"], "mc_alpha": mc[0].p_flag, "mc_alpha_se": mc[0].se_p_flag,
            "exact_beta": ex["beta"], "mc_beta": mc[1].p_clear, "mc_beta_se": mc[1].se_p_flag,
            "exact_asn_p0": ex["asn_p0"], "mc_asn_p0": mc[0].asn, "mc_asn_p0_se": mc[0].se_asn,
            "exact_asn_p1": ex["asn_p1"], "mc_asn_p1": mc[1].asn, "mc_asn_p1_se": mc[1].se_asn,
        })
    head = (f"{'plan':<14}{'design ms':>10}{'MC ms':>9}{'ratio':>7}  "
            f"{'alpha exact':>11} {'MC (se)':>17}  {'ASN p0 exact':>12} {'MC (se)':>16}")
    print(head)
    print("-" * len(head))
    for r in rows:
        print(f"{r['plan']:<14}{1e3 * r['design_s']:>10.1f}{1e3 * r['monte_carlo_s']:>9.0f}"
              f"{r['ratio']:>7.1f}  {r['exact_alpha']:>11.5f} "
              f"{r['mc_alpha']:>9.5f} ({r['mc_alpha_se']:.5f})  {r['exact_asn_p0']:>12.2f} "
              f"{r['mc_asn_p0']:>9.2f} ({r['mc_asn_p0_se']:.2f})")
    target = next(r for r in rows if r["plan"] == "asn-120")
    ok = target["ratio"] >= TARGET_RATIO
    print(f"\nasn-120: design() is {target['ratio']:.1f}x faster than {args.paths:,}-path "
          f"Monte Carlo at p0 and p1 (target >= {TARGET_RATIO:g}x): {'met' if ok else 'NOT met'}")
    rec = recursion_rows(RECURSION_PLANS + ([LONG_PLAN] if args.long else []), args.repeat)
    print(f"\n{'plan':<12}{'design s':>10}{'one rate s':>12}{'units':>10}{'ratio':>7}  "
          f"(design() with its curve / one-rate recursion at s; target <= "
          f"{TARGET_DESIGN_VS_ONE_RATE:g}x)")
    for r in rec:
        print(f"{r['plan']:<12}{r['design_s']:>10.3f}{r['one_rate_s']:>12.3f}"
              f"{r['one_rate_units']:>10,}{r['ratio']:>7.2f}  residual {r['residual']:.1e}  "
              f"{'met' if r['met'] else 'NOT met'}")
    cal = calibration_row(max(1, args.repeat - 1))
    print(f"\ncalibration of {cal['plan']} (p0 {cal['p0']}, p1 {cal['p1']}; ASN at p0 "
          f"{cal['asn_p0']:.0f}): {cal['calibrate_s']:.3f} s, {cal['evaluations']} exact "
          f"evaluations, {cal['ratio']:.2f}x its design time (target < "
          f"{TARGET_CALIBRATION:g}x): {'met' if cal['met'] else 'NOT met'}")
    st = start_times()
    print(f"seqaudit plan with bad input: {1e3 * st['bad_plan_input_s']:.0f} ms against "
          f"{1e3 * st['bare_python_s']:.0f} ms for a bare python start: {st['ratio']:.1f}x "
          f"(target < {TARGET_BAD_INPUT:g}x): {'met' if st['met'] else 'NOT met'}")
    all_ok = ok and all(r["met"] for r in rec) and cal["met"] and st["met"]
    print(json.dumps({"paths": args.paths, "rows": rows, "target_ratio": TARGET_RATIO,
                      "target_met": ok, "recursion": rec, "calibration": cal,
                      "start": st, "all_targets_met": all_ok}))
    return 0 if all_ok else 1


if __name__ == "__main__":
    sys.exit(main())
