"""seqaudit program forecast / seqaudit program visits: the audit program from the command line."""
from __future__ import annotations

import json
import sys

from .. import program_ops
from ..cautions import SIGNAL_NOT_VERDICT
from ..clock import utc_now
from ..errors import ServiceError


def forecast(store, region, budget, runs, seed, as_json: bool, out=sys.stdout) -> int:
    answer = program_ops.forecast(store, region=region, budget=budget, runs=runs, seed=seed)
    answer["caution"] = SIGNAL_NOT_VERDICT
    if as_json:
        json.dump(answer, out, indent=2)
        out.write("\n")
        return 0
    t = answer["totals"]
    where = f" in region {region}" if region else ""
    lines = [f"Register forecast{where}: {t['open_cycles']} open cycle(s)",
             "",
             "If every open facility is compliant (rate p0):",
             f"  expected false flags      {t['expected_false_flags']:10.3f}",
             f"  expected further audits   {t['expected_audits_p0']:10.1f}",
             "If every open facility is at the rate worth acting on (p1):",
             f"  expected missed           {t['expected_missed']:10.3f}",
             f"  expected further audits   {t['expected_audits_p1']:10.1f}"]
    if "weeks" in answer:
        w = answer["weeks"]
        lines += ["", f"Weeks to decide at {w['budget']} audits a week "
                      f"({w['runs']} simulation runs, seed {w['seed']}; ± one standard error):"]
        for r in ("p0", "p1"):
            x = w[r]
            lines.append(f"  at {r}: half in {x['weeks_50']:.2f} ± {x['weeks_50_se']:.2f}, "
                         f"90 % in {x['weeks_90']:.2f} ± {x['weeks_90_se']:.2f}")
        lines.append(f"  model: {w['model']}")
    lines += ["", f"{'facility':<16} {'n':>5} {'d':>3} {'P(flag|p0)':>11} {'P(clear|p1)':>12} "
                  f"{'E[more|p0]':>11} {'q90|p0':>7}"]
    for c in answer["cycles"]:
        lines.append(f"{c['facility_id']:<16} {c['units']:>5} {c['nonconforming']:>3} "
                     f"{c['p_flag_p0']:>11.4f} {c['p_clear_p1']:>12.4f} "
                     f"{c['further_p0']:>11.1f} {c['further_p0_q90']:>7}")
    lines += ["", SIGNAL_NOT_VERDICT]
    out.write("\n".join(lines) + "\n")
    return 0


def visits(store, plans, settings, budget, region, per_visit, fmt: str, out=sys.stdout) -> int:
    answer = program_ops.visits(store, plans, utc_now(), budget, region=region,
                                per_visit=per_visit,
                                stale_default=settings.schedule.stale_after_days,
                                **program_ops.hooks(store))
    if fmt == "json":
        json.dump(answer, out, indent=2)
        out.write("\n")
    elif fmt == "csv":
        out.write(program_ops.visits_csv(answer))
    else:
        where = f" in region {region}" if region else ""
        out.write(f"Visits this week{where}: {answer['units']} of {budget} audits at "
                  f"{answer['facilities']} facilit{'y' if answer['facilities'] == 1 else 'ies'} "
                  f"({answer['open_cycles']} open cycles)\n\n")
        for v in answer["visits"]:
            out.write(f"{v['rank']:>3}. {v['facility_id']} ({v['name']}): {v['units']} unit(s), "
                      f"score {v['score']:.2f} — {v['reason']}\n")
    return 0


def run(action: str, args, parser) -> int:
    from ..operations import PlanBook
    from ..store import Store
    settings = args.settings
    if not settings.db_path.exists():
        parser.error(f"argument --db: {settings.db_path} does not exist")
    store = Store(settings.db_path)
    store.migrate()
    try:
        if action == "forecast":
            return forecast(store, args.region, args.budget, args.runs, args.seed, args.json)
        return visits(store, PlanBook(settings.plans), settings, args.budget, args.region,
                      args.per_visit, args.format)
    except ServiceError as exc:
        field = exc.extra.get("field")
        parser.error(f"argument --{field.replace('_', '-')}: {exc.detail}" if field
                     else exc.detail)
    finally:
        store.close()
