"""seqaudit verify: replay every cycle, then walk the tamper-evident trail."""
from __future__ import annotations

import sys
import time

from ..store import Store
from ..trail_check import check_trail
from ..verify import verify_database

SHOWN = 20


def run(db_path) -> int:
    store = Store(db_path)
    store.migrate()         # a database of an earlier version gets its trail first
    start = time.perf_counter()
    report = verify_database(store)
    took = time.perf_counter() - start
    for m in report.mismatches[:SHOWN]:
        print(f"MISMATCH {m}", file=sys.stderr)
    print(f"replayed {report.records} records in {report.cycles} cycles in {took:.2f} s: "
          + ("every stored state equals its replay" if report.ok
             else f"{len(report.mismatches)} cycle(s) differ"))
    start = time.perf_counter()
    trail = check_trail(store._conn())
    took = time.perf_counter() - start
    ordered = sorted(trail.problems, key=lambda p: (p["n"] is None, p["n"] or 0))
    for p in ordered[:SHOWN]:
        print(f"TRAIL {p['problem']}", file=sys.stderr)
    if len(ordered) > SHOWN:
        print(f"TRAIL ... and {len(ordered) - SHOWN} more", file=sys.stderr)
    head = (f"head entry {trail.head_n} sha256 {trail.head_sha256}" if trail.head_n
            else "empty")
    if trail.ok:
        print(f"trail of {trail.entries} entries checked in {took:.2f} s ({head}): every entry "
              "matches its row and the entry before it")
    else:
        print(f"trail of {trail.entries} entries checked in {took:.2f} s ({head}): "
              f"{len(ordered)} problem(s); the first: {trail.first['problem']}")
    return 0 if report.ok and trail.ok else 1
