"""Connections, write transactions, counters and the action log: what every part of the
store builds on.

Every change of a facility (records, cycle state, alerts, action log) is written in one
``BEGIN IMMEDIATE`` transaction, so several worker processes on one file serialise their
updates and a crash leaves either all or none of a request's writes. Reads use the WAL
snapshot of the moment.
"""
from __future__ import annotations

import json
import sqlite3
import threading
from contextlib import contextmanager
from pathlib import Path

import sqlite_utils

from .common import rows_of
from .group_commit import GroupCommitter
from .migrations import migrate
from .trail import action_content, append_entry
from .writer_lock import WriterLock

CACHE_KIB = 64 * 1024       # per connection, filled only as pages are used
# Checkpoint every ~40 MB of WAL rather than every 4 MB: random record ids dirty a page of
# the id index each, and every checkpoint copies each dirty page once more.
WAL_PAGES = 10_000


class StoreBase:
    """Access to one SQLite file; safe to share between threads (one connection each)."""

    def __init__(self, path: str | Path):
        self.path = Path(path)
        self.path.parent.mkdir(parents=True, exist_ok=True)
        self._local = threading.local()
        self._writer = threading.Lock()
        self._lookup_lock = threading.Lock()        # readers' lookups by record id
        self._file_lock = WriterLock(self.path)     # the queue of writers across processes
        self._committer = GroupCommitter(self._commit_group, on_exit=self._close_connection,
                                         after=self._after_commit)

    # -- connections and transactions ------------------------------------
    def _conn(self) -> sqlite3.Connection:
        conn = getattr(self._local, "conn", None)
        if conn is None:
            conn = sqlite3.connect(self.path, isolation_level=None, timeout=30.0,
                                   check_same_thread=False)
            conn.execute("PRAGMA busy_timeout = 30000")
            conn.execute("PRAGMA journal_mode = WAL")
            conn.execute("PRAGMA synchronous = FULL")
            # A page cache that holds a batch's dirty pages: random record ids touch a page of
            # the id index each, and with the 2 MB default cache a batch re-read most of them.
            # (No memory map: an I/O error on a mapped page is a signal, not an error that the
            # storage checks can answer.)
            conn.execute(f"PRAGMA cache_size = -{CACHE_KIB}")
            conn.execute(f"PRAGMA wal_autocheckpoint = {WAL_PAGES}")
            self._local.conn = conn
        return conn

    @contextmanager
    def write(self):
        """One write transaction; the write lock is taken at BEGIN.

        Threads of this process queue on a lock first: SQLite's own busy handler sleeps in
        steps of milliseconds, which would waste most of the time when several request
        threads want to write at once. Processes then queue on a file lock
        (:mod:`.writer_lock`), which wakes the next writer as soon as the last one commits.
        """
        with self._writer, self._transaction() as conn:
            yield conn

    @contextmanager
    def _transaction(self):
        """BEGIN IMMEDIATE ... COMMIT on this thread's connection; the caller holds _writer."""
        with self._file_lock, self._begun() as conn:
            yield conn

    @contextmanager
    def _begun(self):
        """BEGIN IMMEDIATE ... COMMIT; the caller holds _writer and the file lock."""
        conn = self._conn()
        conn.execute("BEGIN IMMEDIATE")
        try:
            yield conn
            conn.execute("COMMIT")
        except BaseException:
            # SQLite may have rolled back already (it does on SQLITE_FULL): a ROLLBACK
            # then would fail and hide the error that matters
            if conn.in_transaction:
                conn.execute("ROLLBACK")
            raise

    def _after_commit(self) -> bool:
        """Upkeep after a group commit, once its callers are answered (the record ids' merge,
        a step at a time); True while it has more to do."""
        return False

    def read(self, sql: str, params=()) -> list[dict]:
        return rows_of(self._conn().execute(sql, params))

    def close(self) -> None:
        """Stop the writer thread (after what is queued) and close this thread's connection."""
        self._committer.stop()
        self._close_connection()
        self._file_lock.close()

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
        text = json.dumps(detail, sort_keys=True)
        cur = conn.execute("INSERT INTO actions (at, key_label, role, action, facility_id, "
                           "cycle, target, detail) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                           (now, label, role, action, facility_id, cycle, target, text))
        append_entry(conn, "action", action_content(cur.lastrowid, now, label, role, action,
                                                    facility_id, cycle, target, text),
                     now, ref=cur.lastrowid)

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
