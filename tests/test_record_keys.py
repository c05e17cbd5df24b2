"""Records found by id through record_keys and the in-memory tail (service/store/record_keys.py).

The reference is a plain dict kept by the test (common practice: an id names one record; the
same id with the same content is a retry, with other content a conflict). Merges are made
small (a few ids, slices of a few) so that a seeded walk crosses many of them, including ids
posted again while they sit in the tail, in record_keys, or in both (between slices).
"""
import json
import sqlite3
import threading
import time

import numpy as np
import pytest
import sqlite_utils

from service.errors import NotFound
from service.operations import Monitor, PlanBook
from service.schemas import FacilityCreate
from service.settings import load_settings
from service.store import Store, record_keys
from service.store.migrations import MIGRATIONS, migrate
from service.store.record_keys import RecentKeys, merge_slice

ACTOR = ("test", "admin")
FIDS = ("RK-1", "RK-2", "RK-3")


def monitor(path) -> Monitor:
    settings = load_settings(db_path=path)
    m = Monitor(store=Store(settings.db_path), plans=PlanBook(settings.plans))
    m.store.migrate()
    return m


def register(m: Monitor) -> None:
    for fid in FIDS:
        m.register_facility(FacilityCreate(facility_id=fid, name=fid, plan="dispensers"), ACTOR)


def rec(rid: str, fid: str, bad: int) -> dict:
    return {"record_id": rid, "facility_id": fid, "units": 1, "nonconforming": bad,
            "observed_at": "2026-11-30T09:15:00Z"}


def statuses(m: Monitor, records: list[dict]) -> list[str]:
    _, body = m.post_records({"records": records}, ACTOR, with_state=False)
    return [r["status"] for r in body["results"]]


def check_found(store: Store, reference: dict[str, tuple]) -> None:
    """Every id the reference holds is found with its content; both parts together hold each
    stored record once (an id may sit in both only with the same seq)."""
    rows = store.read("SELECT seq, record_id, facility_id, nonconforming FROM records")
    assert len(rows) == len(reference) == len({r["record_id"] for r in rows})
    for r in rows:
        assert reference[r["record_id"]] == (r["facility_id"], r["nonconforming"])
        assert store.record(r["record_id"])["seq"] == r["seq"]
    upto = store.read("SELECT upto FROM record_keys_merged")[0]["upto"]
    keys = {r["record_id"]: r["seq"] for r in store.read("SELECT * FROM record_keys")}
    by_id = {r["record_id"]: r["seq"] for r in rows}
    assert all(by_id[rid] == seq for rid, seq in keys.items())
    assert {rid for rid, seq in by_id.items() if seq <= upto} <= set(keys)


@pytest.fixture
def small_merges(monkeypatch):
    monkeypatch.setattr(record_keys, "MERGE_AT", 40)
    monkeypatch.setattr(record_keys, "MERGE_SLICE", 7)


def test_a_seeded_walk_of_new_retried_and_conflicting_ids(tmp_path, small_merges):
    m = monitor(tmp_path / "walk.db")
    register(m)
    rng = np.random.default_rng(20261202)            # seeded: which ids come back, and how
    reference: dict[str, tuple] = {}
    seen_kinds = set()
    for step in range(60):
        batch, expected = [], []
        for _ in range(int(rng.integers(1, 25))):
            fid = str(rng.choice(FIDS))
            if reference and rng.random() < 0.3:     # an id posted before: retry or conflict
                rid = str(rng.choice(sorted(reference)))
                old = reference[rid]
                if rng.random() < 0.5:
                    batch.append(rec(rid, *old))
                    expected.append("duplicate")
                else:
                    batch.append(rec(rid, old[0], 1 - old[1]))
                    expected.append("conflict")
                seen_kinds.add(expected[-1])
                continue
            rid = f"{rng.integers(0, 2**62):016x}"   # random, as a UUID 4 is
            if rid in reference or any(b["record_id"] == rid for b in batch):
                continue
            batch.append(rec(rid, fid, int(rng.random() < 0.2)))
            expected.append("accepted")
        assert statuses(m, batch) == expected
        for b, e in zip(batch, expected):
            if e == "accepted":
                reference[b["record_id"]] = (b["facility_id"], b["nonconforming"])
        check_found(m.store, reference)
    upto = m.store.read("SELECT upto FROM record_keys_merged")[0]["upto"]
    assert upto > 200 and m.store.merge_failure is None     # many merges happened
    assert seen_kinds == {"duplicate", "conflict"}
    with pytest.raises(NotFound):
        m.store.record("never-posted")
    m.store.close()


