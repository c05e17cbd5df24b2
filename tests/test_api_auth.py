"""Every route x {no key, field, analyst, admin, revoked key}: the expected status code,
and every refusal is an RFC 9457 problem."""
import pytest

from .conftest import new_facility, record

FRAME = {"label": "week 45", "period_start": "2026-11-02", "period_end": "2026-11-08"}

ROLES = [None, "field", "analyst", "admin", "revoked"]
RANK = {"field": 0, "analyst": 1, "admin": 2}


def routes(fid, rid, aid, hook, delivery):
    """(method, path, body, minimum role, success status)"""
    return [
        ("GET", f"/v1/facilities/{fid}/cycles/1/casefile.json", None, "analyst", 200),
        ("GET", f"/v1/facilities/{fid}/cycles/1/casefile.pdf", None, "analyst", 200),
        ("GET", "/v1/webhooks", None, "admin", 200),
        ("GET", f"/v1/webhooks/{hook}/deliveries", None, "admin", 200),
        ("POST", f"/v1/webhooks/{hook}/deliveries/{delivery}/retry", None, "admin", 202),
        ("POST", "/v1/webhooks", {"url": "http://127.0.0.1:9/h", "kinds": ["stale"]}, "admin",
         201),
        ("DELETE", "/v1/webhooks/NEWHOOK", None, "admin", 200),
        ("GET", "/v1/facilities", None, "analyst", 200),
        ("GET", f"/v1/facilities/{fid}", None, "analyst", 200),
        ("GET", f"/v1/facilities/{fid}/records", None, "analyst", 200),
        ("POST", "/v1/facilities", "facility", "admin", 201),
        ("POST", "/v1/records", "record", "field", 201),
        ("POST", f"/v1/records/{rid}/void", {"reason": "test"}, "analyst", 200),
        ("POST", f"/v1/facilities/{fid}/close", {"reason": "test"}, "analyst", 200),
        ("POST", f"/v1/facilities/{fid}/cycles", None, "analyst", 201),
        ("GET", "/v1/alerts", None, "analyst", 200),
        ("POST", f"/v1/alerts/{aid}/ack", {"note": "seen"}, "analyst", 200),
        ("GET", "/v1/plans", None, "analyst", 200),
        ("GET", "/v1/plans/dispensers", None, "analyst", 200),
        ("GET", "/v1/program/forecast", None, "analyst", 200),
        ("GET", "/metrics", None, "analyst", 200),
        ("GET", "/v1/actions", None, "admin", 200),
        ("GET", "/v1/keys", None, "admin", 200),
        ("POST", "/v1/keys", {"role": "field", "label": "tablet 9"}, "admin", 201),
        ("POST", "/v1/keys/1/revoke", None, "admin", 200),
        ("POST", "/v1/facilities/GFID/frames", "frame", "analyst", 201),
        ("POST", "/v1/facilities/GFID/frames/upload", "csv", "analyst", 201),
        ("GET", "/v1/facilities/GFID/frames", None, "analyst", 200),
        ("GET", "/v1/facilities/GFID/frames/FRAMEID", None, "analyst", 200),
        ("GET", "/v1/facilities/GFID/frames/FRAMEID/canonical", None, "analyst", 200),
        ("POST", "/v1/facilities/GFID/draws", "draw", "analyst", 201),
        ("GET", "/v1/facilities/GFID/draws", None, "analyst", 200),
        ("GET", "/v1/facilities/GFID/draws/DRAWID", None, "analyst", 200),
        ("GET", "/v1/assignments", None, "field", 200),
    ]


def expected(role, minimum, success):
    if role in (None, "revoked"):
        return 401
    return success if RANK[role] >= RANK[minimum] else 403


