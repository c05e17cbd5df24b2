"""Record ids: how a stored record is found by its id, at a cost per record that stays flat as
records accumulate, even when the ids are random (UUID 4).

A unique index on ``records.record_id`` puts each new random id on a page of its own among
all the index's leaves: at 1,000,000 stored records a batch of 1000 dirtied about 1000 pages
(4 MB written to the log, then again to the file at the checkpoint), and a record cost about
2.5 times what it cost in an empty database. So the ids are kept in two parts:

- ``record_keys`` (record_id -> seq, a table without rowid, ordered by id) holds the ids of
  every record up to ``record_keys_merged.upto``;
- the later records (the *tail*) are found through their ``seq``, in order of arrival: the
  records table itself is their durable list, and each store keeps them in memory as a dict
  (:class:`RecentKeys`), read again from the file whenever another connection may have
  added some.

When the tail reaches :data:`MERGE_AT` ids they are merged into ``record_keys`` in id order,
a slice at a time (:data:`MERGE_SLICE` ids per transaction, one transaction between group
commits, so writers wait at most one slice): every leaf of the table is then written about
once for a tail of ids, not once per id. Between the slices, and after a crash in the middle
of a merge, some ids are in both parts, which is harmless: both name the same ``seq``, and a
slice that meets an id already merged with the same ``seq`` skips it (another ``seq`` would
be two records with one id and raises :class:`DuplicateKey`).

The unique index's guarantee now comes from the one writer at a time (the store's write
locks): inside a write transaction, the tail is read up to the newest record first, and the
ingest checks every id against both parts before it inserts.
"""
from __future__ import annotations

from .common import rows_of, split_known, where_in

# Tail ids that start a merge. A merge writes each leaf of record_keys about once: at 1M
# stored ids (about 11,000 leaves) that is about 0.1 page per merged id. The tail costs about
# 150 bytes of memory an id, and a lookup by id that misses record_keys reads the tail's rows.
MERGE_AT = 128_000
MERGE_SLICE = 16_000

_KEYS_IN = "SELECT record_id, seq FROM record_keys WHERE record_id IN ({marks})"

# A lookup inside a write transaction (one statement, one snapshot): through record_keys,
# else through the rows of the tail (at most about MERGE_AT of them).
_SCAN_BY_ID = ("SELECT r.* FROM record_keys k JOIN records r ON r.seq = k.seq WHERE "
               "k.record_id = ?1 AND r.record_id = ?1 UNION ALL SELECT * FROM records WHERE "
               "seq > (SELECT upto FROM record_keys_merged) AND record_id = ?1 LIMIT 1")


class DuplicateKey(RuntimeError):
    """Two stored records carry one id: the store's write locks were bypassed."""


class RecentKeys:
    """The ids of the records after ``record_keys_merged.upto`` (id -> seq), of one store.

    Used only by a thread that holds the store's write lock. :meth:`catch_up` at the start of
    each write transaction reads what other connections added; :meth:`add` takes this
    transaction's own inserts (so a later job of the same commit sees them); a transaction
    that fails must :meth:`forget` them all (they may never have reached the file).
    """

    __slots__ = ("upto", "seen", "ids")

    def __init__(self):
        self.upto, self.seen, self.ids = -1, 0, {}

    @classmethod
    def of(cls, store) -> "RecentKeys":
        recent = store.__dict__.get("_recent_keys")
        if recent is None:
            recent = store.__dict__["_recent_keys"] = cls()
        return recent

    @staticmethod
    def forget(store) -> None:
        store.__dict__.pop("_recent_keys", None)

    def catch_up(self, conn) -> None:
        """Read the merge mark and every record newer than the last one known."""
        upto = conn.execute("SELECT upto FROM record_keys_merged").fetchone()[0]
        if upto != self.upto:
            if upto < self.upto:            # the file is not the one these came from
                self.ids, self.seen = {}, 0
            elif self.ids:                  # another connection merged
                self.ids = {rid: seq for rid, seq in self.ids.items() if seq > upto}
            self.upto = upto
        self.seen = max(self.seen, upto)
        self.add(conn.execute("SELECT record_id, seq FROM records WHERE seq > ?", (self.seen,)))

    def add(self, pairs) -> None:
        """(record_id, seq) of records read or inserted by this transaction, in seq order."""
        ids = self.ids
        for rid, seq in pairs:
            ids[rid] = seq
            self.seen = seq

    def seqs(self, conn, record_ids: list[str]) -> dict[str, int]:
        """record_id -> seq of the stored records among ``record_ids``."""
        found, rest = split_known(self.ids, record_ids)
        if rest:
            found.update(where_in(conn, _KEYS_IN, rest))
        return found

    def record(self, conn, record_id: str) -> list[dict]:
        """The stored record with this id (a list of at most one row), caught up first in
        ``conn``'s transaction, which the caller holds."""
        self.catch_up(conn)
        seq = self.seqs(conn, [record_id]).get(record_id)
        if seq is None:
            return []
        return rows_of(conn.execute("SELECT * FROM records WHERE seq = ? AND record_id = ?",
                                    (seq, record_id)))


