"""Maintained listing columns (migration v11): the per-plan, per-status facility counts, the
current-cycle flag and the position between the boundaries must equal what a full count and
the plan's own formula give, through every kind of change and after migrating an old file.
The reference is brute force: COUNT over the join on current_cycle (a cleared cycle under its watch chart
shows as ``watching``), and
(llr - lower) / (upper - lower) from each cycle's stored plan snapshot."""
import json
import sqlite3

import numpy as np
import pytest
import sqlite_utils

from service.operations import Monitor, PlanBook
from service.schemas import FacilityCreate
from service.settings import load_settings
from service.store import Store
from service.store.migrations import MIGRATIONS, migrate

from .old_schema import database_at

ACTOR = ("test", "admin")


def brute_counts(store) -> dict:
    rows = store.read("SELECT f.plan, CASE WHEN c.status = 'cleared' AND c.watch_state = "
                      "'watching' THEN 'watching' ELSE c.status END AS status, COUNT(*) AS n "
                      "FROM facilities f JOIN cycles c ON c.facility_id = f.facility_id AND "
                      "c.cycle = f.current_cycle GROUP BY 1, 2")
    return {(r["plan"], r["status"]): r["n"] for r in rows}


def check(store) -> set:
    """The maintained columns equal the brute-force ones; returns the statuses seen."""
    kept = {(r["plan"], r["status"]): r["n"] for r in store.read(
        "SELECT plan, status, n FROM facility_counts WHERE n != 0")}
    assert kept == brute_counts(store)
    for r in store.read("SELECT c.*, f.current_cycle FROM cycles_planned c JOIN facilities f "
                        "ON f.facility_id = c.facility_id"):
        assert r["is_current"] == (r["cycle"] == r["current_cycle"])
        snap = json.loads(r["plan_json"])
        want = (r["llr"] - snap["lower_llr"]) / (snap["upper_llr"] - snap["lower_llr"])
        assert r["llr_position"] == pytest.approx(want, abs=1e-12)
    by_status: dict = {}
    for (_, status), n in brute_counts(store).items():
        by_status[status] = by_status.get(status, 0) + n
    assert store.status_counts() == by_status
    for status in (None, "monitoring", "flagged", "cleared", "watching", "closed"):
        for plan in (None, "dispensers", "scales"):
            rows, total = store.facilities(status=status, plan=plan, limit=10_000)
            assert total == len(rows)
    return set(by_status)


def test_counts_and_positions_follow_every_change(tmp_path):
    settings = load_settings(db_path=tmp_path / "l.db")
    m = Monitor(store=Store(settings.db_path), plans=PlanBook(settings.plans))
    m.store.migrate()
    rng = np.random.default_rng(20261202)          # seeded: which facility gets what
    fids = [f"L-{k}" for k in range(12)]
    for k, fid in enumerate(fids):
        m.register_facility(FacilityCreate(facility_id=fid, name=fid,
                                           plan="dispensers" if k % 3 else "scales"), ACTOR)
    seen = check(m.store)
    seq = 0
    for round_no in range(10):
        batch = []
        for fid in rng.choice(fids, size=60):
            seq += 1
            batch.append({"record_id": f"r{seq}", "facility_id": str(fid), "units": 1,
                          # even facilities near 0 (they clear, then are watched), odd at 0.25
                          "nonconforming": int(rng.random() < (0.005 if int(str(fid)[2:]) % 2
                                                               == 0 else 0.25)),
                          "observed_at": "2026-11-30T09:15:00Z"})
        m.post_records({"records": batch}, ACTOR, with_state=False)
        seen |= check(m.store)
        for fid in fids:                         # new cycles after decisions, some closed
            fac = m.store.facility(fid)
            if fac["status"] in ("flagged", "cleared") and round_no % 2:
                m.open_cycle(fid, ACTOR)
            elif round_no == 3 and fid.endswith("1"):
                m.close_cycle(fid, "agency closed the site", ACTOR)
        check(m.store)
    decided = m.store.read("SELECT r.record_id FROM records r JOIN cycles c ON "
                           "c.facility_id = r.facility_id AND c.cycle = r.cycle "
                           "WHERE c.status IN ('flagged', 'cleared') AND r.counted = 1 "
                           "AND r.nonconforming = 1 LIMIT 3")
    for row in decided:                          # voids may revise a decision
        m.void_record(row["record_id"], "entered twice", ACTOR)
        check(m.store)
    assert {"monitoring", "flagged", "watching"} <= seen    # the walk reached them


def test_migration_fills_counts_and_positions(tmp_path):
    db = tmp_path / "old.db"
    old = database_at(db, 10)                # the schema as of v10
    snap = json.dumps({"p0": 0.02, "p1": 0.08, "alpha": 0.05, "beta": 0.1, "upper_llr": 2.0,
                       "lower_llr": -1.0, "max_units": None, "cut_llr": 0.0})
    for k, (plan, cycles, status) in enumerate([("dispensers", 1, "monitoring"),
                                                 ("dispensers", 2, "flagged"),
                                                 ("scales", 1, "cleared")]):
        old.execute("INSERT INTO facilities (facility_id, name, plan, created_at, current_cycle) "
                    "VALUES (?, 'n', ?, 't', ?)", [f"M{k}", plan, cycles])
        for c in range(1, cycles + 1):
            old.execute("INSERT INTO cycles (facility_id, cycle, plan_name, plan_json, status, "
                        "units, nonconforming, llr, opened_at, record_count) VALUES "
                        "(?, ?, ?, ?, ?, 3, 1, ?, 't', 3)",
                        [f"M{k}", c, plan, snap, "cleared" if c < cycles else status, 0.5 * k])
    old.conn.close()
    assert migrate(sqlite_utils.Database(sqlite3.connect(db, isolation_level=None))) \
        == len(MIGRATIONS)
    store = Store(db)
    check(store)
    assert store.status_counts() == {"monitoring": 1, "flagged": 1, "cleared": 1}
    rows, total = store.facilities(sort="llr_position", descending=True)
    assert total == 3 and [r["facility_id"] for r in rows] == ["M2", "M1", "M0"]
    assert rows[0]["llr_position"] == pytest.approx((1.0 + 1.0) / 3.0)   # (llr - lower)/(upper - lower)
