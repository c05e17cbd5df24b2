"""The watch chart in the service: a clear starts it, post-decision records move it unit by
unit (nonconforming first), a signal raises `watch_signal` (webhooks too) and opens a new
cycle at once; the stored chart equals a replay of the records (hypothesis)."""
import random

from fastapi.testclient import TestClient
from hypothesis import HealthCheck, given, settings as hsettings, strategies as st

from service.api import create_app
from service.stats.watch import design_watch, step
from service.watching import Chart, replay

from .clock import FakeClock
from .conftest import make_keys, new_facility, quiet_settings, record
from .test_webhooks import run_delivery, subscribe
from .webhook_receiver import Receiver

# config/seqaudit.toml: dispensers p0 0.02, p1 0.08, [watch] arl0 2000 -> m = 23, t = 62
# (the chart's figures are checked against outside sources in test_watch_stats.py)
W = design_watch(0.02, 0.08, 2000, 400)
M, T = W.m, W.t


def clear(client, keys, fid):
    # 36 conforming units clear the dispensers plan (hand computation in test_api_decisions.py)
    r = client.post("/v1/records", json={"records": [record(fid, f"{fid}-c{i}")
                                                     for i in range(36)]},
                    headers=keys.header("field"))
    assert r.status_code == 200, r.text


def facility(client, keys, fid):
    return client.get(f"/v1/facilities/{fid}", headers=keys.header("analyst")).json()


def test_a_clear_starts_the_watch(client, keys):
    fid = new_facility(client, keys)
    clear(client, keys, fid)
    f = facility(client, keys, fid)
    assert (f["status"], f["decision"]) == ("watching", "cleared")
    assert f["watch"]["state"] == "watching" and f["watch"]["value"] == 0
    assert (f["watch"]["m"], f["watch"]["t"]) == (M, T) == (23, 62)
    listed = client.get("/v1/facilities", params={"status": "watching"},
                        headers=keys.header("analyst")).json()
    assert [x["facility_id"] for x in listed["items"]] == [fid]
    assert client.get("/v1/facilities", params={"status": "cleared"},
                      headers=keys.header("analyst")).json()["total"] == 0


def test_no_watch_without_the_option(client, keys):
    # scales_capped has no [watch] table: a clear stays a plain clear
    fid = new_facility(client, keys, plan="scales_capped")
    client.post("/v1/records", json={"records": [record(fid, f"{fid}-c{i}") for i in range(60)]},
                headers=keys.header("field"))
    f = facility(client, keys, fid)
    assert f["status"] == "cleared" and f["watch"] is None


def test_signal_opens_a_new_cycle_and_later_records_are_its_evidence(client, keys):
    fid = new_facility(client, keys)
    clear(client, keys, fid)
    # by the chart's definition: 0 -> 22 -> 44 -> 66 >= 62 at the third nonconforming unit;
    # one record of 2 units (1 nonconforming) first: nonconforming first gives 22, then 21.
    s = 0
    for x in (1, 0):
        s = step(s, M, bool(x))
    assert s == 21
    batch = [record(fid, "p0", 1, units=2), record(fid, "p1", 1), record(fid, "p2", 1),
             record(fid, "n0"), record(fid, "n1", 1)]
    # 21 -> 43 -> 65 >= 62: signal at p2; n0 and n1 are evidence of the new cycle
    r = client.post("/v1/records", json={"records": batch}, headers=keys.header("field"))
    assert r.status_code == 200, r.text
    f = facility(client, keys, fid)
    assert (f["cycle"], f["status"], f["units"], f["nonconforming"]) == (2, "monitoring", 2, 1)
    old = f["cycles"][0]
    assert old["watch"]["state"] == "signalled" and old["watch"]["value"] == 65
    assert old["watch"]["units"] == 4 and old["records"] == 36 + 3
    alerts = client.get("/v1/alerts", params={"kind": "watch_signal"},
                        headers=keys.header("analyst")).json()["items"]
    assert len(alerts) == 1
    d = alerts[0]["detail"]
    assert (d["record_id"], d["chart_value"], d["limit"], d["new_cycle"]) == ("p2", 65, T, 2)
    log = client.get("/v1/actions", params={"facility_id": fid},
                     headers=keys.header("admin")).json()["items"]
    opened = [a for a in log if a["action"] == "cycle_opened"]
    assert opened and opened[-1]["detail"]["reason"] == "watch_signal"
    recs = client.get(f"/v1/facilities/{fid}/records", params={"cycle": 2},
                      headers=keys.header("analyst")).json()["items"]
    assert [x["record_id"] for x in recs] == ["n0", "n1"] and all(x["evidence"] for x in recs)


def test_signal_is_delivered_to_webhooks(settings):
    clock = FakeClock()
    app = create_app(settings, clock=clock)
    receiver = Receiver().start()
    try:
        with TestClient(app) as client:
            keys = make_keys(app.state.monitor.store)
            subscribe(client, keys, receiver.url, kinds=("watch_signal",))
            fid = new_facility(client, keys)
            clear(client, keys, fid)
            client.post("/v1/records", json={"records": [record(fid, f"s{i}", 1)
                                                         for i in range(3)]},
                        headers=keys.header("field"))
            # delivery makes its own async client when given none
            assert run_delivery(app, None, clock, random.Random(3))["delivered"] == 1
            got = receiver.received
            assert [g["json"]["type"] for g in got] == ["alert.watch_signal"]
            assert got[0]["json"]["data"]["alert"]["detail"]["limit"] == T
    finally:
        receiver.stop()


