"""The current cycles ingest reads and writes: which columns, the statements that write their
new states (by rowid), and the cycles kept between ingest transactions."""
from __future__ import annotations

import operator

from ..monitor import CycleState
from .common import plan_of, position, split_known, where_in


_STATE_SET = (
    "UPDATE cycles SET status = ?, units = ?, nonconforming = ?, llr = ?, llr_position = ?, "
    "decided_seq = ?, decided_at = ?, decided_after_units = ?, at_cap = ?, last_record_at = ?, "
    "record_count = ? WHERE ")
UPDATE_STATE = _STATE_SET + "facility_id = ? AND cycle = ?"
# Ingest names its cycles by rowid, read with them in the same transaction: one search of the
# table instead of the primary-key index and then the table.
UPDATE_STATE_AT = _STATE_SET + "rowid = ?"

# a cycle whose status stayed: only the counts and the position change (fewer columns to
# rewrite, and the listing triggers on status are not woken)
UPDATE_COUNTS_AT = (
    "UPDATE cycles SET units = ?, nonconforming = ?, llr = ?, llr_position = ?, "
    "last_record_at = ?, record_count = ? WHERE rowid = ?")


# The columns of a current cycle that ingest reads; the state's come first, in CycleState's
# order (at_cap made a bool on reading). Each column read costs about 0.1 us a cycle, so
# last_record_at (only ever overwritten here) is left out, and the watch chart's columns are
# read only for the cycles that have a chart running (watch_state set).
_CYCLE_COLUMNS = ("status", "units", "nonconforming", "decided_seq", "decided_after_units",
                  "decided_at", "at_cap", "facility_id", "cycle", "plan_name", "plan_json",
                  "opened_at", "record_count", "watch_state", "_rowid")
_CURRENT_CYCLES = ("SELECT " + ", ".join(
    "(SELECT p.plan_json FROM plan_snapshots p WHERE p.ref = plan_ref)" if name == "plan_json"
    else name for name in _CYCLE_COLUMNS[:-1])
    + ", rowid FROM cycles WHERE is_current = 1 AND facility_id IN ({marks})")
_WATCH_COLUMNS = ("watch_value", "watch_units", "watch_nonconforming", "watch_peak",
                  "watch_signal_seq", "watch_signal_at")
_WATCHED_CYCLES = (f"SELECT rowid, {', '.join(_WATCH_COLUMNS)} FROM cycles WHERE rowid IN "
                   "({marks})")


def state_row(cyc: dict, state: CycleState) -> tuple:
    """The parameters of UPDATE_STATE for a cycle row (with its plan) and its new state."""
    plan = cyc["_plan"]
    llr = float(plan.llr(state.units, state.nonconforming))
    return (state.status, state.units, state.nonconforming, llr,
            position(llr, plan.lower_llr, plan.upper_llr), state.decided_seq, state.decided_at,
            state.decided_after_units, int(state.at_cap), cyc.get("last_record_at"),
            cyc.get("record_count", 0), cyc["facility_id"], cyc["cycle"])


def rowid_of(conn, cyc: dict) -> int:
    """A cycle's rowid (read with the cycle; looked up for one opened in this transaction)."""
    rowid = cyc.get("_rowid")
    if rowid is None:
        rowid = cyc["_rowid"] = conn.execute(
            "SELECT rowid FROM cycles WHERE facility_id = ? AND cycle = ?",
            (cyc["facility_id"], cyc["cycle"])).fetchone()[0]
    return rowid


