"""Two real uvicorn worker processes on one SQLite file, many concurrent clients."""
import json
from concurrent.futures import ThreadPoolExecutor

import httpx2

from service.monitor import Evidence, replay
from service.store import Store, plan_from_snapshot

from .conftest import make_keys, record
from .live_server import BALANCED_CONFIG, LiveServer


def test_two_workers_count_each_distinct_record_once(tmp_path):
    db = tmp_path / "live.db"
    config = tmp_path / "live.toml"
    config.write_text(BALANCED_CONFIG)
    store = Store(db)
    store.migrate()
    keys = make_keys(store)
    with LiveServer(db, workers=2, config=config) as server:
        admin = {"Authorization": f"Bearer {keys.admin}"}
        r = httpx2.post(server.url + "/v1/facilities", headers=admin, timeout=10,
                        json={"facility_id": "SA-LIVE", "name": "Live", "plan": "balanced"})
        assert r.status_code == 201, r.text
        field = {"Authorization": f"Bearer {keys.field}"}
        clients, per_client = 12, 40

        def work(c):
            seen = {}
            with httpx2.Client(base_url=server.url, headers=field, timeout=30) as http:
                for i in range(per_client):
                    body = record("SA-LIVE", f"c{c}-{i}", i % 2)
                    for attempt in range(2 if i % 5 == 0 else 1):   # some tablets retry
                        out = http.post("/v1/records", json=body)
                        assert out.status_code in (200, 201), out.text
                        seen[(body["record_id"], attempt)] = out.json()["status"]
                    # and one record id posted by two clients at once
                    shared = record("SA-LIVE", f"shared-{i}", 0)
                    out = http.post("/v1/records", json=shared)
                    assert out.status_code in (200, 201), out.text
            return seen

        with ThreadPoolExecutor(clients) as pool:
            results = list(pool.map(work, range(clients)))
        analyst = {"Authorization": f"Bearer {keys.analyst}"}
        state = httpx2.get(server.url + "/v1/facilities/SA-LIVE", headers=analyst,
                           timeout=10).json()
        listed = httpx2.get(server.url + "/v1/facilities/SA-LIVE/records", headers=analyst,
                            timeout=30).json()["items"]
    distinct = clients * per_client + per_client  # the shared ids count once each
    assert len(listed) == distinct
    assert len({r["record_id"] for r in listed}) == distinct
    assert state["status"] == "monitoring"
    assert state["units"] == distinct
    assert state["nonconforming"] == clients * per_client // 2
    assert all(r["evidence"] for r in listed)
    # retries answered "duplicate"
    assert all(s == "duplicate" for res in results for (rid, attempt), s in res.items()
               if attempt == 1)
    # the stored state equals a replay of the stored records
    cyc = store.cycle("SA-LIVE", 1)
    plan = plan_from_snapshot(json.loads(cyc["plan_json"]))
    replayed, _ = replay(plan, [Evidence(r["seq"], r["units"], r["nonconforming"],
                                         r["received_at"]) for r in listed])
    assert (replayed.status, replayed.units, replayed.nonconforming) == \
        (state["status"], state["units"], state["nonconforming"])
    seqs = [r["seq"] for r in listed]
    assert seqs == sorted(seqs) and len(set(seqs)) == len(seqs)
