"""Stale reminders and re-monitoring, called directly with an injected clock."""
from dataclasses import replace

import pytest
from fastapi.testclient import TestClient

from service.api import create_app
from service.jobs.calendar import raise_stale_alerts, remonitor_cleared

from .clock import FakeClock
from .conftest import make_keys, new_facility, record


@pytest.fixture
def env(settings):
    clock = FakeClock()
    plans = dict(settings.plans)
    plans["scales"] = replace(plans["scales"], remonitor_after_days=30, stale_after_days=7)
    app = create_app(settings.with_overrides(plans=plans), clock=clock)
    with TestClient(app) as client:
        yield client, make_keys(app.state.monitor.store), clock, app.state.monitor


def stale_alerts(client, keys, fid):
    return client.get("/v1/alerts", params={"facility_id": fid, "kind": "stale"},
                      headers=keys.header("analyst")).json()["items"]


def test_stale_fires_once_at_the_right_time(env):
    client, keys, clock, m = env
    default_days = 14  # [schedule] stale_after_days in config/seqaudit.toml
    quiet = new_facility(client, keys, plan="dispensers")      # plan default: 14 days
    busy = new_facility(client, keys, plan="dispensers")
    scales = new_facility(client, keys, plan="scales")          # plan's own: 7 days
    client.post("/v1/records", json=record(quiet, "q-1", 0), headers=keys.header("field"))
    clock.advance(days=7, seconds=-1)
    assert raise_stale_alerts(m.store, m.plans, clock, default_days) == []
    clock.advance(seconds=1)
    assert raise_stale_alerts(m.store, m.plans, clock, default_days) == [(scales, 1)]
    clock.advance(days=6, hours=23)
    client.post("/v1/records", json=record(busy, "b-1", 0), headers=keys.header("field"))
    assert raise_stale_alerts(m.store, m.plans, clock, default_days) == []
    clock.advance(hours=1)          # 14 days since quiet's record
    assert raise_stale_alerts(m.store, m.plans, clock, default_days) == [(quiet, 1)]
    for _ in range(3):              # never twice for one cycle
        clock.advance(days=10)
        raised = raise_stale_alerts(m.store, m.plans, clock, default_days)
        assert (quiet, 1) not in raised and (scales, 1) not in raised
    assert len(stale_alerts(client, keys, quiet)) == 1
    detail = stale_alerts(client, keys, quiet)[0]["detail"]
    assert detail["idle_days"] == pytest.approx(14.0, abs=1e-6)
    # a new cycle may go stale again (once)
    client.post(f"/v1/facilities/{quiet}/close", json={"reason": "audit moved"},
                headers=keys.header("analyst"))
    client.post(f"/v1/facilities/{quiet}/cycles", headers=keys.header("analyst"))
    clock.advance(days=14)
    assert (quiet, 2) in raise_stale_alerts(m.store, m.plans, clock, default_days)


def test_remonitor_opens_one_new_cycle_after_the_plans_delay(env):
    client, keys, clock, m = env
    fid = new_facility(client, keys, plan="scales")
    never = new_facility(client, keys, plan="dispensers")
    # scales: LLR per conforming unit ln(0.88/0.96) = -0.0870; b = -2.2513 -> cleared at 26
    for plan_fid in (fid, never):
        for i in range(40):
            client.post("/v1/records", json=record(plan_fid, f"{plan_fid}-{i}", 0),
                        headers=keys.header("field"))
    assert client.get(f"/v1/facilities/{fid}", headers=keys.header("analyst")).json()[
        "decision"] == "cleared"
    plans = dict(m.plans.specs)
    plans["dispensers"] = replace(plans["dispensers"], remonitor_after_days=None)
    m.plans.specs = plans
    clock.advance(days=30, seconds=-1)
    assert remonitor_cleared(m.store, m.plans, clock) == []
    clock.advance(seconds=1)
    assert remonitor_cleared(m.store, m.plans, clock) == [(fid, 2)]
    clock.advance(days=60)
    assert remonitor_cleared(m.store, m.plans, clock) == []
    state = client.get(f"/v1/facilities/{fid}", headers=keys.header("analyst")).json()
    assert state["cycle"] == 2 and state["status"] == "monitoring"
    assert client.get(f"/v1/facilities/{never}", headers=keys.header("analyst")).json()[
        "cycle"] == 1
    actions = client.get("/v1/actions", params={"facility_id": fid},
                         headers=keys.header("admin")).json()["items"]
    assert actions[-1]["action"] == "cycle_opened" and actions[-1]["key_label"] == "scheduler"
