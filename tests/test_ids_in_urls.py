"""Ids that reach a URL: each is one path segment everywhere, the void stays within its
facility, and ids that could change a URL's meaning are refused at ingest."""
import re
from urllib.parse import quote

import pytest

from service.web.routes import templates

from .conftest import new_facility, record


def sign_in(client, key):
    page = client.get("/ui/signin")
    csrf = re.search(r'name="csrf" value="([^"]+)"', page.text).group(1)
    r = client.post("/ui/signin", data={"key": key, "csrf": csrf}, follow_redirects=False)
    assert r.status_code == 303, r.text
    page = client.get("/ui/overview")
    return re.search(r'name="csrf" value="([^"]+)"', page.text).group(1)


@pytest.mark.parametrize("rid", ["junk/../vic-2", "a b", "x\u202ey", "zw\u200bj", " lead",
                                 "trail ", ".", "..", "back\\slash", "tab\tid", "c1\x85"])
def test_unsafe_record_ids_are_refused_naming_the_field(client, keys, rid):
    fid = new_facility(client, keys) if rid != "a b" else None
    if rid == "a b":            # an inner space is an ordinary character: accepted
        fid = new_facility(client, keys)
        r = client.post("/v1/records", json=record(fid, rid), headers=keys.header("field"))
        assert r.status_code == 201, r.text
        return
    r = client.post("/v1/records", json=record(fid, rid), headers=keys.header("field"))
    assert r.status_code == 422, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    assert [e["field"] for e in r.json()["errors"]] == ["record_id"]
    # in a batch: only that line is refused, the good record is stored
    r = client.post("/v1/records", json={"records": [record(fid, rid), record(fid, "ok-1")]},
                    headers=keys.header("field"))
    assert r.status_code == 200
    lines = r.json()["results"]
    assert lines[0]["code"] == 422 and lines[0]["errors"][0]["field"] == "records[0].record_id"
    assert lines[1]["status"] == "accepted"


@pytest.mark.parametrize("fid", ["a/b", " F-1", "F-1 ", "F\u200d1", "F\u2066x", ".", ".."])
def test_unsafe_facility_ids_are_refused(client, keys, fid):
    r = client.post("/v1/facilities", json={"facility_id": fid, "name": "n",
                                            "plan": "dispensers"},
                    headers=keys.header("admin"))
    assert r.status_code == 422, r.text
    assert r.json()["errors"][0]["field"] == "facility_id"
    r = client.post("/v1/records", json=record(fid, "r-unsafe-fid"), headers=keys.header("field"))
    assert r.status_code == 422
    assert r.json()["errors"][0]["field"] == "facility_id"


def test_location_header_is_percent_encoded_for_non_latin1_ids(client, keys):
    # Finding: 'Łódź-1' was stored, then the raw id in the Location header (which must be
    # Latin-1) made the answer 500 and a retry 409.
    r = client.post("/v1/facilities", json={"facility_id": "Łódź-1", "name": "Łódź depot",
                                            "plan": "dispensers"},
                    headers=keys.header("admin"))
    assert r.status_code == 201, r.text
    assert r.headers["location"] == "/v1/facilities/%C5%81%C3%B3d%C5%BA-1"
    assert client.get(r.headers["location"], headers=keys.header("analyst")).json()[
        "facility_id"] == "Łódź-1"
    r = client.post("/v1/facilities", json={"facility_id": "sp ace#1?", "name": "x",
                                            "plan": "dispensers"},
                    headers=keys.header("admin"))
    assert r.headers["location"] == "/v1/facilities/sp%20ace%231%3F"


def test_segment_filter_encodes_every_reserved_character():
    seg = templates.env.filters["segment"]
    for raw in ("junk/../vic-2", "a?b#c", "50%", "x y", "Łódź", "a\\b"):
        assert seg(raw) == quote(raw, safe="")
        assert "/" not in seg(raw) and "?" not in seg(raw) and "#" not in seg(raw)


def stored_record(app, fid, rid, nonconforming):
    """A record stored as an earlier version could have stored it (ids are no longer checked
    at this level)."""
    from service.store import RecordIn
    store = app.state.monitor.store
    store.ingest([RecordIn(rid, fid, "2026-11-30T09:15:00Z", "2026-11-30T09:15:00Z", 1,
                           nonconforming)], "old tablet", "2026-11-30T10:00:00.000000Z")


