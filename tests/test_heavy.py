"""The heavy-work pool (service/heavy.py): work in other processes, a timeout that stops the
job, 503 with Retry-After when full, results cached by inputs and a void that invalidates a
cached case file. No timing goals here (those live in scripts/bench_ingest.py): the waits
below only order events, and every limit has a wide margin."""
import asyncio
import os
import time
from dataclasses import replace

import pytest
from fastapi.testclient import TestClient

from service.api import create_app
from service.errors import Busy, NotFound, TimedOut
from service.heavy import HeavyPool, HeavySettings
from service.stats import PlanInputError

from .conftest import make_keys
from .test_casefile import flagged_cycle


def pid_after(seconds: float) -> int:
    """A job for the pool (module level: pickled by reference): sleep, then say who ran it."""
    time.sleep(seconds)
    return os.getpid()


def in_pool(settings: HeavySettings, body) -> None:
    """Run ``await body(pool)`` on a new pool, closed afterwards whatever happens."""
    async def main():
        pool = HeavyPool(settings)
        try:
            await body(pool)
        finally:
            pool.close()
    asyncio.run(main())


def fail_with(kind: str):
    if kind == "notfound":
        raise NotFound("no facility 'X'", facility_id="X")
    raise PlanInputError("p1", "p1 must be larger than p0")


def test_jobs_run_in_another_process_and_errors_cross_intact():
    async def body(pool):
        child = await pool.run(pid_after, 0)
        assert child != os.getpid()
        with pytest.raises(NotFound) as nf:
            await pool.run(fail_with, "notfound")
        assert nf.value.extra == {"facility_id": "X"} and nf.value.status == 404
        with pytest.raises(PlanInputError) as pe:
            await pool.run(fail_with, "plan")
        assert pe.value.argument == "p1"
        assert await pool.run(pid_after, 0) == child     # the same worker, kept alive
        pool.close()                 # the app's lifespan ended; a new one may begin
        assert await pool.run(pid_after, 0) not in (child, os.getpid())
    in_pool(HeavySettings(workers=1, queue=0, timeout_s=60), body)


def test_timeout_stops_the_job_and_a_new_worker_takes_over():
    async def body(pool):
        first = await pool.run(pid_after, 0)
        start = time.monotonic()
        with pytest.raises(TimedOut) as exc:
            await pool.run(pid_after, 30, timeout_s=0.5)
        # the 30 s job was stopped, not waited for (margin: 25 s on a loaded machine)
        assert time.monotonic() - start < 25
        assert exc.value.status == 503 and exc.value.headers["Retry-After"] == "1"
        assert pool.stats["timed_out"] == 1
        second = await pool.run(pid_after, 0)
        assert second != first                       # the stopped worker was replaced
        with pytest.raises(ProcessLookupError):
            os.kill(first, 0)
    in_pool(HeavySettings(workers=1, queue=0, timeout_s=60), body)


def test_full_pool_refuses_at_once_and_same_key_shares_one_run():
    async def body(pool):
        running = asyncio.ensure_future(pool.run(pid_after, 1.0, key="a"))
        waiting = asyncio.ensure_future(pool.run(pid_after, 0, key="b"))
        shared = asyncio.ensure_future(pool.run(pid_after, 1.0, key="a"))
        await asyncio.sleep(0.05)
        with pytest.raises(Busy) as exc:       # 1 running + 1 waiting = capacity
            await pool.run(pid_after, 0)
        assert exc.value.status == 503 and int(exc.value.headers["Retry-After"]) >= 1
        a, b, a2 = await asyncio.gather(running, waiting, shared)
        assert a == a2 == b and pool.stats["runs"] == 2 and pool.stats["shared"] == 1
        assert await pool.run(pid_after, 5.0, key="a") == a   # from the cache, no 5 s
        assert pool.stats["cache_hits"] == 1 and pool.stats["runs"] == 2
    in_pool(HeavySettings(workers=1, queue=1, timeout_s=60), body)


def test_cache_bounded_by_entries():
    async def body(pool):
        for k in ("a", "b", "c"):
            await pool.run(pid_after, 0, key=k)
        await pool.run(pid_after, 0, key="a")          # evicted (oldest): runs again
        assert pool.stats["runs"] == 4 and pool.stats["cache_hits"] == 0
        await pool.run(pid_after, 0, key="c")
        assert pool.stats["cache_hits"] == 1
    in_pool(HeavySettings(workers=1, queue=0, cache_entries=2), body)


