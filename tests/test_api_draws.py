"""Frames, RFC 3797 draws and assignments over the API."""
import hashlib
from urllib.parse import quote

import pytest

from .conftest import new_facility, record
from .test_api_bad_input import assert_problem

FRAME = {"label": "week 2026-W48", "period_start": "2026-11-23", "period_end": "2026-11-29"}
SEED = "9319 / 2 5 12 8 10 / 9 18 26 34 41 45"      # the sources of RFC 3797 section 6


def units(n=30, prefix="PUMP"):
    return [f"{prefix}-{i:03d}" for i in range(n)]


def add_frame(client, keys, fid, refs=None, **extra):
    body = {**FRAME, "units": units() if refs is None else refs, **extra}
    return client.post(f"/v1/facilities/{quote(fid, safe='')}/frames", json=body,
                       headers=keys.header("analyst"))


def by_hand(refs, seed_key, size):
    """RFC 3797 section 4 written out here, apart from service.selection: canonical text,
    its SHA-256 as the last source of the key, MD5(i, key, i) modulo the remaining pool."""
    canon = sorted({r.strip() for r in refs})
    sha = hashlib.sha256("".join(u + "\n" for u in canon).encode()).hexdigest()
    key = seed_key + sha + "./"
    pool, out = list(canon), []
    for i in range(size):
        b = i.to_bytes(2, "big")
        n = int.from_bytes(hashlib.md5(b + key.encode() + b).digest(), "big")
        out.append(pool.pop(n % len(pool)))
    return sha, key, out


def test_frame_registered_with_hash_and_duplicates(client, keys):
    fid = new_facility(client, keys)
    refs = [" PUMP-002", "PUMP-001", "PUMP-002", "PUMP-010 "]
    r = add_frame(client, keys, fid, refs)
    assert r.status_code == 201, r.text
    body = r.json()
    canon = "PUMP-001\nPUMP-002\nPUMP-010\n"
    assert body["size"] == 3 and body["duplicates"] == ["PUMP-002"]
    assert body["sha256"] == hashlib.sha256(canon.encode()).hexdigest()   # hashlib by hand
    assert r.headers["location"] == f"/v1/facilities/{fid}/frames/{body['frame_id']}"
    text = client.get(f"/v1/facilities/{fid}/frames/{body['frame_id']}/canonical",
                      headers=keys.header("analyst"))
    assert text.status_code == 200 and text.text == canon
    listed = client.get(f"/v1/facilities/{fid}/frames", headers=keys.header("analyst")).json()
    assert [f["frame_id"] for f in listed["items"]] == [body["frame_id"]]


def test_frame_upload_csv(client, keys):
    fid = new_facility(client, keys)
    csv_text = "site,unit_ref\nNorth,S-2\nNorth,S-1\nSouth,S-2\n"
    r = client.post(f"/v1/facilities/{fid}/frames/upload", params=FRAME,
                    content=csv_text.encode(), headers={**keys.header("analyst"),
                                                        "Content-Type": "text/csv"})
    assert r.status_code == 201, r.text
    assert r.json()["size"] == 2 and r.json()["duplicates"] == ["S-2"]
    bad = client.post(f"/v1/facilities/{fid}/frames/upload", params=FRAME,
                      content=b"A\nB\n" + b"x" * 129 + b"\n",
                      headers={**keys.header("analyst"), "Content-Type": "text/plain"})
    problem = assert_problem(bad, 422, "file")
    assert "line 3" in problem["detail"]
    bad_dates = client.post(f"/v1/facilities/{fid}/frames/upload",
                            params={**FRAME, "period_end": "2026-11-01"}, content=b"A\n",
                            headers={**keys.header("analyst"), "Content-Type": "text/plain"})
    assert_problem(bad_dates, 422)
    not_utf8 = client.post(f"/v1/facilities/{fid}/frames/upload", params=FRAME,
                           content=b"\xff\xfe\x00A", headers={**keys.header("analyst"),
                                                              "Content-Type": "text/plain"})
    assert_problem(not_utf8, 422, "file")
    frames = client.get(f"/v1/facilities/{fid}/frames", headers=keys.header("analyst")).json()
    assert len(frames["items"]) == 1          # the refused uploads wrote nothing


