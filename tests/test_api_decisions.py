"""Status flips at exactly the unit a hand computation of the LLR says."""
import math

from .conftest import new_facility, record

# dispensers plan in config/seqaudit.toml: p0 0.02, p1 0.08, alpha 0.05, beta 0.10
P0, P1, ALPHA, BETA = 0.02, 0.08, 0.05, 0.10
UPPER = math.log((1 - BETA) / ALPHA)       # Wald (1947): a = ln((1-beta)/alpha) = 2.8904
LOWER = math.log(BETA / (1 - ALPHA))       # b = ln(beta/(1-alpha)) = -2.2513
UP, DOWN = math.log(P1 / P0), math.log((1 - P1) / (1 - P0))   # +1.3863, -0.0632 per unit


def hand_decision_unit(outcomes):
    """First unit at which a running LLR sum reaches a boundary (computed by hand)."""
    total = 0.0
    for n, bad in enumerate(outcomes, start=1):
        total += UP if bad else DOWN
        if total >= UPPER:
            return n, "flagged"
        if total <= LOWER:
            return n, "cleared"
    return None, "monitoring"


def post_sequence(client, keys, fid, outcomes):
    statuses = []
    for i, bad in enumerate(outcomes):
        r = client.post("/v1/records", json=record(fid, f"{fid}-{i}", int(bad)),
                        headers=keys.header("analyst"))
        assert r.status_code == 201, r.text
        statuses.append(r.json()["facility"]["status"])
    return statuses


def test_flag_at_third_nonconforming_unit(client, keys):
    # 2 x 1.3863 = 2.7726 < 2.8904 <= 3 x 1.3863 = 4.1589: flagged after unit 3
    fid = new_facility(client, keys)
    assert hand_decision_unit([1, 1, 1]) == (3, "flagged")
    assert post_sequence(client, keys, fid, [1, 1, 1]) == ["monitoring", "monitoring", "flagged"]
    state = client.get(f"/v1/facilities/{fid}", headers=keys.header("analyst")).json()
    assert state["decided_after_units"] == 3
    assert abs(state["llr"] - 3 * UP) < 1e-12


def test_clear_at_thirty_sixth_conforming_unit(client, keys):
    # LLR after k conforming units is -0.06318 k: -2.2113 at 35 (above b = -2.2513),
    # -2.2744 at 36 (at or below b): cleared after unit 36
    fid = new_facility(client, keys)
    n, status = hand_decision_unit([0] * 60)
    assert (n, status) == (36, "cleared")
    statuses = post_sequence(client, keys, fid, [0] * 36)
    # config/seqaudit.toml gives the dispensers plan a watch chart: a cleared facility is
    # shown as watching, its cycle's decision is cleared
    assert statuses[34] == "monitoring" and statuses[35] == "watching"
    state = client.get(f"/v1/facilities/{fid}", headers=keys.header("analyst")).json()
    assert state["decision"] == "cleared" and state["cycles"][0]["status"] == "cleared"


def test_mixed_sequence_flips_where_the_running_sum_says(client, keys):
    outcomes = [0] * 10 + [1] + [0] * 5 + [1] + [0] * 3 + [1, 1] + [0] * 40
    n, status = hand_decision_unit(outcomes)
    fid = new_facility(client, keys)
    statuses = post_sequence(client, keys, fid, outcomes[:n + 3])
    assert statuses[n - 2] == "monitoring"
    assert statuses[n - 1] == status
    # later records are kept, shown as post-decision, and do not move the decision
    assert statuses[n:] == [status] * 3
    recs = client.get(f"/v1/facilities/{fid}/records", headers=keys.header("analyst")).json()
    assert [r["evidence"] for r in recs["items"]] == [True] * n + [False] * 3
    state = client.get(f"/v1/facilities/{fid}", headers=keys.header("analyst")).json()
    assert state["units"] == n and state["decided_after_units"] == n


def test_alert_raised_with_the_decision(client, keys):
    fid = new_facility(client, keys)
    post_sequence(client, keys, fid, [1, 1, 1])
    alerts = client.get("/v1/alerts", params={"facility_id": fid},
                        headers=keys.header("analyst")).json()
    assert [a["kind"] for a in alerts["items"]] == ["flagged"]
    assert alerts["items"][0]["detail"]["decided_after_units"] == 3


def test_capped_plan_decides_at_cap_and_raises_cap_reached(client, keys, tmp_path):
    # scales_capped: p0 0.04, p1 0.12, cap 150, cut LLR 0. A pattern of 1 nonconforming
    # in 15 keeps the LLR inside the band up to the cap (checked by hand below).
    up, down = math.log(0.12 / 0.04), math.log(0.88 / 0.96)
    a, b = math.log(0.9 / 0.05), math.log(0.1 / 0.95)
    outcomes = [1 if i % 15 == 7 else 0 for i in range(150)]
    total, inside = 0.0, True
    for x in outcomes:
        total += up if x else down
        inside &= b < total < a
    assert inside and total < 0  # so the cut rule clears at unit 150
    fid = new_facility(client, keys, plan="scales_capped")
    r = client.post("/v1/records", json={"records": [record(fid, f"{fid}-{i}", x)
                                                     for i, x in enumerate(outcomes)]},
                    headers=keys.header("analyst"))
    assert r.json()["accepted"] == 150
    state = client.get(f"/v1/facilities/{fid}", headers=keys.header("analyst")).json()
    assert state["status"] == "cleared" and state["decided_after_units"] == 150
    assert state["cycles"][0]["decided_at_cap"] is True
    kinds = sorted(a["kind"] for a in client.get("/v1/alerts", params={"facility_id": fid},
                                                 headers=keys.header("analyst")).json()["items"])
    assert kinds == ["cap_reached", "cleared"]
