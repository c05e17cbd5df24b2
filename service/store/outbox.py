"""Webhook subscriptions, the alert outbox, delivery attempts, job leases and job runs.

A mixin of :class:`service.store.Store`: all SQL stays in this package.
"""
from __future__ import annotations

import json

from ..alerting import AlertDraft
from ..errors import Conflict, NotFound

# Alerts about delivery itself are never sent to webhooks (a dead receiver would loop).
NOT_DELIVERED = {"delivery_failed"}


def _row_dicts(cursor) -> list[dict]:
    names = [c[0] for c in cursor.description]
    return [dict(zip(names, r)) for r in cursor.fetchall()]


class OutboxMixin:
    # -- subscriptions ---------------------------------------------------------
    def add_webhook(self, url: str, secret: str, kinds: list[str], now: str, actor) -> dict:
        with self.write() as conn:
            cur = conn.execute("INSERT INTO webhooks (url, secret, kinds, created_at) VALUES "
                               "(?, ?, ?, ?)", (url, secret, json.dumps(sorted(set(kinds))), now))
            hook_id = cur.lastrowid
            self._log(conn, now, actor, "webhook_added", {"webhook_id": hook_id, "url": url,
                                                          "kinds": sorted(set(kinds))},
                      target=str(hook_id))
        return self.webhook(hook_id)

    def webhook(self, hook_id: int, with_secret: bool = False) -> dict:
        rows = self.read("SELECT * FROM webhooks WHERE id = ?", (hook_id,))
        if not rows:
            raise NotFound(f"no webhook {hook_id}")
        return self._hook_public(rows[0], with_secret)

    @staticmethod
    def _hook_public(row: dict, with_secret: bool = False) -> dict:
        out = {"id": row["id"], "url": row["url"], "kinds": json.loads(row["kinds"]),
               "created_at": row["created_at"], "active": row["disabled_at"] is None,
               "disabled_at": row["disabled_at"], "disabled_reason": row["disabled_reason"]}
        if with_secret:
            out["secret"] = row["secret"]
        return out

    def webhooks(self) -> list[dict]:
        return [self._hook_public(r) for r in self.read("SELECT * FROM webhooks ORDER BY id")]

    def disable_webhook(self, hook_id: int, reason: str, now: str, actor=None, conn=None) -> dict:
        def apply(c):
            row = c.execute("SELECT disabled_at FROM webhooks WHERE id = ?", (hook_id,)).fetchone()
            if row is None:
                raise NotFound(f"no webhook {hook_id}")
            if row[0] is not None:
                raise Conflict(f"webhook {hook_id} was already disabled at {row[0]}")
            c.execute("UPDATE webhooks SET disabled_at = ?, disabled_reason = ? WHERE id = ?",
                      (now, reason, hook_id))
            c.execute("UPDATE outbox SET status = 'cancelled', last_error = ? WHERE webhook_id = ? "
                      "AND status = 'pending'", (f"subscription disabled: {reason}", hook_id))
            if actor is not None:
                self._log(c, now, actor, "webhook_disabled", {"webhook_id": hook_id,
                                                              "reason": reason},
                          target=str(hook_id))
        if conn is not None:
            apply(conn)
        else:
            with self.write() as c:
                apply(c)
        return self.webhook(hook_id) if conn is None else {}

    # -- the outbox, filled in the alert's own transaction --------------------------
    def _enqueue(self, conn, alert_id: int, kind: str, facility_id: str, cycle, detail: dict,
                 now: str) -> None:
        if kind in NOT_DELIVERED:
            return
        hooks = [h for h in _row_dicts(conn.execute(
            "SELECT id, kinds FROM webhooks WHERE disabled_at IS NULL"))
            if kind in json.loads(h["kinds"])]
        if not hooks:
            return
        fac = _row_dicts(conn.execute(
            "SELECT f.facility_id, f.name, f.plan, c.cycle, c.status, c.units, c.nonconforming, "
            "c.llr, c.decided_at, c.decided_after_units, (SELECT p.plan_json FROM plan_snapshots p "
            "WHERE p.ref = c.plan_ref) AS plan_json FROM facilities f JOIN "
            "cycles c ON c.facility_id = f.facility_id AND c.cycle = ? WHERE f.facility_id = ?",
            (cycle, facility_id)))
        state = fac[0] if fac else {}
        plan = json.loads(state.pop("plan_json", "{}") or "{}")
        payload = {
            "type": f"alert.{kind}", "timestamp": now,
            "data": {
                "alert": {"alert_id": alert_id, "kind": kind, "facility_id": facility_id,
                          "cycle": cycle, "created_at": now, "detail": detail},
                "facility": {"facility_id": facility_id, "name": state.get("name"),
                             "plan": state.get("plan")},
                "cycle": {k: state.get(k) for k in ("cycle", "status", "units", "nonconforming",
                                                    "llr", "decided_at", "decided_after_units")},
                "plan": plan,
                "caution": "A boundary crossing is a statistical signal for review under the "
                           "agency's own procedures, not a verdict.",
            }}
        body = json.dumps(payload, sort_keys=True, separators=(",", ":"))
        for h in hooks:
            conn.execute("INSERT INTO outbox (webhook_id, alert_id, msg_id, event_type, payload, "
                         "status, attempts, created_at, window_start, next_attempt_at) VALUES "
                         "(?, ?, ?, ?, ?, 'pending', 0, ?, ?, ?)",
                         (h["id"], alert_id, f"msg_alert{alert_id}_hook{h['id']}",
                          payload["type"], body, now, now, now))

    def due_deliveries(self, now: str, limit: int) -> list[dict]:
        return self.read("SELECT o.*, w.url, w.secret FROM outbox o JOIN webhooks w ON "
                         "w.id = o.webhook_id WHERE o.status = 'pending' AND w.disabled_at IS NULL "
                         "AND o.next_attempt_at <= ? ORDER BY o.next_attempt_at, o.id LIMIT ?",
                         (now, limit))

    def record_attempt(self, outbox_id: int, at: str, status_code: int | None, error: str | None,
                       duration_ms: float, outcome: str, next_attempt_at: str | None,
                       failed_alert: dict | None = None, disable_reason: str | None = None) -> None:
        """Write one attempt and its consequence (delivered / retry / failed / gone)."""
        with self.write() as conn:
            conn.execute("INSERT INTO delivery_attempts (outbox_id, at, status_code, error, "
                         "duration_ms) VALUES (?, ?, ?, ?, ?)",
                         (outbox_id, at, status_code, error, duration_ms))
            status = {"delivered": "delivered", "retry": "pending", "failed": "failed",
                      "gone": "cancelled"}[outcome]
            conn.execute("UPDATE outbox SET attempts = attempts + 1, status = ?, next_attempt_at = ?, "
                         "last_error = ?, delivered_at = CASE WHEN ? = 'delivered' THEN ? ELSE "
                         "delivered_at END WHERE id = ?",
                         (status, next_attempt_at, error, outcome, at, outbox_id))
            if disable_reason is not None:
                hook, gone_at = conn.execute(
                    "SELECT w.id, w.disabled_at FROM outbox o JOIN webhooks w ON "
                    "w.id = o.webhook_id WHERE o.id = ?", (outbox_id,)).fetchone()
                if gone_at is None:      # another run may have disabled it already
                    self.disable_webhook(hook, disable_reason, at, conn=conn)
            if failed_alert is not None:
                self._insert_alerts(conn, [AlertDraft("delivery_failed",
                                                      failed_alert["facility_id"],
                                                      failed_alert["cycle"], failed_alert)], at)

    def defer_deliveries(self, outbox_ids: list[int], until: str) -> None:
        """Let pending deliveries wait until ``until`` without counting an attempt (their
        subscription's receiver just failed; they are tried after it recovers)."""
        if not outbox_ids:
            return
        with self.write() as conn:
            conn.executemany("UPDATE outbox SET next_attempt_at = MAX(next_attempt_at, ?) "
                             "WHERE id = ? AND status = 'pending'",
                             [(until, i) for i in outbox_ids])

    def deliveries(self, hook_id: int, limit: int = 100, offset: int = 0) -> tuple[list[dict], int]:
        self.webhook(hook_id)
        total = self.read("SELECT COUNT(*) AS n FROM outbox WHERE webhook_id = ?",
                          (hook_id,))[0]["n"]
        rows = self.read("SELECT id, webhook_id, alert_id, msg_id, event_type, status, attempts, "
                         "created_at, next_attempt_at, delivered_at, last_error FROM outbox "
                         "WHERE webhook_id = ? ORDER BY id DESC LIMIT ? OFFSET ?",
                         (hook_id, limit, offset))
        if rows:
            marks = ",".join("?" * len(rows))
            tries: dict[int, list] = {}
            for a in self.read(f"SELECT * FROM delivery_attempts WHERE outbox_id IN ({marks}) "
                               "ORDER BY id", [r["id"] for r in rows]):
                tries.setdefault(a["outbox_id"], []).append(
                    {"at": a["at"], "status_code": a["status_code"], "error": a["error"],
                     "duration_ms": a["duration_ms"]})
            for r in rows:
                r["attempt_log"] = tries.get(r["id"], [])
        return rows, total

    def retry_delivery(self, hook_id: int, delivery_id: int, now: str, actor) -> dict:
        with self.write() as conn:
            row = conn.execute("SELECT status FROM outbox WHERE id = ? AND webhook_id = ?",
                               (delivery_id, hook_id)).fetchone()
            if row is None:
                raise NotFound(f"webhook {hook_id} has no delivery {delivery_id}")
            active = conn.execute("SELECT disabled_at FROM webhooks WHERE id = ?",
                                  (hook_id,)).fetchone()[0] is None
            if not active:
                raise Conflict(f"webhook {hook_id} is disabled; add a new subscription")
            if row[0] == "delivered":
                raise Conflict(f"delivery {delivery_id} was already delivered")
            conn.execute("UPDATE outbox SET status = 'pending', next_attempt_at = ?, "
                         "window_start = ? WHERE id = ?", (now, now, delivery_id))
            self._log(conn, now, actor, "delivery_retried", {"webhook_id": hook_id,
                                                             "delivery_id": delivery_id},
                      target=str(delivery_id))
        rows, _ = self.deliveries(hook_id, limit=1000)
        return next(r for r in rows if r["id"] == delivery_id)

    def outbox_status(self, alert_ids: list[int]) -> dict[int, list[dict]]:
        if not alert_ids:
            return {}
        marks = ",".join("?" * len(alert_ids))
        out: dict[int, list[dict]] = {}
        for r in self.read(f"SELECT alert_id, webhook_id, status, attempts FROM outbox WHERE "
                           f"alert_id IN ({marks}) ORDER BY id", alert_ids):
            out.setdefault(r["alert_id"], []).append(r)
        return out

    # -- leases and job runs -----------------------------------------------------
    def acquire_lease(self, name: str, holder: str, now_s: float, ttl_s: float) -> bool:
        """Take or renew the lease ``name``; an expired lease is free to take."""
        with self.write() as conn:
            row = conn.execute("SELECT holder, expires_at FROM leases WHERE name = ?",
                               (name,)).fetchone()
            if row is not None and row[0] != holder and row[1] > now_s:
                return False
            conn.execute("INSERT INTO leases (name, holder, expires_at) VALUES (?, ?, ?) "
                         "ON CONFLICT(name) DO UPDATE SET holder = excluded.holder, "
                         "expires_at = excluded.expires_at", (name, holder, now_s + ttl_s))
            return True

    def release_lease(self, name: str, holder: str) -> None:
        with self.write() as conn:
            conn.execute("DELETE FROM leases WHERE name = ? AND holder = ?", (name, holder))

    def claim_tick(self, job: str, tick: int, holder: str, now: str) -> bool:
        """Record that ``job`` runs for ``tick``; False if some process already ran it."""
        with self.write() as conn:
            cur = conn.execute("INSERT OR IGNORE INTO job_runs (job, tick, holder, started_at) "
                               "VALUES (?, ?, ?, ?)", (job, tick, holder, now))
            return cur.rowcount == 1

    def finish_tick(self, job: str, tick: int, now: str, outcome: str) -> None:
        with self.write() as conn:
            conn.execute("UPDATE job_runs SET finished_at = ?, outcome = ? WHERE job = ? AND "
                         "tick = ?", (now, outcome, job, tick))

    def job_runs(self, job: str | None = None) -> list[dict]:
        if job is None:
            return self.read("SELECT * FROM job_runs ORDER BY job, tick")
        return self.read("SELECT * FROM job_runs WHERE job = ? ORDER BY tick", (job,))

    # -- what the calendar jobs look at -------------------------------------------------
    def stale_candidates(self, cutoff_by_plan: dict[str, str]) -> list[dict]:
        """Open current cycles whose last record (or opening) is older than their plan's cutoff
        and that have no stale alert yet."""
        out = []
        for plan, cutoff in cutoff_by_plan.items():
            out += self.read(
                "SELECT c.facility_id, c.cycle, c.plan_name, c.opened_at, c.last_record_at FROM "
                "facilities f JOIN cycles c ON c.facility_id = f.facility_id AND c.cycle = "
                "f.current_cycle WHERE c.status = 'monitoring' AND c.plan_name = ? AND "
                "COALESCE(c.last_record_at, c.opened_at) <= ? AND NOT EXISTS (SELECT 1 FROM alerts a "
                "WHERE a.facility_id = c.facility_id AND a.cycle = c.cycle AND a.kind = 'stale')",
                (plan, cutoff))
        return out

    def raise_stale(self, facility_id: str, cycle: int, detail: dict, now: str) -> bool:
        """One stale alert per cycle, checked again inside the write transaction."""
        with self.write() as conn:
            row = conn.execute("SELECT c.status, f.current_cycle FROM cycles c JOIN facilities f ON "
                               "f.facility_id = c.facility_id WHERE c.facility_id = ? AND "
                               "c.cycle = ?", (facility_id, cycle)).fetchone()
            if row is None or row[0] != "monitoring" or row[1] != cycle:
                return False
            if conn.execute("SELECT 1 FROM alerts WHERE facility_id = ? AND cycle = ? AND "
                            "kind = 'stale'", (facility_id, cycle)).fetchone():
                return False
            self._insert_alerts(conn, [AlertDraft("stale", facility_id, cycle, detail)], now)
            return True

    def remonitor_candidates(self, cutoff_by_plan: dict[str, str]) -> list[dict]:
        out = []
        for plan, cutoff in cutoff_by_plan.items():
            out += self.read(
                "SELECT c.facility_id, c.cycle, f.plan, c.decided_at FROM facilities f JOIN cycles "
                "c ON c.facility_id = f.facility_id AND c.cycle = f.current_cycle WHERE "
                "c.status = 'cleared' AND f.plan = ? AND c.decided_at <= ?", (plan, cutoff))
        return out


class SessionMixin:
    """Dashboard sessions."""

    def create_session(self, token_hash: str, key_id: int, csrf: str, now: str,
                       expires_at: float) -> None:
        with self.write() as conn:
            conn.execute("DELETE FROM ui_sessions WHERE expires_at < ?", (expires_at - 86400 * 30,))
            conn.execute("INSERT INTO ui_sessions (token_hash, key_id, csrf, created_at, "
                         "expires_at) VALUES (?, ?, ?, ?, ?)",
                         (token_hash, key_id, csrf, now, expires_at))

    def session(self, token_hash: str, now_s: float) -> dict | None:
        rows = self.read("SELECT s.csrf, s.expires_at, k.id AS key_id, k.label, k.role, "
                         "k.revoked_at FROM ui_sessions s JOIN keys k ON k.id = s.key_id "
                         "WHERE s.token_hash = ?", (token_hash,))
        if not rows or rows[0]["expires_at"] < now_s or rows[0]["revoked_at"] is not None:
            return None
        return rows[0]

    def end_session(self, token_hash: str) -> None:
        with self.write() as conn:
            conn.execute("DELETE FROM ui_sessions WHERE token_hash = ?", (token_hash,))
