"""Two real worker processes, each with its scheduler: every job runs once per tick."""
import time

import httpx2

from service.store import Store

from .conftest import make_keys, record
from .live_server import LiveServer
from .webhook_receiver import Receiver

CONFIG = """
[plans.dispensers]
p0 = 0.02
p1 = 0.08
alpha = 0.05
beta = 0.10
stale_after_days = 0.00003     # about 2.6 s

[schedule]
delivery_interval_s = 1
stale_check_s = 1
remonitor_check_s = 1
lease_ttl_s = 10

[delivery]
first_retry_s = 0              # every tick retries, so attempts count the delivery runs
give_up_after_s = 3600
"""


def test_each_job_runs_once_per_tick_across_two_workers(tmp_path):
    config = tmp_path / "sched.toml"
    config.write_text(CONFIG)
    db = tmp_path / "sched.db"
    store = Store(db)
    store.migrate()
    keys = make_keys(store)
    receiver = Receiver().start()
    receiver.script = [500] * 10_000
    try:
        with LiveServer(db, workers=2, config=config) as server:
            admin = {"Authorization": f"Bearer {keys.admin}"}
            hook = httpx2.post(server.url + "/v1/webhooks", headers=admin, timeout=10,
                               json={"url": receiver.url, "kinds": ["flagged"]}).json()
            receiver.secret = hook["secret"]
            for fid in ("SA-1", "SA-2"):
                httpx2.post(server.url + "/v1/facilities", headers=admin, timeout=10,
                            json={"facility_id": fid, "name": fid, "plan": "dispensers"})
            for i in range(3):
                httpx2.post(server.url + "/v1/records", headers=admin, timeout=10,
                            json=record("SA-1", f"s-{i}", 1))
            time.sleep(9)
        runs = store.job_runs("delivery")
        assert len(runs) >= 4
        # both worker processes ran a scheduler competing for the same ticks
        started = [line for line in server.log.read_text().splitlines()
                   if "scheduler started in" in line]
        assert len({line.split("started in ")[1].split()[0] for line in started}) == 2
        attempts = store.read("SELECT COUNT(*) AS n FROM delivery_attempts")[0]["n"]
        # runs that finished before the first alert existed had nothing to send (on a loaded
        # machine several ticks pass while the records are posted)
        first = store.read("SELECT MIN(created_at) AS at FROM alerts")[0]["at"]
        ran = [r for r in runs if r["outcome"] == "ok" and r["finished_at"] > first]
        # one attempt per delivery run: never two processes sending for the same tick
        assert attempts == len(ran) == len(receiver.received)
        assert len({g["id"] for g in receiver.received}) == 1
        assert all(g["valid"] for g in receiver.received)
        stale = store.read("SELECT facility_id, cycle FROM alerts WHERE kind = 'stale'")
        assert stale == [{"facility_id": "SA-2", "cycle": 1}]
        ticks = [r["tick"] for r in store.job_runs("stale")]
        assert len(ticks) == len(set(ticks))
    finally:
        receiver.stop()
