"""Alerts: insert (with their webhook outbox rows), list, acknowledge."""
from __future__ import annotations

import json

from ..alerting import AlertDraft, needs_review
from ..errors import Conflict, NotFound
from .trail import alert_content, alert_entry_kind, append_entry


class AlertsMixin:
    def _insert_alerts(self, conn, alerts: list[AlertDraft], now: str) -> list[int]:
        """Insert alerts and, in the same transaction, their webhook outbox rows."""
        ids = []
        for kind, fid, cycle, detail in alerts:
            text = json.dumps(detail, sort_keys=True)
            cur = conn.execute("INSERT INTO alerts (kind, facility_id, cycle, created_at, state, "
                               "detail, needs_review) VALUES (?, ?, ?, ?, 'open', ?, ?)",
                               (kind, fid, cycle, now, text, int(needs_review(kind))))
            ids.append(cur.lastrowid)
            append_entry(conn, alert_entry_kind(kind),
                         alert_content(cur.lastrowid, kind, fid, cycle, now, text), now,
                         ref=cur.lastrowid)
            self._enqueue(conn, cur.lastrowid, kind, fid, cycle, detail, now)
        return ids

    def alerts(self, state=None, kind=None, facility_id=None, limit=100, offset=0,
               needs_review=None) -> tuple[list[dict], int]:
        rows, total = self._page("alerts", "alert_id DESC",
                                 {"state": state, "kind": kind, "facility_id": facility_id,
                                  "needs_review": None if needs_review is None
                                  else int(needs_review)}, limit, offset)
        for r in rows:
            r["needs_review"] = bool(r["needs_review"])
        return rows, total

    def alert(self, alert_id: int) -> dict:
        rows = self.read("SELECT * FROM alerts WHERE alert_id = ?", (alert_id,))
        if not rows:
            raise NotFound(f"no alert {alert_id}")
        rows[0]["detail"] = json.loads(rows[0]["detail"])
        rows[0]["needs_review"] = bool(rows[0]["needs_review"])
        return rows[0]

    def ack_alert(self, alert_id: int, note: str | None, now: str, actor) -> dict:
        with self.write() as conn:
            row = conn.execute("SELECT state, acked_at, acked_by, facility_id, cycle FROM alerts "
                               "WHERE alert_id = ?", (alert_id,)).fetchone()
            if row is None:
                raise NotFound(f"no alert {alert_id}")
            state, acked_at, acked_by, fid, cycle = row
            if state == "acknowledged":
                raise Conflict(f"alert {alert_id} was already acknowledged at {acked_at} by "
                               f"{acked_by}")
            conn.execute("UPDATE alerts SET state = 'acknowledged', acked_at = ?, acked_by = ?, "
                         "ack_note = ? WHERE alert_id = ?", (now, actor[0], note, alert_id))
            self._log(conn, now, actor, "alert_acknowledged", {"alert_id": alert_id, "note": note},
                      facility_id=fid, cycle=cycle, target=str(alert_id))
        return self.alert(alert_id)

    def ack_alerts(self, alert_ids: list[int], note: str | None, now: str,
                   actor) -> tuple[list[int], list[int]]:
        """Acknowledge several alerts with one note in one transaction; returns the ids
        acknowledged now and those skipped (unknown or already acknowledged)."""
        done, skipped = [], []
        with self.write() as conn:
            for alert_id in dict.fromkeys(alert_ids):
                row = conn.execute("SELECT state, facility_id, cycle FROM alerts WHERE "
                                   "alert_id = ?", (alert_id,)).fetchone()
                if row is None or row[0] == "acknowledged":
                    skipped.append(alert_id)
                    continue
                conn.execute("UPDATE alerts SET state = 'acknowledged', acked_at = ?, "
                             "acked_by = ?, ack_note = ? WHERE alert_id = ?",
                             (now, actor[0], note, alert_id))
                self._log(conn, now, actor, "alert_acknowledged",
                          {"alert_id": alert_id, "note": note, "together_with": len(alert_ids)},
                          facility_id=row[1], cycle=row[2], target=str(alert_id))
                done.append(alert_id)
        return done, skipped

    def open_alert_count(self, needs_review: bool | None = None) -> int:
        if needs_review is None:
            return self.read("SELECT COUNT(*) AS n FROM alerts WHERE state = 'open'")[0]["n"]
        return self.read("SELECT COUNT(*) AS n FROM alerts WHERE state = 'open' AND "
                         "needs_review = ?", (int(needs_review),))[0]["n"]
