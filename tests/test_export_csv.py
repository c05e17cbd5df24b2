"""CSV exports: API (?format=csv, Accept: text/csv), `seqaudit export`; each checked against
the JSON the same route gives, read back with Python's csv module (RFC 4180)."""
import csv
import io
import json
import shutil
import subprocess
import sys

import pytest

from service import exports

from .conftest import new_facility, record


def rows_of(text: str) -> list[dict]:
    return list(csv.DictReader(io.StringIO(text, newline="")))


def as_cells(item: dict, columns) -> dict:
    """What the CSV must hold for one JSON item: text as the csv module reads it back."""
    out = {}
    for c in columns:
        v = item.get(c)
        out[c] = ("" if v is None else "true" if v is True else "false" if v is False
                  else json.dumps(v, sort_keys=True, ensure_ascii=False)
                  if isinstance(v, (dict, list)) else str(v))
    return out


@pytest.fixture
def seeded(client, keys, monkeypatch):
    monkeypatch.setattr(exports, "PAGE", 3)          # several pages even for a few rows
    fids = [new_facility(client, keys) for _ in range(7)]
    hdr = keys.header("admin")
    for i in range(3):                               # three nonconforming in a row: flagged
        client.post("/v1/records", json=record(fids[0], f"x-{i}", 1, unit_ref=f"FD-{i}",
                                               note="line one\nline two, with a comma"),
                    headers=hdr)
    client.post("/v1/records", json=record(fids[1], "y-0", 1), headers=hdr)
    client.post("/v1/records/y-0/void", json={"reason": "wrong agency"}, headers=hdr)
    return fids


def test_facilities_csv_holds_every_row_of_the_json_listing(client, keys, seeded):
    hdr = keys.header("analyst")
    listed = client.get("/v1/facilities", params={"limit": 1000}, headers=hdr).json()
    by_param = client.get("/v1/facilities", params={"format": "csv"}, headers=hdr)
    by_accept = client.get("/v1/facilities", headers={**hdr, "Accept": "text/csv"})
    assert by_param.status_code == by_accept.status_code == 200
    assert by_param.headers["content-type"].startswith("text/csv")
    assert 'filename="facilities.csv"' in by_param.headers["content-disposition"]
    assert by_param.text == by_accept.text
    assert by_param.text.startswith(",".join(exports.COLUMNS["facilities"]) + "\r\n")
    rows = rows_of(by_param.text)
    assert len(rows) == listed["total"] == 7         # three pages of three, all there
    assert rows == [as_cells(f, exports.COLUMNS["facilities"]) for f in listed["items"]]
    # filters apply to the export as to the listing
    flagged = rows_of(client.get("/v1/facilities", params={"format": "csv", "status": "flagged"},
                                 headers=hdr).text)
    assert [r["facility_id"] for r in flagged] == [seeded[0]]
    # JSON stays the default, also for a browser's Accept header
    browser = client.get("/v1/facilities", headers={**hdr, "Accept": "text/html,*/*"})
    assert browser.headers["content-type"] == "application/json"


def test_records_csv_of_a_cycle_keeps_notes_unit_refs_and_voids(client, keys, seeded):
    hdr = keys.header("analyst")
    fid = seeded[0]
    listed = client.get(f"/v1/facilities/{fid}/records", params={"cycle": 1}, headers=hdr).json()
    r = client.get(f"/v1/facilities/{fid}/records", params={"cycle": 1, "format": "csv"},
                   headers=hdr)
    assert f'filename="records-{fid}-cycle1.csv"' in r.headers["content-disposition"]
    rows = rows_of(r.text)
    assert rows == [as_cells(x, exports.COLUMNS["records"]) for x in listed["items"]]
    assert [x["unit_ref"] for x in rows] == ["FD-0", "FD-1", "FD-2"]
    assert rows[1]["note"] == "line one\nline two, with a comma"   # quoted, read back whole
    voided = rows_of(client.get(f"/v1/facilities/{seeded[1]}/records",
                                params={"format": "csv"}, headers=hdr).text)
    assert voided[0]["void"] == "true" and voided[0]["void_reason"] == "wrong agency"
    missing = client.get("/v1/facilities/NOPE/records", params={"format": "csv"}, headers=hdr)
    assert missing.status_code == 404
    assert missing.headers["content-type"] == "application/problem+json"