@pytest.fixture
def small_pool_client(settings):
    app = create_app(settings.with_overrides(
        heavy=HeavySettings(workers=1, queue=0, timeout_s=60)))
    with TestClient(app) as c:
        yield app, c, make_keys(app.state.monitor.store)


def test_casefile_cached_until_a_void_or_a_finding(small_pool_client):
    app, client, keys = small_pool_client
    pool = app.state.heavy
    fid = flagged_cycle(client, keys)
    url = f"/v1/facilities/{fid}/cycles/1/casefile.json"
    first = client.get(url, headers=keys.header("analyst")).json()
    again = client.get(url, headers=keys.header("analyst")).json()
    assert again == first                       # same generated_at: served from the cache
    assert (pool.stats["runs"], pool.stats["cache_hits"]) == (1, 1)
    r = client.post(f"/v1/records/{fid}-0/void", json={"reason": "wrong dispenser"},
                    headers=keys.header("analyst"))
    assert r.status_code == 200, r.text
    after = client.get(url, headers=keys.header("analyst")).json()
    assert pool.stats["runs"] == 2
    assert [x["void"] for x in after["records"] if x["record_id"] == f"{fid}-0"] == [True]
    assert any(a["action"] == "record_voided" and a["target"] == f"{fid}-0"
               for a in after["actions"])
    # a finding is logged on the cycle: the case file is made again and shows it
    r = client.post(f"/v1/facilities/{fid}/cycles/1/findings",
                    json={"outcome": "referred", "note": "sent to the county"},
                    headers=keys.header("analyst"))
    assert r.status_code == 201, r.text
    found = client.get(url, headers=keys.header("analyst")).json()
    assert pool.stats["runs"] == 3
    assert any(a["action"] == "finding_recorded" for a in found["actions"])
    # another confidence level is another input: its own run
    client.get(url, params={"ci_level": 0.9}, headers=keys.header("analyst"))
    assert pool.stats["runs"] == 4


def test_full_pool_gives_503_problem_with_retry_after(small_pool_client):
    app, client, keys = small_pool_client
    fid = flagged_cycle(client, keys)
    busy = client.portal.start_task_soon(app.state.heavy.run, pid_after, 3.0)
    for _ in range(200):
        if app.state.heavy._admitted:
            break
        time.sleep(0.01)
    r = client.get(f"/v1/facilities/{fid}/cycles/1/casefile.pdf", headers=keys.header("analyst"))
    assert r.status_code == 503, r.text
    assert r.headers["content-type"] == "application/problem+json"
    assert int(r.headers["Retry-After"]) >= 1
    body = r.json()
    assert body["type"] == "/problems/busy" and body["status"] == 503
    assert body["retry_after_s"] == int(r.headers["Retry-After"])
    # the dashboard's workbench uses the same pool: an error page, with Retry-After too
    from .test_ui_pages import signin
    signin(client, keys.analyst)
    page = client.get("/ui/workbench", params={"p0": "0.02", "p1": "0.08", "alpha": "0.05",
                                               "beta": "0.1", "calibrate": "1"})
    assert page.status_code == 503 and "Retry-After" in page.headers
    assert "busy" in page.text
    busy.result(timeout=60)
    ok = client.get(f"/v1/facilities/{fid}/cycles/1/casefile.pdf", headers=keys.header("analyst"))
    assert ok.status_code == 200 and ok.content.startswith(b"%PDF")


def test_casefile_past_its_time_gives_503_problem(settings):
    # 1 ms cannot hold a case file: starting the build alone (a database read) takes longer
    app = create_app(settings.with_overrides(heavy=HeavySettings(workers=1, timeout_s=0.001)))
    with TestClient(app) as client:
        keys = make_keys(app.state.monitor.store)
        fid = flagged_cycle(client, keys)
        r = client.get(f"/v1/facilities/{fid}/cycles/1/casefile.json",
                       headers=keys.header("analyst"))
        assert r.status_code == 503, r.text
        assert r.json()["type"] == "/problems/timed-out" and r.headers["Retry-After"] == "1"


def test_heavy_settings_from_the_config_file(tmp_path):
    from service.settings import load_settings
    config = tmp_path / "c.toml"
    config.write_text("[heavy]\nworkers = 2\nqueue = 8\ntimeout_s = 30\n")
    s = load_settings(config)
    assert replace(s.heavy) == HeavySettings(workers=2, queue=8, timeout_s=30.0)
    config.write_text("[heavy]\nthreads = 2\n")
    from service.plans import ConfigError
    with pytest.raises(ConfigError, match="threads"):
        load_settings(config)
