"""GET /v1/program/forecast and /v1/program/visits, and regions on facilities.

Figures are checked against enumeration of every continuation of a small capped
plan (tests/test_register_stats.py::_enumerate_from, the LLR as a running sum),
added up here by hand.
"""
import csv
import io
import math

import pytest

from service.stats import SprtPlan
from service.store import plan_of

from .conftest import record
from .test_api_bad_input import assert_problem
from .test_register_stats import _enumerate_from


def _facility(client, keys, fid, plan="scales_capped", region=None):
    body = {"facility_id": fid, "name": f"Scale house {fid}", "plan": plan}
    if region is not None:
        body["region"] = region
    r = client.post("/v1/facilities", json=body, headers=keys.header("admin"))
    assert r.status_code == 201, r.text
    return r.json()


def _post(client, keys, fid, n, d, tag):
    if n:
        r = client.post("/v1/records", json=record(fid, f"{fid}-{tag}", nonconforming=d, units=n),
                        headers=keys.header("field"))
        assert r.status_code == 201, r.text


@pytest.fixture
def register(client, keys):
    """Five facilities in two regions at known states of the capped scales plan."""
    states = {"N-1": ("north", 0, 0), "N-2": ("north", 40, 2), "N-3": ("north", 90, 5),
              "S-1": ("south", 10, 1), "S-2": ("south", 100, 7)}
    for fid, (region, n, d) in states.items():
        _facility(client, keys, fid, region=region)
        _post(client, keys, fid, n, d, "a")
    return states


def test_region_is_stored_shown_and_filtered(client, keys, register):
    r = client.get("/v1/facilities", params={"region": "north"}, headers=keys.header("analyst"))
    assert r.status_code == 200
    assert sorted(i["facility_id"] for i in r.json()["items"]) == ["N-1", "N-2", "N-3"]
    assert {i["region"] for i in r.json()["items"]} == {"north"}
    one = client.get("/v1/facilities/S-1", headers=keys.header("analyst")).json()
    assert one["region"] == "south"
    plain = _facility(client, keys, "X-1")
    assert plain["region"] is None


def _enumerated(plan, states, cap):
    """Sums over the cycles of the enumerated figures (p0 and p1)."""
    tot = {"expected_false_flags": 0.0, "expected_missed": 0.0,
           "expected_audits_p0": 0.0, "expected_audits_p1": 0.0}
    for n, d in states:
        flag, clear, further, _ = _enumerate_from(plan, n, d, cap, [plan.p0, plan.p1])
        tot["expected_false_flags"] += flag[0]
        tot["expected_missed"] += clear[1]
        tot["expected_audits_p0"] += further[0]
        tot["expected_audits_p1"] += further[1]
    return tot


@pytest.mark.slow
def test_forecast_totals_equal_enumeration_on_a_small_capped_register(client, keys, app):
    # A plan with a cap of 14 units (enumerable: at most 2**14 continuations per cycle),
    # registered through a plan snapshot of the store's own form.
    plan = SprtPlan.wald(0.10, 0.30, 0.10, 0.10, max_units=14)
    store = app.state.monitor.store
    snap = {"name": "tiny", "p0": plan.p0, "p1": plan.p1, "alpha": plan.alpha,
            "beta": plan.beta, "max_units": 14, "cut_llr": 0.0, "calibrate": False,
            "upper_llr": plan.upper_llr, "lower_llr": plan.lower_llr}
    states = [(0, 0), (2, 0), (3, 1), (3, 1), (6, 1)]
    for i, (n, d) in enumerate(states):
        store.add_facility(f"T-{i}", "Tiny weighbridge", "tiny", snap,
                           "2026-11-01T00:00:00.000000Z", ("test", "admin"), region="east")
        _post(client, keys, f"T-{i}", n, d, "a")
    r = client.get("/v1/program/forecast", params={"region": "east"},
                   headers=keys.header("analyst"))
    assert r.status_code == 200, r.text
    body = r.json()
    want = _enumerated(plan_of(store.open_cycles("east")[0]["plan_json"]), states, 14)
    assert body["totals"]["open_cycles"] == 5
    for k, v in want.items():
        # tolerance: sums of at most 5 * 2**14 positive terms in float64
        assert body["totals"][k] == pytest.approx(v, abs=1e-9)
    assert [c["units"] for c in body["cycles"]] == [n for n, _ in states]
    assert "not a verdict" in body["caution"]


def test_forecast_by_region_and_weeks(client, keys, register):
    h = keys.header("analyst")
    every = client.get("/v1/program/forecast", headers=h).json()
    north = client.get("/v1/program/forecast", params={"region": "north"}, headers=h).json()
    south = client.get("/v1/program/forecast", params={"region": "south"}, headers=h).json()
    assert every["totals"]["open_cycles"] == 5
    assert north["totals"]["open_cycles"] == 3 and south["totals"]["open_cycles"] == 2
    for k in ("expected_false_flags", "expected_missed", "expected_audits_p0"):
        assert math.isclose(every["totals"][k], north["totals"][k] + south["totals"][k],
                            rel_tol=1e-12)
    by_id = {c["facility_id"]: c for c in every["cycles"]}
    assert (by_id["N-2"]["units"], by_id["N-2"]["nonconforming"]) == (40, 2)
    r = client.get("/v1/program/forecast", params={"budget": 30, "runs": 300}, headers=h)
    w = r.json()["weeks"]
    assert w["budget"] == 30 and w["runs"] == 300
    # more than 90 % of 5 cycles is all 5: at least the expected audits over the budget
    assert w["p0"]["weeks_90"] >= every["totals"]["expected_audits_p0"] / 30 - 4 * w["p0"][
        "weeks_90_se"] - 1
    assert w["p0"]["weeks_50"] <= w["p0"]["weeks_90"]


