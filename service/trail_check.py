"""Check the trail: every link of the chain, and every chained table against its entries.

Used by ``seqaudit verify`` and ``seqaudit casefile --check``. The walk reads the entries in
order once and the records beside them in seq order (each ingest job's records are one
``records`` entry and are numbered in seq order, so the two streams are merged without
holding either in memory); the other chained tables (voids, alerts, actions: few rows) are
read into a dict first.
"""
from __future__ import annotations

from dataclasses import dataclass, field

from .store import trail as store_trail
from .trail_hash import RECORD_ID, SEQ, entry_sha256, records_content


@dataclass
class TrailReport:
    entries: int = 0
    head_n: int = 0
    head_sha256: str = ""
    problems: list[dict] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.problems

    @property
    def first(self) -> dict | None:
        """The problem of the lowest entry number (rows without an entry come last)."""
        if not self.problems:
            return None
        return min(self.problems, key=lambda p: (p["n"] is None, p["n"] or 0))


def _what(kind: str, ref, record_id: str | None = None) -> str:
    if kind == "records":
        return f"records seq {ref}"
    if kind == "record":
        return f"record seq {ref}" + (f" ({record_id!r})" if record_id is not None else "")
    if kind == "void":
        return f"void of record seq {ref}"
    if kind in ("decision", "alert"):
        return f"{kind} (alert {ref})"
    return f"{kind} {ref}" if ref is not None else kind


def check_trail(conn) -> TrailReport:
    """Walk the whole trail of the database on ``conn`` (a read snapshot is enough)."""
    report = TrailReport()
    problems = report.problems
    kinds, rows = store_trail.sourced_rows(conn)
    records = iter(store_trail.record_rows(conn))      # (trail_n, *RECORD_FIELDS values)
    upcoming = next(records, None)
    strays: list[tuple] = []                           # records outside their entry
    last_n, last_hash = 0, store_trail.GENESIS
    for n, at, kind, ref, content, prev, stored in store_trail.entries(conn):
        report.entries += 1
        if n != last_n + 1:
            problems.append({"n": n, "kind": kind, "ref": ref, "problem":
                             f"entry {n} follows entry {last_n}: entries are missing or "
                             "were inserted"})
        elif prev != last_hash:
            problems.append({"n": n, "kind": kind, "ref": ref, "problem":
                             f"entry {n} ({_what(kind, ref)}) does not carry the hash of entry "
                             f"{last_n} (the trail was edited at or before entry {n})"})
        if kind == "records":
            while upcoming is not None and (upcoming[0] is None or upcoming[0] < n):
                strays.append(upcoming)
                upcoming = next(records, None)
            group = []
            while upcoming is not None and upcoming[0] == n:
                group.append(upcoming[1:])
                upcoming = next(records, None)
            if not group:
                problems.append({"n": n, "kind": kind, "ref": ref, "problem":
                                 f"entry {n} ({_what(kind, ref)}): none of its records is in "
                                 "the records table"})
            elif entry_sha256(n, kind, at, records_content(group), prev) != stored:
                ids = ", ".join(repr(g[RECORD_ID]) for g in group[:3]) + (", ..." if len(group) > 3
                                                                   else "")
                problems.append({"n": n, "kind": kind, "ref": ref, "problem":
                                 f"entry {n} ({_what(kind, ref)}: {len(group)} record(s), "
                                 f"{ids}) does not match the records' rows: a record or the "
                                 "entry was edited, or records were removed"})
        elif content is None:
            problems.append({"n": n, "kind": kind, "ref": ref,
                             "problem": f"entry {n} ({_what(kind, ref)}) has no content"})
        else:
            body = content.encode("utf-8")
            if entry_sha256(n, kind, at, body, prev) != stored:
                problems.append({"n": n, "kind": kind, "ref": ref, "problem":
                                 f"entry {n} ({_what(kind, ref)}) does not match its own "
                                 "content: the trail was edited"})
            if kind in kinds:
                have = rows.pop((kind, ref), None)
                if have is None:
                    problems.append({"n": n, "kind": kind, "ref": ref, "problem":
                                     f"entry {n} ({_what(kind, ref)}): its row is missing "
                                     "from its table (deleted, or the change undone)"})
                elif have != body:
                    problems.append({"n": n, "kind": kind, "ref": ref, "problem":
                                     f"entry {n} ({_what(kind, ref)}) does not match its row: "
                                     "the row was edited"})
        last_n, last_hash = n, stored
    report.head_n, report.head_sha256 = last_n, last_hash
    while upcoming is not None:
        strays.append(upcoming)
        upcoming = next(records, None)
    for row in strays:
        where = ("has no trail entry" if row[0] is None else
                 f"names entry {row[0]}, which does not hold it")
        seq, record_id = row[1 + SEQ], row[1 + RECORD_ID]
        problems.append({"n": None, "kind": "record", "ref": str(seq), "record_id": record_id,
                         "problem": f"{_what('record', seq, record_id)} {where}"})
    for (kind, ref) in sorted(rows):
        problems.append({"n": None, "kind": kind, "ref": ref,
                         "problem": f"{_what(kind, ref)} has no trail entry"})
    return report
