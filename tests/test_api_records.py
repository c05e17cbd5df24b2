"""Idempotent posts, conflicts, batches, voids with replay, cycles and close."""
from .conftest import new_facility, record


def state(client, keys, fid):
    return client.get(f"/v1/facilities/{fid}", headers=keys.header("analyst")).json()


def test_retried_posts_are_not_counted_twice(client, keys):
    fid = new_facility(client, keys)
    body = record(fid, "tab-7-0001", 1)
    first = client.post("/v1/records", json=body, headers=keys.header("field"))
    assert first.status_code == 201 and first.json()["status"] == "accepted"
    for _ in range(3):
        again = client.post("/v1/records", json=body, headers=keys.header("field"))
        assert again.status_code == 200 and again.json()["status"] == "duplicate"
        assert again.json()["seq"] == first.json()["seq"]
    # the same instant written with another offset is the same content
    shifted = dict(body, observed_at="2026-11-30T10:15:00+01:00")
    assert client.post("/v1/records", json=shifted,
                       headers=keys.header("field")).json()["status"] == "duplicate"
    s = state(client, keys, fid)
    assert (s["units"], s["nonconforming"]) == (1, 1)


def test_conflicting_reuse_of_record_id_is_refused(client, keys):
    fid = new_facility(client, keys)
    client.post("/v1/records", json=record(fid, "dup-1", 0), headers=keys.header("field"))
    r = client.post("/v1/records", json=record(fid, "dup-1", 1), headers=keys.header("field"))
    assert r.status_code == 409
    assert r.headers["content-type"].startswith("application/problem+json")
    assert "different content" in r.json()["detail"]
    s = state(client, keys, fid)
    assert (s["units"], s["nonconforming"]) == (1, 0)


def test_field_key_learns_nothing_about_standing(client, keys):
    fid = new_facility(client, keys)
    r = client.post("/v1/records", json=record(fid, "f-1", 1), headers=keys.header("field"))
    assert set(r.json()) == {"index", "record_id", "status", "code", "seq"}
    r = client.post("/v1/records", json={"records": [record(fid, "f-2", 1)]},
                    headers=keys.header("field"))
    assert all("facility" not in res for res in r.json()["results"])


def test_batch_keeps_good_records_and_reports_each_bad_one(client, keys):
    fid = new_facility(client, keys)
    client.post("/v1/records", json=record(fid, "old", 0), headers=keys.header("field"))
    batch = [record(fid, "b-1", 0), record("NOPE", "b-2", 0), record(fid, "b-3", 3, units=2),
             record(fid, "old", 1), record(fid, "old", 0), record(fid, "b-1", 0),
             record(fid, "b-4", 1, observed_at="yesterday"), {"record_id": "b-5"},
             "not an object", record(fid, "b-6", 0, colour="red")]
    r = client.post("/v1/records", json={"records": batch}, headers=keys.header("field"))
    assert r.status_code == 200
    res = r.json()["results"]
    assert [x["status"] for x in res] == ["accepted", "invalid", "invalid", "conflict",
                                          "duplicate", "duplicate", "invalid", "invalid",
                                          "invalid", "invalid"]
    assert res[1]["errors"][0]["field"] == "records[1].facility_id"
    assert res[2]["errors"][0]["field"] == "records[2].nonconforming"
    assert "cannot exceed" in res[2]["errors"][0]["message"]
    assert res[6]["errors"][0]["field"] == "records[6].observed_at"
    assert {e["field"] for e in res[7]["errors"]} >= {"records[7].facility_id",
                                                       "records[7].observed_at"}
    assert res[9]["errors"][0]["field"] == "records[9].colour"
    assert (r.json()["accepted"], r.json()["duplicate"], r.json()["rejected"]) == (1, 2, 7)
    s = state(client, keys, fid)
    assert s["units"] == 2
    metrics = client.get("/metrics", headers=keys.header("analyst")).text
    assert 'seqaudit_records_total{outcome="accepted"} 2' in metrics
    assert 'seqaudit_records_total{outcome="rejected"} 7' in metrics


