"""Assemble a case file: plan and why, every record in order, the path, the inference."""
from __future__ import annotations

import json
from functools import lru_cache

from ..cautions import ASSUMPTIONS, SIGNAL_NOT_VERDICT
from ..clock import utc_now
from ..errors import Conflict, Invalid
from ..operations import cycle_public, record_public
from ..stats import Recheck, design_plan
from ..stats.inference import infer
from ..stats.looks import looks_figures, sizes_differ
from ..store import Store, plan_from_snapshot
from .docid import with_document_id
from .draws import draws_section
from .trail_refs import trail_citation

NOT_CHECKED = [
    "whether the audited units were in fact selected at random (the service records what "
    "auditors send; it does not see how units were chosen)",
    "whether outcomes were independent, e.g. several units from one batch or one technician",
    "whether the facility's rate was stable during the cycle (no test for drift is made)",
    "the correctness of each re-check itself beyond the sensitivity and specificity the plan "
    "states (measurement error of the audit)",
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

ESTIMATE_NOTE = (
    "For a discrete outcome the median-unbiased estimate is median-unbiased on one side only: "
    "the chance that it lies above the true rate is at most one half, but the chance that it "
    "lies below can be much larger (a clear at the first chance, often the most likely "
    "outcome, gets the estimate 0). The mid-p estimate (Hirji, Tsiatis and Mehta, 'Median "
    "unbiased estimation for binary data', The American Statistician 43 (1989) 7-11) solves "
    "the same equation with the observed outcome counted half; it lies between the two "
    "one-sided medians and is less pulled down by early clears, but is also 0 for a clear at "
    "the very first chance. Read either beside the interval.")


def _true_rate_figures(rc: Recheck, inference) -> dict:
    """The estimates and interval for the true rate (Rogan-Gladen; the interval's ends mapped
    through the increasing map and clipped to [0, 1])."""
    low, high, clipped = rc.true_interval(inference.ci_low, inference.ci_high)
    note = ("Re-checks are imperfect (sensitivity {:g}, specificity {:g}): the test and its "
            "inference run on the apparent rate; the estimates and interval shown are for the "
            "true rate by the Rogan-Gladen correction p = (p* + Sp - 1) / (Se + Sp - 1) "
            "(Rogan and Gladen 1978), with the interval's ends mapped through it."
            ).format(rc.sensitivity, rc.specificity)
    if clipped:
        note += " An end fell outside [0, 1] and was clipped to it."
    return {"ci_low": low, "ci_high": high,
            "estimate_median_unbiased": rc.true_rate(inference.estimate_median_unbiased),
            "estimate_mid_p": rc.true_rate(inference.estimate_mid_p),
            "estimate_naive": rc.true_rate(inference.estimate_naive), "clipped": clipped,
            "note": note}


def looks_report(plan, snap: dict, sizes: list[int]) -> dict:
    """Whether the records' sizes differ from the plan's visit size, and if so the exact risks
    for the looks that actually happened (then looks every visit_units units again)."""
    k = int(snap.get("visit_units", 1))
    out = {"visit_units": k, "record_sizes_differ": sizes_differ(sizes, k)}
    if out["record_sizes_differ"]:
        fig = looks_figures(plan, sizes)
        out.update({"alpha": fig.alpha, "beta": fig.beta, "asn_p0": fig.asn_p0,
                    "asn_p1": fig.asn_p1, "residual": fig.residual, "note": (
                        f"The plan's figures assume a look after every {k} unit(s); this "
                        f"cycle's {len(sizes)} record(s) held other numbers of units, so its "
                        f"boundaries were looked at after each record. For those looks the "
                        f"exact risks are alpha' {fig.alpha:.4f} and beta' {fig.beta:.4f}.")})
    return out


def explain_plan(snap: dict, exact: dict | None = None) -> dict[str, str]:
    """What p0, p1, alpha, beta (and the cap) mean, in words, with this plan's exact risks."""
    pct = lambda x: f"{100 * x:.3g} %"
    exact_pct = lambda x: f"{100 * x:.4g} %"
    alpha = (f"exactly {exact_pct(exact['alpha'])} for this plan (it was designed for "
             f"{pct(snap['alpha'])})" if exact else f"about {pct(snap['alpha'])}")
    beta = (f"exactly {exact_pct(exact['beta'])} for this plan (it was designed for "
            f"{pct(snap['beta'])})" if exact else f"about {pct(snap['beta'])}")
    out = {
        "p0": f"{pct(snap['p0'])} of passed units nonconforming is the rate this plan treats as "
              "tolerable (H0).",
        "p1": f"{pct(snap['p1'])} nonconforming is the rate worth acting on (H1).",
        "alpha": f"A facility whose true rate is {pct(snap['p0'])} is flagged with probability "
                 f"{alpha} (risk of a false flag).",
        "beta": f"A facility whose true rate is {pct(snap['p1'])} is cleared with probability "
                f"{beta} (risk of missing it).",
    }
    if snap.get("visit_units", 1) != 1:
        out["visit_units"] = (f"The plan's figures assume the boundaries are looked at after "
                              f"every {snap['visit_units']} units (one record).")
    if snap.get("sensitivity", 1.0) < 1.0 or snap.get("specificity", 1.0) < 1.0:
        out["recheck"] = (f"A re-check finds a truly nonconforming unit with probability "
                          f"{snap['sensitivity']:g} and passes a conforming one with "
                          f"probability {snap['specificity']:g}; the test runs on the rates "
                          "the auditors record, and the figures are for the true rate.")
    if snap.get("max_units"):
        out["max_units"] = (f"A cycle still open after {snap['max_units']} audited units is "
                            f"decided there: flagged if the LLR is at least "
                            f"{snap['cut_llr']:g}, cleared otherwise.")
    return out


@lru_cache(maxsize=256)
def looks_report_for(plan_json: str, sizes: tuple[int, ...]) -> dict:
    """:func:`looks_report` for a stored snapshot text, kept for repeated page views."""
    snap = json.loads(plan_json)
    return looks_report(plan_from_snapshot(snap), snap, list(sizes))


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
    sizes = [r["units"] for r in evidence]
    inference = infer(plan, sizes, [r["nonconforming"] for r in evidence], level)
    rc = Recheck(snap.get("sensitivity", 1.0), snap.get("specificity", 1.0))
    figures = design_plan(plan, calibrated=bool(snap.get("calibrate")), recheck=rc,
                          true_p0=snap["p0"], true_p1=snap["p1"]).to_dict()
    true = _true_rate_figures(rc, inference)
    actions, _ = store.actions(limit=10_000, facility_id=facility_id, cycle=number)
    from .after import after_decision
    after = after_decision(store, facility_id, number, cyc, snap)
    cf = {
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
        "ci_low": true["ci_low"],
        "ci_high": true["ci_high"],
        "estimate_median_unbiased": true["estimate_median_unbiased"],
        "estimate_mid_p": true["estimate_mid_p"],
        "estimate_naive": true["estimate_naive"],
        "estimate_naive_note": "d/n after a sequential stop is biased; shown for comparison",
        "estimate_note": ESTIMATE_NOTE,
        "recheck": {**figures["recheck"], "perfect": rc.perfect,
                    "apparent": {"ci_low": inference.ci_low, "ci_high": inference.ci_high,
                                 "estimate_median_unbiased":
                                     inference.estimate_median_unbiased,
                                 "estimate_mid_p": inference.estimate_mid_p,
                                 "estimate_naive": inference.estimate_naive},
                    "clipped": true["clipped"],
                    "note": None if rc.perfect else true["note"]},
        "looks": looks_report(plan, snap, sizes),
        "warnings": figures["warnings"],
        "plan": {**snap, "exact_alpha": figures["exact"]["alpha"],
                 "exact_beta": figures["exact"]["beta"],
                 "asn_p0": figures["exact"]["asn_p0"], "asn_p1": figures["exact"]["asn_p1"],
                 "asn_max": figures["exact"]["asn_max"],
                 "first_flag_units": figures["exact"]["first_flag_units"],
                 "first_clear_units": figures["exact"]["first_clear_units"],
                 "h1": figures["boundaries"]["h1"], "h2": figures["boundaries"]["h2"],
                 "s": figures["boundaries"]["s"]},
        "plan_explained": explain_plan(snap, figures["exact"]),
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
    return with_document_id(cf)
