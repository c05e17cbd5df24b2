"""Bad bodies and parameters give 4xx problem+json naming the field, never 5xx."""
import pytest

from .conftest import new_facility, record


def assert_problem(r, status, field=None):
    assert r.status_code == status, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    body = r.json()
    assert body["status"] == status and body["type"].startswith("/problems/")
    assert body["instance"].startswith("/")
    if field is not None:
        fields = [e["field"] for e in body.get("errors", [])] + [body.get("field")]
        assert field in fields, body
    return body


@pytest.mark.parametrize("mutate, field", [
    (lambda r: r.pop("record_id"), "record_id"),
    (lambda r: r.pop("facility_id"), "facility_id"),
    (lambda r: r.pop("observed_at"), "observed_at"),
    (lambda r: r.pop("nonconforming"), "nonconforming"),
    (lambda r: r.update(nonconforming=2, units=1), "nonconforming"),
    (lambda r: r.update(nonconforming=2, units="x"), "units"),
    (lambda r: r.update(units=-1), "units"),
    (lambda r: r.update(units=0), "units"),
    (lambda r: r.update(units=1.5), "units"),
    (lambda r: r.update(units="3"), "units"),
    (lambda r: r.update(nonconforming=True), "nonconforming"),
    (lambda r: r.update(nonconforming=-1), "nonconforming"),
    (lambda r: r.update(observed_at="2026-11-30 10:00"), "observed_at"),
    (lambda r: r.update(observed_at="2026-13-40T10:00:00Z"), "observed_at"),
    (lambda r: r.update(observed_at="2026-11-30T10:00:00"), "observed_at"),
    (lambda r: r.update(observed_at="2999-01-01T00:00:00Z"), "observed_at"),
    (lambda r: r.update(observed_at=1700000000), "observed_at"),
    (lambda r: r.update(record_id=""), "record_id"),
    (lambda r: r.update(record_id="x" * 65), "record_id"),
    (lambda r: r.update(record_id=12), "record_id"),
    (lambda r: r.update(record_id="a\nb"), "record_id"),
    (lambda r: r.update(facility_id="UNKNOWN-9"), "facility_id"),
    (lambda r: r.update(note="n" * 2001), "note"),
    (lambda r: r.update(inspector=["a"]), "inspector"),
    (lambda r: r.update(extra_field=1), "extra_field"),
])
def test_bad_single_record(client, keys, mutate, field):
    fid = new_facility(client, keys)
    body = record(fid, "bad-1", 0)
    mutate(body)
    r = client.post("/v1/records", json=body, headers=keys.header("field"))
    problem = assert_problem(r, 422)
    assert any(e["field"] == field for e in problem["errors"]), problem


@pytest.mark.parametrize("raw, status", [
    (b"{not json", 422), (b"", 422), (b"[]", 422), (b"17", 422), (b'"text"', 422),
    (b'{"records": []}', 422), (b'{"records": {}}', 422), (b'{"records": [], "x": 1}', 422),
    ("\udcff".encode("utf-8", "surrogatepass"), 422),
])
def test_bad_bodies(client, keys, raw, status):
    r = client.post("/v1/records", content=raw, headers={**keys.header("field"),
                                                          "content-type": "application/json"})
    assert_problem(r, status)


def test_oversize_batch(client, keys):
    fid = new_facility(client, keys)
    batch = [record(fid, f"o-{i}", 0) for i in range(1001)]
    r = client.post("/v1/records", json={"records": batch}, headers=keys.header("field"))
    assert_problem(r, 413)
    state = client.get(f"/v1/facilities/{fid}", headers=keys.header("analyst")).json()
    assert state["units"] == 0


def test_oversize_body(client, keys, app):
    big = b'{"records": [' + b" " * (app.state.settings.max_body_bytes + 1) + b"]}"
    r = client.post("/v1/records", content=big, headers={**keys.header("field"),
                                                          "content-type": "application/json"})
    assert_problem(r, 413)


@pytest.mark.parametrize("body, field", [
    ({"facility_id": "X-1", "name": "n"}, "plan"),
    ({"facility_id": "X-1", "name": "n", "plan": "nope"}, "plan"),
    ({"facility_id": "", "name": "n", "plan": "scales"}, "facility_id"),
    ({"facility_id": "a/b", "name": "n", "plan": "scales"}, "facility_id"),
    ({"facility_id": "X-1", "name": 5, "plan": "scales"}, "name"),
    ({"facility_id": "X-1", "name": "n", "plan": "scales", "p0": 0.1}, "p0"),
])
def test_bad_facility(client, keys, body, field):
    r = client.post("/v1/facilities", json=body, headers=keys.header("admin"))
    assert_problem(r, 422, field)


def test_duplicate_facility_is_409(client, keys):
    fid = new_facility(client, keys)
    r = client.post("/v1/facilities", json={"facility_id": fid, "name": "again",
                                            "plan": "scales"}, headers=keys.header("admin"))
    assert_problem(r, 409)


@pytest.mark.parametrize("method, path, body, status", [
    ("GET", "/v1/facilities/NOPE", None, 404),
    ("GET", "/v1/facilities/NOPE/records", None, 404),
    ("GET", "/v1/facilities?status=sleeping", None, 422),
    ("GET", "/v1/facilities?limit=0", None, 422),
    ("GET", "/v1/facilities?limit=abc", None, 422),
    ("GET", "/v1/facilities?sort=colour", None, 422),
    ("POST", "/v1/facilities/NOPE/close", {"reason": "x"}, 404),
    ("POST", "/v1/facilities/NOPE/cycles", None, 404),
    ("POST", "/v1/records/NOPE/void", {"reason": "x"}, 404),
    ("POST", "/v1/records/NOPE/void", {}, 422),
    ("POST", "/v1/records/NOPE/void", {"reason": ""}, 422),
    ("GET", "/v1/alerts?state=unread", None, 422),
    ("GET", "/v1/alerts?kind=weird", None, 422),
    ("POST", "/v1/alerts/999999/ack", {}, 404),
    ("POST", "/v1/alerts/abc/ack", {}, 422),
    ("GET", "/v1/plans/nope", None, 404),
    ("GET", "/v1/program/visits?budget=0", None, 422),
    ("GET", "/v1/program/forecast?region=nowhere", None, 422),
    ("GET", "/v1/nothing-here", None, 404),
    ("DELETE", "/v1/facilities", None, 405),
    ("POST", "/v1/keys", {"role": "root", "label": "x"}, 422),
    ("POST", "/v1/keys/99999/revoke", None, 404),
    ("GET", "/v1/actions?cycle=0", None, 422),
    ("GET", "/v1/webhooks/999/deliveries", None, 404),
    ("POST", "/v1/webhooks/999/deliveries/1/retry", None, 404),
    ("DELETE", "/v1/webhooks/999", None, 404),
    ("POST", "/v1/webhooks", {"url": "not a url", "kinds": ["flagged"]}, 422),
    ("POST", "/v1/webhooks", {"url": "http://127.0.0.1:9/h", "kinds": ["everything"]}, 422),
    ("GET", "/v1/facilities/NOPE/cycles/1/casefile.json", None, 404),
    ("GET", "/v1/facilities/NOPE/cycles/x/casefile.pdf", None, 422),
])
def test_error_routes(client, keys, method, path, body, status):
    r = client.request(method, path, json=body, headers=keys.header("admin"))
    assert_problem(r, status)


def test_cycle_query_must_exist(client, keys):
    fid = new_facility(client, keys)
    r = client.get(f"/v1/facilities/{fid}/records", params={"cycle": 5},
                   headers=keys.header("analyst"))
    assert_problem(r, 404)
