"""Read-only queries of the audit program: the open cycles of the register, regions.

Nothing here writes; the forecast and the visit list are computed from these
rows by the pure functions of :mod:`service.program`.
"""
from __future__ import annotations

OPEN_COLUMNS = ("facility_id", "name", "plan", "region", "cycle", "plan_json", "units",
                "nonconforming", "opened_at", "last_record_at", "record_count", "since")


class ProgramMixin:
    """Program queries, composed into :class:`service.store.Store`."""

    def _open_cycles_cursor(self, region: str | None):
        where, params = "c.status = 'monitoring'", []
        if region is not None:
            where += " AND f.region = ?"
            params.append(region)
        return self._conn().execute(
            "SELECT f.facility_id, f.name, f.plan, f.region, c.cycle, "
            "(SELECT p.plan_json FROM plan_snapshots p WHERE p.ref = c.plan_ref), c.units, "
            "c.nonconforming, c.opened_at, c.last_record_at, c.record_count, "
            "COALESCE(c.last_record_at, c.opened_at) "
            # CROSS JOIN keeps SQLite's join order: facilities in key order (no sort),
            # each current cycle found by its primary key
            "FROM facilities f CROSS JOIN cycles c ON c.facility_id = f.facility_id "
            f"AND c.cycle = f.current_cycle WHERE {where} ORDER BY f.facility_id", params)

    def open_cycles(self, region: str | None = None) -> list[dict]:
        """Every facility's open current cycle (facility_id order), one dict per cycle."""
        return [dict(zip(OPEN_COLUMNS, row)) for row in
                self._open_cycles_cursor(region).fetchall()]

    def open_cycle_columns(self, region: str | None = None) -> dict[str, list]:
        """The same rows as :meth:`open_cycles`, column by column (one list per column):
        cheaper for the whole register than a dict per row."""
        rows = self._open_cycles_cursor(region).fetchall()
        if not rows:
            return {c: [] for c in OPEN_COLUMNS}
        return dict(zip(OPEN_COLUMNS, (list(col) for col in zip(*rows))))

    def regions(self) -> list[str]:
        """The regions facilities are registered in (sorted)."""
        return [r["region"] for r in self.read(
            "SELECT DISTINCT region FROM facilities WHERE region IS NOT NULL ORDER BY region")]

    def region_known(self, region: str) -> bool:
        return bool(self.read("SELECT 1 AS x FROM facilities WHERE region = ? LIMIT 1",
                              (region,)))
