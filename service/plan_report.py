"""Plain-text report of a designed plan, as `seqaudit plan` prints it."""
from __future__ import annotations

from .cautions import caution_lines
from .stats.design import DesignResult


def _num(value, digits=4) -> str:
    return "-" if value is None else f"{value:.{digits}f}"


def _pct(value) -> str:
    return "-" if value is None else f"{100 * value:.0f}%"


def render(result: DesignResult, title: str | None = None, table_units: int = 30) -> str:
    d = result.to_dict()
    plan, bnd, ex, wd, fx = d["plan"], d["boundaries"], d["exact"], d["wald"], d["fixed_sample"]
    kind = "calibrated boundaries" if plan["calibrated"] else "Wald's boundaries"
    cap = (f", cap {plan['max_units']} units (at the cap: flag iff LLR >= {plan['cut_llr']:g})"
           if plan["max_units"] is not None else ", no cap")
    lines = []
    if title:
        lines += [title, "=" * len(title)]
    lines += [
        f"Plan: p0 = {plan['p0']:g} (tolerated), p1 = {plan['p1']:g} (worth acting on), "
        f"alpha = {plan['alpha']:g}, beta = {plan['beta']:g}; {kind}{cap}",
        "",
        "Boundaries",
        f"  LLR scale:     flag when LLR >= {bnd['upper_llr']:.4f}, "
        f"clear when LLR <= {bnd['lower_llr']:.4f}",
        f"  per unit:      +{bnd['g1']:.4f} for a nonconforming unit, "
        f"-{bnd['g2']:.4f} for a conforming one",
        f"  (n, d) plane:  flag when d >= {bnd['h2']:.4f} + {bnd['s']:.5f} n, "
        f"clear when d <= -{bnd['h1']:.4f} + {bnd['s']:.5f} n",
        "",
        f"  {'':28}{'exact':>12}{'Wald approx.':>16}",
        f"  {'alpha (flag at p0)':28}{_num(ex['alpha'], 5):>12}{_num(wd['alpha'], 5):>16}",
        f"  {'beta (clear at p1)':28}{_num(ex['beta'], 5):>12}{_num(wd['beta'], 5):>16}",
        f"  {'units expected at p0':28}{_num(ex['asn_p0'], 2):>12}{_num(wd['asn_p0'], 2):>16}",
        f"  {'units expected at p1':28}{_num(ex['asn_p1'], 2):>12}{_num(wd['asn_p1'], 2):>16}",
        f"  {'units expected, worst rate':28}{_num(ex['asn_max'], 2):>12}"
        f"{_num(wd['asn_at_s'], 2):>16}   (exact worst at p = {ex['p_at_asn_max']:.5f}; "
        f"Wald at s)",
        f"  units needed at p0:  sd {ex['sd_p0']:.1f}; 50% by {ex['units_p0']['q50']}, "
        f"90% by {ex['units_p0']['q90']}, 99% by {ex['units_p0']['q99']}",
        f"  units needed at p1:  sd {ex['sd_p1']:.1f}; 50% by {ex['units_p1']['q50']}, "
        f"90% by {ex['units_p1']['q90']}, 99% by {ex['units_p1']['q99']}",
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
            f"  the sequential plan saves {_pct(fx['saving_p0'])} of the units at p0 and "
            f"{_pct(fx['saving_p1'])} at p1",
            f"  suggested cap if one is wanted: {fx['suggested_max_units']} units "
            f"(three times the fixed-sample n)",
        ]
    lines += ["", "Decision numbers for the first units (d = nonconforming so far)",
              f"  {'units':>5}  {'clear if d <=':>13}  {'flag if d >=':>12}"]
    for row in d["decision_numbers"][:table_units]:
        acc = "-" if row["accept"] is None else str(row["accept"])
        rej = "-" if row["reject"] is None else str(row["reject"])
        lines.append(f"  {row['n']:>5}  {acc:>13}  {rej:>12}")
    lines += ["", *caution_lines()]
    return "\n".join(lines) + "\n"