def test_two_stores_on_one_file_see_each_others_ids(tmp_path, small_merges):
    """As two server processes do: each catches up with what the other wrote and merged."""
    a = monitor(tmp_path / "two.db")
    register(a)
    b = Monitor(store=Store(tmp_path / "two.db"), plans=a.plans)
    reference = {}
    for step in range(30):
        mine, other = (a, b) if step % 2 else (b, a)
        new = [rec(f"s{step}-{k}", FIDS[k % 3], k % 2) for k in range(9)]
        assert statuses(mine, new) == ["accepted"] * 9
        reference.update({r["record_id"]: (r["facility_id"], r["nonconforming"]) for r in new})
        # the other store sees them as retries, and a changed one as a conflict
        again = [new[0], dict(new[1], nonconforming=1 - new[1]["nonconforming"])]
        assert statuses(other, again) == ["duplicate", "conflict"]
        check_found(a.store, reference)
    assert a.store.read("SELECT upto FROM record_keys_merged")[0]["upto"] > 0
    b.store.close()
    a.store.close()


def test_a_merge_cut_short_is_finished_by_the_next(tmp_path, small_merges):
    """Slices written but the mark not moved (a crash between them): the ids are in both
    parts; a new store merges again without complaint and finds each record once."""
    m = monitor(tmp_path / "cut.db")
    register(m)
    records = [rec(f"c{k:03d}", FIDS[k % 3], 0) for k in range(30)]
    assert statuses(m, records) == ["accepted"] * 30          # below MERGE_AT: all in the tail
    with m.store.write() as conn:
        pairs = sorted((r["record_id"], r["seq"]) for r in
                       m.store.read("SELECT record_id, seq FROM records"))[:20]
        assert merge_slice(conn, pairs) == 20
        assert merge_slice(conn, pairs) == 0               # again: skipped, same seqs
    m.store.close()
    again = monitor(tmp_path / "cut.db")
    assert again.store.merge_record_keys(least=1) == 30
    assert statuses(again, records[:3]) == ["duplicate"] * 3
    check_found(again.store, {r["record_id"]: (r["facility_id"], 0) for r in records})
    assert again.store.read("SELECT COUNT(*) AS n FROM record_keys")[0]["n"] == 30
    again.store.close()


def test_an_id_stored_twice_is_reported_not_hidden(tmp_path, small_merges):
    """Two records with one id can only come from writes that bypassed the store; the merge
    refuses to paper over them and the storage checks get the reason."""
    m = monitor(tmp_path / "dup.db")
    register(m)
    assert statuses(m, [rec("twin", "RK-1", 0)]) == ["accepted"]
    with m.store.write() as conn:
        conn.execute("INSERT INTO record_keys (record_id, seq) VALUES ('twin', 999)")
    with pytest.raises(record_keys.DuplicateKey, match="'twin' is stored as seq 999"):
        m.store.merge_record_keys(least=1)
    # the tail reaches MERGE_AT: the merge after this commit fails, the records stand
    more = [rec(f"m{k}", "RK-2", 0) for k in range(45)]
    assert statuses(m, more) == ["accepted"] * 45
    assert m.store.merge_failure is not None and "'twin'" in m.store.merge_failure
    assert "DuplicateKey" in m.store.merge_failure
    assert statuses(m, more[:2] + [rec("twin", "RK-1", 0)]) == ["duplicate"] * 3
    # no merge is tried again until a restart: the tail grows, the mark stays
    assert statuses(m, [rec(f"n{k}", "RK-3", 0) for k in range(45)]) == ["accepted"] * 45
    assert m.store.ids_duplicated
    assert m.store.read("SELECT upto FROM record_keys_merged")[0]["upto"] == 0
    assert len(RecentKeys.of(m.store).ids) == 91
    m.store.close()


