"""Replaying any cycle from its records equals the stored state (hypothesis).

Random sequences of single posts, batches, retried duplicates and voids go
through the HTTP API; afterwards the stored state must equal (a) the pure
replay of the stored records and (b) a running-sum LLR computed here by hand.
"""
import itertools
import math
from dataclasses import replace

import pytest
from fastapi.testclient import TestClient
from hypothesis import event, given, settings as hsettings, strategies as st

from service.api import create_app
from service.monitor import Evidence, replay
from service.store import plan_from_snapshot

from .conftest import make_keys, quiet_settings

PLANS = {"dispensers": (0.02, 0.08, 0.05, 0.10, None),
         "scales_capped": (0.04, 0.12, 0.05, 0.10, 150)}   # as in config/seqaudit.toml
_n = itertools.count()


@pytest.fixture(scope="module")
def env(tmp_path_factory):
    app = create_app(quiet_settings(tmp_path_factory.mktemp("replay")))
    # The SPRT alone: without the watch chart a clear is final, so every record stays in
    # cycle 1 (the chart and its own replay property are in test_watch_service.py).
    book = app.state.monitor.plans
    book.specs = {name: replace(spec, watch=None) for name, spec in book.specs.items()}
    with TestClient(app) as client:
        yield client, make_keys(app.state.monitor.store)


@st.composite
def counts(draw, clean):
    """(units, nonconforming) of one record; a clean facility rarely has a bad unit."""
    units = draw(st.integers(1, 4))
    bad = draw(st.sampled_from([0] * (40 if clean else 6) + [1, units]))
    return units, min(bad, units)


def ops(clean):
    one = st.one_of(
        st.tuples(st.just("post"), counts(clean)),
        st.tuples(st.just("batch"), st.lists(counts(clean), min_size=1 if not clean else 12,
                                             max_size=40)),
        st.tuples(st.just("dup"), st.integers(0, 10_000)),
        st.tuples(st.just("void"), st.integers(0, 10_000)))
    return st.lists(one, min_size=1, max_size=30)


def hand_state(plan_args, records):
    """Running LLR sum over evidence in receipt order (Wald 1947, the SPRT rule)."""
    p0, p1, alpha, beta, cap = plan_args
    a, b = math.log((1 - beta) / alpha), math.log(beta / (1 - alpha))
    up, down = math.log(p1 / p0), math.log((1 - p1) / (1 - p0))
    total, units, bad = 0.0, 0, 0
    for units_i, bad_i in records:
        total += bad_i * up + (units_i - bad_i) * down
        units, bad = units + units_i, bad + bad_i
        if total >= a - 1e-9:
            return "flagged", units, bad
        if total <= b + 1e-9:
            return "cleared", units, bad
        if cap is not None and units >= cap:
            return ("flagged" if total >= -1e-9 else "cleared"), units, bad
    return "monitoring", units, bad


@hsettings(max_examples=60, deadline=None)
@given(plan=st.sampled_from(sorted(PLANS)), ops=st.one_of(ops(True), ops(False)))
def test_stored_state_equals_replay(env, plan, ops):
    client, keys = env
    fid = f"H-{next(_n)}"
    assert client.post("/v1/facilities", json={"facility_id": fid, "name": "h", "plan": plan},
                       headers=keys.header("admin")).status_code == 201
    sent: list[dict] = []     # records stored, in receipt order
    voided: set[str] = set()

    def make(units_bad):
        return {"record_id": f"{fid}-{len(sent)}", "facility_id": fid,
                "observed_at": "2026-11-30T08:00:00Z", "units": units_bad[0],
                "nonconforming": units_bad[1]}

    for kind, x in ops:
        if kind == "post":
            body = make(x)
            assert client.post("/v1/records", json=body,
                               headers=keys.header("field")).status_code == 201
            sent.append(body)
        elif kind == "batch":
            bodies = []
            for units_bad in x:
                bodies.append(make(units_bad))
                sent.append(bodies[-1])
            r = client.post("/v1/records", json={"records": bodies}, headers=keys.header("field"))
            assert r.json()["accepted"] == len(bodies)
        elif kind == "dup" and sent:
            body = sent[x % len(sent)]
            r = client.post("/v1/records", json=body, headers=keys.header("field"))
            assert r.json()["status"] == "duplicate"
        elif kind == "void" and sent:
            rid = sent[x % len(sent)]["record_id"]
            r = client.post(f"/v1/records/{rid}/void", json={"reason": "property test"},
                            headers=keys.header("analyst"))
            assert r.status_code == (409 if rid in voided else 200)
            voided.add(rid)

    state = client.get(f"/v1/facilities/{fid}", headers=keys.header("analyst")).json()
    listed = client.get(f"/v1/facilities/{fid}/records",
                        headers=keys.header("analyst")).json()["items"]
    assert [r["record_id"] for r in listed] == [b["record_id"] for b in sent]  # receipt order
    live = [r for r in listed if not r["void"]]
    snap = state["cycles"][0]["plan_snapshot"]
    replayed, counted = replay(plan_from_snapshot(snap),
                               [Evidence(r["seq"], r["units"], r["nonconforming"], r["received_at"])
                                for r in live])
    assert (state["status"], state["units"], state["nonconforming"]) == \
        (replayed.status, replayed.units, replayed.nonconforming)
    assert state["decided_after_units"] == replayed.decided_after_units
    assert [r["evidence"] for r in live] == counted
    hand = hand_state(PLANS[plan], [(b["units"], b["nonconforming"]) for b in sent
                                    if b["record_id"] not in voided])
    assert (state["status"], state["units"], state["nonconforming"]) == hand
    event(f"status {state['status']}")
