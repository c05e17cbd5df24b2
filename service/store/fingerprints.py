"""Fingerprints of what a cached result was computed from (see :mod:`service.heavy`)."""
from __future__ import annotations


def cycle_fingerprint(store, facility_id: str, cycle: int) -> tuple | None:
    """A value that changes whenever the case file of the cycle could change, or None if the
    cycle does not exist.

    It is the cycle's maintained state (status, counts, decision, last receipt, record count
    — a void changes the count and the state), the facility's name, and the newest entry of
    the action log for the cycle: a void, a finding or any manual action on the cycle logs
    one. Two indexed lookups; no scan of the records.
    """
    rows = store.read(
        "SELECT c.status, c.units, c.nonconforming, c.decided_seq, c.closed_seq, "
        "c.last_record_at, c.record_count, f.name, "
        "(SELECT MAX(a.id) FROM actions a WHERE a.facility_id = c.facility_id "
        " AND a.cycle = c.cycle) AS last_action "
        "FROM cycles c JOIN facilities f ON f.facility_id = c.facility_id "
        "WHERE c.facility_id = ? AND c.cycle = ?", (facility_id, cycle))
    return tuple(rows[0].values()) if rows else None


def database_fingerprint(store) -> tuple:
    """A value that changes whenever a record is stored or an action is logged (registering a
    facility, a void, a finding, opening or closing a cycle): the newest receipt number and
    the newest action-log entry, both read from the end of their primary keys."""
    row = store.read("SELECT (SELECT MAX(seq) FROM records) AS seq, "
                     "(SELECT MAX(id) FROM actions) AS action")[0]
    return (row["seq"], row["action"])
