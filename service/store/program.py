"""Read-only queries of the audit program: the open cycles of the register, regions.

Nothing here writes; the forecast and the visit list are computed from these
rows by the pure functions of :mod:`service.program`.
"""
from __future__ import annotations


class ProgramMixin:
    """Program queries, composed into :class:`service.store.Store`."""

    def open_cycles(self, region: str | None = None) -> list[dict]:
        """Every facility's open current cycle, with what the forecast and visits need."""
        where, params = "c.status = 'monitoring'", []
        if region is not None:
            where += " AND f.region = ?"
            params.append(region)
        return self.read(
            "SELECT f.facility_id, f.name, f.plan, f.region, c.cycle, c.plan_json, c.units, "
            "c.nonconforming, c.opened_at, c.last_record_at, c.record_count "
            "FROM facilities f JOIN cycles c ON c.facility_id = f.facility_id "
            f"AND c.cycle = f.current_cycle WHERE {where} ORDER BY f.facility_id", params)

    def regions(self) -> list[str]:
        """The regions facilities are registered in (sorted)."""
        return [r["region"] for r in self.read(
            "SELECT DISTINCT region FROM facilities WHERE region IS NOT NULL ORDER BY region")]

    def region_known(self, region: str) -> bool:
        return bool(self.read("SELECT 1 AS x FROM facilities WHERE region = ? LIMIT 1",
                              (region,)))