def test_a_schema_valid_batch_still_reports_each_later_fault(client, keys, app):
    # every record passes the schema, so the body takes the one-pass JSON validation; the
    # checks after it (calendar date, future, unknown facility) must still name each record
    fid = new_facility(client, keys)
    batch = [record(fid, "v-1", 0), record(fid, "v-2", 0, observed_at="2026-02-30T10:00:00Z"),
             record(fid, "v-3", 0, observed_at="2999-01-01T00:00:00Z"),
             record("NOPE", "v-4", 0), record(fid, "v-5", 1), record(fid, "v-1", 0)]
    r = client.post("/v1/records", json={"records": batch}, headers=keys.header("field"))
    res = r.json()["results"]
    assert [(x["record_id"], x["status"]) for x in res] == [
        ("v-1", "accepted"), ("v-2", "invalid"), ("v-3", "invalid"), ("v-4", "invalid"),
        ("v-5", "accepted"), ("v-1", "duplicate")]
    assert [x["errors"][0]["field"] for x in res[1:4]] == [
        "records[1].observed_at", "records[2].observed_at", "records[3].facility_id"]
    assert "calendar date" in res[1]["errors"][0]["message"]
    assert "future" in res[2]["errors"][0]["message"]
    # the same batch through the parsed-dict path gives the same report, record for record
    again = [dict(b, record_id="w" + b["record_id"]) for b in batch]
    _, report = app.state.monitor.post_records({"records": again}, ("test", "field"), False)
    strip = lambda xs: [(x["status"], [(e["field"], e["message"].replace("'w", "'"))
                                       for e in x.get("errors", [])]) for x in xs]
    assert strip(report["results"]) == strip(res)
    assert state(client, keys, fid)["units"] == 4


def test_void_replays_and_revises_the_decision(client, keys):
    fid = new_facility(client, keys)
    for i in range(3):
        client.post("/v1/records", json=record(fid, f"v-{i}", 1), headers=keys.header("field"))
    client.post("/v1/records", json=record(fid, "v-late", 1), headers=keys.header("field"))
    assert state(client, keys, fid)["status"] == "flagged"
    r = client.post("/v1/records/v-1/void", json={"reason": "unit belonged to another agency"},
                    headers=keys.header("analyst"))
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["decision_revised"] is True
    # replay: v-0, v-2 and the former post-decision v-late give 3 nonconforming again,
    # so the cycle decides anew at the later record
    s = state(client, keys, fid)
    assert s["status"] == "flagged" and s["units"] == 3
    recs = client.get(f"/v1/facilities/{fid}/records", headers=keys.header("analyst")).json()
    by_id = {x["record_id"]: x for x in recs["items"]}
    assert by_id["v-1"]["void"] and by_id["v-1"]["void_reason"] == \
        "unit belonged to another agency"
    assert by_id["v-1"]["voided_by"] == "test analyst"
    assert by_id["v-late"]["evidence"] is True
    kinds = [a["kind"] for a in client.get("/v1/alerts", params={"facility_id": fid},
                                           headers=keys.header("analyst")).json()["items"]]
    assert "decision_revised" in kinds
    again = client.post("/v1/records/v-1/void", json={"reason": "again"},
                        headers=keys.header("analyst"))
    assert again.status_code == 409


def test_void_that_undoes_a_flag_reopens_the_cycle(client, keys):
    fid = new_facility(client, keys)
    for i in range(3):
        client.post("/v1/records", json=record(fid, f"u-{i}", 1), headers=keys.header("field"))
    client.post("/v1/records/u-2/void", json={"reason": "mis-keyed"},
                headers=keys.header("analyst"))
    s = state(client, keys, fid)
    assert s["status"] == "monitoring" and s["decided_after_units"] is None
    # and new evidence can decide it again
    client.post("/v1/records", json=record(fid, "u-3", 1), headers=keys.header("field"))
    assert state(client, keys, fid)["status"] == "flagged"


