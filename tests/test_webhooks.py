"""Signed webhook delivery with retries, checked by a real receiver on 127.0.0.1."""
import random
from datetime import timedelta

import pytest
from fastapi.testclient import TestClient

from service.api import create_app
from service.clock import parse_rfc3339
from service.jobs.delivery import deliver_due, retry_delay

from .clock import FakeClock
from .conftest import make_keys, new_facility, record
from .webhook_receiver import Receiver


@pytest.fixture
def receiver():
    """A webhook receiver on 127.0.0.1, up for the test."""
    with Receiver() as r:
        yield r


@pytest.fixture
def env(settings):
    clock = FakeClock()
    app = create_app(settings, clock=clock)
    with TestClient(app) as client:
        keys = make_keys(app.state.monitor.store)
        yield client, keys, clock, app, None      # None: each delivery run makes its client


def subscribe(client, keys, url, kinds=("flagged", "cleared", "decision_revised")):
    r = client.post("/v1/webhooks", json={"url": url, "kinds": list(kinds)},
                    headers=keys.header("admin"))
    assert r.status_code == 201, r.text
    return r.json()


def flag(client, keys, fid, prefix="w"):
    for i in range(3):
        client.post("/v1/records", json=record(fid, f"{fid}-{prefix}{i}", 1),
                    headers=keys.header("field"))


def run_delivery(app, http, clock, rng=None):
    m = app.state.monitor
    return deliver_due(m.store, http, app.state.settings.delivery, clock, rng or random.Random(1))


def test_subscription_secret_shown_once(env):
    client, keys, *_ = env
    hook = subscribe(client, keys, "http://127.0.0.1:9/hook")
    assert hook["secret"].startswith("whsec_")
    listed = client.get("/v1/webhooks", headers=keys.header("admin")).json()
    assert listed[0]["id"] == hook["id"] and "secret" not in listed[0]
    bad = client.post("/v1/webhooks", json={"url": "ftp://x", "kinds": ["flagged"]},
                      headers=keys.header("admin"))
    assert bad.status_code == 422
    bad = client.post("/v1/webhooks", json={"url": "http://x.test/h", "kinds": ["flagged"],
                                             "secret": "plain"}, headers=keys.header("admin"))
    assert bad.status_code == 422
    assert client.post("/v1/webhooks", json={"url": "http://x.test/h", "kinds": []},
                       headers=keys.header("admin")).status_code == 422
    assert client.get("/v1/webhooks", headers=keys.header("analyst")).status_code == 403


def test_signed_delivery_carries_alert_facility_cycle_and_plan(env, receiver):
    client, keys, clock, app, http = env
    hook = subscribe(client, keys, receiver.url)
    receiver.secret = hook["secret"]
    fid = new_facility(client, keys)
    flag(client, keys, fid)
    # the outbox row exists as soon as the alert does (same transaction)
    pending = client.get(f"/v1/webhooks/{hook['id']}/deliveries",
                         headers=keys.header("admin")).json()
    assert pending["total"] == 1 and pending["items"][0]["status"] == "pending"
    assert run_delivery(app, http, clock)["delivered"] == 1
    got = receiver.received
    assert len(got) == 1 and got[0]["valid"]
    assert abs(int(got[0]["timestamp"]) - clock.epoch()) < 2
    data = got[0]["json"]["data"]
    assert got[0]["json"]["type"] == "alert.flagged"
    assert data["alert"]["kind"] == "flagged" and data["facility"]["facility_id"] == fid
    assert data["cycle"]["status"] == "flagged" and data["cycle"]["units"] == 3
    assert data["plan"]["p1"] == 0.08 and "not a verdict" in data["caution"]
    # a tampered body does not verify
    from .webhook_receiver import verify
    assert not verify(hook["secret"], got[0]["id"], got[0]["timestamp"],
                      got[0]["body"] + b" ", "v1,AAAA")
    assert run_delivery(app, http, clock)["delivered"] == 0  # nothing left to send


def test_receiver_down_then_up_every_alert_arrives_once(env):
    client, keys, clock, app, http = env
    receiver = Receiver()
    receiver.start()
    port = receiver.port
    receiver.stop()                        # down: connections are refused
    hook = subscribe(client, keys, f"http://127.0.0.1:{port}/hook")
    fids = [new_facility(client, keys) for _ in range(3)]
    for fid in fids:
        flag(client, keys, fid)
    first = run_delivery(app, http, clock)
    # one attempt fails; the subscription's two other deliveries wait with its retry, their
    # waiting not counted as attempts
    assert first == {"delivered": 0, "retry": 1, "failed": 0, "gone": 0}
    rows = client.get(f"/v1/webhooks/{hook['id']}/deliveries",
                      headers=keys.header("admin")).json()["items"]
    assert sorted(r["attempts"] for r in rows) == [0, 0, 1]
    for row in rows:  # the first retry comes within a minute
        wait = parse_rfc3339(row["next_attempt_at"]) - parse_rfc3339(clock())
        assert timedelta(0) < wait <= timedelta(minutes=1)
    assert run_delivery(app, http, clock)["retry"] == 0   # not due yet
    clock.advance(minutes=1)
    run_delivery(app, http, clock)        # still down: second failure
    with Receiver(secret=hook["secret"], port=port) as receiver:
        clock.advance(minutes=5)
        assert run_delivery(app, http, clock)["delivered"] == 3
        clock.advance(hours=2)
        assert run_delivery(app, http, clock)["delivered"] == 0
        got = receiver.received
        assert len(got) == 3 and all(g["valid"] for g in got)
        assert sorted(g["json"]["data"]["facility"]["facility_id"] for g in got) == sorted(fids)
        rows = client.get(f"/v1/webhooks/{hook['id']}/deliveries",
                          headers=keys.header("admin")).json()["items"]
        assert all(r["status"] == "delivered" for r in rows)
        # the first delivery was tried three times; the others only once the receiver was up
        assert sorted(r["attempts"] for r in rows) == [1, 1, 3]
        # one webhook-id per alert across its retries
        by_alert = {r["alert_id"]: r["msg_id"] for r in rows}
        assert sorted(g["id"] for g in got) == sorted(by_alert.values())
        assert len(set(by_alert.values())) == 3


