#!/usr/bin/env python
"""Exact plan design against a seeded vectorised Monte Carlo, in one run.

For each plan: the time of ``design()`` (boundaries, exact figures at p0 and p1,
41-point OC/ASN curve, worst-case ASN, fixed-sample comparison) against a
100,000-path Monte Carlo at p0 and p1 alone, the speed ratio, and how far the
Monte Carlo's estimates sit from the exact figures (its standard error is what
the exact engine avoids). Prints a table, then one JSON object.

Run:  .venv/bin/python scripts/bench_plan.py [--paths N] [--repeat R]
Target: design() at least 10x faster than the Monte Carlo for the plan with
ASN near 120 (p0 0.025, p1 0.065, alpha 0.05, beta 0.10).
"""
from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from service.stats import design  # noqa: E402
from service.stats.montecarlo import simulate  # noqa: E402

PLANS = [
    {"name": "handbook", "p0": 0.01, "p1": 0.10, "alpha": 0.05, "beta": 0.10},
    {"name": "asn-120", "p0": 0.025, "p1": 0.065, "alpha": 0.05, "beta": 0.10},
    {"name": "scales-capped", "p0": 0.04, "p1": 0.12, "alpha": 0.05, "beta": 0.10,
     "max_units": 150},
]
TARGET_RATIO = 10.0


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
    print(json.dumps({"paths": args.paths, "rows": rows, "target_ratio": TARGET_RATIO,
                      "target_met": ok}))
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