def test_void_form_of_an_attackers_record_cannot_reach_another_facility(app, client, keys):
    # The victim facility is flagged by three nonconforming records; the attacker's facility
    # holds a record whose id climbs out of its URL (stored before ids were checked).
    victim = new_facility(client, keys, prefix="VIC")
    attacker = new_facility(client, keys, prefix="ATT")
    for k in range(3):
        stored_record(app, victim, f"vic-{k}", 1)
    stored_record(app, attacker, f"junk/../vic-2", 0)
    stored_record(app, attacker, "..", 0)
    csrf = sign_in(client, keys.analyst)
    page = client.get(f"/ui/facilities/{attacker}")
    assert "junk/../vic-2" in page.text
    # no form action on the page carries a raw record id (they travel in a hidden field)
    actions = re.findall(r'action="([^"]+)"', page.text)
    assert all("/../" not in a and not a.endswith("/..") for a in actions)
    void_forms = re.findall(r'<form method="post" action="([^"]+)"[^>]*>\s*'
                            r'<input type="hidden" name="record_id" value="([^"]*)"', page.text)
    assert ("/ui/facilities/" + quote(attacker, safe="") + "/void", "junk/../vic-2") in void_forms
    r = client.post(f"/ui/facilities/{quote(attacker, safe='')}/void",
                    data={"record_id": "junk/../vic-2", "reason": "junk", "csrf": csrf,
                          "cycle": "1"}, follow_redirects=False)
    assert r.status_code == 303
    fac = client.get(f"/v1/facilities/{victim}", headers=keys.header("analyst")).json()
    assert fac["status"] == "flagged"                 # the victim is untouched
    recs = client.get(f"/v1/facilities/{attacker}/records",
                      headers=keys.header("analyst")).json()["items"]
    assert [r["void"] for r in recs if r["record_id"] == "junk/../vic-2"] == [True]
    # '..' can be voided from the dashboard too
    r = client.post(f"/ui/facilities/{quote(attacker, safe='')}/void",
                    data={"record_id": "..", "reason": "junk", "csrf": csrf, "cycle": "1"},
                    follow_redirects=False)
    assert "voided" in r.headers["location"]


def test_void_checks_the_record_belongs_to_the_facility_in_the_url(app, client, keys):
    victim = new_facility(client, keys, prefix="VIC")
    other = new_facility(client, keys, prefix="OTH")
    for k in range(3):
        stored_record(app, victim, f"v2-{k}", 1)
    csrf = sign_in(client, keys.analyst)
    for url, data in ((f"/ui/facilities/{other}/void", {"record_id": "v2-2"}),
                      (f"/ui/facilities/{other}/records/v2-2/void", {})):
        r = client.post(url, data={**data, "reason": "x", "csrf": csrf, "cycle": "1"},
                        follow_redirects=False)
        assert r.status_code == 303
        assert "kind=error" in r.headers["location"]
        assert "not+a+record+of" in r.headers["location"]
    fac = client.get(f"/v1/facilities/{victim}", headers=keys.header("analyst")).json()
    assert fac["status"] == "flagged"


def test_api_void_of_an_encoded_id(app, client, keys):
    fid = new_facility(client, keys)
    stored_record(app, fid, "old/style?id#1", 0)
    r = client.post(f"/v1/records/{quote('old/style?id#1', safe='')}/void",
                    json={"reason": "test"}, headers=keys.header("analyst"))
    assert r.status_code == 200, r.text
    assert r.json()["record"]["record_id"] == "old/style?id#1"


def test_download_names_of_non_latin1_ids_are_ascii(client, keys):
    # A header value must be Latin-1: a facility id such as 'Łódź-2' in a download's
    # Content-Disposition made the case file and the CSV exports answer 500.
    client.post("/v1/facilities", json={"facility_id": "Łódź-2", "name": "Łódź depot",
                                        "plan": "dispensers"}, headers=keys.header("admin"))
    client.post("/v1/records", json={"records": [record("Łódź-2", f"lz-{i}", 1)
                                                 for i in range(3)]},
                headers=keys.header("field"))
    seg = quote("Łódź-2", safe="")
    r = client.get(f"/v1/facilities/{seg}/cycles/1/casefile.pdf", headers=keys.header("analyst"))
    assert r.status_code == 200
    assert 'filename="casefile-__d_-2-cycle1.pdf"' in r.headers["content-disposition"]
    r = client.get("/v1/actions", params={"facility_id": "Łódź-2", "format": "csv"},
                   headers=keys.header("admin"))
    assert r.status_code == 200
    r.headers["content-disposition"].encode("latin-1")