@pytest.mark.parametrize("refs, extra, field", [
    ([], {}, "units"),
    (["A", "  "], {}, "units.1"),
    (["A", "B", "C\x07"], {}, "units.2"),
    (["A", "x" * 129], {}, "units.1"),
    (["A"], {"period_start": "2026-02-30"}, "period_start"),
    (["A"], {"period_end": "2026-11-01"}, "body"),
    (["A"], {"label": ""}, "label"),
    (["A"], {"extra": 1}, "extra"),
])
def test_bad_frames(client, keys, refs, extra, field):
    fid = new_facility(client, keys)
    assert_problem(add_frame(client, keys, fid, refs, **extra), 422, field)
    frames = client.get(f"/v1/facilities/{fid}/frames", headers=keys.header("analyst")).json()
    assert frames["items"] == []


def test_frame_of_unknown_facility_is_404(client, keys):
    assert_problem(add_frame(client, keys, "NOPE"), 404)


def test_draw_matches_rfc3797_by_hand(client, keys):
    fid = new_facility(client, keys)
    refs = list(reversed(units(40)))
    frame = add_frame(client, keys, fid, refs).json()
    r = client.post(f"/v1/facilities/{fid}/draws", json={"frame_id": frame["frame_id"],
                                                          "size": 8, "seed": SEED},
                    headers=keys.header("analyst"))
    assert r.status_code == 201, r.text
    d = r.json()
    sha, key, expected = by_hand(refs, "9319./2.5.8.10.12./9.18.26.34.41.45./", 8)
    assert d["frame_sha256"] == sha and d["key"] == key
    assert [u["unit_ref"] for u in d["units"]] == expected
    assert [u["order"] for u in d["units"]] == list(range(1, 9))
    assert all(sorted(units(40))[u["frame_position"] - 1] == u["unit_ref"] for u in d["units"])
    assert d["cycle"] == 1 and d["rechecked"] == 0 and d["created_by"] == "test analyst"
    assert d["verify_command"] == (f"seqaudit draw verify --frame frame-{frame['frame_id']}.txt "
                                   f"--seed '{SEED}' --size 8")
    assert r.headers["location"] == f"/v1/facilities/{fid}/draws/{d['draw_id']}"
    again = client.get(r.headers["location"], headers=keys.header("analyst")).json()
    assert again == d
    listed = client.get(f"/v1/facilities/{fid}/draws", headers=keys.header("analyst")).json()
    assert [x["draw_id"] for x in listed["items"]] == [d["draw_id"]]
    assert "units" not in listed["items"][0] or listed["items"][0]["units"] is None
    acts = client.get("/v1/actions", params={"facility_id": fid},
                      headers=keys.header("admin")).json()["items"]
    made = [a for a in acts if a["action"] == "draw_made"]
    assert len(made) == 1 and made[0]["detail"]["units"] == expected


def test_ids_in_urls_are_one_path_segment(client, keys):
    fid = "Agency #7 ?x&y"
    r = client.post("/v1/facilities", json={"facility_id": fid, "name": "Odd id",
                                            "plan": "dispensers"}, headers=keys.header("admin"))
    assert r.status_code == 201
    frame = add_frame(client, keys, fid)
    assert frame.status_code == 201, frame.text
    seg = quote(fid, safe="")
    assert frame.headers["location"] == f"/v1/facilities/{seg}/frames/{frame.json()['frame_id']}"
    d = client.post(f"/v1/facilities/{seg}/draws", json={"frame_id": frame.json()["frame_id"],
                                                          "size": 2, "seed": "1 2 3"},
                    headers=keys.header("analyst"))
    assert d.status_code == 201
    assert client.get(d.headers["location"], headers=keys.header("analyst")).status_code == 200


