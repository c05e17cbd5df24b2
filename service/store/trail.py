"""The tamper-evident trail (SQL side): one append-only hash chain per database.

Every record, void, alert (decisions among them) and logged action is appended, in the same
write transaction that writes it, as an entry of the ``trail`` table::

    n             1, 2, 3, ... (no gaps)
    at            RFC 3339 UTC time of the append
    kind          records | void | decision | alert | action | (kinds added later)
    ref           the row(s) the entry stands for (first-last record seq, the seq of a
                  voided record, alert id, action id)
    content       the canonical JSON of the entry's content; NULL for ``records`` entries,
                  whose content is rebuilt from their rows (records.trail_n = n), not copied
    prev_sha256   entry_sha256 of entry n - 1 (64 zeros for entry 1)
    entry_sha256  SHA-256 of the canonical JSON {at, content, kind, n, prev_sha256}

The hashing itself is :mod:`service.trail_hash` (pure). :func:`append_entry` is the one way
to append one entry; the ingest path appends each job's new records as one ``records``
entry with :func:`append_records` (one read of the head, one pass of orjson and
one SHA-256 per job; each record's ``trail_n`` is that entry's number).

To have ``seqaudit verify`` compare a table with its entries, give its kinds a reader in
``SOURCES`` (rows -> (kind, ref, canonical content)); entries of kinds without one are
still checked as links of the chain (their content is stored here).
"""
from __future__ import annotations

import json
from typing import Callable, Iterator

from ..trail_hash import (GENESIS, RECEIVED, RECORD_FIELDS, SEQ, canonical, entry_sha256,
                          records_content)

_INSERT = ("INSERT INTO trail (n, at, kind, ref, content, prev_sha256, entry_sha256) "
           "VALUES (?, ?, ?, ?, ?, ?, ?)")
DECISION_KINDS = frozenset({"flagged", "cleared", "cap_reached", "decision_revised"})
RECORD_COLUMNS = ", ".join(RECORD_FIELDS)
_CHUNK = 500


def head(conn) -> tuple[int, str]:
    """(n, entry_sha256) of the last entry; (0, 64 zeros) for an empty trail."""
    row = conn.execute("SELECT n, entry_sha256 FROM trail ORDER BY n DESC LIMIT 1").fetchone()
    return (0, GENESIS) if row is None else (row[0], row[1])


def append_entry(conn, kind: str, content: dict, at: str, ref: str | int | None = None) -> str:
    """Append one entry inside the caller's write transaction; returns its entry_sha256.

    ``content`` is a JSON object (texts, integers, booleans, null, lists, objects; floats
    only where they must be); ``ref`` names the row the entry stands for, so that
    ``seqaudit verify`` can compare the two when the kind has a reader in ``SOURCES``.
    """
    n, prev = head(conn)
    body = canonical(content)
    digest = entry_sha256(n + 1, kind, at, body, prev)
    conn.execute(_INSERT, (n + 1, at, kind, None if ref is None else str(ref),
                           body.decode("utf-8"), prev, digest))
    return digest


def append_records(conn, n: int, prev: str, rows: list[tuple], at: str) -> str:
    """Append a job's new records (tuples in RECORD_FIELDS order, seq order, non-empty)
    as entry n + 1 after the head (n, prev) the caller read in this transaction; the
    records carry n + 1 in trail_n. Returns the entry's hash."""
    digest = entry_sha256(n + 1, "records", at, records_content(rows), prev)
    conn.execute(_INSERT, (n + 1, at, "records", f"{rows[0][SEQ]}-{rows[-1][SEQ]}", None, prev,
                           digest))
    return digest


# -- the contents of the other kinds, from their rows (the same when appended and checked)
def void_content(seq, record_id, voided_at, voided_by, void_reason) -> dict:
    return {"seq": seq, "record_id": record_id, "voided_at": voided_at,
            "voided_by": voided_by, "void_reason": void_reason}


def alert_entry_kind(alert_kind: str) -> str:
    return "decision" if alert_kind in DECISION_KINDS else "alert"


