"""Findings of a review (API, action log, facility JSON, dashboard, case file) and the summary
of the records kept after a decision."""
import io

import pytest
from pypdf import PdfReader

from .conftest import new_facility, record
from .test_api_bad_input import assert_problem
from .test_ui_pages import ui  # noqa: F401  (the signed-in dashboard client)


def flagged(client, keys, after=0):
    fid = new_facility(client, keys)
    for i in range(3):          # three nonconforming in a row flag the dispensers plan
        client.post("/v1/records", json=record(fid, f"{fid}-f{i}", 1), headers=keys.header("field"))
    for i in range(after):      # kept after the decision
        client.post("/v1/records", json=record(fid, f"{fid}-a{i}", int(i % 3 == 0), units=2,
                                               observed_at=f"2026-11-{10 + i:02d}T09:00:00Z"),
                    headers=keys.header("field"))
    return fid


def test_several_findings_per_cycle_in_the_facility_json_and_the_log(client, keys):
    fid = flagged(client, keys)
    url = f"/v1/facilities/{fid}/cycles/1/findings"
    first = client.post(url, json={"outcome": "referred", "note": "sent to the county"},
                        headers=keys.header("analyst"))
    assert first.status_code == 201, first.text
    body = first.json()
    assert (body["outcome"], body["note"], body["by"], body["cycle"]) == (
        "referred", "sent to the county", "test analyst", 1)
    second = client.post(url, json={"outcome": "records_corrected"}, headers=keys.header("admin"))
    assert second.status_code == 201 and second.json()["note"] is None
    fac = client.get(f"/v1/facilities/{fid}", headers=keys.header("analyst")).json()
    got = [(f["outcome"], f["by"]) for f in fac["cycles"][0]["findings"]]
    assert got == [("referred", "test analyst"), ("records_corrected", "test admin")]
    log = client.get("/v1/actions", params={"facility_id": fid},
                     headers=keys.header("admin")).json()["items"]
    recorded = [a for a in log if a["action"] == "finding_recorded"]
    assert [a["detail"]["outcome"] for a in recorded] == ["referred", "records_corrected"]
    assert recorded[0]["key_label"] == "test analyst" and recorded[0]["cycle"] == 1


@pytest.mark.parametrize("role, status", [("field", 403), (None, 401), ("revoked", 401),
                                          ("analyst", 201), ("admin", 201)])
def test_who_may_record_a_finding(client, keys, role, status):
    fid = flagged(client, keys)
    r = client.post(f"/v1/facilities/{fid}/cycles/1/findings", json={"outcome": "no_action"},
                    headers=keys.header(role))
    assert r.status_code == status


@pytest.mark.parametrize("path, body, status", [
    ("/v1/facilities/NOPE/cycles/1/findings", {"outcome": "referred"}, 404),
    ("/v1/facilities/{fid}/cycles/9/findings", {"outcome": "referred"}, 404),
    ("/v1/facilities/{fid}/cycles/0/findings", {"outcome": "referred"}, 422),
    ("/v1/facilities/{fid}/cycles/x/findings", {"outcome": "referred"}, 422),
    ("/v1/facilities/{fid}/cycles/1/findings", {"outcome": "guilty"}, 422),
    ("/v1/facilities/{fid}/cycles/1/findings", {}, 422),
    ("/v1/facilities/{fid}/cycles/1/findings", {"outcome": "referred", "extra": 1}, 422),
    ("/v1/facilities/{fid}/cycles/1/findings", {"outcome": "referred", "note": "x" * 2001}, 422),
    ("/v1/facilities/{open}/cycles/1/findings", {"outcome": "referred"}, 409),
])
def test_finding_errors_are_problems(client, keys, path, body, status):
    fid = flagged(client, keys)
    still_open = new_facility(client, keys)        # a monitoring cycle has nothing to review
    r = client.post(path.format(fid=fid, open=still_open), json=body,
                    headers=keys.header("analyst"))
    assert_problem(r, status)


def test_post_decision_records_are_summarised(client, keys):
    fid = flagged(client, keys, after=4)
    cyc = client.get(f"/v1/facilities/{fid}", headers=keys.header("analyst")).json()["cycles"][0]
    # by hand: 4 records of 2 units; nonconforming in records 0 and 3; observed 10 to 13 Nov
    assert cyc["after_decision"] == {"records": 4, "units": 8, "nonconforming": 2,
                                     "first_observed": "2026-11-10T09:00:00.000000Z",
                                     "last_observed": "2026-11-13T09:00:00.000000Z"}


def test_dashboard_summary_paging_and_finding_form(ui, client, keys):
    fid = flagged(client, keys, after=4)
    page = ui.get(f"/ui/facilities/{fid}").text
    assert 'id="after-summary"' in page and "4 records kept (8 units, 2 nonconforming)" in page
    assert "2026-11-10 to 2026-11-13" in page
    table = page.split('id="records"')[1]
    assert f"{fid}-f2" in table and f"{fid}-a0" not in table        # evidence only by default
    later = ui.get(f"/ui/facilities/{fid}", params={"cycle": 1, "after": 1}).text
    table = later.split('id="records"')[1]
    assert f"{fid}-a3" in table and f"{fid}-f2" not in table and "page 1 of 1" in later
    r = ui.post(f"/ui/facilities/{fid}/cycles/1/findings",
                data={"outcome": "no_action", "note": "explained by a new nozzle", "csrf": "bad"})
    assert r.status_code == 403
    r = ui.post(f"/ui/facilities/{fid}/cycles/1/findings",
                data={"outcome": "no_action", "note": "explained by a new nozzle",
                      "csrf": ui.csrf})
    assert "Finding recorded on cycle 1" in r.text
    assert "No action needed</strong>: explained by a new nozzle" in r.text
    r = ui.post(f"/ui/facilities/{fid}/cycles/1/findings", data={"outcome": "", "csrf": ui.csrf})
    assert "Choose what the review found" in r.text


def test_case_file_has_the_section_after_the_decision(client, keys):
    fid = flagged(client, keys, after=2)
    client.post(f"/v1/facilities/{fid}/cycles/1/findings",
                json={"outcome": "retraining_ordered", "note": "calibration <b>drift</b>"},
                headers=keys.header("analyst"))
    cf = client.get(f"/v1/facilities/{fid}/cycles/1/casefile.json",
                    headers=keys.header("analyst")).json()
    assert cf["after_decision"]["records"] == 2 and cf["watch"] is None   # flagged: no watch
    assert [(f["outcome"], f["by"]) for f in cf["findings"]] == [("retraining_ordered",
                                                                  "test analyst")]
    pdf = client.get(f"/v1/facilities/{fid}/cycles/1/casefile.pdf",
                     headers=keys.header("analyst")).content
    text = " ".join(p.extract_text() for p in PdfReader(io.BytesIO(pdf)).pages)
    for phrase in ("After the decision", "2 record(s) were kept", "Findings of the review",
                   "retraining ordered", "calibration <b>drift</b>", "test analyst"):
        assert phrase in text, phrase
    assert text.index("After the decision") < text.index("The path of the evidence")
