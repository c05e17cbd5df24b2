"""The writer thread's group commit for request handlers: every caller is answered once its
records are stored, concurrent callers share commits, one failing job sinks nobody else, and
a caller that gives up still has its records kept."""
import asyncio
import sqlite3
import threading
import time

import pytest

from service.monitor import Evidence, replay
from service.store import RecordIn, Store, plan_of
from service.store.group_commit import GroupCommitter, Job

from .test_store_schema import _monitor

NOW = "2026-12-01T08:00:00.000000Z"


def _store_with_facility(tmp_path, fid="G-1"):
    m = _monitor(tmp_path / "group.db")
    m.store.migrate()
    m.store.add_facility(fid, "Northgate Weighbridge Co", "dispensers",
                         m.plans.snapshot("dispensers"), NOW, ("test", "admin"))
    return m.store


def _rec(rid, fid="G-1", bad=0):
    return RecordIn(rid, fid, "2026-11-30T09:00:00Z", "2026-11-30T09:00:00.000000Z", 1, bad)


def _commits(store, monkeypatch, delay=0.0):
    """Record the size of each group the writer commits (the first one slowed down)."""
    sizes = []
    real = store._commit_group

    def counting(take):
        def taking():
            jobs = take()
            sizes.append(len(jobs))
            if len(sizes) == 1:
                time.sleep(delay)
            return jobs
        real(taking)

    monkeypatch.setattr(store._committer, "_commit", counting)
    return sizes


def test_concurrent_async_callers_share_commits_and_each_is_stored_once(tmp_path, monkeypatch):
    store = _store_with_facility(tmp_path)
    sizes = _commits(store, monkeypatch, delay=0.2)   # the others queue behind the first

    async def main():
        return await asyncio.gather(*(store.ingest_async([_rec(f"a-{i}")], "t", NOW)
                                      for i in range(60)))

    outcomes = asyncio.run(main())
    assert [o[0].status for o in outcomes] == ["accepted"] * 60
    assert sum(sizes) == 60 and len(sizes) < 60 and max(sizes) > 1
    seqs = sorted(o[0].seq for o in outcomes)
    assert seqs == list(range(seqs[0], seqs[0] + 60))          # each stored once, no gaps
    assert store.facility("G-1")["record_count"] == 60
    store.close()


def test_threads_committing_inline_and_the_writer_thread_take_turns(tmp_path):
    # blocking callers commit in their own thread, request handlers through the writer:
    # the store's write lock keeps the two apart, and nothing is lost or counted twice
    store = _store_with_facility(tmp_path)
    got = []

    def from_thread(k):
        got.extend(o.status for o in store.ingest([_rec(f"t{k}-{i}") for i in range(5)], "t",
                                                  NOW))

    threads = [threading.Thread(target=from_thread, args=(k,)) for k in range(8)]
    for t in threads:
        t.start()

    async def main():
        outs = await asyncio.gather(*(store.ingest_async([_rec(f"e-{i}")], "t", NOW)
                                      for i in range(20)))
        return [o[0].status for o in outs]

    got.extend(asyncio.run(main()))
    for t in threads:
        t.join()
    assert got.count("accepted") == 60
    rows = store.read("SELECT seq, units, nonconforming, received_at FROM records "
                      "WHERE facility_id = 'G-1' ORDER BY seq")
    state, _ = replay(plan_of(store.cycle("G-1", 1)["plan_json"]),
                      [Evidence(r["seq"], r["units"], r["nonconforming"], r["received_at"])
                       for r in rows])
    stored = store.facility("G-1")
    assert len(rows) == stored["record_count"] == 60
    assert [r["seq"] for r in rows] == list(range(rows[0]["seq"], rows[0]["seq"] + 60))
    assert (state.status, state.units) == (stored["status"], stored["units"])
    store.close()


