"""What the facility page shows after a decision: a summary of the records kept after it
(the rows themselves on request, paged), the watch chart, and the findings of the review."""
from __future__ import annotations

import math

from .watch_svg import watch_chart

OUTCOME_TEXT = {"referred": "Referred for enforcement or inspection",
                "no_action": "No action needed",
                "records_corrected": "Records corrected",
                "retraining_ordered": "Retraining of the agency's technicians ordered",
                "certification_suspended": "The agency's certification suspended"}


def after_decision_context(m, facility_id: str, cyc: dict, records: list[dict],
                           show_after: bool, page_no: int, per_page: int) -> dict:
    """Template values for the part of the facility page after the decision.

    ``records``: the cycle's rows; those after the deciding record are summarised and
    left out of the table unless ``show_after``, in which case only they are listed, one
    page of ``per_page`` at a time.
    """
    out = {"watch": None, "watch_svg": None, "findings": cyc.get("findings", []),
           "outcomes": OUTCOME_TEXT, "after": cyc.get("after_decision"),
           "show_after": False, "after_page": 1, "after_pages": 1, "records": records}
    if cyc.get("decided_after_units") is not None:
        decided_seq = max((r["seq"] for r in records if r["evidence"]), default=0)
        before = [r for r in records if r["seq"] <= decided_seq]
        later = [r for r in records if r["seq"] > decided_seq]
        if show_after and later:
            pages = max(1, math.ceil(len(later) / per_page))
            page_no = min(max(page_no, 1), pages)
            out.update(show_after=True, after_page=page_no, after_pages=pages,
                       records=later[(page_no - 1) * per_page:page_no * per_page])
        else:
            out["records"] = before
    path = m.store.watch_path(facility_id, cyc["cycle"]) if cyc.get("watch") else None
    if path is not None:
        points = [(p["units"], p["value"]) for p in path["points"]]
        signal = ((points[-1][0], points[-1][1]) if path["state"] == "signalled" and points
                  else None)
        out["watch"] = {**cyc["watch"], "points": path["points"]}
        out["watch_svg"] = watch_chart(points, path["t"], path["m"], signal)
    return out