def alert_content(alert_id, kind, facility_id, cycle, created_at, detail_json: str) -> dict:
    return {"alert_id": alert_id, "kind": kind, "facility_id": facility_id, "cycle": cycle,
            "created_at": created_at, "detail": json.loads(detail_json)}


def action_content(action_id, at, key_label, role, action, facility_id, cycle, target,
                   detail_json: str) -> dict:
    return {"id": action_id, "at": at, "key_label": key_label, "role": role,
            "action": action, "facility_id": facility_id, "cycle": cycle, "target": target,
            "detail": json.loads(detail_json)}


def _content_of(build, row) -> bytes:
    """Canonical content of a row read back; a hand edit that left something JSON cannot
    hold (text that is not JSON in ``detail``, a BLOB) gives bytes no entry has."""
    try:
        return canonical(build(*row))
    except (TypeError, ValueError, UnicodeEncodeError):
        return json.dumps({"unreadable row": [repr(v) for v in row]}).encode("utf-8")


def _voids(conn) -> Iterator[tuple[str, str, bytes]]:
    for row in conn.execute("SELECT seq, record_id, voided_at, voided_by, void_reason "
                            "FROM records WHERE void != 0"):
        yield "void", str(row[0]), _content_of(void_content, row)


def _alerts(conn) -> Iterator[tuple[str, str, bytes]]:
    for row in conn.execute("SELECT alert_id, kind, facility_id, cycle, created_at, detail "
                            "FROM alerts"):
        yield alert_entry_kind(row[1]), str(row[0]), _content_of(alert_content, row)


def _actions(conn) -> Iterator[tuple[str, str, bytes]]:
    for row in conn.execute("SELECT id, at, key_label, role, action, facility_id, cycle, "
                            "target, detail FROM actions"):
        yield "action", str(row[0]), _content_of(action_content, row)


# the kinds whose rows verify compares with their entries -> the reader of those rows
SOURCES: dict[frozenset, Callable] = {
    frozenset({"void"}): _voids,
    frozenset({"decision", "alert"}): _alerts,
    frozenset({"action"}): _actions,
}


def entries(conn) -> Iterator[tuple]:
    """Every entry in order: (n, at, kind, ref, content, prev_sha256, entry_sha256)."""
    return conn.execute("SELECT n, at, kind, ref, content, prev_sha256, entry_sha256 "
                        "FROM trail ORDER BY n")


def record_rows(conn) -> Iterator[tuple]:
    """Every record as (trail_n, *RECORD_FIELDS values), in seq order."""
    return conn.execute(f"SELECT trail_n, {RECORD_COLUMNS} FROM records ORDER BY seq")


def entry_records(conn, n: int) -> list[tuple]:
    """The records of ``records`` entry n, as its content lists them (RECORD_FIELDS order)."""
    return conn.execute(f"SELECT {RECORD_COLUMNS} FROM records WHERE trail_n = ? ORDER BY seq",
                        (n,)).fetchall()


def sourced_rows(conn) -> tuple[set[str], dict[tuple[str, str], bytes]]:
    """(kinds with a reader, {(kind, ref): canonical content of the row})."""
    kinds: set[str] = set()
    rows: dict[tuple[str, str], bytes] = {}
    for covered, read in SOURCES.items():
        kinds |= covered
        for kind, ref, content in read(conn):
            rows[(kind, ref)] = content
    return kinds, rows


def cited_entries(conn, kind: str, refs: list[str]) -> dict[str, tuple]:
    """ref -> (n, at, prev_sha256, entry_sha256) of the entries of ``kind`` for ``refs``."""
    out = {}
    for i in range(0, len(refs), _CHUNK):
        part = refs[i:i + _CHUNK]
        for ref, *rest in conn.execute(
                "SELECT ref, n, at, prev_sha256, entry_sha256 FROM trail WHERE kind != 'records' "
                f"AND kind = ? AND ref IN ({','.join('?' * len(part))}) ORDER BY n",
                [kind, *part]):
            out[ref] = tuple(rest)
    return out


def entry_at(conn, n: int) -> tuple | None:
    """(n, at, kind, ref, entry_sha256) of entry n, or None."""
    return conn.execute("SELECT n, at, kind, ref, entry_sha256 FROM trail WHERE n = ?",
                        (n,)).fetchone()