def test_a_failing_job_is_reported_to_its_caller_only(tmp_path, monkeypatch):
    store = _store_with_facility(tmp_path)
    real = store._ingest_tx

    def poisoned(conn, job):
        if job.items and job.items[0].record_id == "poison":
            raise sqlite3.OperationalError("disk I/O error (injected)")
        return real(conn, job)

    monkeypatch.setattr(store, "_ingest_tx", poisoned)
    sizes = _commits(store, monkeypatch, delay=0.2)

    async def main():
        return await asyncio.gather(
            *(store.ingest_async([_rec(f"ok-{i}")], "t", NOW) for i in range(5)),
            store.ingest_async([_rec("poison")], "t", NOW),
            *(store.ingest_async([_rec(f"ok-{i}")], "t", NOW) for i in range(5, 10)),
            return_exceptions=True)

    results = asyncio.run(main())
    assert max(sizes) > 1                              # the poison shared a group with others
    assert isinstance(results[5], sqlite3.OperationalError)
    good = results[:5] + results[6:]
    assert all(r[0].status == "accepted" for r in good)
    assert store.facility("G-1")["record_count"] == 10
    assert not store.read("SELECT 1 FROM records WHERE record_id = 'poison'")
    store.close()


def test_a_caller_that_gives_up_still_has_its_records_kept(tmp_path, monkeypatch):
    store = _store_with_facility(tmp_path)
    _commits(store, monkeypatch, delay=0.3)

    async def main():
        task = asyncio.create_task(store.ingest_async([_rec("gave-up")], "t", NOW))
        await asyncio.sleep(0.05)
        task.cancel()
        with pytest.raises(asyncio.CancelledError):
            await task
        await asyncio.sleep(0.5)                        # the writer finishes regardless

    asyncio.run(main())
    assert store.record("gave-up")["seq"] >= 1
    # a retry is a duplicate, not a second count
    assert store.ingest([_rec("gave-up")], "t", NOW)[0].status == "duplicate"
    assert store.facility("G-1")["units"] == 1
    store.close()


def test_the_writer_stops_on_close_and_restarts_when_needed(tmp_path):
    store = _store_with_facility(tmp_path)

    def post(rid):
        return asyncio.run(store.ingest_async([_rec(rid)], "t", NOW))[0].status

    assert post("before") == "accepted"
    writer = store._committer._thread
    assert writer is not None and writer.is_alive()
    store.close()
    assert not writer.is_alive()
    assert post("after") == "accepted"
    assert store._committer._thread.is_alive() and store._committer._thread is not writer
    store.close()


def test_an_error_outside_any_job_never_leaves_a_caller_waiting():
    def broken(take):
        raise KeyboardInterrupt            # not an Exception: still reported, not hung on

    committer = GroupCommitter(broken, on_exit=lambda: None)
    job = asyncio.run(committer.run_async(Job([], "t", NOW, 0)))
    with pytest.raises(KeyboardInterrupt):
        job.result()
    committer.stop()


def test_jobs_that_queue_while_another_process_writes_join_one_commit(tmp_path, monkeypatch):
    """The writer thread waits for its turn (the file lock another server process holds)
    before it takes the queue: every job that arrived meanwhile goes into that one commit,
    so several processes make bigger batches, not more fsyncs."""
    store = _store_with_facility(tmp_path)
    sizes = _commits(store, monkeypatch)
    other = Store(store.path)            # another Store on the file stands for another process

    async def main():
        with other._file_lock:           # the other process is writing
            tasks = [asyncio.ensure_future(store.ingest_async([_rec(f"q-{i}")], "t", NOW))
                     for i in range(40)]
            await asyncio.sleep(0.3)     # all 40 have queued; the writer waits on the lock
            assert sizes == [] and not any(t.done() for t in tasks)
        return await asyncio.gather(*tasks)

    outcomes = asyncio.run(main())
    assert [o[0].status for o in outcomes] == ["accepted"] * 40
    assert sizes == [40]                  # one commit took them all
    assert store.facility("G-1")["record_count"] == 40
    other.close()
    store.close()
