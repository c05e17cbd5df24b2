"""Schema migrations and how values land in SQLite.

The v4 migration drops the records' content hash; a database written before it must keep
every record and still tell a retry (duplicate) from a reused id (conflict), now by comparing
the stored columns.
"""
import json
import sqlite3

import pytest
import sqlite_utils

from service.cli import main as cli_main
from service.commands.serve import check_database
from service.errors import SchemaTooNew
from service.operations import Monitor, PlanBook
from service.settings import load_settings
from service.store import Store
from service.store.migrations import MIGRATIONS, migrate

from .old_schema import database_at

ACTOR = ("test", "field")


def _columns(db, table):
    return [r[1] for r in sqlite3.connect(db).execute(f"PRAGMA table_info({table})")]


def _monitor(db) -> Monitor:
    return Monitor(store=Store(db), plans=PlanBook(load_settings(db_path=db).plans),
                   clock=lambda: "2026-12-01T08:00:00.000000Z")


def test_a_fresh_database_has_every_migration_once(tmp_path):
    db = tmp_path / "fresh.db"
    store = Store(db)
    assert store.migrate() == len(MIGRATIONS)
    assert store.migrate() == len(MIGRATIONS)          # a second run applies nothing
    versions = [r["version"] for r in store.read("SELECT version FROM schema_version")]
    assert versions == list(range(1, len(MIGRATIONS) + 1))
    assert "content_hash" not in _columns(db, "records")


def test_records_written_before_v4_survive_and_still_deduplicate(tmp_path):
    db = tmp_path / "old.db"
    database_at(db, 3).conn.close()          # the schema as of v3
    m = _monitor(db)
    snapshot = m.plans.snapshot("dispensers")
    with m.store.write() as w:   # a facility and a record as the v3 code stored them
        w.execute("INSERT INTO facilities (facility_id, name, plan, created_at, current_cycle) "
                  "VALUES ('OLD-1', 'Harbour Road Scales Ltd', 'dispensers', "
                  "'2026-11-01T00:00:00.000000Z', 1)")
        w.execute("INSERT INTO cycles (facility_id, cycle, plan_name, plan_json, status, units, "
                  "nonconforming, llr, opened_at, at_cap, record_count) VALUES ('OLD-1', 1, "
                  "'dispensers', ?, 'monitoring', 0, 0, 0.0, '2026-11-01T00:00:00.000000Z', 0, "
                  "0)", (json.dumps(snapshot, sort_keys=True),))
        w.execute("INSERT INTO records (seq, record_id, facility_id, cycle, observed_at, "
                  "observed_utc, received_at, units, nonconforming, unit_ref, inspector, note, "
                  "content_hash, counted, void, key_label) VALUES (1, 'r-1', 'OLD-1', 1, "
                  "'2026-11-02T10:00:00+01:00', '2026-11-02T09:00:00.000000Z', "
                  "'2026-11-02T09:05:00.000000Z', 1, 1, NULL, 'J. Okafor', '', 'ab' || 'cd', "
                  "1, 0, 'tablet 3')")
        w.execute("UPDATE cycles SET units = 1, nonconforming = 1, record_count = 1")
    assert "content_hash" in _columns(db, "records")

    upgrade = sqlite3.connect(db)
    assert migrate(sqlite_utils.Database(upgrade)) == len(MIGRATIONS)
    upgrade.commit()          # later migrations write rows (the trail's entries)
    upgrade.close()
    assert "content_hash" not in _columns(db, "records")
    kept = m.store.record("r-1")
    assert (kept["seq"], kept["observed_at"], kept["inspector"], kept["note"],
            kept["unit_ref"], kept["key_label"]) == (1, "2026-11-02T10:00:00+01:00",
                                                     "J. Okafor", "", None, "tablet 3")

    retry = {"record_id": "r-1", "facility_id": "OLD-1", "units": 1, "nonconforming": 1,
             "observed_at": "2026-11-02T09:00:00Z",      # the same instant, written in UTC
             "inspector": "J. Okafor", "note": ""}
    code, body = m.post_records(retry, ACTOR, with_state=False)
    assert (code, body["status"], body["seq"]) == (200, "duplicate", 1)
    for change in ({"nonconforming": 0}, {"note": None}, {"unit_ref": ""},
                   {"observed_at": "2026-11-02T09:00:01Z"}):
        _, report = m.post_records({"records": [{**retry, **change}]}, ACTOR, with_state=False)
        assert report["results"][0]["status"] == "conflict", change
    assert m.store.facility("OLD-1")["units"] == 1          # nothing counted twice


def test_none_is_stored_as_null_and_empty_text_as_text(tmp_path):
    # the store registers an sqlite3 adapter for None (for speed); it must still write NULL
    db = tmp_path / "values.db"
    m = _monitor(db)
    m.store.migrate()
    m.store.add_facility("V-1", "Quayside Fuel Services", "dispensers",
                         m.plans.snapshot("dispensers"), "2026-11-01T00:00:00.000000Z",
                         ("test", "admin"))
    base = {"facility_id": "V-1", "observed_at": "2026-11-30T09:00:00Z", "nonconforming": 0}
    m.post_records({"records": [{**base, "record_id": "a"},
                                {**base, "record_id": "b", "unit_ref": "", "note": "",
                                 "inspector": ""}]}, ACTOR, with_state=False)
    rows = sqlite3.connect(db).execute(
        "SELECT record_id, typeof(unit_ref), typeof(inspector), typeof(note), "
        "typeof(key_label) FROM records ORDER BY seq").fetchall()
    assert rows == [("a", "null", "null", "null", "text"), ("b", "text", "text", "text", "text")]
    assert sqlite3.connect(":memory:").execute("SELECT ? IS NULL", (None,)).fetchone() == (1,)


