"""Records observed before their cycle opened or long ago: accepted, counted, and marked in
the answer and on the facility page (threshold: record_checks.OLD_AFTER_DAYS = 365)."""
from datetime import datetime, timedelta, timezone

from service.clock import format_time
from service.record_checks import (BEFORE_CYCLE, OLD, OLD_AFTER_DAYS, observation_note,
                                   old_limit)

from .conftest import new_facility, record


def test_old_limit_is_365_days_by_datetime_arithmetic():
    now = "2026-03-01T12:00:00.000000Z"
    # computed a second way: 2026-03-01 minus 365 days is 2025-03-01 (2025 is no leap year,
    # and no 29 February lies between; calendar arithmetic, from memory)
    assert old_limit(now) == "2025-03-01T12:00:00.000000Z"
    limit = old_limit(now)
    assert observation_note("2025-03-01T12:00:00.000000Z", "2020-01-01T00:00:00.000000Z",
                            limit) is None                       # exactly 365 days: not old
    assert observation_note("2025-03-01T11:59:59.999999Z", "2020-01-01T00:00:00.000000Z",
                            limit) == OLD
    assert observation_note("2026-02-01T00:00:00.000000Z", "2026-02-01T00:00:00.000001Z",
                            limit) == BEFORE_CYCLE
    assert OLD_AFTER_DAYS == 365


def test_early_and_old_records_are_accepted_counted_and_marked(app, client, keys):
    fid = new_facility(client, keys)
    now = datetime.now(timezone.utc)
    before_cycle = format_time(now - timedelta(days=3))          # the cycle opened just now
    years_back = format_time(now - timedelta(days=OLD_AFTER_DAYS + 30))
    analyst, field = keys.header("analyst"), keys.header("field")
    r = client.post("/v1/records", json=record(fid, "e-1", observed_at=before_cycle),
                    headers=analyst)
    assert r.status_code == 201 and r.json()["status"] == "accepted"
    assert r.json()["warnings"][0]["field"] == "observed_at"
    assert "before its monitoring cycle opened" in r.json()["warnings"][0]["message"]
    # a field key learns nothing about the cycle, but does hear of a date years back
    r = client.post("/v1/records", json=record(fid, "e-2", observed_at=before_cycle),
                    headers=field)
    assert r.status_code == 201 and "warnings" not in r.json()
    recent = format_time(datetime.now(timezone.utc))            # after the cycle opened
    r = client.post("/v1/records", json={"records": [
        record(fid, "e-3", observed_at=recent), record(fid, "e-4", observed_at=years_back)]},
        headers=field)
    res = r.json()["results"]
    assert "warnings" not in res[0]
    assert res[1]["status"] == "accepted"
    assert res[1]["warnings"] == [{"field": "records[1].observed_at", "message":
                                   res[1]["warnings"][0]["message"]}]
    assert f"more than {OLD_AFTER_DAYS} days" in res[1]["warnings"][0]["message"]
    state = client.get(f"/v1/facilities/{fid}", headers=analyst).json()
    assert state["units"] == 4                                   # every one counted
    # the facility page marks the same records
    from fastapi.testclient import TestClient

    from .test_ui_pages import signin
    with TestClient(app, base_url="http://127.0.0.1") as ui:
        assert signin(ui, keys.analyst).status_code == 303
        html = ui.get(f"/ui/facilities/{fid}").text
    seqs = {x["record_id"]: x["seq"] for x in client.get(
        f"/v1/facilities/{fid}/records", headers=analyst).json()["items"]}
    assert f'data-late="{seqs["e-1"]}"' in html and f'data-late="{seqs["e-2"]}"' in html
    assert f'data-late="{seqs["e-4"]}"' in html and f'data-late="{seqs["e-3"]}"' not in html
    assert "observed before this cycle opened" in html
    assert f"observed over {OLD_AFTER_DAYS} days before it was received" in html
