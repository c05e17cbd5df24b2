"""Findings: what the review of a decided cycle found (several per cycle).

A mixin of :class:`service.store.Store`: all SQL stays in this package. Each
finding is written in one transaction with its line on the action log (and on
the tamper-evident trail when the store has one).
"""
from __future__ import annotations

from ..errors import Conflict, NotFound

#: Outcomes of a review, in our own words.
OUTCOMES = ("referred", "no_action", "records_corrected", "retraining_ordered",
            "certification_suspended")
#: Cycles a finding can be recorded on: those the plan decided.
REVIEWABLE = ("flagged", "cleared")


def _trail_append():
    """``append_entry(conn, kind, content, at)`` of the trail when it exists, else None."""
    try:
        from .trail import append_entry
    except ImportError:
        return None
    return append_entry


class FindingsMixin:
    def add_finding(self, facility_id: str, cycle: int, outcome: str, note: str | None,
                    now: str, actor) -> dict:
        label, role = actor
        with self.write() as conn:
            row = conn.execute("SELECT status FROM cycles WHERE facility_id = ? AND cycle = ?",
                               (facility_id, cycle)).fetchone()
            if row is None:
                raise NotFound(f"facility {facility_id!r} has no cycle {cycle}",
                               facility_id=facility_id)
            if row[0] not in REVIEWABLE:
                raise Conflict(f"cycle {cycle} of {facility_id!r} is {row[0]}: findings are "
                               "recorded on a flagged or cleared cycle")
            cur = conn.execute("INSERT INTO findings (facility_id, cycle, outcome, note, at, "
                               "key_label, role) VALUES (?, ?, ?, ?, ?, ?, ?)",
                               (facility_id, cycle, outcome, note, now, label, role))
            finding_id = cur.lastrowid
            detail = {"finding_id": finding_id, "outcome": outcome, "note": note}
            self._log(conn, now, actor, "finding_recorded", detail, facility_id=facility_id,
                      cycle=cycle, target=str(finding_id))
            append = _trail_append()
            if append is not None:
                append(conn, "finding", {"facility_id": facility_id, "cycle": cycle,
                                         "by": label, **detail}, now)
        return self.finding(finding_id)

    def finding(self, finding_id: int) -> dict:
        rows = self.read("SELECT * FROM findings WHERE id = ?", (finding_id,))
        if not rows:
            raise NotFound(f"no finding {finding_id}")
        return rows[0]

    def post_decision_summary(self, facility_id: str, cycle: int) -> dict | None:
        """Records kept after a cycle's decision (not evidence, not void): how many, their
        units and nonconforming units, and the span of their observation times (UTC)."""
        rows = self.read("SELECT c.decided_seq AS decided_seq, COUNT(r.seq) AS records, "
                         "COALESCE(SUM(r.units), 0) AS units, COALESCE(SUM(r.nonconforming), 0) "
                         "AS nonconforming, MIN(r.observed_utc) AS first_observed, "
                         "MAX(r.observed_utc) AS last_observed FROM cycles c LEFT JOIN records r "
                         "ON r.facility_id = c.facility_id AND r.cycle = c.cycle AND r.void = 0 "
                         "AND r.seq > c.decided_seq WHERE c.facility_id = ? AND c.cycle = ? "
                         "GROUP BY c.facility_id, c.cycle", (facility_id, cycle))
        if not rows or rows[0]["decided_seq"] is None:
            return None
        out = rows[0]
        del out["decided_seq"]
        return out

    def findings(self, facility_id: str, cycle: int | None = None) -> list[dict]:
        if cycle is None:
            return self.read("SELECT * FROM findings WHERE facility_id = ? ORDER BY id",
                             (facility_id,))
        return self.read("SELECT * FROM findings WHERE facility_id = ? AND cycle = ? "
                         "ORDER BY id", (facility_id, cycle))
