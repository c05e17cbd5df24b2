"""SIGKILL the real service mid-stream; after a restart nothing acknowledged is lost or
doubled, nothing unacknowledged is half-written, and every state equals its replay."""
import signal
import sqlite3
import threading
import time
from concurrent.futures import ThreadPoolExecutor

import httpx2
import pytest

from service.store import Store

from .conftest import make_keys, record
from .live_server import LiveServer, quiet_config
from .test_backup import replay_matches

CLIENTS = 8


def cycle_count(db) -> int:
    """Cycles stored: one per facility (12), plus one for each watch signal after a clear
    (config/seqaudit.toml watches cleared dispensers and scales), every one replayed."""
    n = Store(db).read("SELECT COUNT(*) AS n FROM cycles")[0]["n"]
    assert n >= 12
    return n


def stream(url, key, client_no, stop, acked, unknown, lock):
    """One tablet: singles and small batches until the server dies or ``stop`` is set."""
    n = 0
    with httpx2.Client(base_url=url, headers={"Authorization": f"Bearer {key}"},
                       timeout=10) as http:
        while not stop.is_set():
            size = 1 if n % 3 else 5
            bodies = [record(f"SA-{(client_no + n + k) % 12}", f"c{client_no}-{n}-{k}",
                             int((client_no * 31 + n * 7 + k) % 17 == 0)) for k in range(size)]
            n += 1
            try:
                r = http.post("/v1/records", json=bodies[0] if size == 1 else {"records": bodies})
            except httpx2.TransportError:
                with lock:
                    unknown.extend(bodies)
                return
            assert r.status_code in (200, 201), r.text
            with lock:
                acked.extend(bodies)


@pytest.mark.parametrize("kill_after", [150, 600, 1500])
def test_sigkill_mid_stream(tmp_path, kill_after):
    db = tmp_path / "crash.db"
    store = Store(db)
    store.migrate()
    keys = make_keys(store)
    config = quiet_config(tmp_path)
    server = LiveServer(db, workers=2, config=config).start()
    admin = {"Authorization": f"Bearer {keys.admin}"}
    for i in range(12):
        httpx2.post(server.url + "/v1/facilities", headers=admin, timeout=10,
                    json={"facility_id": f"SA-{i}", "name": f"Agency {i}",
                          "plan": "dispensers" if i % 2 else "scales"}).raise_for_status()
    acked, unknown, lock, stop = [], [], threading.Lock(), threading.Event()
    with ThreadPoolExecutor(CLIENTS) as pool:
        futures = [pool.submit(stream, server.url, keys.field, c, stop, acked, unknown, lock)
                   for c in range(CLIENTS)]
        deadline = time.monotonic() + 60
        while len(acked) < kill_after and time.monotonic() < deadline:
            time.sleep(0.005)
        server.stop(sig=signal.SIGKILL)          # no shutdown, no checkpoint, mid-request
        stop.set()
        for f in futures:
            f.result()
    assert len(acked) >= kill_after
    # the file itself survived
    with sqlite3.connect(db) as conn:
        assert conn.execute("PRAGMA integrity_check").fetchone() == ("ok",)
    with LiveServer(db, workers=2, config=config) as again:
        stored = {r["record_id"]: r for r in Store(db).read(
            "SELECT record_id, facility_id, units, nonconforming FROM records")}
        counts = Store(db).read("SELECT record_id, COUNT(*) AS n FROM records GROUP BY record_id "
                                "HAVING n > 1")
        assert counts == []                                  # nothing doubled
        for body in acked:                                   # every acknowledged record kept
            row = stored[body["record_id"]]
            assert (row["facility_id"], row["units"], row["nonconforming"]) == \
                (body["facility_id"], body["units"], body["nonconforming"])
        for body in unknown:                                 # unanswered: all or nothing
            row = stored.get(body["record_id"])
            assert row is None or row["nonconforming"] == body["nonconforming"]
        assert replay_matches(db) == cycle_count(db)
        # tablets retry what got no answer: accepted or duplicate, never a conflict
        with httpx2.Client(base_url=again.url, timeout=10,
                           headers={"Authorization": f"Bearer {keys.field}"}) as http:
            for body in unknown:
                r = http.post("/v1/records", json=body)
                assert r.status_code in (200, 201), r.text
                assert r.json()["status"] == ("duplicate" if body["record_id"] in stored
                                              else "accepted")
    total = Store(db).read("SELECT COUNT(*) AS n FROM records")[0]["n"]
    assert total == len({b["record_id"] for b in acked + unknown})
    assert replay_matches(db) == cycle_count(db)
