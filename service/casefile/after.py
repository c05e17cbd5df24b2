"""The case file's part after the decision: records kept after it (summarised), the watch
chart that followed a clear, and the findings of the review (who, when)."""
from __future__ import annotations

from ..operations import finding_public, watch_public


def after_decision(store, facility_id: str, cycle: int, cyc_row: dict, snap: dict) -> dict:
    """JSON-ready dict: ``after_decision`` summary, ``watch`` (None without one), ``findings``."""
    watch = watch_public(cyc_row, snap)
    if watch is not None:
        path = store.watch_path(facility_id, cycle)
        watch["points"] = path["points"] if path else []
    return {"after_decision": store.post_decision_summary(facility_id, cycle),
            "watch": watch,
            "findings": [finding_public(f) for f in store.findings(facility_id, cycle)]}


def pdf_section(cf: dict, p, t, grid, h2, small) -> list:
    """Flowables of the section after the decision (reportlab helpers passed in so this
    module shares the PDF's styles)."""
    from reportlab.lib.units import mm
    out = [p("After the decision", h2)]
    after = cf.get("after_decision")
    if after and after["records"]:
        span = after["first_observed"][:10]
        if after["last_observed"][:10] != span:
            span += f" to {after['last_observed'][:10]}"
        out.append(p(f"{after['records']} record(s) were kept after the decision "
                     f"({after['units']} units, {after['nonconforming']} nonconforming), "
                     f"observed {t(span)} (UTC). They do not change the decision; they are "
                     "summarised after the records of the cycle below, and the JSON case "
                     "file lists each of them."))
    else:
        out.append(p("No record arrived after the decision."))
    w = cf.get("watch")
    if w is not None:
        if w["state"] == "signalled":
            text = (f"Watch chart after the clear: <b>signal</b> at {t(w['signal_at'])}: the "
                    f"chart reached {w['value']} (limit {w['t']}) after {w['units']} units "
                    f"({w['nonconforming']} nonconforming); the next cycle was opened.")
        else:
            text = (f"Watch chart after the clear: {w['value']} of the limit {w['t']} after "
                    f"{w['units']} units ({w['nonconforming']} nonconforming).")
        out.append(p(text + f" Chart S = max(0, S + {w['m']} X - 1) per unit (Reynolds and "
                     f"Stoumbos 1999), limit t = {w['t']} (h = {w['h']:.3f}); at p0 a false "
                     f"signal comes on average once in {(w['arl_p0'] or 0):.0f} units, at "
                     f"p1 = {w['p1']:g} after {(w['arl_p1'] or 0):.0f} units on average "
                     f"(exact, Markov chain of Brook and Evans 1972)."))
    out.append(p("Findings of the review", h2))
    if cf.get("findings"):
        rows = [["when (UTC)", "who", "outcome", "note"]]
        for f in cf["findings"]:
            rows.append([p(t(f["at"]), small), p(t(f["by"]), small),
                         p(t(f["outcome"]).replace("_", " "), small), p(t(f["note"]), small)])
        out.append(grid(rows, [36 * mm, 30 * mm, 36 * mm, 76 * mm]))
    else:
        out.append(p("No finding has been recorded for this cycle."))
    return out
