"""Importing facilities and records from .xlsx workbooks (openpyxl writes them here), with
spreadsheet date-times converted only in a time zone the user names."""
import csv
import shutil
import subprocess
import sys
from datetime import date, datetime, time, timedelta, timezone

import pytest
from openpyxl import Workbook

from service.commands.spreadsheets import SpreadsheetError, local_to_rfc3339, parse_zone
from service.store import Store


def run(*args):
    exe = shutil.which("seqaudit")
    cmd = [exe, *args] if exe else [sys.executable, "-m", "service.cli", *args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=120)


def workbook(path, header, rows, title="Sheet"):
    wb = Workbook()
    ws = wb.active
    ws.title = title
    ws.append(header)
    for r in rows:
        ws.append(r)
    wb.save(path)
    return path


# Time-zone facts from the IANA tz database (EU rules, from memory): in 2026 British Summer
# Time runs from 29 March 01:00 UTC to 25 October 01:00 UTC (UTC+01:00), GMT otherwise; New
# York is UTC-05:00 in January. Each is also checked against the stdlib's own arithmetic.
@pytest.mark.parametrize("local, zone, expected", [
    (datetime(2026, 7, 1, 8, 0), "Europe/London", "2026-07-01T08:00:00+01:00"),
    (datetime(2026, 1, 15, 8, 0), "Europe/London", "2026-01-15T08:00:00Z"),
    (datetime(2026, 1, 15, 8, 0, 0, 250000), "America/New_York",
     "2026-01-15T08:00:00.250000-05:00"),
    (datetime(2026, 11, 7, 8, 0), "UTC", "2026-11-07T08:00:00Z"),
    (datetime(2026, 11, 7, 8, 0), "+05:30", "2026-11-07T08:00:00+05:30"),
])
def test_local_spreadsheet_times_get_the_named_zone(local, zone, expected):
    text = local_to_rfc3339(local, parse_zone(zone))
    assert text == expected
    # the instant, computed a second way: local time minus the zone's offset
    offset = datetime.fromisoformat(expected.replace("Z", "+00:00")).utcoffset()
    assert datetime.fromisoformat(text.replace("Z", "+00:00")).astimezone(timezone.utc) \
        == (local - offset).replace(tzinfo=timezone.utc)


@pytest.mark.parametrize("local", [datetime(2026, 10, 25, 1, 30),    # shown twice (BST ends)
                                   datetime(2026, 3, 29, 1, 30)])    # never shown (BST begins)
def test_clock_change_times_are_refused_not_guessed(local):
    with pytest.raises(SpreadsheetError, match="clock change"):
        local_to_rfc3339(local, parse_zone("Europe/London"))


def test_unknown_zone_is_refused():
    with pytest.raises(ValueError, match="unknown time zone"):
        parse_zone("Mars/Olympus")


def test_xlsx_import_of_facilities_and_records(tmp_path):
    db = tmp_path / "x.db"
    fac = workbook(tmp_path / "agencies.xlsx", ["facility_id", "name", "plan"],
                   [["SA-1", "Weighbridge Services", "scales"], [1001, "Numbered Agency",
                                                                 "dispensers"],
                    ["SA-2", "Unknown plan", "nope"]], title="Agencies")
    out = run("facilities", "import", str(fac), "--db", str(db))
    assert out.returncode == 1 and "2 of 3 rows stored" in out.stdout
    assert "row 4: plan" in out.stderr
    assert {f["facility_id"] for f in Store(db).facilities(limit=10)[0]} == {"SA-1", "1001"}

    header = ["record_id", "facility_id", "observed_at", "units", "nonconforming", "unit_ref",
              "inspector", "note"]
    rows = [["r1", "SA-1", datetime(2026, 7, 1, 8, 0), 1, 0, "SC-1", "K. Osei", None],
            ["r2", "SA-1", "2026-07-01T09:00:00Z", 2, 1, None, None, "written as text"],
            ["r3", 1001, date(2026, 7, 2), 1, 0, None, None, None],
            [None] * 8,                                                 # an empty row between
            ["r4", "SA-1", datetime(2026, 10, 25, 1, 30), 1, 0, None, None, None],
            ["r5", "SA-1", time(8, 0), 1, 0, None, None, None]]
    book = workbook(tmp_path / "history.xlsx", header, rows)
    # without --time-zone the spreadsheet dates are refused, the text one is taken
    no_zone = run("records", "import", str(book), "--db", str(db),
                  "--errors", str(tmp_path / "e1.csv"))
    assert no_zone.returncode == 1 and "1 of 6 rows stored" in no_zone.stdout
    with (tmp_path / "e1.csv").open(newline="") as fh:
        report = list(csv.DictReader(fh))
    assert [(r["row"], r["field"]) for r in report] == sorted([
        ("2", "observed_at"), ("4", "observed_at"), ("5", "record_id"), ("5", "facility_id"),
        ("5", "observed_at"), ("5", "nonconforming"), ("6", "observed_at"), ("7", "observed_at")])
    assert "--time-zone" in report[0]["message"]
    # with the zone named they are converted; the clock-change hour is still refused
    zoned = run("records", "import", str(book), "--db", str(db), "--time-zone",
                "Europe/London", "--sheet", "Sheet")
    assert zoned.returncode == 1 and "3 of 6 rows stored" in zoned.stdout
    assert "row 6: observed_at" in zoned.stderr and "clock change" in zoned.stderr
    assert "row 7: observed_at" in zoned.stderr
    stored = {r["record_id"]: r for r in Store(db).records("SA-1", 1)}
    assert stored["r1"]["observed_at"] == "2026-07-01T08:00:00+01:00"
    assert stored["r1"]["observed_utc"] == "2026-07-01T07:00:00.000000Z"
    assert stored["r2"]["observed_at"] == "2026-07-01T09:00:00Z"
    assert stored["r1"]["unit_ref"] == "SC-1" and stored["r2"]["note"] == "written as text"
    assert Store(db).records("1001", 1)[0]["observed_at"] == "2026-07-02T00:00:00+01:00"
    bad_zone = run("records", "import", str(book), "--db", str(db), "--time-zone", "Nowhere/X")
    assert bad_zone.returncode == 2 and "--time-zone" in bad_zone.stderr
    no_sheet = run("records", "import", str(book), "--db", str(db), "--sheet", "Other")
    assert no_sheet.returncode == 2 and "no worksheet 'Other'" in no_sheet.stderr
    junk = tmp_path / "junk.xlsx"
    junk.write_bytes(b"not a workbook")
    assert run("records", "import", str(junk), "--db", str(db)).returncode == 2