def test_readyz_reports_an_id_stored_twice(tmp_path, small_merges):
    from fastapi.testclient import TestClient

    from service.api import create_app
    from tests.conftest import make_keys, new_facility, quiet_settings, record
    with TestClient(create_app(quiet_settings(tmp_path))) as c:
        keys = make_keys(c.app.state.monitor.store)
        fid = new_facility(c, keys)
        post = {"records": [record(fid, "twin")]}
        assert c.post("/v1/records", json=post, headers=keys.header("field")).status_code == 200
        with c.app.state.monitor.store.write() as conn:
            conn.execute("INSERT INTO record_keys (record_id, seq) VALUES ('twin', 999)")
        assert c.get("/readyz").status_code == 200
        more = {"records": [record(fid, f"m{k}") for k in range(45)]}
        assert c.post("/v1/records", json=more, headers=keys.header("field")).status_code == 200
        # the merge runs on the writer thread once the answer is out: wait for it
        deadline = time.monotonic() + 30
        while c.app.state.monitor.store.merge_failure is None and time.monotonic() < deadline:
            time.sleep(0.01)
        r = c.get("/readyz")
        assert r.status_code == 503 and r.json()["type"] == "/problems/storage-corrupt"
        assert "record ids stored twice" in r.json()["detail"] and "'twin'" in r.json()["detail"]


def test_a_failed_job_does_not_leave_its_ids_behind(tmp_path, monkeypatch):
    """The tail takes a job's ids before its commit; if the commit fails they must go, or a
    later post of the same id would be judged against whatever record took its seq."""
    m = monitor(tmp_path / "fail.db")
    register(m)
    add = RecentKeys.add
    failing_now = []

    def failing(recent, pairs):
        add(recent, pairs)
        if failing_now:
            raise RuntimeError("disk gone at commit")

    monkeypatch.setattr(RecentKeys, "add", failing)
    failing_now.append(1)
    with pytest.raises(RuntimeError, match="disk gone"):   # with the group and alone
        statuses(m, [rec("gone", "RK-1", 1)])
    failing_now.clear()
    assert statuses(m, [rec("taker", "RK-2", 0)]) == ["accepted"]      # gets gone's seq
    assert m.store.record("taker")["seq"] == 1
    assert statuses(m, [rec("gone", "RK-1", 1)]) == ["accepted"]
    assert statuses(m, [rec("gone", "RK-1", 1)]) == ["duplicate"]
    recent = RecentKeys.of(m.store)
    assert recent.ids == {"taker": 1, "gone": 2}
    m.store.close()


def test_migration_moves_the_ids_of_an_older_file(tmp_path, monkeypatch):
    """A file at the previous version (unique index on records.record_id) gets every id into
    record_keys and the index dropped; its records are then found and retries recognised."""
    from service.store import migrations
    db = tmp_path / "old.db"
    monkeypatch.setattr(migrations, "MIGRATIONS", MIGRATIONS[:11])   # as of v11
    m = monitor(db)
    with m.store.write() as w:          # the facility as that version stored it
        w.execute("INSERT INTO facilities (facility_id, name, plan, created_at, current_cycle) "
                  "VALUES ('RK-1', 'RK-1', 'dispensers', '2026-11-30T09:00:00.000000Z', 1)")
        w.execute("INSERT INTO cycles (facility_id, cycle, plan_name, plan_json, status, "
                  "opened_at, is_current, llr_position) VALUES ('RK-1', 1, 'dispensers', ?, "
                  "'monitoring', '2026-11-30T09:00:00.000000Z', 1, 0.5)",
                  (json.dumps(m.plans.snapshot("dispensers"), sort_keys=True),))
    rows = [(k + 1, f"old-{k}", "RK-1", 1, "2026-11-30T09:15:00Z",
             "2026-11-30T09:15:00.000000Z", "2026-11-30T09:16:00.000000Z", 1, k % 2, 1, 0)
            for k in range(50)]
    insert = ("INSERT INTO records (seq, record_id, facility_id, cycle, observed_at, "
              "observed_utc, received_at, units, nonconforming, counted, void) VALUES "
              "(?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)")
    with m.store.write() as w:           # rows as the previous version stored them
        w.executemany(insert, rows)
    with pytest.raises(sqlite3.IntegrityError), m.store.write() as w:   # its unique index
        w.execute(insert, (99,) + rows[1][1:])
    monkeypatch.setattr(migrations, "MIGRATIONS", MIGRATIONS)
    with m.store.write() as w:
        assert migrate(sqlite_utils.Database(w)) == len(MIGRATIONS)
    indexes = {r["name"] for r in m.store.read("SELECT name FROM sqlite_master WHERE "
                                               "type = 'index'")}
    assert "idx_records_record_id" not in indexes
    assert m.store.read("SELECT upto FROM record_keys_merged")[0]["upto"] == 50
    keys = m.store.read("SELECT record_id, seq FROM record_keys ORDER BY seq")
    assert [(k["record_id"], k["seq"]) for k in keys] == [(r[1], r[0]) for r in rows]
    assert m.store.record("old-7")["seq"] == 8
    assert statuses(m, [rec("old-3", "RK-1", 1), rec("old-4", "RK-1", 1),
                        rec("new-1", "RK-1", 0)]) == ["duplicate", "conflict", "accepted"]
    m.store.close()


