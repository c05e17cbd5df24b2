"""Records of drawn units: marks, plans that require draws, one re-check per drawn unit,
assignments, voids, replay and the case file."""
import io
from dataclasses import replace

import pytest
from fastapi.testclient import TestClient
from hypothesis import given, settings as hsettings
from hypothesis import strategies as st
from pypdf import PdfReader

from service.api import create_app
from service.draw_rule import NOT_DRAWN, DrawSlot, check_unit
from service.verify import verify_database

from .conftest import make_keys, record
from .test_api_bad_input import assert_problem

FRAME = {"label": "week 48", "period_start": "2026-11-23", "period_end": "2026-11-29"}


@pytest.fixture
def drawn_client(settings):
    """The repository's plans plus 'dispensers_drawn': dispensers with require_draw."""
    plans = {**settings.plans,
             "dispensers_drawn": replace(settings.plans["dispensers"], name="dispensers_drawn",
                                         require_draw=True)}
    app = create_app(settings.with_overrides(plans=plans))
    with TestClient(app) as c:
        c.keys = make_keys(app.state.monitor.store)
        yield c


def setup(c, fid, plan="dispensers_drawn", size=6, n_units=40):
    h = c.keys.header("admin")
    assert c.post("/v1/facilities", json={"facility_id": fid, "name": fid, "plan": plan},
                  headers=h).status_code == 201
    frame = c.post(f"/v1/facilities/{fid}/frames",
                   json={**FRAME, "units": [f"U-{i:03d}" for i in range(n_units)]},
                   headers=h).json()
    d = c.post(f"/v1/facilities/{fid}/draws", json={"frame_id": frame["frame_id"], "size": size,
                                                     "seed": "3 14 15 92 65"}, headers=h)
    assert d.status_code == 201, d.text
    return d.json()


def post(c, body, role="field"):
    return c.post("/v1/records", json=body, headers=c.keys.header(role))


def listed(c, fid):
    return c.get(f"/v1/facilities/{fid}/records", headers=c.keys.header("analyst")).json()["items"]


def test_require_draw_keeps_undrawn_records_out_of_the_evidence(drawn_client):
    c = drawn_client
    d = setup(c, "A-1")
    first = d["units"][0]["unit_ref"]
    assert post(c, record("A-1", "r1", 0, unit_ref=first)).status_code == 201
    assert post(c, record("A-1", "r2", 1, unit_ref="NOT-IN-DRAW")).status_code == 201
    assert post(c, record("A-1", "r3", 1)).status_code == 201          # no unit_ref at all
    rows = {r["record_id"]: r for r in listed(c, "A-1")}
    assert rows["r1"]["evidence"] and rows["r1"]["draw_id"] == d["draw_id"]
    assert rows["r1"]["draw_order"] == 1 and rows["r1"]["not_evidence_reason"] is None
    for rid in ("r2", "r3"):
        assert not rows[rid]["evidence"] and rows[rid]["draw_id"] is None
        assert "requires drawn units" in rows[rid]["not_evidence_reason"]
    fac = c.get("/v1/facilities/A-1", headers=c.keys.header("analyst")).json()
    assert (fac["units"], fac["nonconforming"]) == (1, 0)               # only r1 counted
    assert fac["cycles"][0]["records"] == 3                             # all three kept
    assert verify_database(c.app.state.monitor.store).ok


def test_a_drawn_unit_counts_once_and_the_refusal_names_the_first_record(drawn_client):
    c = drawn_client
    d = setup(c, "A-2")
    unit = d["units"][1]["unit_ref"]
    assert post(c, record("A-2", "first", 0, unit_ref=unit)).status_code == 201
    assert post(c, record("A-2", "first", 0, unit_ref=unit)).status_code == 200   # a retry
    again = post(c, record("A-2", "second", 1, unit_ref=unit))
    body = assert_problem(again, 409)
    assert "'first'" in body["detail"] and body["errors"][0]["field"] == "unit_ref"
    # in one batch: the first takes the place, the second is refused
    other = d["units"][2]["unit_ref"]
    r = post(c, {"records": [record("A-2", "b1", 0, unit_ref=other),
                             record("A-2", "b2", 0, unit_ref=other)]})
    res = r.json()["results"]
    assert [x["status"] for x in res] == ["accepted", "conflict"]
    assert "'b1'" in res[1]["errors"][0]["message"]
    assert [r["record_id"] for r in listed(c, "A-2")] == ["first", "b1"]


def test_without_require_draw_records_count_and_drawn_ones_are_marked(drawn_client):
    c = drawn_client
    d = setup(c, "B-1", plan="dispensers")
    unit = d["units"][0]["unit_ref"]
    post(c, record("B-1", "x1", 0, unit_ref=unit))
    post(c, record("B-1", "x2", 0, unit_ref="ELSEWHERE"))
    rows = {r["record_id"]: r for r in listed(c, "B-1")}
    assert rows["x1"]["evidence"] and rows["x1"]["draw_id"] == d["draw_id"]
    assert rows["x2"]["evidence"] and rows["x2"]["draw_id"] is None
    assert rows["x2"]["not_evidence_reason"] is None