@pytest.mark.parametrize("change, field", [
    ({"size": 0}, "size"), ({"size": 31}, "size"), ({"size": 70000}, "size"),
    ({"frame_id": 999999}, "frame_id"), ({"frame_id": "OTHER"}, "frame_id"),
    ({"seed": ""}, "seed"), ({"seed": "   "}, "seed"), ({"seed": " / / "}, "seed"),
    ({"seed": "12-4"}, "seed"), ({"size": "3"}, "size"), ({"extra": 1}, "extra"),
])
def test_bad_draws_name_the_field_and_write_nothing(client, keys, change, field):
    fid = new_facility(client, keys)
    other = new_facility(client, keys)
    mine = add_frame(client, keys, fid).json()["frame_id"]
    theirs = add_frame(client, keys, other).json()["frame_id"]
    body = {"frame_id": mine, "size": 5, "seed": SEED, **change}
    if body["frame_id"] == "OTHER":
        body["frame_id"] = theirs
    r = client.post(f"/v1/facilities/{fid}/draws", json=body, headers=keys.header("analyst"))
    assert_problem(r, 422, field)
    for f in (fid, other):
        assert client.get(f"/v1/facilities/{f}/draws",
                          headers=keys.header("analyst")).json()["items"] == []
    acts = client.get("/v1/actions", headers=keys.header("admin")).json()["items"]
    assert not [a for a in acts if a["action"] == "draw_made"]


def test_draw_needs_an_open_cycle_and_lookups_check_the_facility(client, keys):
    fid = new_facility(client, keys)
    other = new_facility(client, keys)
    frame = add_frame(client, keys, fid).json()["frame_id"]
    d = client.post(f"/v1/facilities/{fid}/draws", json={"frame_id": frame, "size": 3,
                                                          "seed": "5 6"},
                    headers=keys.header("analyst")).json()
    assert_problem(client.get(f"/v1/facilities/{other}/draws/{d['draw_id']}",
                              headers=keys.header("analyst")), 404)
    assert_problem(client.get(f"/v1/facilities/{other}/frames/{frame}",
                              headers=keys.header("analyst")), 404)
    assert_problem(client.get(f"/v1/facilities/{fid}/draws/0",
                              headers=keys.header("analyst")), 422)
    assert_problem(client.get(f"/v1/facilities/{fid}/draws/77777",
                              headers=keys.header("analyst")), 404)
    assert_problem(client.get("/v1/facilities/NOPE/draws", headers=keys.header("analyst")), 404)
    client.post(f"/v1/facilities/{fid}/close", json={"reason": "test"},
                headers=keys.header("analyst"))
    r = client.post(f"/v1/facilities/{fid}/draws", json={"frame_id": frame, "size": 3,
                                                          "seed": "5 6"},
                    headers=keys.header("analyst"))
    assert_problem(r, 409)


def test_assignments_for_field_keys(client, keys):
    fid = new_facility(client, keys)
    frame = add_frame(client, keys, fid).json()["frame_id"]
    d = client.post(f"/v1/facilities/{fid}/draws", json={"frame_id": frame, "size": 4,
                                                          "seed": "11 22 33"},
                    headers=keys.header("analyst")).json()
    r = client.get("/v1/assignments", headers=keys.header("field"))
    assert r.status_code == 200
    mine = [f for f in r.json()["items"] if f["facility_id"] == fid]
    assert mine == [{"facility_id": fid,
                     "units": [{"draw_id": d["draw_id"], "order": u["order"],
                                "unit_ref": u["unit_ref"]} for u in d["units"]]}]
    # a decided cycle's pending units leave the list
    for i in range(3):
        client.post("/v1/records", json=record(fid, f"{fid}-bad-{i}", 1),
                    headers=keys.header("field"))
    assert client.get(f"/v1/facilities/{fid}", headers=keys.header("analyst")).json()[
        "status"] == "flagged"
    r = client.get("/v1/assignments", headers=keys.header("field"))
    assert [f for f in r.json()["items"] if f["facility_id"] == fid] == []