def merge_slice(conn, pairs: list[tuple[str, int]]) -> int:
    """Insert (record_id, seq) pairs, sorted by id, into record_keys; pairs already there
    with the same seq are skipped. Returns how many were inserted."""
    before = conn.total_changes
    conn.executemany("INSERT INTO record_keys (record_id, seq) VALUES (?, ?) "
                     "ON CONFLICT (record_id) DO NOTHING", pairs)
    inserted = conn.total_changes - before
    if inserted < len(pairs):
        wanted = dict(pairs)
        for rid, seq in where_in(conn, _KEYS_IN, list(wanted)):
            if seq != wanted[rid]:
                raise DuplicateKey(f"record_id {rid!r} is stored as seq {seq} and seq "
                                   f"{wanted[rid]}")
    return inserted


def set_merged(conn, upto: int) -> None:
    conn.execute("UPDATE record_keys_merged SET upto = MAX(upto, ?)", (upto,))


class _MergePlan:
    """A merge under way: the mark it moves to, the (id, seq) pairs in id order, the next
    slice. Its pairs are committed records, so it stays valid while ingest goes on."""

    __slots__ = ("upto", "pending", "next")

    def __init__(self, upto: int, pending: list[tuple[str, int]]):
        self.upto, self.pending, self.next = upto, pending, 0


class RecordKeysMixin:
    """The merge of the tail into record_keys, run by the writer a transaction at a time
    between its group commits; and the lookup of one record by id."""

    merge_failure: str | None = None
    # two stored records with one id: the storage checks (/readyz) report the store damaged,
    # and no merge is tried again until the service restarts
    ids_duplicated: bool = False

    def merge_step(self, least: int | None = None) -> bool:
        """One transaction of a merge: start one once the tail holds at least ``least`` ids
        (default :data:`MERGE_AT`), or merge its next slice, or, all slices in, move the mark.
        Returns True while the merge has more to do."""
        least = MERGE_AT if least is None else max(1, least)
        if self.ids_duplicated:
            return False
        recent = self.__dict__.get("_recent_keys")
        if "_merge_plan" not in self.__dict__ and recent is not None and len(recent.ids) < least:
            return False        # known without a transaction: the tail is only ever shorter
        with self._writer:
            plan = self.__dict__.get("_merge_plan")
            if plan is None:
                with self._transaction() as conn:
                    recent = RecentKeys.of(self)
                    recent.catch_up(conn)
                    if len(recent.ids) < least:
                        return False
                    self.__dict__["_merge_plan"] = _MergePlan(recent.seen,
                                                              sorted(recent.ids.items()))
                return True
            if plan.next < len(plan.pending):
                with self._transaction() as conn:
                    merge_slice(conn, plan.pending[plan.next:plan.next + MERGE_SLICE])
                plan.next += MERGE_SLICE        # only once the slice is committed
                return True
            with self._transaction() as conn:
                set_merged(conn, plan.upto)
                RecentKeys.of(self).catch_up(conn)      # the merged ids leave the tail
            del self.__dict__["_merge_plan"]
            self.__dict__["_merged_last"] = len(plan.pending)
            return False

    def merge_record_keys(self, least: int | None = None) -> int:
        """The whole merge (:meth:`merge_step` until done); the number of ids the last
        completed merge took (0: the tail was shorter than ``least``)."""
        self.__dict__["_merged_last"] = 0
        while self.merge_step(least):
            pass
        return self.__dict__["_merged_last"]

    def _after_commit(self) -> bool:
        """After a group's callers have their answers: one step of a merge, if the tail is
        long enough or one is under way; True while it has more to do (the writer goes on
        between groups). A failed step is tried again after the next commit, from where it
        stopped; the last failure is kept in ``merge_failure`` for the storage checks."""
        try:
            more = self.merge_step()
        except DuplicateKey as exc:
            self.__dict__.pop("_merge_plan", None)
            self.merge_failure, self.ids_duplicated = f"{type(exc).__name__}: {exc}", True
            return False
        except Exception as exc:  # noqa: BLE001 - kept and reported, the ids stay found
            self.merge_failure = f"{type(exc).__name__}: {exc}"
            return False
        self.merge_failure = None
        return more

    def find_record(self, record_id: str) -> list[dict]:
        """The stored record with this id, as a list of at most one row. Readers keep a tail
        of their own (behind one lock), caught up in the lookup's read transaction: a lookup
        costs the records added since the last one, never a read of the whole tail."""
        conn = self._conn()
        if conn.in_transaction:
            # inside a write, whose rows may yet roll back: the readers' tail must not take
            # them (their seqs would be given to other records), so read the tail's rows
            return rows_of(conn.execute(_SCAN_BY_ID, (record_id,)))
        with self._lookup_lock:
            keys = self.__dict__.setdefault("_reader_keys", RecentKeys())
            conn.execute("BEGIN")
            try:
                return keys.record(conn, record_id)
            finally:
                conn.execute("COMMIT")