@pytest.mark.parametrize("role", ROLES)
def test_route_matrix(client, keys, role):
    hdr = keys.header("admin")
    hook = client.post("/v1/webhooks", json={"url": "http://127.0.0.1:9/h", "kinds": ["flagged"]},
                       headers=hdr).json()["id"]
    fid = new_facility(client, keys)
    for i in range(3):  # a flag gives an alert to acknowledge
        client.post("/v1/records", json=record(fid, f"{fid}-m{i}", 1), headers=hdr)
    aid = client.get("/v1/alerts", params={"facility_id": fid}, headers=hdr).json()[
        "items"][0]["alert_id"]
    extra_key = client.post("/v1/keys", json={"role": "field", "label": "spare"}, headers=hdr)
    spare_id = extra_key.json()["id"]
    delivery = client.get(f"/v1/webhooks/{hook}/deliveries", headers=hdr).json()["items"][0]["id"]
    spare_hook = client.post("/v1/webhooks", json={"url": "http://127.0.0.1:9/x",
                                                   "kinds": ["stale"]}, headers=hdr).json()["id"]
    gfid = new_facility(client, keys)     # frames and draws need an open cycle
    frame_id = client.post(f"/v1/facilities/{gfid}/frames",
                           json={**FRAME, "units": ["U-1", "U-2"]}, headers=hdr).json()["frame_id"]
    draw_id = client.post(f"/v1/facilities/{gfid}/draws", json={"frame_id": frame_id, "size": 1,
                                                              "seed": "7 7"},
                          headers=hdr).json()["draw_id"]
    counter = 0
    for method, path, body, minimum, success in routes(fid, f"{fid}-m0", aid, hook, delivery):
        path = path.replace("NEWHOOK", str(spare_hook)).replace("GFID", gfid) \
            .replace("FRAMEID", str(frame_id)).replace("DRAWID", str(draw_id))
        content = None
        if body == "frame":
            body = {**FRAME, "units": ["U-1", "U-2", "U-3"]}
        elif body == "draw":
            body = {"frame_id": frame_id, "size": 1, "seed": f"{counter} 5"}
        elif body == "csv":
            body, content = None, b"unit_ref\nU-9\n"
            path += "?label=w&period_start=2026-11-02&period_end=2026-11-08"
        counter += 1
        if body == "facility":
            body = {"facility_id": f"{fid}-new-{role}", "name": "New", "plan": "scales"}
        elif body == "record":
            body = record(fid, f"{fid}-r-{role}-{counter}", 0)
        if path.endswith("/cycles"):  # needs a stopped cycle first
            client.post(f"/v1/facilities/{fid}/close", json={"reason": "setup"}, headers=hdr)
        path = path.replace("/v1/keys/1/", f"/v1/keys/{spare_id}/")
        r = client.request(method, path, json=body, content=content, headers=keys.header(role))
        want = expected(role, minimum, success)
        assert r.status_code == want, (method, path, role, r.status_code, r.text)
        if want >= 400:
            assert r.headers["content-type"].startswith("application/problem+json")
            problem = r.json()
            assert problem["status"] == want and problem["detail"] and problem["title"]
            if want == 401:
                assert r.headers["www-authenticate"].startswith("Bearer")


def test_healthz_is_open(client):
    assert client.get("/healthz").json() == {"status": "ok"}


@pytest.mark.parametrize("header", ["Basic abc", "Bearer", "Bearer    ", "sqa_nobearer",
                                    "Bearer sqa_not-a-real-key"])
def test_malformed_or_unknown_keys_are_401(client, header):
    r = client.get("/v1/facilities", headers={"Authorization": header})
    assert r.status_code == 401
    assert r.headers["content-type"].startswith("application/problem+json")


def test_key_created_over_api_works_and_is_logged(client, keys):
    r = client.post("/v1/keys", json={"role": "analyst", "label": "desk 3"},
                    headers=keys.header("admin"))
    new = r.json()["key"]
    assert client.get("/v1/facilities", headers={"Authorization": f"Bearer {new}"}).status_code \
        == 200
    listed = client.get("/v1/keys", headers=keys.header("admin")).json()
    assert all("key" not in k and "key_hash" not in k for k in listed)
    actions = client.get("/v1/actions", headers=keys.header("admin")).json()["items"]
    assert any(a["action"] == "key_added" and a["key_label"] == "test admin" for a in actions)