def test_the_writer_answers_waiting_jobs_between_merge_steps():
    """GroupCommitter: upkeep runs a step at a time, and a job that arrives meanwhile is
    committed before the next step (a merge never holds up this process's requests for more
    than one of its transactions)."""
    from service.store.group_commit import GroupCommitter, Job
    log, steps = [], []
    done = threading.Event()

    def commit(take):
        jobs = take()
        log.append(("commit", len(jobs)))
        for j in jobs:
            j.outcomes = []

    def after():
        steps.append(1)
        log.append(("step", len(steps)))
        if len(steps) == 2:         # a request arrives during the second step
            committer._submit(late)
        if len(steps) == 5:
            done.set()
        return len(steps) < 5

    committer = GroupCommitter(commit, on_exit=lambda: None, after=after)
    late = Job([], None, "now", 0)
    committer._submit(Job([], None, "now", 0))
    assert done.wait(10)
    committer.stop()
    assert log == [("commit", 1), ("step", 1), ("step", 2), ("commit", 1), ("step", 3),
                   ("step", 4), ("step", 5)]


def test_a_failed_merge_step_resumes_where_it_stopped(tmp_path, small_merges, monkeypatch):
    m = monitor(tmp_path / "resume.db")
    register(m)
    real = record_keys.merge_slice
    calls = []

    def flaky(conn, pairs):
        calls.append([rid for rid, _ in pairs])
        if len(calls) == 2:
            raise sqlite3.OperationalError("disk I/O error")
        return real(conn, pairs)

    monkeypatch.setattr(record_keys, "merge_slice", flaky)
    first = [rec(f"r{k:02d}", FIDS[k % 3], 0) for k in range(40)]      # MERGE_AT: 40
    assert statuses(m, first) == ["accepted"] * 40
    assert "disk I/O error" in m.store.merge_failure
    assert m.store.read("SELECT upto FROM record_keys_merged")[0]["upto"] == 0
    assert statuses(m, [rec("after", "RK-1", 0)]) == ["accepted"]    # its commit resumes
    assert m.store.merge_failure is None
    assert m.store.read("SELECT upto FROM record_keys_merged")[0]["upto"] == 40
    # slices of 7 in id order: the failed second one again, then the rest, none twice
    ids = sorted(r["record_id"] for r in first)
    assert calls[1] == calls[2] == ids[7:14]
    assert [rid for c in calls[:1] + calls[2:] for rid in c] == ids
    check_found(m.store, {r["record_id"]: (r["facility_id"], 0) for r in first}
                | {"after": ("RK-1", 0)})
    m.store.close()


def test_lookups_inside_a_write_do_not_feed_the_readers_tail(tmp_path):
    """A row seen inside a write that then rolls back must not be remembered: its seq goes to
    the next record, which must still be found by its own id."""
    m = monitor(tmp_path / "roll.db")
    register(m)
    assert statuses(m, [rec("first", "RK-1", 0)]) == ["accepted"]
    assert m.store.find_record("first")[0]["seq"] == 1          # the readers' tail starts
    with pytest.raises(RuntimeError, match="changed my mind"), m.store.write() as conn:
        conn.execute("INSERT INTO records (seq, record_id, facility_id, cycle, observed_at, "
                     "received_at, units, nonconforming, counted, void) VALUES (2, 'ghost', "
                     "'RK-1', 1, 'x', 'y', 1, 0, 1, 0)")
        assert m.store.find_record("ghost")[0]["seq"] == 2      # seen in its own write
        assert m.store.find_record("first")[0]["seq"] == 1
        raise RuntimeError("changed my mind")
    assert statuses(m, [rec("real", "RK-2", 0)]) == ["accepted"]
    assert m.store.find_record("real")[0]["seq"] == 2
    assert m.store.find_record("ghost") == []
    m.store.close()
