"""Which alerts a decision raises: pure functions beside :mod:`service.monitor`.

The store only writes what these return (inside the transaction that stored the evidence);
what a decision means for the alert queue is decided here.
"""
from __future__ import annotations

from typing import NamedTuple

from .monitor import DECIDED, CycleState
from .stats import SprtPlan


class AlertDraft(NamedTuple):
    """An alert to be written: its kind, where it belongs and what it says."""

    kind: str
    facility_id: str
    cycle: int
    detail: dict


def decision_alerts(facility_id: str, cycle: int, plan_name: str, plan: SprtPlan,
                    state: CycleState, record_id: str) -> list[AlertDraft]:
    """The alerts of a cycle that has just decided (``state`` is the decided state).

    One alert named by the decision (``flagged`` or ``cleared``), and a ``cap_reached``
    notice beside it when the cap's cut rule made the decision.
    """
    detail = {"status": state.status, "units": state.units,
              "nonconforming": state.nonconforming,
              "llr": float(plan.llr(state.units, state.nonconforming)),
              "upper_llr": plan.upper_llr, "lower_llr": plan.lower_llr,
              "decided_after_units": state.decided_after_units, "record_id": record_id,
              "plan": plan_name, "at_cap": state.at_cap}
    out = [AlertDraft(state.status, facility_id, cycle, detail)]
    if state.at_cap:
        out.append(AlertDraft("cap_reached", facility_id, cycle, detail))
    return out


def void_alerts(facility_id: str, cycle: int, plan_name: str, plan: SprtPlan,
                before: CycleState, after: CycleState, record_id: str,
                reason: str) -> list[AlertDraft]:
    """The alerts of a void: none when the decision stands; otherwise ``decision_revised``,
    and the new decision's own alerts when the void produced a different decision."""
    if (before.status, before.decided_seq) == (after.status, after.decided_seq):
        return []
    detail = {"record_id": record_id, "reason": reason,
              "before": {"status": before.status,
                         "decided_after_units": before.decided_after_units},
              "after": {"status": after.status,
                        "decided_after_units": after.decided_after_units},
              "plan": plan_name}
    out = [AlertDraft("decision_revised", facility_id, cycle, detail)]
    if after.status in DECIDED and after.status != before.status:
        out += decision_alerts(facility_id, cycle, plan_name, plan, after, record_id)
    return out