def backfill(conn) -> int:
    """Entries for the rows of a database written before the trail, in a fixed order:
    records by seq (one ``records`` entry per run of records received at the same instant,
    as their ingest job wrote them, at most 10,000 each), then voids by (voided_at, seq),
    alerts by id, actions by id; each entry's ``at`` is its rows' own time. Returns the
    number of entries appended."""
    count = 0
    n, prev = head(conn)
    run: list[tuple] = []
    for row in conn.execute(f"SELECT {RECORD_COLUMNS} FROM records ORDER BY seq").fetchall():
        if run and (row[RECEIVED] != run[-1][RECEIVED] or len(run) >= 10_000):
            prev, n, count = _backfill_run(conn, n, prev, run), n + 1, count + 1
            run = []
        run.append(tuple(row))
    if run:
        prev, n, count = _backfill_run(conn, n, prev, run), n + 1, count + 1
    for row in conn.execute("SELECT seq, record_id, voided_at, voided_by, void_reason FROM "
                            "records WHERE void != 0 ORDER BY voided_at, seq").fetchall():
        append_entry(conn, "void", void_content(*row), row[2] or "", ref=row[0])
        count += 1
    for row in conn.execute("SELECT alert_id, kind, facility_id, cycle, created_at, detail "
                            "FROM alerts ORDER BY alert_id").fetchall():
        append_entry(conn, alert_entry_kind(row[1]), alert_content(*row), row[4], ref=row[0])
        count += 1
    for row in conn.execute("SELECT id, at, key_label, role, action, facility_id, cycle, "
                            "target, detail FROM actions ORDER BY id").fetchall():
        append_entry(conn, "action", action_content(*row), row[1], ref=row[0])
        count += 1
    return count


def _backfill_run(conn, n: int, prev: str, run: list[tuple]) -> str:
    conn.executemany("UPDATE records SET trail_n = ? WHERE seq = ?",
                     [(n + 1, row[SEQ]) for row in run])
    return append_records(conn, n, prev, run, run[0][RECEIVED])


def entries_by_number(conn, numbers: list) -> dict[int, dict]:
    """n -> {n, at, kind, ref, entry_sha256} for the given entry numbers (others ignored)."""
    wanted = [n for n in numbers if isinstance(n, int)]
    out = {}
    for i in range(0, len(wanted), _CHUNK):
        part = wanted[i:i + _CHUNK]
        for n, at, kind, ref, digest in conn.execute(
                "SELECT n, at, kind, ref, entry_sha256 FROM trail WHERE n IN "
                f"({','.join('?' * len(part))})", part):
            out[n] = {"n": n, "at": at, "kind": kind, "ref": ref, "entry_sha256": digest}
    return out


def decision_entry(conn, facility_id: str, cycle: int) -> dict | None:
    """The entry of the cycle's latest decision (flagged, cleared or decision revised): the
    head of the chain right after that decision was appended; None if there is none."""
    row = conn.execute(
        "SELECT t.n, t.at, t.entry_sha256, a.alert_id, a.kind FROM alerts a JOIN trail t ON "
        "t.kind = 'decision' AND t.ref = CAST(a.alert_id AS TEXT) WHERE a.facility_id = ? "
        "AND a.cycle = ? AND a.kind IN ('flagged', 'cleared', 'decision_revised') "
        "ORDER BY a.alert_id DESC LIMIT 1", (facility_id, cycle)).fetchone()
    if row is None:
        return None
    return {"n": row[0], "at": row[1], "entry_sha256": row[2], "alert_id": row[3],
            "alert_kind": row[4]}


def records_by_seq(conn, seqs: list) -> list[dict]:
    """The stored records with the given seq numbers, with their trail_n."""
    wanted = [s for s in seqs if isinstance(s, int)]
    out = []
    for i in range(0, len(wanted), _CHUNK):
        part = wanted[i:i + _CHUNK]
        cur = conn.execute(f"SELECT * FROM records WHERE seq IN ({','.join('?' * len(part))})",
                           part)
        names = [c[0] for c in cur.description]
        out += [dict(zip(names, r)) for r in cur.fetchall()]
    return out
