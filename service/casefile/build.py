"""Assemble a case file: plan and why, every record in order, the path, the inference."""
from __future__ import annotations

import json

from ..cautions import ASSUMPTIONS, SIGNAL_NOT_VERDICT
from ..clock import utc_now
from ..errors import Conflict, Invalid
from ..operations import cycle_public, record_public
from ..stats import design_plan
from ..stats.inference import infer
from ..store import Store, plan_from_snapshot
from .draws import draws_section
from .trail_refs import trail_citation

NOT_CHECKED = [
    "whether the audited units were in fact selected at random (the service records what "
    "auditors send; it does not see how units were chosen)",
    "whether outcomes were independent, e.g. several units from one batch or one technician",
    "whether the facility's rate was stable during the cycle (no test for drift is made)",
    "the correctness of each re-check itself (measurement error of the audit)",
    "the sizes of records are taken as fixed in advance when computing the p-value and the "
    "interval",
]

METHOD = (
    "Exact inference after the sequential stop: the outcomes of the plan are ordered "
    "stagewise (a flag at fewer units is more extreme; then, for a capped plan, the final "
    "look by its count; then clears, from more units down to fewer), following Jennison and "
    "Turnbull, 'Group Sequential Methods with Applications to Clinical Trials' (2000), ch. 8, "
    "and Siegmund, 'Sequential Analysis' (1985). The p-value is the probability, at rate p0, "
    "of an outcome at least as extreme upward as the one observed. The interval inverts that "
    "ordering (Clopper-Pearson construction); the median-unbiased estimate is the rate at "
    "which the upward probability is one half. The naive rate d/n is shown for comparison "
    "only: after a sequential stop it is biased.")


def explain_plan(snap: dict) -> dict[str, str]:
    pct = lambda x: f"{100 * x:.3g} %"
    out = {
        "p0": f"{pct(snap['p0'])} of passed units nonconforming is the rate this plan treats as "
              "tolerable (H0).",
        "p1": f"{pct(snap['p1'])} nonconforming is the rate worth acting on (H1).",
        "alpha": f"A facility whose true rate is {pct(snap['p0'])} is flagged with probability "
                 f"about {pct(snap['alpha'])} (designed risk of a false flag).",
        "beta": f"A facility whose true rate is {pct(snap['p1'])} is cleared with probability "
                f"about {pct(snap['beta'])} (designed risk of missing it).",
    }
    if snap.get("max_units"):
        out["max_units"] = (f"A cycle still open after {snap['max_units']} audited units is "
                            f"decided there: flagged if the LLR is at least "
                            f"{snap['cut_llr']:g}, cleared otherwise.")
    return out


def build_casefile(store: Store, facility_id: str, cycle: int | None = None,
                   level: float = 0.95) -> dict:
    """The case file of a decided cycle as a JSON-ready dict.

    Raises NotFound for an unknown facility or cycle and Conflict for a cycle without a
    decision (still monitoring, or closed by hand).
    """
    if not 0.0 < level < 1.0:
        raise Invalid(f"ci_level must lie strictly between 0 and 1, got {level}",
                      field="ci_level")
    fac = store.facility(facility_id)
    number = cycle if cycle is not None else fac["current_cycle"]
    cyc = store.cycle(facility_id, number)
    if cyc["status"] not in ("flagged", "cleared"):
        raise Conflict(f"cycle {number} of {facility_id!r} is {cyc['status']}: a case file is "
                       "made for a cycle that was flagged or cleared")
    snap = json.loads(cyc["plan_json"])
    plan = plan_from_snapshot(snap)
    rows = store.records(facility_id, number)
    evidence = [r for r in rows if r["counted"] and not r["void"]]
    inference = infer(plan, [r["units"] for r in evidence], [r["nonconforming"] for r in evidence],
                      level)
    figures = design_plan(plan, calibrated=bool(snap.get("calibrate"))).to_dict()
    actions, _ = store.actions(limit=10_000, facility_id=facility_id, cycle=number)
    from .after import after_decision
    after = after_decision(store, facility_id, number, cyc, snap)
    return {
        **after,
        "facility": {"facility_id": fac["facility_id"], "name": fac["name"],
                     "plan": fac["plan"], "registered_at": fac["created_at"]},
        "cycle": number,
        "decision": cyc["status"],
        "decided_at": cyc["decided_at"],
        "decided_after_units": cyc["decided_after_units"],
        "decided_at_cap": bool(cyc["at_cap"]),
        "units": cyc["units"],
        "nonconforming": cyc["nonconforming"],
        "llr": cyc["llr"],
        "p_value": inference.p_value,
        "ci_level": level,
        "ci_low": inference.ci_low,
        "ci_high": inference.ci_high,
        "estimate_median_unbiased": inference.estimate_median_unbiased,
        "estimate_naive": inference.estimate_naive,
        "estimate_naive_note": "d/n after a sequential stop is biased; shown for comparison",
        "plan": {**snap, "exact_alpha": figures["exact"]["alpha"],
                 "exact_beta": figures["exact"]["beta"],
                 "asn_p0": figures["exact"]["asn_p0"], "asn_p1": figures["exact"]["asn_p1"],
                 "asn_max": figures["exact"]["asn_max"],
                 "h1": figures["boundaries"]["h1"], "h2": figures["boundaries"]["h2"],
                 "s": figures["boundaries"]["s"]},
        "plan_explained": explain_plan(snap),
        "cycle_state": cycle_public(cyc),
        "records": [record_public(r) for r in rows],
        "draws": draws_section(store, facility_id, number, rows, snap),
        "actions": actions,
        "trail": trail_citation(store, facility_id, number, rows),
        "curve": figures["curve"],
        "method": METHOD,
        "caution": SIGNAL_NOT_VERDICT,
        "assumptions": list(ASSUMPTIONS),
        "not_checked": NOT_CHECKED,
        "generated_at": utc_now(),
    }
