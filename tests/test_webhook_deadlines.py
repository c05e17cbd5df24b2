"""Webhook delivery against a receiver that trickles its answer: the attempt is bounded as a
whole, other subscriptions are served at the same time, and waiting is not an attempt."""
import random
from dataclasses import replace

from fastapi.testclient import TestClient

from service.api import create_app
from service.clock import parse_rfc3339
from service.jobs.delivery import deliver_due

from .conftest import make_keys, new_facility, record
from .webhook_receiver import Receiver, TricklingReceiver


def subscribe(client, keys, url):
    r = client.post("/v1/webhooks", json={"url": url, "kinds": ["flagged", "cleared"]},
                    headers=keys.header("admin"))
    assert r.status_code == 201, r.text
    return r.json()


def flag_four(client, keys):
    for n in range(4):
        fid = new_facility(client, keys, prefix="W")
        client.post("/v1/records", json={"records": [record(fid, f"{fid}-{i}", 1)
                                                     for i in range(3)]},
                    headers=keys.header("field"))


def test_trickling_receiver_is_cut_at_the_deadline_and_others_get_every_alert(settings):
    # timeout 1 s for the whole attempt; the trickler would hold a per-read timeout for
    # 100,000 bytes x 0.3 s. Give-up window 0 s: before the fix, deliveries that waited in
    # line behind the trickler were failed after their first attempt.
    cfg = replace(settings.delivery, timeout_s=1.0, give_up_after_s=0.0, batch=50)
    app = create_app(replace(settings, delivery=cfg))
    slow, healthy = TricklingReceiver(every_s=0.3).start(), Receiver().start()
    try:
        with TestClient(app) as client:
            keys = make_keys(app.state.monitor.store)
            hook_slow = subscribe(client, keys, slow.url)
            hook_ok = subscribe(client, keys, healthy.url)
            healthy.secret = hook_ok["secret"]
            flag_four(client, keys)
            store = app.state.monitor.store
            out = deliver_due(store, None, cfg, app.state.monitor.clock, random.Random(3))
            # the healthy receiver got all four, each signed
            assert len(healthy.received) == 4 and all(x["valid"] for x in healthy.received)
            assert out["delivered"] == 4
            rows, _ = store.deliveries(hook_slow["id"], limit=10)
            tried = [r for r in rows if r["attempts"]]
            # one attempt at the slow receiver, cut at its deadline (1 s, plus scheduling
            # slack on a loaded machine: far below the 30,000 s the trickle would take)
            assert len(tried) == 1 and slow.requests == 1
            log = tried[0]["attempt_log"][0]
            assert log["status_code"] is None and "1 s" in log["error"]
            assert log["duration_ms"] < 10_000
            # the others waited in line: no attempt counted, still pending, not failed
            waiting = [r for r in rows if not r["attempts"]]
            assert len(waiting) == 3 and {r["status"] for r in waiting} == {"pending"}
            # the first attempt never fails a delivery outright, even with the window gone
            assert tried[0]["status"] == "pending" and out["failed"] == 0
            stamps = [parse_rfc3339(r["next_attempt_at"]) for r in rows]
            assert len(stamps) == 4
    finally:
        slow.stop()
        healthy.stop()


def test_two_410s_in_one_batch_do_not_abort_the_run(settings):
    # Before: the second 410 of one subscription raised Conflict('webhook already disabled')
    # and the rest of the run (here: a healthy subscription) was never sent.
    app = create_app(settings)
    gone, healthy = Receiver().start(), Receiver().start()
    gone.script = [410] * 10
    try:
        with TestClient(app) as client:
            keys = make_keys(app.state.monitor.store)
            hook_gone = subscribe(client, keys, gone.url)
            hook_gone_too = subscribe(client, keys, gone.url)
            subscribe(client, keys, healthy.url)
            flag_four(client, keys)
            store = app.state.monitor.store
            out = deliver_due(store, None, settings.delivery, app.state.monitor.clock,
                              random.Random(4))
            assert out["gone"] == 2 and out["delivered"] == 4
            assert len(healthy.received) == 4
            listed = {h["id"]: h for h in store.webhooks()}
            assert not listed[hook_gone["id"]]["active"]
            assert not listed[hook_gone_too["id"]]["active"]
            # the same subscription's other deliveries were cancelled, not attempted
            rows, _ = store.deliveries(hook_gone["id"], limit=10)
            assert sorted(r["status"] for r in rows) == ["cancelled"] * 4
            assert sum(r["attempts"] for r in rows) == 1
    finally:
        gone.stop()
        healthy.stop()


def test_record_attempt_tolerates_an_already_disabled_subscription(settings):
    # two workers' runs may both see a 410 for one subscription
    app = create_app(settings)
    with TestClient(app) as client:
        keys = make_keys(app.state.monitor.store)
        hook = subscribe(client, keys, "http://127.0.0.1:9/hook")
        flag_four(client, keys)
        store = app.state.monitor.store
        rows, _ = store.deliveries(hook["id"], limit=10)
        at = app.state.monitor.clock()
        store.record_attempt(rows[0]["id"], at, 410, "HTTP 410", 1.0, "gone", None,
                             disable_reason="receiver answered 410 Gone")
        store.record_attempt(rows[1]["id"], at, 410, "HTTP 410", 1.0, "gone", None,
                             disable_reason="receiver answered 410 Gone")
        assert store.webhook(hook["id"])["active"] is False