def test_three_500s_then_200_is_delivered_once_more_not_more(env, receiver):
    client, keys, clock, app, http = env
    hook = subscribe(client, keys, receiver.url)
    receiver.secret = hook["secret"]
    receiver.script = [500, 500, 500]
    flag(client, keys, new_facility(client, keys))
    for _ in range(8):
        run_delivery(app, http, clock)
        clock.advance(minutes=30)
    answered = [g["answered"] for g in receiver.received]
    assert answered == [500, 500, 500, 200]
    assert len({g["id"] for g in receiver.received}) == 1
    assert all(g["valid"] for g in receiver.received)
    row = client.get(f"/v1/webhooks/{hook['id']}/deliveries",
                     headers=keys.header("admin")).json()["items"][0]
    assert row["status"] == "delivered" and row["attempts"] == 4
    assert [a["status_code"] for a in row["attempt_log"]] == [500, 500, 500, 200]
    assert all(a["duration_ms"] >= 0 for a in row["attempt_log"])


def test_410_disables_the_subscription(env, receiver):
    client, keys, clock, app, http = env
    subscribe(client, keys, receiver.url)
    receiver.script = [410]
    fid = new_facility(client, keys)
    flag(client, keys, fid)
    assert run_delivery(app, http, clock)["gone"] == 1
    listed = client.get("/v1/webhooks", headers=keys.header("admin")).json()[0]
    assert listed["active"] is False and "410" in listed["disabled_reason"]
    client.post(f"/v1/records/{fid}-w0/void", json={"reason": "x"},
                headers=keys.header("analyst"))
    clock.advance(hours=1)
    assert run_delivery(app, http, clock) == {"delivered": 0, "retry": 0, "failed": 0,
                                              "gone": 0}
    assert len(receiver.received) == 1


def test_gives_up_after_a_day_with_an_alert_then_manual_retry(env):
    client, keys, clock, app, http = env
    receiver = Receiver().start()
    port = receiver.port
    receiver.stop()
    hook = subscribe(client, keys, f"http://127.0.0.1:{port}/hook")
    flag(client, keys, new_facility(client, keys))
    attempts = 0
    while True:
        out = run_delivery(app, http, clock)
        attempts += sum(out.values())
        if out["failed"]:
            break
        clock.advance(hours=1)
        assert attempts < 100
    row = client.get(f"/v1/webhooks/{hook['id']}/deliveries",
                     headers=keys.header("admin")).json()["items"][0]
    assert row["status"] == "failed"
    span = parse_rfc3339(row["attempt_log"][-1]["at"]) - parse_rfc3339(row["created_at"])
    assert timedelta(hours=24) <= span < timedelta(hours=26)
    failed = client.get("/v1/alerts", params={"kind": "delivery_failed"},
                        headers=keys.header("analyst")).json()["items"]
    assert len(failed) == 1 and failed[0]["detail"]["delivery_id"] == row["id"]
    with Receiver(secret=hook["secret"], port=port) as receiver:
        r = client.post(f"/v1/webhooks/{hook['id']}/deliveries/{row['id']}/retry",
                        headers=keys.header("admin"))
        assert r.status_code == 202 and r.json()["status"] == "pending"
        assert run_delivery(app, http, clock)["delivered"] == 1
        assert len(receiver.received) == 1 and receiver.received[0]["id"] == row["msg_id"]
        again = client.post(f"/v1/webhooks/{hook['id']}/deliveries/{row['id']}/retry",
                            headers=keys.header("admin"))
        assert again.status_code == 409


def test_deleted_subscription_gets_nothing(env, receiver):
    client, keys, clock, app, http = env
    hook = subscribe(client, keys, receiver.url)
    assert client.delete(f"/v1/webhooks/{hook['id']}",
                         headers=keys.header("admin")).json()["active"] is False
    flag(client, keys, new_facility(client, keys))
    run_delivery(app, http, clock)
    assert receiver.received == []
    assert client.delete(f"/v1/webhooks/{hook['id']}",
                         headers=keys.header("admin")).status_code == 409
    assert client.delete("/v1/webhooks/999", headers=keys.header("admin")).status_code == 404


def test_backoff_grows_exponentially_with_jitter_and_a_cap(settings):
    cfg = settings.delivery
    rng = random.Random(3)
    for attempt in range(1, 15):
        base = min(cfg.first_retry_s * 2 ** (attempt - 1), cfg.max_delay_s)
        delays = [retry_delay(attempt, cfg, rng) for _ in range(200)]
        assert all(0.5 * base <= d <= base for d in delays)
        assert max(delays) - min(delays) > 0.2 * base   # jitter is real
    assert retry_delay(1, cfg, rng) <= 60   # the first retry comes within a minute
