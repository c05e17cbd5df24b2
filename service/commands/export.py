"""seqaudit export facilities|records|alerts|actions: CSV to a file or standard output."""
from __future__ import annotations

import sys
from pathlib import Path

from ..errors import ServiceError
from ..exports import export_lines
from ..operations import Monitor, PlanBook
from ..settings import Settings
from ..store import Store


def export(settings: Settings, db: Path, kind: str, out: str | None,
           facility_id: str | None = None, cycle: int | None = None,
           state: str | None = None) -> tuple[int, str | None]:
    """Write the export; returns (rows written, error message or None)."""
    monitor = Monitor(store=Store(db), plans=PlanBook(settings.plans))
    filters = {"facilities": {},
               "records": {"facility_id": facility_id, "cycle": cycle},
               "alerts": {"state": state, "facility_id": facility_id},
               "actions": {"facility_id": facility_id, "cycle": cycle}}[kind]
    try:
        lines = export_lines(monitor, kind, **filters)
        header = next(lines)
    except ServiceError as exc:
        return 0, exc.detail
    fh = open(out, "w", encoding="utf-8", newline="") if out else sys.stdout
    rows = 0
    try:
        fh.write(header)
        for line in lines:
            fh.write(line)
            rows += 1
    finally:
        if out:
            fh.close()
    return rows, None