def cycle_writes(conn, cycles: list[dict], kept: "KeptCycles") -> tuple[list[tuple], list[tuple]]:
    """The parameters of UPDATE_COUNTS_AT for the cycles whose status stayed and of
    UPDATE_STATE_AT for the others, in one pass that also does :meth:`KeptCycles.keep`'s
    work for each cycle (a batch spread over 1000 facilities touches 1000 cycles: each
    further pass over them costs about 0.1-0.2 us a record)."""
    counts, states = [], []
    known = kept.cycles
    for cyc in cycles:
        plan, state, fid = cyc["_plan"], cyc["_state"], cyc["facility_id"]
        rowid = cyc.get("_rowid")
        if rowid is None:
            rowid = rowid_of(conn, cyc)
        if state.status == cyc["status"]:
            n, d = state.units, state.nonconforming
            llr = float(plan.llr(n, d))
            counts.append((n, d, llr, position(llr, plan.lower_llr, plan.upper_llr),
                           cyc["last_record_at"], cyc["record_count"], rowid))
            # kept as a read would give it again, unless its watch chart changed or it is
            # not the kept one (opened in this job, after a signal)
            if "_watch_dirty" in cyc or known.get(fid) is not cyc:
                known.pop(fid, None)
            else:
                cyc["units"], cyc["nonconforming"] = n, d
        else:
            states.append(state_row(cyc, state)[:-2] + (rowid,))
            known.pop(fid, None)        # its status changed: read again
    counts.sort(key=_ROWID)             # the table's order: each row near the last one
    return counts, states


_ROWID = operator.itemgetter(-1)


def current_cycles(conn, facility_ids: list[str]) -> dict[str, dict]:
    """facility_id -> its current cycle row (the columns ingest uses, and its rowid), with
    the plan and state decoded. Found through the maintained ``is_current`` flag: no
    join, and only the columns needed (a row's every column would cost twice as much per
    facility)."""
    out, plans = {}, {}
    for values in where_in(conn, _CURRENT_CYCLES, facility_ids):
        row = dict(zip(_CYCLE_COLUMNS, values))
        known = plans.get(values[10])
        if known is None:
            known = plans[values[10]] = (plan_of(values[10]), values[10])
        row["_plan"], row["plan_json"] = known     # one text object per snapshot
        row["_state"] = CycleState(*values[:6], bool(values[6]))
        out[values[7]] = row
    watched = {row["_rowid"]: row for row in out.values() if row["watch_state"] is not None}
    for rowid, *values in where_in(conn, _WATCHED_CYCLES, list(watched)):
        watched[rowid].update(zip(_WATCH_COLUMNS, values))
    return out


# At most this many cycles are kept between ingest transactions (about 1 kB each).
KEPT_CYCLES = 10_000


class KeptCycles:
    """The current cycles the last ingest transactions of one connection read and wrote,
    kept so that the next one need not read them again (one per store, on the store).

    They are trusted only while nothing else wrote to the database: ``mark`` is SQLite's
    ``data_version`` (changed by any other connection's commit) and this connection's
    ``total_changes`` (changed by any other write through it), read inside the write
    transaction at the end of the last ingest job. A job in progress, a failed one and a
    failed commit (:meth:`forget`) all leave ``mark`` unset, which drops the lot.
    """

    __slots__ = ("conn", "mark", "cycles")

    def __init__(self, conn):
        self.conn, self.mark, self.cycles = conn, None, {}

    @staticmethod
    def _mark(conn) -> tuple[int, int]:
        return conn.execute("PRAGMA data_version").fetchone()[0], conn.total_changes

    @classmethod
    def of(cls, store, conn) -> "KeptCycles":
        """The store's kept cycles of ``conn`` if nothing else wrote since they were kept,
        else none; marked as in use (unset) until :meth:`keep`."""
        kept = store.__dict__.get("_kept_cycles")
        if kept is None or kept.conn is not conn or kept.mark != cls._mark(conn):
            kept = store.__dict__["_kept_cycles"] = cls(conn)
        kept.mark = None
        return kept

    @staticmethod
    def forget(store) -> None:
        """A transaction failed: what was kept may be ahead of the file."""
        store.__dict__.pop("_kept_cycles", None)

    def cycles_for(self, conn, facility_ids: set[str]) -> dict[str, dict]:
        """facility_id -> its current cycle, kept or read (:func:`current_cycles`)."""
        known = self.cycles
        out, missing = split_known(known, facility_ids)     # (as many as the records)
        if missing:
            read = current_cycles(conn, missing)
            if len(known) + len(read) > KEPT_CYCLES:
                known.clear()
            known.update(read)
            out.update(read)
        return out

    def keep(self, conn) -> None:
        """After a job's writes (:func:`cycle_writes` kept or dropped each of its cycles):
        what is kept is what a read would give again, from now on."""
        self.mark = self._mark(conn)
