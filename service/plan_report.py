"""Plain-text report of a designed plan, as `seqaudit plan` prints it."""
from __future__ import annotations

from .cautions import caution_lines
from .stats.design import TABLE_UNITS, DesignResult

# beyond this many rows after the first looks, the text report shows only the first possible
# clear and the cap (a long plan's table would run to hundreds of rows)
_MORE_ROWS = 20


def _num(value, digits=4) -> str:
    return "-" if value is None else f"{value:.{digits}f}"


def _pct(value) -> str:
    return "-" if value is None else f"{100 * value:.0f}%"


def _units(value) -> str:
    return "not reached" if value is None else str(value)


def warning_lines(d: dict) -> list[str]:
    """The plan's warnings in words, for the top of a report."""
    if not d["warnings"]:
        return []
    out = ["WARNINGS"]
    for w in d["warnings"]:
        out.append(f"  [{w['code']}] {w['message']}")
    return out + [""]


def render(result: DesignResult, title: str | None = None) -> str:
    d = result.to_dict()
    plan, bnd, ex, wd, fx = d["plan"], d["boundaries"], d["exact"], d["wald"], d["fixed_sample"]
    rc = d["recheck"]
    kind = "calibrated boundaries" if plan["calibrated"] else "Wald's boundaries"
    cap = (f", cap {plan['max_units']} units (at the cap: flag iff LLR >= {plan['cut_llr']:g})"
           if plan["max_units"] is not None else ", no cap")
    label = "exact" if ex["complete"] else "partial"
    lines = []
    if title:
        lines += [title, "=" * len(title)]
    lines += warning_lines(d)
    looks = ("after every unit" if plan["visit_units"] == 1
             else f"after every visit of {plan['visit_units']} units"
             + (" and at the cap" if plan["max_units"] is not None else ""))
    lines += [
        f"Plan: p0 = {plan['p0']:g} (tolerated), p1 = {plan['p1']:g} (worth acting on), "
        f"alpha = {plan['alpha']:g}, beta = {plan['beta']:g}; {kind}{cap}",
        f"  boundaries looked at {looks}",
    ]
    if rc["sensitivity"] < 1 or rc["specificity"] < 1:
        lines += [
            f"  re-checks: sensitivity {rc['sensitivity']:g}, specificity {rc['specificity']:g}"
            f"; the test runs on the apparent rates p0* = {rc['apparent_p0']:.5g}, "
            f"p1* = {rc['apparent_p1']:.5g} (Rogan and Gladen 1978); every figure below is "
            "for the true rate",
            f"  a plan built on the uncorrected p0, p1 would really give alpha' "
            f"{rc['uncorrected_alpha']:.4f} and beta' {rc['uncorrected_beta']:.4f}",
        ]
    cal = d["calibration"]
    if cal is not None:
        lines.append(f"  calibration: {cal['compared_with_wald']} than Wald's boundaries "
                     f"(max expected units {max(cal['asn_p0'], cal['asn_p1']):.1f} against "
                     f"{max(cal['wald_asn_p0'], cal['wald_asn_p1']):.1f}). {cal['reason']}")
    lines += [
        "",
        "Boundaries",
        f"  LLR scale:     flag when LLR >= {bnd['upper_llr']:.4f}, "
        f"clear when LLR <= {bnd['lower_llr']:.4f}",
        f"  per unit:      +{bnd['g1']:.4f} for a nonconforming unit, "
        f"-{bnd['g2']:.4f} for a conforming one",
        f"  (n, d) plane:  flag when d >= {bnd['h2']:.4f} + {bnd['s']:.5f} n, "
        f"clear when d <= -{bnd['h1']:.4f} + {bnd['s']:.5f} n",
        "",
        f"  {'':28}{label:>12}{'Wald approx.':>16}",
        f"  {'alpha (flag at p0)':28}{_num(ex['alpha'], 5):>12}{_num(wd['alpha'], 5):>16}",
        f"  {'beta (clear at p1)':28}{_num(ex['beta'], 5):>12}{_num(wd['beta'], 5):>16}",
        f"  {'units expected at p0':28}{_num(ex['asn_p0'], 2):>12}{_num(wd['asn_p0'], 2):>16}",
        f"  {'units expected at p1':28}{_num(ex['asn_p1'], 2):>12}{_num(wd['asn_p1'], 2):>16}",
        f"  {'units expected, worst rate':28}{_num(ex['asn_max'], 2):>12}"
        f"{_num(wd['asn_at_s'], 2):>16}   (exact worst at p = {ex['p_at_asn_max']:.5f}; "
        f"Wald at s)",
        f"  units needed at p0:  sd {ex['sd_p0']:.1f}; 50% by {_units(ex['units_p0']['q50'])}, "
        f"90% by {_units(ex['units_p0']['q90'])}, 99% by {_units(ex['units_p0']['q99'])}",
        f"  units needed at p1:  sd {ex['sd_p1']:.1f}; 50% by {_units(ex['units_p1']['q50'])}, "
        f"90% by {_units(ex['units_p1']['q90'])}, 99% by {_units(ex['units_p1']['q99'])}",
        f"  earliest possible flag after {_units(ex['first_flag_units'])} units, earliest "
        f"possible clear after {_units(ex['first_clear_units'])} units",
        f"  probability still open when the computation stopped: {ex['residual']:.1e}",
        "",
        "Fixed-sample test with the same risks (one-sided exact binomial)",
    ]
    if fx["exact_n"] is None:
        lines.append("  none found within the search limit")
    else:
        lines += [
            f"  audit {fx['exact_n']} units, flag at {fx['critical_count']} or more nonconforming "
            f"(exact alpha {fx['alpha']:.5f}, power {fx['power']:.5f}); normal approximation "
            f"n = {fx['normal_n']}",
            (f"  the sequential plan saves {_pct(fx['saving_p0'])} of the units at p0 and "
             f"{_pct(fx['saving_p1'])} at p1" if fx["saving_p0"] is not None else
             "  no saving is claimed: the plan misses its own targets or is incomplete "
             "(see the warnings)"),
            f"  suggested cap if one is wanted: {fx['suggested_max_units']} units "
            f"(three times the fixed-sample n)",
        ]
    if d["at_rates"]:
        lines += ["", "At chosen true rates",
                  f"  {'rate':>8}  {'P(flag)':>8}  {'P(clear)':>8}  {'units expected':>14}  "
                  f"{'50% by':>7}  {'90% by':>7}  {'99% by':>7}"]
        for r in d["at_rates"]:
            lines.append(f"  {r['p']:>8.4g}  {r['p_flag']:>8.4f}  {r['p_clear']:>8.4f}  "
                         f"{r['asn']:>14.1f}  {_units(r['units_q50']):>7}  "
                         f"{_units(r['units_q90']):>7}  {_units(r['units_q99']):>7}")
    # every look among the first TABLE_UNITS, then the looks where a number changes, as far
    # as the first possible clear and flag or the cap (DesignResult.decision_numbers)
    rows = d["decision_numbers"]
    first, later = rows[:TABLE_UNITS], rows[TABLE_UNITS:]
    what = f"every look up to {first[-1]['n']} units" if first else "no looks"
    if later and len(later) <= _MORE_ROWS:
        what += f", then the looks where a number changes up to {later[-1]['n']} units"
    elif later:
        what += (f", then the first possible clear and the cap (all {len(later)} later rows "
                 "are in the JSON output, --json)")
        later = [r for r in later if r["at_cap"] or r["n"] == ex["first_clear_units"]]
    lines += ["", f"Decision numbers at the looks (d = nonconforming so far): {what}",
              f"  {'units':>7}  {'clear if d <=':>13}  {'flag if d >=':>12}"]
    for row in first + later:
        acc = "-" if row["accept"] is None else str(row["accept"])
        rej = "-" if row["reject"] is None else str(row["reject"])
        note = "  (at the cap, cut rule)" if row["at_cap"] else ""
        lines.append(f"  {row['n']:>7}  {acc:>13}  {rej:>12}{note}")
    lines += ["", *caution_lines()]
    return "\n".join(lines) + "\n"