def test_alerts_and_action_log_csv(client, keys, seeded):
    admin = keys.header("admin")
    alerts = client.get("/v1/alerts", params={"limit": 1000}, headers=admin).json()
    rows = rows_of(client.get("/v1/alerts", params={"format": "csv"}, headers=admin).text)
    assert len(rows) == alerts["total"] >= 1          # the flag
    assert rows == [as_cells(a, exports.COLUMNS["alerts"]) for a in alerts["items"]]
    assert json.loads(rows[0]["detail"]) == alerts["items"][0]["detail"]
    actions = client.get("/v1/actions", params={"limit": 1000}, headers=admin).json()
    rows = rows_of(client.get("/v1/actions", headers={**admin, "Accept": "text/csv"}).text)
    assert rows == [as_cells(a, exports.COLUMNS["actions"]) for a in actions["items"]]
    assert len(rows) == actions["total"] >= 8       # seven registrations and a void
    # the role rules are the route's: the action log stays admin-only in CSV too
    refused = client.get("/v1/actions", params={"format": "csv"}, headers=keys.header("analyst"))
    assert refused.status_code == 403
    bad = client.get("/v1/alerts", params={"format": "xml"}, headers=admin)
    assert bad.status_code == 422 and bad.json()["errors"][0]["field"] == "format"


def test_text_a_spreadsheet_would_run_is_neutralised(client, keys):
    # OWASP "CSV Injection": cells starting with = + - @ tab or CR are prefixed with '
    hdr = keys.header("admin")
    for i, name in enumerate(["=HYPERLINK(\"http://x\")", "+1", "-cmd", "@SUM(A1)", "plain"]):
        client.post("/v1/facilities", json={"facility_id": f"N-{i}", "name": name,
                                            "plan": "dispensers"}, headers=hdr)
    rows = rows_of(client.get("/v1/facilities", params={"format": "csv"}, headers=hdr).text)
    names = {r["facility_id"]: r["name"] for r in rows}
    assert names == {"N-0": "'=HYPERLINK(\"http://x\")", "N-1": "'+1", "N-2": "'-cmd",
                     "N-3": "'@SUM(A1)", "N-4": "plain"}
    assert exports.cell(-1.5) == -1.5                 # numbers are left as numbers


def test_export_command_writes_the_same_csv_as_the_api(client, keys, seeded, settings,
                                                       tmp_path):
    hdr = keys.header("admin")
    fid = seeded[0]
    exe = shutil.which("seqaudit")
    base = [exe] if exe else [sys.executable, "-m", "service.cli"]
    for kind, extra, url, params in (
            ("facilities", [], "/v1/facilities", {}),
            ("records", ["--facility", fid, "--cycle", "1"], f"/v1/facilities/{fid}/records",
             {"cycle": 1}),
            ("alerts", [], "/v1/alerts", {}),
            ("actions", [], "/v1/actions", {})):
        out = tmp_path / f"{kind}.csv"
        done = subprocess.run([*base, "export", kind, *extra, "--out", str(out), "--db",
                               str(settings.db_path)], capture_output=True, text=True,
                              timeout=120)
        assert done.returncode == 0, done.stderr
        api = client.get(url, params={**params, "format": "csv"}, headers=hdr).text
        assert out.read_bytes().decode("utf-8") == api, kind
        assert f"{len(rows_of(api))} {kind} row(s) written" in done.stdout
    to_stdout = subprocess.run([*base, "export", "facilities", "--db", str(settings.db_path)],
                               capture_output=True, text=True, timeout=120)
    assert rows_of(to_stdout.stdout) == rows_of(
        (tmp_path / "facilities.csv").read_bytes().decode("utf-8"))
    no_facility = subprocess.run([*base, "export", "records", "--db", str(settings.db_path)],
                                 capture_output=True, text=True, timeout=120)
    assert no_facility.returncode == 2 and "--facility" in no_facility.stderr
    unknown = subprocess.run([*base, "export", "records", "--facility", "NOPE", "--db",
                              str(settings.db_path)], capture_output=True, text=True, timeout=120)
    assert unknown.returncode == 2 and "NOPE" in unknown.stderr


def test_openapi_lists_csv_beside_json(client):
    doc = client.get("/openapi.json").json()
    for path in ("/v1/facilities", "/v1/facilities/{facility_id}/records", "/v1/alerts",
                 "/v1/actions"):
        content = doc["paths"][path]["get"]["responses"]["200"]["content"]
        assert {"application/json", "text/csv"} <= set(content), path


def test_download_names_stay_latin1_for_any_facility_id(client, keys):
    """Found by the OpenAPI fuzz: a filter value outside Latin-1 went raw into the
    Content-Disposition header and the answer was 500."""
    r = client.get("/v1/alerts", params={"facility_id": "Ā", "format": "csv"},
                   headers=keys.header("analyst"))
    assert r.status_code == 200
    r.headers["content-disposition"].encode("latin-1")
    assert exports.file_safe("Łódź-1/../x") == "__d_-1_.._x"   # Ł ó ź and both slashes become _
