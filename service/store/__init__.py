"""The one module that owns SQLite.

Every change of a facility (records, cycle state, alerts, action log) is
written in one ``BEGIN IMMEDIATE`` transaction, so several worker processes
on one file serialise their updates and a crash leaves either all or none of
a request's writes. Reads use the WAL snapshot of the moment.
"""
from __future__ import annotations

import hashlib
import json
import secrets
import sqlite3
import threading
from contextlib import contextmanager
from pathlib import Path
from typing import NamedTuple

import sqlite_utils

from ..errors import Conflict, Invalid, NotFound
from ..monitor import CLOSED, CycleState, Evidence, apply_run, llr_path, replay
from ..stats import MONITORING, SprtPlan
from .group_commit import GroupCommitter, Job
from .migrations import migrate
from .outbox import OutboxMixin, SessionMixin

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
    return SprtPlan(p0=snapshot["p0"], p1=snapshot["p1"], alpha=snapshot["alpha"],
                    beta=snapshot["beta"], upper_llr=snapshot["upper_llr"],
                    lower_llr=snapshot["lower_llr"], max_units=snapshot["max_units"],
                    cut_llr=snapshot["cut_llr"])


class RecordIn(NamedTuple):
    """A validated record as posted (observed_utc is the normalised instant).

    A named tuple, like the other per-record values: cheap to build a thousand times a request.
    """

    record_id: str
    facility_id: str
    observed_at: str
    observed_utc: str
    units: int
    nonconforming: int
    unit_ref: str | None = None
    inspector: str | None = None
    note: str | None = None

    def content(self) -> tuple:
        """What must match for a record with a known id to be a retry of the stored one
        (the instant, not how it was written)."""
        return (self.facility_id, self.observed_utc, self.units, self.nonconforming,
                self.unit_ref, self.inspector, self.note)


# The columns of a stored record that RecordIn.content() compares, in the same order.
_CONTENT_COLUMNS = "facility_id, observed_utc, units, nonconforming, unit_ref, inspector, note"


class IngestOutcome(NamedTuple):
    """What became of one record; ingest returns them in the order of its items."""

    record_id: str
    status: str                 # accepted | duplicate | conflict | invalid
    seq: int | None = None
    facility_id: str | None = None
    detail: str | None = None
    field: str | None = None


_INSERT_RECORDS = (
    "INSERT INTO records (seq, record_id, facility_id, cycle, observed_at, observed_utc, "
    "received_at, units, nonconforming, unit_ref, inspector, note, counted, key_label, void) "
    "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, 0)")

# The sqlite3 module binds a None parameter only after a failed adapter lookup that raises
# and formats two AttributeErrors (about 0.4 us each; records carry several None fields).
# With an adapter registered for None the lookup succeeds and None still binds as NULL.
# None is not a base type, so this keeps the module's fast path for int, float and str.
sqlite3.register_adapter(type(None), lambda value: None)


def _where_in(conn, sql: str, values: list, cursors: bool = False):
    """Rows of ``sql`` (with ``{marks}`` in its IN list) for all ``values``, queried in
    chunks that stay under SQLite's limit on parameters; the cursors if ``cursors``."""
    for i in range(0, len(values), _IN_CHUNK):
        part = values[i:i + _IN_CHUNK]
        cur = conn.execute(sql.format(marks=",".join("?" * len(part))), part)
        if cursors:
            yield cur
        else:
            yield from cur


def _state_of(row: dict) -> CycleState:
    return CycleState(status=row["status"], units=row["units"], nonconforming=row["nonconforming"],
                      decided_seq=row["decided_seq"], decided_after_units=row["decided_after_units"],
                      decided_at=row["decided_at"], at_cap=bool(row["at_cap"]))


def _rows(cursor) -> list[dict]:
    names = [c[0] for c in cursor.description]
    return [dict(zip(names, r)) for r in cursor.fetchall()]


