"""seqaudit facilities import / records import: CSV files with a per-row error report."""
from __future__ import annotations

import csv
import re
import sys
from pathlib import Path

from pydantic import ValidationError

from ..clock import utc_now
from ..operations import Monitor, validation_errors
from ..schemas import FacilityCreate
from .progress import Progress

BATCH = 500
FACILITY_COLUMNS = ("facility_id", "name", "plan")
RECORD_COLUMNS = ("record_id", "facility_id", "observed_at", "units", "nonconforming",
                  "unit_ref", "inspector", "note")


def _read(path: Path, required: tuple[str, ...],
          sheet: str | None = None) -> tuple[list[dict], list[str]]:
    """Rows of a CSV file, or of an .xlsx workbook's first (or named) worksheet."""
    if path.suffix.lower() == ".xlsx":
        from .spreadsheets import read_xlsx
        rows, header = read_xlsx(path, sheet)
    else:
        if sheet is not None:
            raise ValueError(f"{path}: --sheet applies to .xlsx workbooks only")
        with path.open(newline="", encoding="utf-8-sig") as fh:
            reader = csv.DictReader(fh)
            header = reader.fieldnames or []
            rows = list(reader)
    missing = [c for c in required if c not in header]
    if missing:
        raise ValueError(f"{path}: missing column(s) {', '.join(missing)}; "
                         f"the header must name {', '.join(required)}")
    return rows, header


def _report(errors: list[tuple[int, str, str]], total: int, ok: int, what: str,
            errors_file: str | None) -> int:
    for row, field, message in errors[:50]:
        print(f"row {row}: {field}: {message}", file=sys.stderr)
    if len(errors) > 50:
        print(f"... and {len(errors) - 50} more", file=sys.stderr)
    if errors_file:
        with open(errors_file, "w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            w.writerow(["row", "field", "message"])
            w.writerows(errors)
    print(f"{what}: {ok} of {total} rows stored, {total - ok} rejected")
    return 0 if not errors else 1


def import_facilities(monitor: Monitor, path: str, errors_file: str | None = None,
                      sheet: str | None = None) -> int:
    rows, _ = _read(Path(path), ("facility_id", "name", "plan"), sheet)
    errors: list[tuple[int, str, str]] = []
    progress = Progress("facilities", len(rows))
    ok = 0
    actor = (f"import:{Path(path).name}", "admin")
    for start in range(0, len(rows), BATCH):
        good, where = [], []
        for i, raw in enumerate(rows[start:start + BATCH], start=start):
            line = i + 2  # the header is line 1
            try:
                values = {k: raw.get(k) for k in FACILITY_COLUMNS}
                if (raw.get("region") or "").strip():   # optional column; empty = no region
                    values["region"] = raw["region"].strip()
                body = FacilityCreate.model_validate(values)
            except ValidationError as exc:
                errors += [(line, e["field"], e["message"]) for e in validation_errors(exc)]
                continue
            if body.plan not in monitor.plans.specs:
                errors.append((line, "plan", f"unknown plan {body.plan!r}"))
                continue
            good.append((body.facility_id, body.name, body.plan,
                         monitor.plans.snapshot(body.plan), body.region))
            where.append(line)
        for line, failure in zip(where, monitor.store.add_facilities(good, utc_now(), actor)):
            if failure is None:
                ok += 1
            else:
                errors.append((line, "facility_id", failure))
        progress.advance(min(BATCH, len(rows) - start))
    progress.finish()
    return _report(sorted(errors), len(rows), ok, "facilities", errors_file)


def _record_payload(raw: dict, zone=None) -> dict:
    """A row as a record body. A spreadsheet date-time in ``observed_at`` becomes RFC 3339
    text in ``zone`` (refused when no zone was given); SpreadsheetError says why."""
    from datetime import date, datetime
    out: dict = {}
    for key in RECORD_COLUMNS:
        value = raw.get(key)
        if value is None or value == "":
            continue
        if isinstance(value, (datetime, date)):
            if key != "observed_at":
                value = value.isoformat()
            else:
                from .spreadsheets import SpreadsheetError, local_to_rfc3339
                if zone is None:
                    raise SpreadsheetError(
                        "is a spreadsheet date without a time zone; give the zone its times "
                        "were written in with --time-zone (e.g. --time-zone Europe/London or "
                        "--time-zone UTC), or write RFC 3339 text such as "
                        "2026-11-07T08:00:00Z")
                if not isinstance(value, datetime):
                    value = datetime(value.year, value.month, value.day)
                value = local_to_rfc3339(value, zone)
        elif not isinstance(value, str):
            value = str(value)     # e.g. a time-only cell: validation names the field
        if key in ("units", "nonconforming"):
            try:
                value = int(value)
            except ValueError:
                pass  # left as text: validation names the field
        out[key] = value
    return out


def import_records(monitor: Monitor, path: str, errors_file: str | None = None,
                   time_zone: str | None = None, sheet: str | None = None) -> int:
    from .spreadsheets import SpreadsheetError, parse_zone
    zone = parse_zone(time_zone) if time_zone else None
    rows, _ = _read(Path(path), ("record_id", "facility_id", "observed_at", "nonconforming"),
                    sheet)
    errors: list[tuple[int, str, str]] = []
    progress = Progress("records", len(rows))
    ok = 0
    actor = (f"import:{Path(path).name}", "admin")
    for start in range(0, len(rows), BATCH):
        chunk = rows[start:start + BATCH]
        bodies, lines = [], []
        for i, raw in enumerate(chunk, start=start):
            try:
                bodies.append(_record_payload(raw, zone))
                lines.append(i + 2)   # the header is line 1
            except SpreadsheetError as exc:
                errors.append((i + 2, "observed_at", str(exc)))
        if bodies:
            _, report = monitor.post_records({"records": bodies}, actor, with_state=False)
            for res in report["results"]:
                line = lines[res["index"]]
                if res["status"] in ("accepted", "duplicate"):
                    ok += 1
                else:
                    for err in res.get("errors") or [{"field": "row", "message": res["status"]}]:
                        field = re.sub(r"^records\[\d+\]\.?", "", err["field"]) or "row"
                        errors.append((line, field, err["message"]))
        progress.advance(len(chunk))
    progress.finish()
    return _report(sorted(errors), len(rows), ok, "records", errors_file)
