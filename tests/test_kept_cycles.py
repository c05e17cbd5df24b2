"""Ingest keeps the current cycles it read and wrote between transactions (store/ingest_cycles.py,
``KeptCycles``) and trusts them only while nothing else wrote to the database. These tests
interleave ingest with every other kind of write (through the same connection, through a
second Store on the same file, and a job that fails after its writes) and compare every cycle
with references outside the ingest path after each step:

- brute force over the records table: a cycle's units and nonconforming units are the sums
  over its counted, non-void records, its record count the number of its non-void records;
- the LLR from Wald's definition (Wald 1947, Sequential Analysis, ch. 5: the log of the
  likelihood ratio of d nonconforming units in n under p1 against p0), written here as
  d ln(p1/p0) + (n - d) ln((1 - p1)/(1 - p0)) rather than through SprtPlan.llr;
- ``verify_database``, which replays every cycle from its records.
"""
import json
import math

import numpy as np
import pytest

from service.operations import Monitor, PlanBook
from service.schemas import FacilityCreate
from service.settings import load_settings
from service.store import Store
from service.store.ingest_cycles import KeptCycles
from service.verify import verify_database

ACTOR = ("test", "admin")


def check_against_records(store) -> None:
    sums = {(r["facility_id"], r["cycle"]): r for r in store.read(
        "SELECT facility_id, cycle, SUM(CASE WHEN counted = 1 THEN units ELSE 0 END) AS n, "
        "SUM(CASE WHEN counted = 1 THEN nonconforming ELSE 0 END) AS d, COUNT(*) AS k "
        "FROM records WHERE void = 0 GROUP BY 1, 2")}
    for c in store.read("SELECT * FROM cycles_planned"):
        ref = sums.get((c["facility_id"], c["cycle"]), {"n": 0, "d": 0, "k": 0})
        assert (c["units"], c["nonconforming"], c["record_count"]) == (
            ref["n"], ref["d"], ref["k"]), c["facility_id"]
        snap = json.loads(c["plan_json"])
        p0, p1 = snap.get("apparent_p0", snap["p0"]), snap.get("apparent_p1", snap["p1"])
        n, d = c["units"], c["nonconforming"]
        wald = d * math.log(p1 / p0) + (n - d) * math.log((1 - p1) / (1 - p0))
        # two roundings of the same sum of logs: 1e-9 relative is far above their spread
        assert c["llr"] == pytest.approx(wald, rel=1e-9, abs=1e-9)
    report = verify_database(store)
    assert report.ok, report.mismatches


def monitor(path) -> Monitor:
    settings = load_settings(db_path=path)
    m = Monitor(store=Store(settings.db_path), plans=PlanBook(settings.plans))
    m.store.migrate()
    return m


def test_kept_cycles_follow_every_other_write(tmp_path):
    m = monitor(tmp_path / "k.db")
    other = Monitor(store=Store(tmp_path / "k.db"), plans=m.plans)   # a second connection
    rng = np.random.default_rng(20261202)          # seeded: which facility gets what
    fids = [f"K-{k}" for k in range(8)]
    for k, fid in enumerate(fids):
        m.register_facility(FacilityCreate(facility_id=fid, name=fid,
                                           plan="dispensers" if k % 2 else "scales"), ACTOR)
    seq = 0
    kinds = set()
    for step in range(40):
        batch = []
        for fid in rng.choice(fids, size=25):
            seq += 1
            batch.append({"record_id": f"k{seq}", "facility_id": str(fid),
                          "units": int(rng.integers(1, 4)),
                          "nonconforming": int(rng.random() < 0.15),
                          "observed_at": "2026-11-30T09:15:00Z"})
        m.post_records({"records": batch}, ACTOR, with_state=False)
        check_against_records(m.store)
        kind = step % 5
        kinds.add(kind)
        if kind == 1:           # a void through the same connection
            m.void_record(f"k{int(rng.integers(1, seq + 1))}", "entered twice", ACTOR) \
                if not m.store.record(f"k{seq}")["void"] else None
        elif kind == 2:         # records and a void through another connection
            other.post_records({"records": [
                {"record_id": f"o{step}", "facility_id": fids[step % 8], "units": 2,
                 "nonconforming": 1, "observed_at": "2026-11-30T09:15:00Z"}]}, ACTOR,
                with_state=False)
            other.void_record(f"k{seq - 3}", "wrong unit", ACTOR)
        elif kind == 3:         # cycles closed and opened
            fid = fids[step % 8]
            if m.store.facility(fid)["status"] == "monitoring":
                m.close_cycle(fid, "site closed for works", ACTOR)
            m.open_cycle(fid, ACTOR)
        elif kind == 4:         # the same by the other store
            fid = fids[(step + 3) % 8]
            if other.store.facility(fid)["status"] != "monitoring":
                other.open_cycle(fid, ACTOR)
        check_against_records(m.store)
    assert kinds == {0, 1, 2, 3, 4}
    other.store.close()
    m.store.close()


def test_a_failed_job_drops_the_kept_cycles(tmp_path, monkeypatch):
    """A job that fails after its writes (here: once the kept cycles are marked, as a failed
    COMMIT would) is rolled back; the next attempt must not start from what it had kept."""
    m = monitor(tmp_path / "f.db")
    for fid in ("F-1", "F-2"):
        m.register_facility(FacilityCreate(facility_id=fid, name=fid, plan="dispensers"),
                            ACTOR)

    def batch(tag):
        return {"records": [{"record_id": f"{tag}{k}", "facility_id": f"F-{1 + k % 2}",
                             "units": 1, "nonconforming": 0,
                             "observed_at": "2026-11-30T09:15:00Z"} for k in range(10)]}

    m.post_records(batch("a"), ACTOR, with_state=False)
    keep = KeptCycles.keep
    failures = []

    def failing(kept, conn):
        keep(kept, conn)
        if not failures:
            failures.append(1)
            raise RuntimeError("disk gone at commit")

    monkeypatch.setattr(KeptCycles, "keep", failing)
    # the group commit rolls back and commits the job alone: it must start from the file
    m.post_records(batch("b"), ACTOR, with_state=False)
    assert failures == [1]
    check_against_records(m.store)
    assert m.store.facility("F-1")["units"] == 10
    m.post_records(batch("c"), ACTOR, with_state=False)
    check_against_records(m.store)
    assert m.store.facility("F-1")["units"] == 15
    m.store.close()
