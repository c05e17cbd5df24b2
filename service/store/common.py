"""Small helpers shared by the store's modules: row decoding, chunked IN queries, plans
of stored snapshots, key hashing."""
from __future__ import annotations

import hashlib
import json

from ..monitor import CycleState
from ..stats import SprtPlan

ROLES = ("field", "analyst", "admin")
KEY_PREFIX = "sqa_"
_IN_CHUNK = 500


def hash_key(key: str) -> str:
    """Keys are random 256-bit tokens, so one SHA-256 is a sound stored form."""
    return hashlib.sha256(key.encode("utf-8")).hexdigest()


_SNAPSHOT_PLANS: dict[str, SprtPlan] = {}


def plan_of(plan_json: str) -> SprtPlan:
    """The plan of a cycle's stored snapshot text, built once per distinct text (plans are
    immutable and there are few distinct snapshots; each ingest needs its cycles' plans)."""
    plan = _SNAPSHOT_PLANS.get(plan_json)
    if plan is None:
        if len(_SNAPSHOT_PLANS) >= 1024:
            _SNAPSHOT_PLANS.clear()
        plan = _SNAPSHOT_PLANS[plan_json] = plan_from_snapshot(json.loads(plan_json))
    return plan


def plan_from_snapshot(snapshot: dict) -> SprtPlan:
    """The plan a cycle runs. With imperfect re-checks the test runs on the apparent rates
    (``apparent_p0``, ``apparent_p1``); older snapshots have neither key."""
    return SprtPlan(p0=snapshot.get("apparent_p0", snapshot["p0"]),
                    p1=snapshot.get("apparent_p1", snapshot["p1"]), alpha=snapshot["alpha"],
                    beta=snapshot["beta"], upper_llr=snapshot["upper_llr"],
                    lower_llr=snapshot["lower_llr"], max_units=snapshot["max_units"],
                    cut_llr=snapshot["cut_llr"], visit_units=snapshot.get("visit_units", 1))



def split_known(known: dict, keys) -> tuple[dict, list]:
    """(key -> value for the keys ``known`` holds, the other keys in their order): one pass,
    for caches in front of a query."""
    found, missing = {}, []
    for key in keys:
        value = known.get(key)
        if value is None:
            missing.append(key)
        else:
            found[key] = value
    return found, missing


def where_in(conn, sql: str, values: list, cursors: bool = False):
    """Rows of ``sql`` (with ``{marks}`` in its IN list) for all ``values``, queried in
    chunks that stay under SQLite's limit on parameters; the cursors if ``cursors``."""
    for i in range(0, len(values), _IN_CHUNK):
        part = values[i:i + _IN_CHUNK]
        cur = conn.execute(sql.format(marks=",".join("?" * len(part))), part)
        if cursors:
            yield cur
        else:
            yield from cur


def position(llr: float, lower: float, upper: float) -> float:
    """Where an LLR lies between the boundaries: 0 at the lower, 1 at the upper one."""
    return (llr - lower) / (upper - lower)


def state_of(row: dict) -> CycleState:
    return CycleState(status=row["status"], units=row["units"], nonconforming=row["nonconforming"],
                      decided_seq=row["decided_seq"], decided_after_units=row["decided_after_units"],
                      decided_at=row["decided_at"], at_cap=bool(row["at_cap"]))


def rows_of(cursor) -> list[dict]:
    names = [c[0] for c in cursor.description]
    return [dict(zip(names, r)) for r in cursor.fetchall()]