def test_visits_under_a_budget_with_reasons_and_csv(client, keys, register):
    h = keys.header("analyst")
    r = client.get("/v1/program/visits", params={"budget": 25}, headers=h)
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["units"] <= 25 and body["units"] == sum(v["units"] for v in body["visits"])
    assert [v["rank"] for v in body["visits"]] == list(range(1, len(body["visits"]) + 1))
    scores = [v["score"] for v in body["visits"]]
    assert scores == sorted(scores, reverse=True)
    first = body["visits"][0]
    assert first["facility_id"] == "N-1" and "never audited" in first["reason"]
    assert all(v["reason"] for v in body["visits"])
    south = client.get("/v1/program/visits", params={"budget": 100, "region": "south"},
                       headers=h).json()
    assert {v["facility_id"] for v in south["visits"]} == {"S-1", "S-2"}
    r = client.get("/v1/program/visits", params={"budget": 25, "format": "csv"}, headers=h)
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    assert "attachment" in r.headers["content-disposition"]
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert [x["facility_id"] for x in rows] == [v["facility_id"] for v in body["visits"]]


@pytest.mark.parametrize("path, params, field", [
    ("/v1/program/visits", {"budget": 0}, "budget"),
    ("/v1/program/visits", {"budget": -3}, "budget"),
    ("/v1/program/visits", {}, "budget"),
    ("/v1/program/visits", {"budget": "many"}, "budget"),
    ("/v1/program/visits", {"budget": 10, "region": "atlantis"}, "region"),
    ("/v1/program/visits", {"budget": 10, "per_visit": 0}, "per_visit"),
    ("/v1/program/forecast", {"budget": 0}, "budget"),
    ("/v1/program/forecast", {"region": "atlantis"}, "region"),
    ("/v1/program/forecast", {"budget": 5, "runs": 1}, "runs"),
    ("/v1/facilities", {"region": "atlantis"}, "region"),
])
def test_program_bad_input_is_a_clear_422(client, keys, register, path, params, field):
    r = client.get(path, params=params, headers=keys.header("analyst"))
    assert_problem(r, 422)
    assert field in r.text
    if params.get("region") == "atlantis":
        assert "north" in r.json()["detail"] and "south" in r.json()["detail"]


def test_bad_region_on_registration(client, keys):
    r = client.post("/v1/facilities", json={"facility_id": "R-1", "name": "x",
                                            "plan": "scales", "region": ""},
                    headers=keys.header("admin"))
    assert_problem(r, 422)


def test_program_routes_need_an_analyst(client, keys):
    for role, status in ((None, 401), ("field", 403), ("analyst", 200)):
        r = client.get("/v1/program/visits", params={"budget": 5}, headers=keys.header(role))
        assert r.status_code == status
        r = client.get("/v1/program/forecast", headers=keys.header(role))
        assert r.status_code == status


def test_visits_name_the_units_of_an_open_draw_in_draw_order(app, client, keys, register):
    # A store that offers pending drawn units (the audit-sampling feature's assignments):
    # the visit names as many of them as it has units, in draw order; facilities without a
    # draw get no unit names.
    from service import program_ops

    store = app.state.monitor.store

    class WithDraws:
        def __getattr__(self, name):
            return getattr(store, name)

        def assignments(self):
            return [{"facility_id": "N-1", "draw_id": 7, "draw_order": i, "unit_ref": f"P-{i}"}
                    for i in range(1, 40)]

    out = program_ops.visits(WithDraws(), app.state.monitor.plans, "2026-12-01T08:00:00.000000Z",
                             25, **program_ops.hooks(WithDraws()))
    by_id = {v["facility_id"]: v for v in out["visits"]}
    n1 = by_id["N-1"]
    assert n1["unit_refs"] == [f"P-{i}" for i in range(1, n1["units"] + 1)]
    assert all(v["unit_refs"] is None for f, v in by_id.items() if f != "N-1")
    assert "unit_refs" not in program_ops.visits(
        store, None, "2026-12-01T08:00:00.000000Z", 25)["visits"][0]


def test_visits_take_units_from_an_open_draw_in_draw_order(client, keys, register):
    # With the audit-sampling feature: a frame and a draw for N-1; the visit names the first
    # drawn units (GET /v1/facilities/{id}/draws gives the draw order), others none.
    from .test_api_draws import SEED, add_frame

    frame = add_frame(client, keys, "N-1").json()
    d = client.post("/v1/facilities/N-1/draws", json={"frame_id": frame["frame_id"],
                                                      "size": 12, "seed": SEED},
                    headers=keys.header("analyst")).json()
    drawn = [u["unit_ref"] for u in sorted(d["units"], key=lambda u: u["order"])]
    body = client.get("/v1/program/visits", params={"budget": 25},
                      headers=keys.header("analyst")).json()
    by_id = {v["facility_id"]: v for v in body["visits"]}
    n1 = by_id["N-1"]
    assert n1["unit_refs"] == drawn[:n1["units"]]
    assert all(v["unit_refs"] is None for f, v in by_id.items() if f != "N-1")
