"""Writers of several processes queue on a file lock taken before BEGIN IMMEDIATE
(service/store/writer_lock.py): two processes ingesting at once lose and double nothing,
and a writer waits for the lock rather than starting its transaction."""
import multiprocessing
import threading

from service.operations import Monitor, PlanBook
from service.schemas import FacilityCreate
from service.settings import load_settings
from service.store import Store
from service.store.writer_lock import WriterLock
from service.verify import verify_database

from .live_server import BALANCED_CONFIG

BATCHES, PER_BATCH, SHARED = 30, 10, 5


def monitor_on(db: str, config: str) -> Monitor:
    settings = load_settings(config, db_path=db)
    return Monitor(store=Store(db), plans=PlanBook(settings.plans), max_batch=1000)


def rec(record_id: str, i: int) -> dict:
    return {"record_id": record_id, "facility_id": "WQ-1", "observed_at": "2026-11-30T09:15:00Z",
            "units": 1, "nonconforming": i % 2}


def ingest_from_process(db: str, config: str, name: str, start, out) -> None:
    """In a child process: batches of own records plus records both processes send."""
    m = monitor_on(db, config)
    start.wait(30)
    statuses = {}
    for b in range(BATCHES):
        own = [rec(f"{name}-{b}-{i}", i) for i in range(PER_BATCH)]
        shared = [rec(f"shared-{b}-{i}", i) for i in range(SHARED)]
        _, body = m.post_records({"records": own + shared}, (name, "field"), with_state=False)
        for item in body["results"]:
            statuses[item["record_id"]] = item["status"]
    m.store.close()
    out.put((name, statuses))


def test_two_processes_ingesting_at_once_lose_and_double_nothing(tmp_path):
    db, config = tmp_path / "wq.db", tmp_path / "wq.toml"
    config.write_text(BALANCED_CONFIG)
    m = monitor_on(str(db), str(config))
    m.store.migrate()
    m.register_facility(FacilityCreate(facility_id="WQ-1", name="queue", plan="balanced"),
                        ("test", "admin"))
    ctx = multiprocessing.get_context("spawn")
    start, out = ctx.Event(), ctx.Queue()
    procs = [ctx.Process(target=ingest_from_process, args=(str(db), str(config), name, start,
                                                           out)) for name in ("pa", "pb")]
    for p in procs:
        p.start()
    start.set()
    got = dict(out.get(timeout=300) for _ in procs)
    for p in procs:
        p.join(60)
        assert p.exitcode == 0
    own = BATCHES * PER_BATCH
    for name in ("pa", "pb"):
        assert sum(1 for k, v in got[name].items()
                   if k.startswith(name) and v == "accepted") == own
    # each shared id accepted by exactly one process and a duplicate for the other
    shared_ids = {k for k in got["pa"] if k.startswith("shared")}
    assert len(shared_ids) == BATCHES * SHARED
    for k in shared_ids:
        assert sorted((got["pa"][k], got["pb"][k])) == ["accepted", "duplicate"], k
    rows = m.store.read("SELECT seq, record_id FROM records ORDER BY seq")
    expected = 2 * own + BATCHES * SHARED
    assert len(rows) == len({r["record_id"] for r in rows}) == expected
    assert [r["seq"] for r in rows] == list(range(1, expected + 1))     # no gap, no double
    fac = m.store.facility("WQ-1")
    assert fac["units"] == fac["record_count"] == expected
    assert verify_database(m.store).ok                # the stored state equals a replay


def hold_lock(db: str, held, release) -> None:
    with WriterLock(db):
        held.set()
        release.wait(60)


def test_a_writer_waits_on_the_file_lock_before_its_transaction(tmp_path):
    db = tmp_path / "lock.db"
    store = Store(db)
    store.migrate()
    ctx = multiprocessing.get_context("spawn")
    held, release = ctx.Event(), ctx.Event()
    holder = ctx.Process(target=hold_lock, args=(str(db), held, release))
    holder.start()
    assert held.wait(60)
    done = threading.Event()

    def write():
        store.bump("probe")
        done.set()

    t = threading.Thread(target=write)
    t.start()
    # the other process holds only the file lock, no SQLite lock: a writer that skipped the
    # file lock would commit at once. Ours must still be waiting after a generous pause.
    assert not done.wait(0.5)
    assert store.counters().get("probe") is None
    release.set()
    assert done.wait(30)                  # woken when the holder let go
    t.join()
    holder.join(30)
    assert store.counters()["probe"] == 1