def test_assignments_follow_records_voids_and_decisions(drawn_client):
    c = drawn_client
    d = setup(c, "C-1", size=5)

    def pending():
        items = c.get("/v1/assignments", headers=c.keys.header("field")).json()["items"]
        mine = [f for f in items if f["facility_id"] == "C-1"]
        assert all(set(f) == {"facility_id", "units"} for f in mine)   # nothing else
        return [u["unit_ref"] for f in mine for u in f["units"]]

    order = [u["unit_ref"] for u in d["units"]]
    assert pending() == order
    post(c, record("C-1", "c1", 0, unit_ref=order[2]))          # out of order is allowed
    assert pending() == order[:2] + order[3:]
    r = c.post("/v1/records/c1/void", json={"reason": "wrong pump"},
               headers=c.keys.header("analyst"))
    assert r.status_code == 200
    assert pending() == order                                     # back on the list
    again = post(c, record("C-1", "c1b", 0, unit_ref=order[2]))
    assert again.status_code == 201                               # the voided one is not first
    for i, unit in enumerate(order[:2]):                          # flag: 3 nonconforming
        post(c, record("C-1", f"bad{i}", 1, unit_ref=unit))
    post(c, record("C-1", "bad2", 1, unit_ref=order[3]))
    fac = c.get("/v1/facilities/C-1", headers=c.keys.header("analyst")).json()
    assert fac["status"] == "flagged"
    assert pending() == []                                        # decided: off the list
    assert verify_database(c.app.state.monitor.store).ok
    cf = c.get("/v1/facilities/C-1/cycles/1/casefile.json", headers=c.keys.header("analyst"))
    assert cf.status_code == 200, cf.text
    section = cf.json()["draws"]
    assert section["require_draw"] and section["all_evidence_drawn"]
    assert section["evidence_records"] == 4 and "Every evidence record" in section["statement"]
    (draw,) = section["draws"]
    assert draw["key"] == d["key"] and draw["frame"]["sha256"] == d["frame_sha256"]
    assert [u["record_id"] for u in draw["units"]] == ["bad0", "bad1", "c1b", "bad2", None]
    assert any(cmd.startswith("seqaudit draw verify") for cmd in draw["commands"])
    pdf = c.get("/v1/facilities/C-1/cycles/1/casefile.pdf", headers=c.keys.header("analyst"))
    assert pdf.status_code == 200
    text = " ".join(page.extract_text() for page in PdfReader(io.BytesIO(pdf.content)).pages)
    flat = " ".join(text.split())
    assert "How the re-checked units were chosen" in flat
    assert d["frame_sha256"] in flat.replace(" ", "") and "seqaudit draw verify" in flat


def test_case_file_says_when_evidence_did_not_come_from_a_draw(drawn_client):
    c = drawn_client
    setup(c, "D-1", plan="dispensers")
    for i in range(3):
        post(c, record("D-1", f"d{i}", 1, unit_ref=f"LOOSE-{i}"))
    cf = c.get("/v1/facilities/D-1/cycles/1/casefile.json", headers=c.keys.header("analyst"))
    section = cf.json()["draws"]
    assert not section["all_evidence_drawn"] and section["evidence_from_draws"] == 0
    assert "3 of 3 evidence records did not" in section["statement"]


# -- the pure rule ------------------------------------------------------------------
def test_check_unit_cases():
    slots = [DrawSlot(4, 2, None), DrawSlot(5, 1, None)]
    assert check_unit(True, "P", slots) == (4, 2, None, None)
    taken = [DrawSlot(4, 2, "r9"), DrawSlot(5, 1, None)]
    assert check_unit(True, "P", taken)[:2] == (5, 1)                # next place of the unit
    done = [DrawSlot(4, 2, "r9"), DrawSlot(5, 1, "r10")]
    out = check_unit(False, "P", done)
    assert out.conflict and "'r9'" in out.conflict and out.draw_id is None
    assert check_unit(True, "Q", []).excluded == NOT_DRAWN
    assert check_unit(True, None, []).excluded == NOT_DRAWN
    assert check_unit(False, "Q", []) == (None, None, None, None)


@hsettings(max_examples=200, deadline=None)
@given(places=st.lists(st.sampled_from("ABCD"), max_size=8),
       posts=st.lists(st.sampled_from("ABCDE"), max_size=20), require=st.booleans())
def test_rule_against_a_count_model(places, posts, require):
    """Folding the rule over posts: each unit is accepted as drawn exactly min(posts, places)
    times and refused for the rest (a brute-force count model); an undrawn unit is excluded
    under require_draw and plain otherwise."""
    slots = {u: [[i, k + 1, None] for k, (i, v) in enumerate(
        (i, v) for i, v in enumerate(places) if v == u)] for u in "ABCDE"}
    accepted, refused, excluded = {}, {}, 0
    for n, unit in enumerate(posts):
        out = check_unit(require, unit, [DrawSlot(*s) for s in slots[unit]])
        if out.conflict:
            refused[unit] = refused.get(unit, 0) + 1
        elif out.draw_id is not None:
            for s in slots[unit]:
                if (s[0], s[1]) == (out.draw_id, out.order):
                    assert s[2] is None           # a place is taken once
                    s[2] = f"r{n}"
            accepted[unit] = accepted.get(unit, 0) + 1
        elif out.excluded:
            excluded += 1
    for unit in "ABCDE":
        n_posts, n_places = posts.count(unit), places.count(unit)
        if n_places:
            assert accepted.get(unit, 0) == min(n_posts, n_places)
            assert refused.get(unit, 0) == max(0, n_posts - n_places)
    assert excluded == (sum(1 for u in posts if u not in places) if require else 0)