def test_void_of_a_watched_record_replays_the_chart(client, keys):
    fid = new_facility(client, keys)
    clear(client, keys, fid)
    client.post("/v1/records", json={"records": [record(fid, "x1", 1), record(fid, "x2", 1)]},
                headers=keys.header("field"))
    assert facility(client, keys, fid)["watch"]["value"] == 44
    r = client.post("/v1/records/x1/void", json={"reason": "entered twice"},
                    headers=keys.header("analyst"))
    assert r.status_code == 200, r.text
    assert facility(client, keys, fid)["watch"]["value"] == 22


outcomes = st.lists(st.tuples(st.integers(1, 6), st.integers(0, 6)).map(
    lambda t: (t[0], min(*t))), min_size=1, max_size=25)


@hsettings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                  HealthCheck.function_scoped_fixture])
@given(recs=outcomes, cut=st.integers(1, 6))
def test_online_chart_equals_replay_of_the_records(tmp_path_factory, recs, cut):
    # online: the service charts the records as they arrive in batches of `cut`;
    # replay: the pure fold over the same records from scratch.
    app = create_app(quiet_settings(tmp_path_factory.mktemp("w")))
    with TestClient(app) as client:
        keys = make_keys(app.state.monitor.store)
        fid = new_facility(client, keys)
        clear(client, keys, fid)
        body = [record(fid, f"r{i}", bad, units=units) for i, (units, bad) in enumerate(recs)]
        for i in range(0, len(body), cut):
            client.post("/v1/records", json={"records": body[i:i + cut]},
                        headers=keys.header("field"))
        state, path, signal = replay(Chart(M, T), recs)
        stored = app.state.monitor.store.watch_path(fid, 1)
        assert (stored["value"], stored["units"], stored["nonconforming"], stored["peak"]) == \
            tuple(state)
        assert [p["value"] for p in stored["points"]] == path
        assert (stored["state"] == "signalled") == (signal is not None)
        assert stored["replayed"] == state._asdict()
        f = facility(client, keys, fid)
        assert f["cycle"] == (2 if signal is not None else 1)


def test_facility_page_shows_the_chart(app, client, keys):
    from .test_ui_pages import CSRF, signin
    fid = new_facility(client, keys)
    clear(client, keys, fid)
    client.post("/v1/records", json={"records": [record(fid, "y1", 1), record(fid, "y2", 0)]},
                headers=keys.header("field"))
    with TestClient(app, base_url="http://127.0.0.1") as ui:
        signin(ui, keys.analyst)
        page = ui.get(f"/ui/facilities/{fid}").text
        assert 'id="watch"' in page and "Watching (cleared)" in page
        # 0 -> 22 -> 21 by the chart's definition
        assert "stands at <strong>21</strong> of the limit 62" in page
        assert "Watch chart after the clear" in page and "not a verdict" in page


def test_verify_agrees_after_a_signal(app, client, keys):
    # `seqaudit verify` replays every cycle from its records: the records that moved to the
    # cycle a signal opened are its evidence, those up to the signal stay post-decision.
    from service.verify import verify_database
    fid = new_facility(client, keys)
    clear(client, keys, fid)
    client.post("/v1/records", json={"records": [record(fid, f"v{i}", int(i < 3))
                                                 for i in range(6)]},
                headers=keys.header("field"))
    assert facility(client, keys, fid)["cycle"] == 2
    report = verify_database(app.state.monitor.store)
    assert report.ok, report


def test_case_file_of_a_watched_clear_shows_the_chart(client, keys):
    import io

    from pypdf import PdfReader
    fid = new_facility(client, keys)
    clear(client, keys, fid)
    client.post("/v1/records", json=record(fid, "k1", 1, units=3), headers=keys.header("field"))
    cf = client.get(f"/v1/facilities/{fid}/cycles/1/casefile.json",
                    headers=keys.header("analyst")).json()
    # by the chart's definition, nonconforming first: 0 -> 22 -> 21 -> 20
    assert (cf["watch"]["state"], cf["watch"]["value"], cf["watch"]["t"]) == ("watching", 20, T)
    assert cf["watch"]["arl_p0"] == W.arl_p0 and cf["watch"]["arl_p1"] == W.arl_p1
    assert [p["value"] for p in cf["watch"]["points"]] == [20]
    pdf = client.get(f"/v1/facilities/{fid}/cycles/1/casefile.pdf",
                     headers=keys.header("analyst")).content
    text = " ".join(p.extract_text() for p in PdfReader(io.BytesIO(pdf)).pages)
    assert "Watch chart after the clear: 20 of the limit 62" in text
    assert f"once in {W.arl_p0:.0f} units" in text
