"""Online backup while posts continue; restore; the CLI commands."""
import json
import sqlite3
import threading

from service.jobs.backup import backup_to, scheduled_backup
from service.monitor import Evidence, replay
from service.operations import Monitor, PlanBook
from service.schemas import FacilityCreate
from service.settings import load_settings
from service.store import Store, plan_from_snapshot

from .test_cli_service import run


def replay_matches(db_path) -> int:
    """Every facility's stored cycle states equal a replay of its stored records."""
    store = Store(db_path)
    checked = 0
    for fac in store.read("SELECT facility_id FROM facilities"):
        for cyc in store.cycles(fac["facility_id"]):
            recs = [r for r in store.records(fac["facility_id"], cyc["cycle"]) if not r["void"]]
            state, counted = replay(plan_from_snapshot(json.loads(cyc["plan_json"])),
                                    [Evidence(r["seq"], r["units"], r["nonconforming"],
                                              r["received_at"]) for r in recs],
                                    stop_seq=cyc["closed_seq"])
            status = "closed" if cyc["closed_seq"] is not None and state.is_open else state.status
            assert (status, state.units, state.nonconforming) == \
                (cyc["status"], cyc["units"], cyc["nonconforming"]), cyc
            assert [bool(r["counted"]) for r in recs] == counted
            checked += 1
    store.close()
    return checked


def test_backup_during_posts_restores_to_a_consistent_database(tmp_path):
    db = tmp_path / "live.db"
    settings = load_settings(db_path=db)
    monitor = Monitor(store=Store(db), plans=PlanBook(settings.plans))
    monitor.store.migrate()
    actor = ("test", "admin")
    for i in range(20):
        monitor.register_facility(FacilityCreate(facility_id=f"SA-{i}", name=f"Agency {i}",
                                                 plan="dispensers" if i % 2 else "scales"), actor)
    stop = threading.Event()
    posted = [0]

    def post():
        n = 0
        while not stop.is_set():
            batch = [{"record_id": f"r-{n}-{k}", "facility_id": f"SA-{(n + k) % 20}",
                      "observed_at": "2026-11-30T08:00:00Z", "units": 1,
                      "nonconforming": int((n * 7 + k) % 13 == 0)} for k in range(50)]
            monitor.post_records({"records": batch}, actor, with_state=False)
            n += 1
            posted[0] = n * 50

    writer = threading.Thread(target=post)
    writer.start()
    try:
        while posted[0] < 2000:
            threading.Event().wait(0.01)
        copies = [backup_to(db, tmp_path / f"copy-{i}.db") for i in range(3)]
    finally:
        stop.set()
        writer.join()
    sizes = []
    for i, copy in enumerate(copies):
        target = tmp_path / f"restored-{i}.db"
        out = run("restore", str(copy), "--db", str(target))
        assert out.returncode == 0, out.stderr
        assert replay_matches(target) == 20
        sizes.append(sqlite3.connect(target).execute("SELECT COUNT(*) FROM records").fetchone()[0])
    assert sizes == sorted(sizes) and sizes[0] >= 2000      # taken while posts went on
    assert sizes[-1] <= posted[0]
    assert replay_matches(db) == 20


def test_scheduled_backup_keeps_the_newest(tmp_path):
    db = tmp_path / "a.db"
    Store(db).migrate()
    folder = tmp_path / "backups"
    made = [scheduled_backup(db, folder, 3, f"2026-12-0{d}T02:30:00Z") for d in range(1, 7)]
    left = sorted(p.name for p in folder.glob("*.db"))
    assert left == sorted(p.name for p in made[-3:])
    assert not list(folder.glob("*.partial*"))
    # each copy is one file (no -wal or -shm beside it, even after it was checked)
    assert sorted(p.name for p in folder.iterdir()) == left
    conn = sqlite3.connect(made[-1])
    assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "delete"
    conn.close()


def test_cli_backup_and_restore_check_files(tmp_path):
    db = tmp_path / "main.db"
    store = Store(db)
    store.migrate()
    store.add_key("admin", "a", "2026-01-01T00:00:00Z")
    store.close()
    out = run("backup", "--out", str(tmp_path / "b.db"), "--db", str(db))
    assert out.returncode == 0 and "integrity check ok" in out.stdout
    assert not list(tmp_path.glob("b.db?*"))      # nothing beside the copy
    junk = tmp_path / "junk.db"
    junk.write_bytes(b"this is not a database at all" * 100)
    bad = run("restore", str(junk), "--db", str(tmp_path / "t.db"))
    assert bad.returncode == 2 and "not a seqaudit database" in bad.stderr
    missing = run("restore", str(tmp_path / "nope.db"), "--db", str(tmp_path / "t.db"))
    assert missing.returncode == 2 and "does not exist" in missing.stderr
    good = run("restore", str(tmp_path / "b.db"), "--db", str(tmp_path / "t.db"))
    assert good.returncode == 0
    assert Store(tmp_path / "t.db").keys()[0]["label"] == "a"