class Store(OutboxMixin, SessionMixin):
    """Access to one SQLite file; safe to share between threads (one connection each)."""

    def __init__(self, path: str | Path):
        self.path = Path(path)
        self.path.parent.mkdir(parents=True, exist_ok=True)
        self._local = threading.local()
        self._writer = threading.Lock()
        self._committer = GroupCommitter(self._commit_group, on_exit=self._close_connection)

    # -- connections and transactions ------------------------------------
    def _conn(self) -> sqlite3.Connection:
        conn = getattr(self._local, "conn", None)
        if conn is None:
            conn = sqlite3.connect(self.path, isolation_level=None, timeout=30.0,
                                   check_same_thread=False)
            conn.execute("PRAGMA busy_timeout = 30000")
            conn.execute("PRAGMA journal_mode = WAL")
            conn.execute("PRAGMA synchronous = FULL")
            self._local.conn = conn
        return conn

    @contextmanager
    def write(self):
        """One write transaction; the write lock is taken at BEGIN.

        Threads of this process queue on a lock first: SQLite's own busy handler sleeps in
        steps of milliseconds, which would waste most of the time when several request
        threads want to write at once. Other processes still wait on busy_timeout.
        """
        with self._writer, self._transaction() as conn:
            yield conn

    @contextmanager
    def _transaction(self):
        """BEGIN IMMEDIATE ... COMMIT on this thread's connection; the caller holds _writer."""
        conn = self._conn()
        conn.execute("BEGIN IMMEDIATE")
        try:
            yield conn
        except BaseException:
            conn.execute("ROLLBACK")
            raise
        conn.execute("COMMIT")

    def read(self, sql: str, params=()) -> list[dict]:
        return _rows(self._conn().execute(sql, params))

    def close(self) -> None:
        """Stop the writer thread (after what is queued) and close this thread's connection."""
        self._committer.stop()
        self._close_connection()

    def _close_connection(self) -> None:
        conn = getattr(self._local, "conn", None)
        if conn is not None:
            conn.close()
            self._local.conn = None

    def migrate(self) -> int:
        with self.write() as conn:
            return migrate(sqlite_utils.Database(conn))

    # -- counters and action log -------------------------------------------
    @staticmethod
    def _bump(conn, name: str, by: int) -> None:
        if by:
            conn.execute("INSERT INTO counters (name, value) VALUES (?, ?) ON CONFLICT(name) "
                         "DO UPDATE SET value = value + excluded.value", (name, by))

    def bump(self, name: str, by: int = 1) -> None:
        with self.write() as conn:
            self._bump(conn, name, by)

    def counters(self) -> dict[str, int]:
        return {r["name"]: r["value"] for r in self.read("SELECT name, value FROM counters")}

    @staticmethod
    def _log(conn, now, actor, action, detail, facility_id=None, cycle=None, target=None):
        label, role = actor
        conn.execute("INSERT INTO actions (at, key_label, role, action, facility_id, cycle, "
                     "target, detail) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                     (now, label, role, action, facility_id, cycle, target,
                      json.dumps(detail, sort_keys=True)))

    def actions(self, limit=100, offset=0, facility_id=None, cycle=None) -> tuple[list[dict], int]:
        return self._page("actions", "id", {"facility_id": facility_id, "cycle": cycle},
                          limit, offset)

    def _page(self, table: str, order: str, equal: dict, limit: int, offset: int
              ) -> tuple[list[dict], int]:
        """Rows of a table whose columns equal the given values (None: any), one page,
        with their JSON ``detail`` decoded, and the total count."""
        where = [f"{column} = ?" for column, value in equal.items() if value is not None]
        params = [value for value in equal.values() if value is not None]
        clause = f"WHERE {' AND '.join(where)}" if where else ""
        total = self.read(f"SELECT COUNT(*) AS n FROM {table} {clause}", params)[0]["n"]
        rows = self.read(f"SELECT * FROM {table} {clause} ORDER BY {order} LIMIT ? OFFSET ?",
                         [*params, limit, offset])
        for r in rows:
            r["detail"] = json.loads(r["detail"])
        return rows, total

    # -- keys ----------------------------------------------------------------
    def add_key(self, role: str, label: str, now: str, actor=("cli", "admin")) -> tuple[dict, str]:
        if role not in ROLES:
            raise Invalid(f"role must be one of {', '.join(ROLES)}, got {role!r}", field="role")
        if not label or not label.strip():
            raise Invalid("label must not be empty", field="label")
        key = KEY_PREFIX + secrets.token_urlsafe(32)
        with self.write() as conn:
            cur = conn.execute("INSERT INTO keys (label, role, key_hash, prefix, created_at) "
                               "VALUES (?, ?, ?, ?, ?)", (label, role, hash_key(key),
                                                          key[:10], now))
            key_id = cur.lastrowid
            self._log(conn, now, actor, "key_added", {"key_id": key_id, "role": role,
                                                     "label": label}, target=str(key_id))
        return self.key(key_id), key

    def key(self, key_id: int) -> dict:
        rows = self.read("SELECT id, label, role, prefix, created_at, revoked_at FROM keys "
                         "WHERE id = ?", (key_id,))
        if not rows:
            raise NotFound(f"no key with id {key_id}")
        return rows[0]

    def keys(self) -> list[dict]:
        return self.read("SELECT id, label, role, prefix, created_at, revoked_at FROM keys "
                         "ORDER BY id")

    def revoke_key(self, key_id: int, now: str, actor=("cli", "admin")) -> dict:
        with self.write() as conn:
            row = conn.execute("SELECT revoked_at FROM keys WHERE id = ?", (key_id,)).fetchone()
            if row is None:
                raise NotFound(f"no key with id {key_id}")
            if row[0] is not None:
                raise Conflict(f"key {key_id} was already revoked at {row[0]}")
            conn.execute("UPDATE keys SET revoked_at = ? WHERE id = ?", (now, key_id))
            self._log(conn, now, actor, "key_revoked", {"key_id": key_id}, target=str(key_id))
        return self.key(key_id)

    def key_by_hash(self, key_hash: str) -> dict | None:
        rows = self.read("SELECT id, label, role, key_hash, revoked_at FROM keys "
                         "WHERE key_hash = ?", (key_hash,))
        return rows[0] if rows else None

    # -- facilities and cycles --------------------------------------------------
    def add_facility(self, facility_id: str, name: str, plan_name: str, snapshot: dict,
                     now: str, actor) -> None:
        with self.write() as conn:
            self._insert_facility(conn, facility_id, name, plan_name, snapshot, now, actor)

    def _insert_facility(self, conn, facility_id, name, plan_name, snapshot, now, actor):
        if conn.execute("SELECT 1 FROM facilities WHERE facility_id = ?",
                        (facility_id,)).fetchone():
            raise Conflict(f"facility {facility_id!r} is already registered",
                           facility_id=facility_id)
        conn.execute("INSERT INTO facilities (facility_id, name, plan, created_at, current_cycle) "
                     "VALUES (?, ?, ?, ?, 1)", (facility_id, name, plan_name, now))
        self._insert_cycle(conn, facility_id, 1, plan_name, snapshot, now)
        self._log(conn, now, actor, "facility_registered",
                  {"name": name, "plan": plan_name}, facility_id=facility_id, cycle=1)

    def add_facilities(self, rows: list[tuple[str, str, str, dict]], now: str,
                       actor) -> list[str | None]:
        """Register many facilities in one transaction; per row None or the reason it failed."""
        out: list[str | None] = []
        with self.write() as conn:
            for facility_id, name, plan_name, snapshot in rows:
                try:
                    conn.execute("SAVEPOINT one")
                    self._insert_facility(conn, facility_id, name, plan_name, snapshot, now, actor)
                    conn.execute("RELEASE one")
                    out.append(None)
                except Conflict as exc:
                    conn.execute("ROLLBACK TO one")
                    conn.execute("RELEASE one")
                    out.append(exc.detail)
        return out

    @staticmethod
    def _insert_cycle(conn, facility_id, cycle, plan_name, snapshot, now):
        conn.execute("INSERT INTO cycles (facility_id, cycle, plan_name, plan_json, status, units, "
                     "nonconforming, llr, opened_at, at_cap, record_count) "
                     "VALUES (?, ?, ?, ?, ?, 0, 0, 0.0, ?, 0, 0)",
                     (facility_id, cycle, plan_name, json.dumps(snapshot, sort_keys=True),
                      MONITORING, now))

    def facility(self, facility_id: str) -> dict:
        rows = self.read("SELECT f.facility_id, f.name, f.plan, f.created_at, f.current_cycle, "
                         "c.* FROM facilities f JOIN cycles c ON c.facility_id = f.facility_id "
                         "AND c.cycle = f.current_cycle WHERE f.facility_id = ?", (facility_id,))
        if not rows:
            raise NotFound(f"no facility {facility_id!r}", facility_id=facility_id)
        return rows[0]

    def facilities(self, status=None, plan=None, search=None, sort="facility_id",
                   descending=False, limit=100, offset=0) -> tuple[list[dict], int]:
        where, params = [], []
        if status is not None:
            where.append("c.status = ?")
            params.append(status)
        if plan is not None:
            where.append("f.plan = ?")
            params.append(plan)
        if search:
            where.append("(f.facility_id LIKE ? ESCAPE '\\' OR f.name LIKE ? ESCAPE '\\')")
            pattern = "%" + search.replace("\\", "\\\\").replace("%", "\\%").replace("_", "\\_") + "%"
            params += [pattern, pattern]
        clause = f"WHERE {' AND '.join(where)}" if where else ""
        orders = {"facility_id": "f.facility_id", "name": "f.name", "units": "c.units",
                  "last_record_at": "c.last_record_at", "llr": "c.llr",
                  "llr_position": "(c.llr - json_extract(c.plan_json, '$.lower_llr')) / "
                                  "(json_extract(c.plan_json, '$.upper_llr') - "
                                  "json_extract(c.plan_json, '$.lower_llr'))"}
        order = orders[sort] + (" DESC" if descending else "")
        base = ("FROM facilities f JOIN cycles c ON c.facility_id = f.facility_id "
                f"AND c.cycle = f.current_cycle {clause}")
        total = self.read(f"SELECT COUNT(*) AS n {base}", params)[0]["n"]
        rows = self.read(f"SELECT f.facility_id, f.name, f.plan, f.created_at, f.current_cycle, "
                         f"c.* {base} ORDER BY {order}, f.facility_id LIMIT ? OFFSET ?",
                         [*params, limit, offset])
        return rows, total

    def cycles(self, facility_id: str) -> list[dict]:
        return self.read("SELECT * FROM cycles WHERE facility_id = ? ORDER BY cycle",
                         (facility_id,))

    def cycle(self, facility_id: str, cycle: int) -> dict:
        rows = self.read("SELECT * FROM cycles WHERE facility_id = ? AND cycle = ?",
                         (facility_id, cycle))
        if not rows:
            raise NotFound(f"facility {facility_id!r} has no cycle {cycle}")
        return rows[0]

    def status_counts(self) -> dict[str, int]:
        rows = self.read("SELECT c.status, COUNT(*) AS n FROM facilities f JOIN cycles c ON "
                         "c.facility_id = f.facility_id AND c.cycle = f.current_cycle "
                         "GROUP BY c.status")
        return {r["status"]: r["n"] for r in rows}

    def open_cycle(self, facility_id: str, snapshot: dict, now: str, actor) -> int:
        with self.write() as conn:
            row = conn.execute("SELECT f.current_cycle, c.status, f.plan FROM facilities f JOIN "
                               "cycles c ON c.facility_id = f.facility_id AND c.cycle = "
                               "f.current_cycle WHERE f.facility_id = ?",
                               (facility_id,)).fetchone()
            if row is None:
                raise NotFound(f"no facility {facility_id!r}", facility_id=facility_id)
            current, status, plan_name = row
            if status == MONITORING:
                raise Conflict(f"cycle {current} of {facility_id!r} is still being monitored; "
                               "close it or wait for a decision before opening another")
            new = current + 1
            self._insert_cycle(conn, facility_id, new, plan_name, snapshot, now)
            conn.execute("UPDATE facilities SET current_cycle = ? WHERE facility_id = ?",
                         (new, facility_id))
            self._log(conn, now, actor, "cycle_opened", {"previous_status": status},
                      facility_id=facility_id, cycle=new)
        return new

    def close_cycle(self, facility_id: str, reason: str, now: str, actor) -> int:
        with self.write() as conn:
            row = conn.execute("SELECT f.current_cycle, c.status FROM facilities f JOIN cycles c "
                               "ON c.facility_id = f.facility_id AND c.cycle = f.current_cycle "
                               "WHERE f.facility_id = ?", (facility_id,)).fetchone()
            if row is None:
                raise NotFound(f"no facility {facility_id!r}", facility_id=facility_id)
            current, status = row
            if status != MONITORING:
                raise Conflict(f"facility {facility_id!r} has no open cycle (cycle {current} is "
                               f"{status})")
            last = conn.execute("SELECT COALESCE(MAX(seq), 0) FROM records").fetchone()[0]
            conn.execute("UPDATE cycles SET status = ?, closed_at = ?, closed_reason = ?, "
                         "closed_seq = ? WHERE facility_id = ? AND cycle = ?",
                         (CLOSED, now, reason, last, facility_id, current))
            self._log(conn, now, actor, "cycle_closed", {"reason": reason},
                      facility_id=facility_id, cycle=current)
        return current

    # -- records -------------------------------------------------------------
    def ingest(self, items: list[RecordIn], key_label: str | None, now: str,
               rejected_before: int = 0) -> list[IngestOutcome]:
        """Store a batch of validated records durably; returns one outcome per record.

        Per record: a new id is evidence for the facility's current cycle (or a
        post-decision record if the cycle has stopped); the same id with the same
        content is a duplicate and is not counted again; the same id with other
        content is a conflict. ``rejected_before`` counts records of the request
        that failed validation, for the metrics (``items`` may be empty).

        This blocking form commits in the calling thread (imports, the demo, scripts);
        it returns once the records are committed. Never call it inside :meth:`write`.
        """
        job = Job(items, key_label, now, rejected_before)
        self._commit_group([job])
        return job.result()

    async def ingest_async(self, items: list[RecordIn], key_label: str | None, now: str,
                           rejected_before: int = 0) -> list[IngestOutcome]:
        """:meth:`ingest` for request handlers on an event loop, with group commit
        (:mod:`.group_commit`): the store's writer thread commits every request waiting at
        that moment in one transaction (one fsync); each caller is answered only after its
        records are committed."""
        job = await self._committer.run_async(Job(items, key_label, now, rejected_before))
        return job.result()

    def _commit_group(self, jobs: list[Job]) -> None:
        """On the writer thread: all jobs in one transaction, or each alone if that fails."""
        with self._writer:
            try:
                with self._transaction() as conn:
                    for j in jobs:
                        j.outcomes = self._ingest_tx(conn, j)
            except Exception:
                # something failed: commit each job alone, so one cannot sink the others
                for j in jobs:
                    j.outcomes = None
                    try:
                        with self._transaction() as conn:
                            j.outcomes = self._ingest_tx(conn, j)
                    except Exception as exc:  # reported to that job's caller only
                        j.error = exc

    def _ingest_tx(self, conn, job: Job) -> list[IngestOutcome]:
        """One job's records, inside the write transaction the caller holds."""
        items, key_label, now = job.items, job.key_label, job.now
        stored = self._stored_content(conn, list({it.record_id for it in items}))
        cycles = self._current_cycles(conn, list({it.facility_id for it in items}))
        seq = conn.execute("SELECT COALESCE(MAX(seq), 0) FROM records").fetchone()[0]
        batch: dict[str, tuple[RecordIn, int]] = {}     # ids first seen in this job
        runs: dict[str, tuple[list, list, list, list]] = {}   # facility -> its new records
        inserts, alerts, outcomes = [], [], []
        duplicates = rejected = 0
        for it in items:
            rid = it.record_id
            earlier = batch.get(rid)
            if earlier is not None:
                same, old_seq, old_fid = (earlier[0].content() == it.content(), earlier[1],
                                          earlier[0].facility_id)
            elif rid in stored:
                old_content, old_seq = stored[rid]
                same, old_fid = old_content == it.content(), old_content[0]
            else:
                same = None
            if same is not None:
                if same:
                    duplicates += 1
                    outcomes.append(IngestOutcome(rid, "duplicate", old_seq, old_fid))
                else:
                    rejected += 1
                    outcomes.append(IngestOutcome(
                        rid, "conflict", old_seq, old_fid, f"record_id {rid!r} was "
                        "already used for a record with different content; use a new "
                        "record_id for a new record", "record_id"))
                continue
            cyc = cycles.get(it.facility_id)
            if cyc is None:
                rejected += 1
                outcomes.append(IngestOutcome(rid, "invalid", None, None,
                                              f"no facility {it.facility_id!r} is registered",
                                              "facility_id"))
                continue
            seq += 1
            run = runs.get(it.facility_id)
            if run is None:
                run = runs[it.facility_id] = ([], [], [], [])
            run[0].append(len(inserts))
            run[1].append(seq)
            run[2].append(it.units)
            run[3].append(it.nonconforming)
            inserts.append((seq, rid, it.facility_id, cyc["cycle"], it.observed_at,
                            it.observed_utc, now, it.units, it.nonconforming, it.unit_ref,
                            it.inspector, it.note, 1, key_label))
            batch[rid] = (it, seq)
            outcomes.append(IngestOutcome(rid, "accepted", seq, it.facility_id))
        # each facility's new records in receipt order, as one run through the pure update
        decided = []
        for fid, (positions, seqs, units, bad) in runs.items():
            cyc = cycles[fid]
            state, decision, counted = apply_run(cyc["_plan"], cyc["_state"], seqs, units, bad,
                                                 now)
            for p in positions[counted:]:      # kept, but the cycle had stopped: not evidence
                row = inserts[p]
                inserts[p] = row[:12] + (0,) + row[13:]
            if decision is not None:
                decided.append((seqs[counted - 1], cyc, state, inserts[positions[counted - 1]][1]))
            cyc["_state"] = state
            cyc["record_count"] += len(positions)
            cyc["last_record_at"] = now
        conn.executemany(_INSERT_RECORDS, inserts)
        for fid in runs:
            self._write_state(conn, cycles[fid], cycles[fid]["_state"])
        for _, cyc, state, rid in sorted(decided, key=lambda x: x[0]):   # alerts in record order
            alerts += self._decision_alerts(cyc, state, rid, now)
        self._insert_alerts(conn, alerts)
        self._bump(conn, "records_accepted", len(inserts))
        self._bump(conn, "records_duplicate", duplicates)
        self._bump(conn, "records_rejected", rejected + job.rejected_before)
        return outcomes

    @staticmethod
    def _stored_content(conn, ids: list[str]) -> dict[str, tuple[tuple, int]]:
        """record_id -> (content, seq) of the stored records among ``ids``."""
        return {rid: (tuple(content), seq) for rid, seq, *content in _where_in(
            conn, f"SELECT record_id, seq, {_CONTENT_COLUMNS} FROM records "
                  "WHERE record_id IN ({marks})", ids)}

    @staticmethod
    def _current_cycles(conn, facility_ids: list[str]) -> dict[str, dict]:
        """facility_id -> its current cycle row, with the plan and state decoded."""
        out = {}
        for cur in _where_in(conn, "SELECT c.* FROM facilities f JOIN cycles c ON "
                                   "c.facility_id = f.facility_id AND c.cycle = "
                                   "f.current_cycle WHERE f.facility_id IN ({marks})",
                             facility_ids, cursors=True):
            for row in _rows(cur):
                row["_plan"] = plan_of(row["plan_json"])
                row["_state"] = _state_of(row)
                out[row["facility_id"]] = row
        return out

    @staticmethod
    def _write_state(conn, cyc: dict, state: CycleState, extra: dict | None = None) -> None:
        plan = cyc["_plan"]
        values = {"status": state.status, "units": state.units,
                  "nonconforming": state.nonconforming,
                  "llr": float(plan.llr(state.units, state.nonconforming)),
                  "decided_seq": state.decided_seq, "decided_at": state.decided_at,
                  "decided_after_units": state.decided_after_units, "at_cap": int(state.at_cap),
                  "last_record_at": cyc.get("last_record_at"),
                  "record_count": cyc.get("record_count", 0)}
        if extra:
            values.update(extra)
        sets = ", ".join(f"{k} = ?" for k in values)
        conn.execute(f"UPDATE cycles SET {sets} WHERE facility_id = ? AND cycle = ?",
                     [*values.values(), cyc["facility_id"], cyc["cycle"]])

    @staticmethod
    def _decision_alerts(cyc: dict, state: CycleState, record_id: str, now: str) -> list[tuple]:
        plan = cyc["_plan"]
        detail = {"status": state.status, "units": state.units,
                  "nonconforming": state.nonconforming,
                  "llr": float(plan.llr(state.units, state.nonconforming)),
                  "upper_llr": plan.upper_llr, "lower_llr": plan.lower_llr,
                  "decided_after_units": state.decided_after_units, "record_id": record_id,
                  "plan": cyc["plan_name"], "at_cap": state.at_cap}
        out = [(state.status, cyc["facility_id"], cyc["cycle"], now, detail)]
        if state.at_cap:
            out.append(("cap_reached", cyc["facility_id"], cyc["cycle"], now, detail))
        return out

    def _insert_alerts(self, conn, alerts: list[tuple]) -> list[int]:
        """Insert alerts and, in the same transaction, their webhook outbox rows."""
        ids = []
        for kind, fid, cycle, now, detail in alerts:
            cur = conn.execute("INSERT INTO alerts (kind, facility_id, cycle, created_at, state, "
                               "detail) VALUES (?, ?, ?, ?, 'open', ?)",
                               (kind, fid, cycle, now, json.dumps(detail, sort_keys=True)))
            ids.append(cur.lastrowid)
            self._enqueue(conn, cur.lastrowid, kind, fid, cycle, detail, now)
        return ids

    def records(self, facility_id: str, cycle: int) -> list[dict]:
        """A cycle's records in evidence (receipt) order, voids included, with the LLR after each."""
        cyc = self.cycle(facility_id, cycle)
        rows = self.read("SELECT * FROM records WHERE facility_id = ? AND cycle = ? ORDER BY seq",
                         (facility_id, cycle))
        plan = plan_of(cyc["plan_json"])
        live = [r for r in rows if not r["void"]]
        evidence = [Evidence(r["seq"], r["units"], r["nonconforming"], r["received_at"])
                    for r in live]
        llrs = dict(zip((r["seq"] for r in live),
                        llr_path(plan, evidence, [bool(r["counted"]) for r in live])))
        for r in rows:
            r["llr_after"] = llrs.get(r["seq"])
        return rows

    def record(self, record_id: str) -> dict:
        rows = self.read("SELECT * FROM records WHERE record_id = ?", (record_id,))
        if not rows:
            raise NotFound(f"no record {record_id!r}")
        return rows[0]

    def void_record(self, record_id: str, reason: str, now: str, actor) -> dict:
        """Mark a record void and replay its cycle from the records still standing."""
        with self.write() as conn:
            rows = _rows(conn.execute("SELECT * FROM records WHERE record_id = ?", (record_id,)))
            if not rows:
                raise NotFound(f"no record {record_id!r}")
            rec = rows[0]
            if rec["void"]:
                raise Conflict(f"record {record_id!r} was already voided at {rec['voided_at']} by "
                               f"{rec['voided_by']}")
            conn.execute("UPDATE records SET void = 1, voided_at = ?, voided_by = ?, "
                         "void_reason = ? WHERE seq = ?", (now, actor[0], reason, rec["seq"]))
            fid, number = rec["facility_id"], rec["cycle"]
            cyc = _rows(conn.execute("SELECT * FROM cycles WHERE facility_id = ? AND cycle = ?",
                                     (fid, number)))[0]
            current = conn.execute("SELECT current_cycle FROM facilities WHERE facility_id = ?",
                                   (fid,)).fetchone()[0]
            cyc["_plan"] = plan_of(cyc["plan_json"])
            before = _state_of(cyc)
            live = _rows(conn.execute("SELECT seq, units, nonconforming, received_at FROM records "
                                      "WHERE facility_id = ? AND cycle = ? AND void = 0 ORDER BY "
                                      "seq", (fid, number)))
            evidence = [Evidence(r["seq"], r["units"], r["nonconforming"], r["received_at"])
                        for r in live]
            state, counted = replay(cyc["_plan"], evidence, stop_seq=cyc["closed_seq"])
            extra = {}
            if state.is_open and cyc["closed_seq"] is not None:
                state = CycleState(status=CLOSED, units=state.units,
                                   nonconforming=state.nonconforming)
            elif state.is_open and number < current:
                state = CycleState(status=CLOSED, units=state.units,
                                   nonconforming=state.nonconforming)
                extra = {"closed_at": now, "closed_reason":
                         f"undecided after a void, and cycle {current} is already open"}
            conn.executemany("UPDATE records SET counted = ? WHERE seq = ?",
                             [(int(c), r["seq"]) for c, r in zip(counted, live)])
            cyc["record_count"] = len(live)
            self._write_state(conn, cyc, state, extra)
            revised = (before.status, before.decided_seq) != (state.status, state.decided_seq)
            alert_ids = []
            if revised:
                detail = {"record_id": record_id, "reason": reason,
                          "before": {"status": before.status,
                                     "decided_after_units": before.decided_after_units},
                          "after": {"status": state.status,
                                    "decided_after_units": state.decided_after_units},
                          "plan": cyc["plan_name"]}
                alerts = [("decision_revised", fid, number, now, detail)]
                if state.status in ("flagged", "cleared") and state.status != before.status:
                    alerts += self._decision_alerts(cyc, state, record_id, now)
                alert_ids = self._insert_alerts(conn, alerts)
            self._log(conn, now, actor, "record_voided",
                      {"record_id": record_id, "reason": reason, "decision_revised": revised},
                      facility_id=fid, cycle=number, target=record_id)
        return {"record": self.record(record_id), "revised": revised, "alert_ids": alert_ids}

    # -- alerts --------------------------------------------------------------
    def alerts(self, state=None, kind=None, facility_id=None, limit=100,
               offset=0) -> tuple[list[dict], int]:
        return self._page("alerts", "alert_id DESC",
                          {"state": state, "kind": kind, "facility_id": facility_id},
                          limit, offset)

    def alert(self, alert_id: int) -> dict:
        rows = self.read("SELECT * FROM alerts WHERE alert_id = ?", (alert_id,))
        if not rows:
            raise NotFound(f"no alert {alert_id}")
        rows[0]["detail"] = json.loads(rows[0]["detail"])
        return rows[0]

    def ack_alert(self, alert_id: int, note: str | None, now: str, actor) -> dict:
        with self.write() as conn:
            row = conn.execute("SELECT state, acked_at, acked_by, facility_id, cycle FROM alerts "
                               "WHERE alert_id = ?", (alert_id,)).fetchone()
            if row is None:
                raise NotFound(f"no alert {alert_id}")
            state, acked_at, acked_by, fid, cycle = row
            if state == "acknowledged":
                raise Conflict(f"alert {alert_id} was already acknowledged at {acked_at} by "
                               f"{acked_by}")
            conn.execute("UPDATE alerts SET state = 'acknowledged', acked_at = ?, acked_by = ?, "
                         "ack_note = ? WHERE alert_id = ?", (now, actor[0], note, alert_id))
            self._log(conn, now, actor, "alert_acknowledged", {"alert_id": alert_id, "note": note},
                      facility_id=fid, cycle=cycle, target=str(alert_id))
        return self.alert(alert_id)

    def open_alert_count(self) -> int:
        return self.read("SELECT COUNT(*) AS n FROM alerts WHERE state = 'open'")[0]["n"]
