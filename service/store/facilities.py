"""Facilities and their monitoring cycles: register, list, open and close cycles."""
from __future__ import annotations

import json

from ..errors import Conflict, NotFound
from ..monitor import CLOSED
from ..stats import MONITORING
from .common import position


def snapshot_ref(conn, snapshot: dict) -> int:
    """The number of a plan snapshot in ``plan_snapshots``, stored first if it is new (each
    snapshot's text once, however many cycles use it)."""
    text = json.dumps(snapshot, sort_keys=True)
    row = conn.execute("SELECT ref FROM plan_snapshots WHERE plan_json = ?", (text,)).fetchone()
    if row is not None:
        return row[0]
    return conn.execute("INSERT INTO plan_snapshots (plan_json) VALUES (?)", (text,)).lastrowid


class FacilitiesMixin:
    def add_facility(self, facility_id: str, name: str, plan_name: str, snapshot: dict,
                     now: str, actor, region: str | None = None) -> None:
        with self.write() as conn:
            self._insert_facility(conn, facility_id, name, plan_name, snapshot, now, actor,
                                  region)

    def _insert_facility(self, conn, facility_id, name, plan_name, snapshot, now, actor,
                         region=None):
        if conn.execute("SELECT 1 FROM facilities WHERE facility_id = ?",
                        (facility_id,)).fetchone():
            raise Conflict(f"facility {facility_id!r} is already registered",
                           facility_id=facility_id)
        if region is None:
            conn.execute("INSERT INTO facilities (facility_id, name, plan, created_at, "
                         "current_cycle) VALUES (?, ?, ?, ?, 1)",
                         (facility_id, name, plan_name, now))
        else:
            conn.execute("INSERT INTO facilities (facility_id, name, plan, created_at, "
                         "current_cycle, region) VALUES (?, ?, ?, ?, 1, ?)",
                         (facility_id, name, plan_name, now, region))
        self._insert_cycle(conn, facility_id, 1, plan_name, snapshot, now)
        self._log(conn, now, actor, "facility_registered",
                  {"name": name, "plan": plan_name, **({"region": region} if region else {})},
                  facility_id=facility_id, cycle=1)

    def add_facilities(self, rows: list[tuple], now: str, actor) -> list[str | None]:
        """Register many facilities in one transaction; per row None or the reason it failed.

        Rows are (facility_id, name, plan, snapshot) or with a fifth item, the region.
        """
        out: list[str | None] = []
        with self.write() as conn:
            for facility_id, name, plan_name, snapshot, *more in rows:
                try:
                    conn.execute("SAVEPOINT one")
                    self._insert_facility(conn, facility_id, name, plan_name, snapshot, now, actor,
                                          more[0] if more else None)
                    conn.execute("RELEASE one")
                    out.append(None)
                except Conflict as exc:
                    conn.execute("ROLLBACK TO one")
                    conn.execute("RELEASE one")
                    out.append(exc.detail)
        return out

    @staticmethod
    def _insert_cycle(conn, facility_id, cycle, plan_name, snapshot, now):
        """A new cycle, which becomes the facility's current one (every caller then points
        ``facilities.current_cycle`` at it): the one before stops being current."""
        conn.execute("UPDATE cycles SET is_current = 0 WHERE facility_id = ? AND is_current = 1",
                     (facility_id,))
        conn.execute("INSERT INTO cycles (facility_id, cycle, plan_name, plan_ref, status, units, "
                     "nonconforming, llr, opened_at, at_cap, record_count, is_current, "
                     "llr_position) VALUES (?, ?, ?, ?, ?, 0, 0, 0.0, ?, 0, 0, 1, ?)",
                     (facility_id, cycle, plan_name, snapshot_ref(conn, snapshot),
                      MONITORING, now, position(0.0, snapshot["lower_llr"],
                                                snapshot["upper_llr"])))

    def facility(self, facility_id: str) -> dict:
        rows = self.read("SELECT f.facility_id, f.name, f.plan, f.created_at, f.current_cycle, "
                         "f.region, c.* FROM facilities f JOIN cycles_planned c ON "
                         "c.facility_id = f.facility_id AND c.cycle = f.current_cycle "
                         "WHERE f.facility_id = ?", (facility_id,))
        if not rows:
            raise NotFound(f"no facility {facility_id!r}", facility_id=facility_id)
        return rows[0]

    def facilities(self, status=None, plan=None, search=None, sort="facility_id",
                   descending=False, limit=100, offset=0, region=None) -> tuple[list[dict], int]:
        """One page of facilities with their current cycles, and how many match.

        The count comes from the maintained ``facility_counts`` (a search or a region
        counts its matches). Ordered by facility id (the primary key) or by position between
        the boundaries (an index over current cycles), a page reads only its own rows; the
        other orders sort all current cycles. Ties go by facility id in the same direction.
        """
        where, params = ["c.is_current = 1"], []
        if region is not None:
            where.append("f.region = ?")
            params.append(region)
        if status == "watching":
            where.append("c.status = 'cleared' AND c.watch_state = 'watching'")
        elif status == "cleared":
            where.append("c.status = 'cleared' AND c.watch_state IS NOT 'watching'")
        elif status is not None:
            where.append("c.status = ?")
            params.append(status)
        if plan is not None:
            where.append("f.plan = ?")
            params.append(plan)
        if search:
            where.append("(f.facility_id LIKE ? ESCAPE '\\' OR f.name LIKE ? ESCAPE '\\')")
            pattern = "%" + search.replace("\\", "\\\\").replace("%", "\\%").replace("_", "\\_") + "%"
            params += [pattern, pattern]
        clause = f"WHERE {' AND '.join(where)}"
        orders = {"facility_id": "c.facility_id", "name": "f.name", "units": "c.units",
                  "last_record_at": "c.last_record_at", "llr": "c.llr",
                  "llr_position": "c.llr_position"}
        way = " DESC" if descending else ""
        order = f"{orders[sort]}{way}, c.facility_id{way}" if sort != "facility_id" \
            else f"c.facility_id{way}"
        base = "FROM {} c JOIN facilities f ON f.facility_id = c.facility_id " + clause
        if search or region is not None:
            total = self.read(f"SELECT COUNT(*) AS n {base.format('cycles')}", params)[0]["n"]
        else:
            total = self._facility_count(status, plan)
        rows = self.read(f"SELECT f.facility_id, f.name, f.plan, f.created_at, f.current_cycle, "
                         f"f.region, c.* {base.format('cycles_planned')} ORDER BY {order} LIMIT ? OFFSET ?",
                         [*params, limit, offset])
        return rows, total

    def _facility_count(self, status=None, plan=None) -> int:
        """Facilities with a current cycle of this shown status and plan (maintained)."""
        where = [f"{k} = ?" for k, v in (("status", status), ("plan", plan)) if v is not None]
        clause = f"WHERE {' AND '.join(where)}" if where else ""
        return self.read(f"SELECT COALESCE(SUM(n), 0) AS n FROM facility_counts {clause}",
                         [v for v in (status, plan) if v is not None])[0]["n"]

    def cycles(self, facility_id: str) -> list[dict]:
        return self.read("SELECT * FROM cycles_planned WHERE facility_id = ? ORDER BY cycle",
                         (facility_id,))

    def cycle(self, facility_id: str, cycle: int) -> dict:
        rows = self.read("SELECT * FROM cycles_planned WHERE facility_id = ? AND cycle = ?",
                         (facility_id, cycle))
        if not rows:
            raise NotFound(f"facility {facility_id!r} has no cycle {cycle}")
        return rows[0]

    def status_counts(self) -> dict[str, int]:
        """Facilities by the shown status of their current cycle (maintained counts)."""
        rows = self.read("SELECT status, SUM(n) AS n FROM facility_counts GROUP BY status "
                         "HAVING SUM(n) > 0")
        return {r["status"]: r["n"] for r in rows}

    def open_cycle(self, facility_id: str, snapshot: dict, now: str, actor) -> int:
        with self.write() as conn:
            row = conn.execute("SELECT f.current_cycle, c.status, f.plan FROM facilities f JOIN "
                               "cycles c ON c.facility_id = f.facility_id AND c.cycle = "
                               "f.current_cycle WHERE f.facility_id = ?",
                               (facility_id,)).fetchone()
            if row is None:
                raise NotFound(f"no facility {facility_id!r}", facility_id=facility_id)
            current, status, plan_name = row
            if status == MONITORING:
                raise Conflict(f"cycle {current} of {facility_id!r} is still being monitored; "
                               "close it or wait for a decision before opening another")
            new = current + 1
            self._insert_cycle(conn, facility_id, new, plan_name, snapshot, now)
            conn.execute("UPDATE facilities SET current_cycle = ? WHERE facility_id = ?",
                         (new, facility_id))
            self._log(conn, now, actor, "cycle_opened", {"previous_status": status},
                      facility_id=facility_id, cycle=new)
        return new

    def close_cycle(self, facility_id: str, reason: str, now: str, actor) -> int:
        with self.write() as conn:
            row = conn.execute("SELECT f.current_cycle, c.status FROM facilities f JOIN cycles c "
                               "ON c.facility_id = f.facility_id AND c.cycle = f.current_cycle "
                               "WHERE f.facility_id = ?", (facility_id,)).fetchone()
            if row is None:
                raise NotFound(f"no facility {facility_id!r}", facility_id=facility_id)
            current, status = row
            if status != MONITORING:
                raise Conflict(f"facility {facility_id!r} has no open cycle (cycle {current} is "
                               f"{status})")
            last = conn.execute("SELECT COALESCE(MAX(seq), 0) FROM records").fetchone()[0]
            conn.execute("UPDATE cycles SET status = ?, closed_at = ?, closed_reason = ?, "
                         "closed_seq = ? WHERE facility_id = ? AND cycle = ?",
                         (CLOSED, now, reason, last, facility_id, current))
            self._log(conn, now, actor, "cycle_closed", {"reason": reason},
                      facility_id=facility_id, cycle=current)
        return current
