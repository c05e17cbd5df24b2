"""Alert triage: which alerts need review (pure rule), the API filter, the dashboard queue that
keeps its filters after an action, and acknowledging the selected alerts at once (CSRF)."""
from urllib.parse import parse_qs, urlsplit

from service.alerting import INFORMATIONAL, NEEDS_REVIEW, needs_review
from service.store.migrations import MIGRATIONS, migrate

from .conftest import new_facility, record
from .old_schema import database_at
from .test_ui_pages import ui  # noqa: F401  (the signed-in dashboard client)


def test_the_rule_by_kind():
    # The split the service promises (README, "Alert triage"): flags, revised decisions, watch
    # signals, stale cycles and failed deliveries need review; clears and cap notices inform.
    for kind in ("flagged", "decision_revised", "watch_signal", "stale", "delivery_failed"):
        assert needs_review(kind) and kind in NEEDS_REVIEW
    for kind in ("cleared", "cap_reached"):
        assert not needs_review(kind) and kind in INFORMATIONAL
    assert needs_review("some_future_kind")      # unknown kinds err towards review
    assert not NEEDS_REVIEW & INFORMATIONAL


def flagged_and_cleared(client, keys):
    bad = new_facility(client, keys)
    for i in range(3):
        client.post("/v1/records", json=record(bad, f"{bad}-f{i}", 1), headers=keys.header("field"))
    good = new_facility(client, keys, plan="scales_capped")
    client.post("/v1/records", json={"records": [record(good, f"{good}-c{i}") for i in range(60)]},
                headers=keys.header("field"))
    return bad, good


def test_api_filters_by_needs_review(client, keys):
    bad, good = flagged_and_cleared(client, keys)
    hdr = keys.header("analyst")
    every = client.get("/v1/alerts", headers=hdr).json()["items"]
    assert {(a["kind"], a["needs_review"]) for a in every} == {("flagged", True),
                                                               ("cleared", False)}
    queue = client.get("/v1/alerts", params={"needs_review": "true"}, headers=hdr).json()
    assert [a["facility_id"] for a in queue["items"]] == [bad]
    info = client.get("/v1/alerts", params={"needs_review": "false"}, headers=hdr).json()
    assert [a["facility_id"] for a in info["items"]] == [good]
    assert client.get("/v1/alerts", params={"needs_review": "maybe"},
                      headers=hdr).status_code == 422


def test_dashboard_queue_shows_review_first_and_notices_on_request(ui, client, keys):
    bad, good = flagged_and_cleared(client, keys)
    page = ui.get("/ui/alerts").text
    rows = page.split("<tbody>")[1]
    assert bad in rows and good not in rows
    assert 'id="informational"' in page and "1 open notice for information only" in page
    assert 'class="kind k-flagged">Flagged<' in page and "needs review" in rows
    info = ui.get("/ui/alerts", params={"review": "info"}).text.split("<tbody>")[1]
    assert good in info and bad not in info
    assert 'class="kind k-cleared">Cleared<' in info and "for information" in info
    overview = ui.get("/ui/overview").text
    assert 'id="open-alerts">1<' in overview and "Alerts to review" in overview


def test_filters_survive_an_acknowledgement(ui, client, keys):
    bad, good = flagged_and_cleared(client, keys)
    aid = client.get("/v1/alerts", params={"facility_id": good},
                     headers=keys.header("analyst")).json()["items"][0]["alert_id"]
    back_to = f"/ui/alerts?state=open&review=info&kind=cleared&facility_id={good}"
    r = ui.post(f"/ui/alerts/{aid}/ack", data={"note": "seen", "csrf": ui.csrf,
                                               "back_to": back_to}, follow_redirects=False)
    assert r.status_code == 303
    query = parse_qs(urlsplit(r.headers["location"]).query)
    # the message's own kind no longer replaces the filter's kind
    assert query["kind"] == ["cleared"] and query["review"] == ["info"]
    assert query["facility_id"] == [good] and query["msg_kind"] == ["ok"]
    page = ui.get(r.headers["location"]).text
    assert '<option value="cleared" selected>' in page and "acknowledged" in page


def test_bulk_acknowledge_needs_csrf_and_takes_one_note(ui, client, keys):
    fids = [new_facility(client, keys) for _ in range(3)]
    for fid in fids:
        for i in range(3):
            client.post("/v1/records", json=record(fid, f"{fid}-b{i}", 1),
                        headers=keys.header("field"))
    ids = [a["alert_id"] for a in client.get("/v1/alerts", headers=keys.header("analyst")).json()[
        "items"]]
    assert len(ids) == 3
    for token in (None, "forged"):
        data = {"alert_id": ids[:2], "note": "x"} | ({} if token is None else {"csrf": token})
        r = ui.post("/ui/alerts/ack", data=data, follow_redirects=False)
        assert r.status_code == 403 and "security token" in r.text
    assert client.get("/v1/alerts", params={"state": "open"},
                      headers=keys.header("analyst")).json()["total"] == 3
    r = ui.post("/ui/alerts/ack", data={"alert_id": ids[:2], "note": "agency visited",
                                        "csrf": ui.csrf, "back_to": "/ui/alerts?kind=flagged"},
                follow_redirects=False)
    assert r.status_code == 303
    assert parse_qs(urlsplit(r.headers["location"]).query)["kind"] == ["flagged"]
    listed = {a["alert_id"]: a for a in client.get(
        "/v1/alerts", headers=keys.header("analyst")).json()["items"]}
    assert [listed[i]["ack_note"] for i in ids[:2]] == ["agency visited"] * 2
    assert listed[ids[2]]["state"] == "open"
    again = ui.post("/ui/alerts/ack", data={"alert_id": ids, "note": "", "csrf": ui.csrf})
    assert "1 alert acknowledged; 2 skipped" in again.text
    none = ui.post("/ui/alerts/ack", data={"note": "", "csrf": ui.csrf})
    assert "Select the alerts" in none.text


def test_alerts_before_the_flag_existed_are_backfilled(tmp_path):
    db = tmp_path / "old.db"
    before = MIGRATIONS.index(next(f for f in MIGRATIONS if "needs_review" in (f.__doc__ or "")))
    old = database_at(db, before)
    for kind in ("flagged", "cleared", "cap_reached", "stale"):
        old.execute("INSERT INTO alerts (kind, facility_id, cycle, created_at, state, detail) "
                    "VALUES (?, 'X', 1, '2026-01-01T00:00:00Z', 'open', '{}')", [kind])
    migrate(old)
    got = dict(old.conn.execute("SELECT kind, needs_review FROM alerts").fetchall())
    assert got == {k: int(needs_review(k)) for k in ("flagged", "cleared", "cap_reached", "stale")}