def test_v13_keeps_each_plan_snapshot_once_and_every_cycle_its_own(tmp_path):
    """A file at v12 (each cycle row carrying its snapshot's text) gets one row per distinct
    snapshot in plan_snapshots; every cycle reads back the same text through cycles_planned,
    and ingest and the listing still work on the migrated file."""
    db = tmp_path / "v12.db"
    old = database_at(db, 12)                # the schema as of v12
    plans = PlanBook(load_settings(db_path=db).plans)
    texts = {name: json.dumps(plans.snapshot(name), sort_keys=True)
             for name in ("dispensers", "scales")}
    rows = [("S-1", 1, "dispensers", "cleared", 0), ("S-1", 2, "dispensers", "monitoring", 1),
            ("S-2", 1, "scales", "monitoring", 1), ("S-3", 1, "dispensers", "flagged", 1)]
    for fid, cycle, plan, status, current in rows:
        if current:
            old.execute("INSERT INTO facilities (facility_id, name, plan, created_at, "
                        "current_cycle) VALUES (?, ?, ?, '2026-11-01T00:00:00.000000Z', ?)",
                        [fid, f"agency {fid}", plan, cycle])
        old.execute("INSERT INTO cycles (facility_id, cycle, plan_name, plan_json, status, "
                    "opened_at, is_current, llr_position) VALUES (?, ?, ?, ?, ?, "
                    "'2026-11-01T00:00:00.000000Z', ?, 0.4)",
                    [fid, cycle, plan, texts[plan], status, current])
    old.conn.close()

    m = _monitor(db)
    assert m.store.migrate() == len(MIGRATIONS)
    assert "plan_json" not in _columns(db, "cycles")
    snapshots = m.store.read("SELECT ref, plan_json FROM plan_snapshots ORDER BY ref")
    assert [s["plan_json"] for s in snapshots] == [texts["dispensers"], texts["scales"]]
    got = {(c["facility_id"], c["cycle"]): c["plan_json"]
           for c in m.store.read("SELECT facility_id, cycle, plan_json FROM cycles_planned")}
    assert got == {(fid, cycle): texts[plan] for fid, cycle, plan, _, _ in rows}

    code, body = m.post_records({"record_id": "after-v13", "facility_id": "S-1", "units": 1,
                                 "nonconforming": 1, "observed_at": "2026-11-30T09:00:00Z"},
                                ACTOR, with_state=False)
    assert (code, body["status"]) == (201, "accepted")
    assert (m.store.facility("S-1")["cycle"], m.store.facility("S-1")["units"]) == (2, 1)
    listed, total = m.store.facilities(sort="llr_position")
    assert total == 3 and {r["plan_json"] for r in listed} == set(texts.values())
    # a new facility on a plan already stored adds no snapshot; a new cycle neither
    m.store.add_facility("S-4", "agency S-4", "scales", plans.snapshot("scales"),
                         "2026-12-01T08:00:00.000000Z", ("test", "admin"))
    assert len(m.store.read("SELECT ref FROM plan_snapshots")) == 2



def test_a_cycle_without_a_stored_plan_snapshot_is_refused(tmp_path):
    """cycles_planned joins each cycle to its snapshot: a cycle with no snapshot (or one
    that does not exist) would vanish from it, so the schema refuses such a row."""
    m = _monitor(tmp_path / "ref.db")
    m.store.migrate()
    m.store.add_facility("R-1", "Quayside Fuel Services", "dispensers",
                         m.plans.snapshot("dispensers"), "2026-11-01T00:00:00.000000Z",
                         ("test", "admin"))
    insert = ("INSERT INTO cycles (facility_id, cycle, plan_name, plan_ref, status, opened_at) "
              "VALUES ('R-1', 2, 'dispensers', ?, 'monitoring', '2026-11-02T00:00:00Z')")
    for ref in (None, 999):
        with pytest.raises(sqlite3.IntegrityError, match="plan_ref"), m.store.write() as w:
            w.execute(insert, (ref,))
    with pytest.raises(sqlite3.IntegrityError, match="plan_ref"), m.store.write() as w:
        w.execute("UPDATE cycles SET plan_ref = NULL WHERE facility_id = 'R-1'")
    assert [c["cycle"] for c in m.store.read("SELECT cycle FROM cycles_planned")] == [1]


def test_a_database_from_a_newer_build_is_refused_with_a_clear_message(tmp_path, capsys):
    db = tmp_path / "newer.db"
    store = Store(db)
    store.migrate()
    with store.write() as w:      # as a later build with one more migration would leave it
        w.execute("INSERT INTO schema_version (version) VALUES (?)", [len(MIGRATIONS) + 1])
    with pytest.raises(SchemaTooNew, match=f"schema version {len(MIGRATIONS) + 1}"):
        store.migrate()
    store.close()
    assert cli_main(["verify", "--db", str(db)]) == 2
    err = capsys.readouterr().err
    assert "newer than this build of seqaudit knows" in err and "Traceback" not in err
    # serve checks the file before any worker starts, and says the same
    assert "newer than this build" in check_database(load_settings(db_path=db))
