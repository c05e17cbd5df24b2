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


def watch_signal_alert(facility_id: str, cycle: int, plan_name: str, snapshot: dict,
                       value: int, units: int, nonconforming: int,
                       record_id: str) -> AlertDraft:
    """The alert of a watch chart that reached its limit after a clear
    (:mod:`service.watching`); the next cycle opens at once."""
    w = snapshot["watch"]
    detail = {"record_id": record_id, "plan": plan_name, "chart_value": value,
              "limit": w["t"], "weight": w["m"], "units_watched": units,
              "nonconforming_watched": nonconforming, "p0": snapshot["p0"],
              "p1_watch": w["p1"], "arl_p0": w.get("arl_p0"), "new_cycle": cycle + 1}
    return AlertDraft("watch_signal", facility_id, cycle, detail)


# -- triage: which alerts need someone's review ------------------------------------------------
#: Alerts that ask for a judgement: a flag, a decision revised by a void, a signal of the
#: watch chart, a stale cycle (no records for too long), a webhook that was not delivered.
NEEDS_REVIEW = frozenset({"flagged", "decision_revised", "watch_signal", "stale",
                          "delivery_failed"})
#: Alerts that only inform: listed, filterable and delivered, but not in the open review
#: queue unless asked for.
INFORMATIONAL = frozenset({"cleared", "cap_reached"})


def needs_review(kind: str) -> bool:
    """True for the kinds of alert that ask for a review; an unknown kind errs towards review."""
    return kind not in INFORMATIONAL