def test_new_cycle_and_close(client, keys):
    fid = new_facility(client, keys)
    hdr = keys.header("analyst")
    r = client.post(f"/v1/facilities/{fid}/cycles", headers=hdr)
    assert r.status_code == 409  # cycle 1 still open
    r = client.post(f"/v1/facilities/{fid}/close", json={"reason": "agency licence withdrawn"},
                    headers=hdr)
    assert r.status_code == 200 and r.json()["status"] == "closed"
    assert client.post(f"/v1/facilities/{fid}/close", json={"reason": "x"},
                       headers=hdr).status_code == 409
    client.post("/v1/records", json=record(fid, "after-close", 1), headers=keys.header("field"))
    recs = client.get(f"/v1/facilities/{fid}/records", params={"cycle": 1}, headers=hdr).json()
    assert recs["items"][0]["evidence"] is False
    r = client.post(f"/v1/facilities/{fid}/cycles", headers=hdr)
    assert r.status_code == 201 and r.json()["cycle"] == 2 and r.json()["status"] == "monitoring"
    assert [c["status"] for c in r.json()["cycles"]] == ["closed", "monitoring"]
    actions = client.get("/v1/actions", params={"facility_id": fid},
                         headers=keys.header("admin")).json()["items"]
    assert [a["action"] for a in actions] == ["facility_registered", "cycle_closed",
                                              "cycle_opened"]
    assert actions[1]["key_label"] == "test analyst"


def test_editing_a_plan_never_changes_an_open_cycle(tmp_path, keys, client, app):
    fid = new_facility(client, keys)
    snap = client.get(f"/v1/facilities/{fid}", headers=keys.header("analyst")).json()
    book = app.state.monitor.plans
    from dataclasses import replace
    book.specs["dispensers"] = replace(book.specs["dispensers"], p1=0.2)
    book._plans.clear()
    client.post("/v1/records", json=record(fid, "e-1", 1), headers=keys.header("field"))
    after = client.get(f"/v1/facilities/{fid}", headers=keys.header("analyst")).json()
    assert after["upper_llr"] == snap["upper_llr"]
    assert after["cycles"][0]["plan_snapshot"]["p1"] == 0.08


def test_ack_alert(client, keys):
    fid = new_facility(client, keys)
    for i in range(3):
        client.post("/v1/records", json=record(fid, f"a-{i}", 1), headers=keys.header("field"))
    alerts = client.get("/v1/alerts", params={"state": "open", "facility_id": fid},
                        headers=keys.header("analyst")).json()["items"]
    aid = alerts[0]["alert_id"]
    r = client.post(f"/v1/alerts/{aid}/ack", json={"note": "case opened"},
                    headers=keys.header("analyst"))
    assert r.status_code == 200 and r.json()["state"] == "acknowledged"
    assert r.json()["ack_note"] == "case opened"
    assert client.post(f"/v1/alerts/{aid}/ack", json={},
                       headers=keys.header("analyst")).status_code == 409
    left = client.get("/v1/alerts", params={"state": "open", "facility_id": fid},
                      headers=keys.header("analyst")).json()
    assert left["total"] == 0


def test_facility_list_filters(client, keys):
    a = new_facility(client, keys, plan="dispensers")
    b = new_facility(client, keys, plan="scales")
    for i in range(3):
        client.post("/v1/records", json=record(a, f"l-{i}", 1), headers=keys.header("field"))
    hdr = keys.header("analyst")
    flagged = client.get("/v1/facilities", params={"status": "flagged"}, headers=hdr).json()
    assert [f["facility_id"] for f in flagged["items"]] == [a]
    scales = client.get("/v1/facilities", params={"plan": "scales"}, headers=hdr).json()
    assert [f["facility_id"] for f in scales["items"]] == [b]
    page = client.get("/v1/facilities", params={"limit": 1, "sort": "llr", "descending": True},
                      headers=hdr).json()
    assert page["total"] == 2 and page["items"][0]["facility_id"] == a


def test_plans_route_gives_exact_figures(client, keys):
    plans = client.get("/v1/plans", headers=keys.header("analyst")).json()
    names = [p["name"] for p in plans]
    assert names == sorted(["dispensers", "scales", "scales_capped"])
    d = client.get("/v1/plans/dispensers", headers=keys.header("analyst")).json()
    from service.stats import design
    assert d["exact"]["alpha"] == design(0.02, 0.08, 0.05, 0.10).to_dict()["exact"]["alpha"]
