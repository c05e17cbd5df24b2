#!/usr/bin/env python
"""Case file of a cycle decided by one large record: time and peak memory.

For each size (default 10,000 and 100,000 units) builds a fresh SQLite file with one facility
whose first record holds that many units (enough of them nonconforming to flag the cycle at
once), then times building the case file (JSON dict, with the exact inference) and rendering
its PDF, measuring the peak of Python-level allocations with tracemalloc (numpy's arrays
included) and the process's peak resident size from resource.getrusage.

Optionally (--post N) adds N records after the decision and times the case file again (the PDF
summarises post-decision records; the JSON lists them).

Run:  .venv/bin/python scripts/bench_casefile.py [--units 10000 100000] [--post 100000]
Target: the case file of a cycle decided by one 10,000-unit record in well under a second.
"""
from __future__ import annotations

import argparse
import resource
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from service.casefile import build_casefile  # noqa: E402
from service.casefile.pdf import render_pdf  # noqa: E402
from service.clock import utc_now  # noqa: E402
from service.operations import PlanBook  # noqa: E402
from service.settings import load_settings  # noqa: E402
from service.store import RecordIn, Store  # noqa: E402

TARGET_S = 1.0


def measure(fn):
    """(result, seconds, peak bytes): timed in one run, memory traced in a second run
    (tracemalloc slows allocation-heavy code such as matplotlib several times)."""
    t0 = time.perf_counter()
    out = fn()
    seconds = time.perf_counter() - t0
    tracemalloc.start()
    try:
        fn()
        return out, seconds, tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def build(folder: Path, units: int, post: int) -> Store:
    settings = load_settings(db_path=folder / f"bench-{units}-{post}.db")
    plans = PlanBook(settings.plans)
    store = Store(settings.db_path)
    store.migrate()
    now = utc_now()
    store.add_facility("SA-BIG", "Big agency", "dispensers", plans.snapshot("dispensers"), now,
                       ("bench", "admin"))
    bad = units // 10      # 10 % nonconforming against p1 = 8 %: flagged by this one record
    store.ingest([RecordIn("big-1", "SA-BIG", "2026-11-30T08:00:00Z", "2026-11-30T08:00:00Z",
                           units, bad)], "bench", now)
    for start in range(0, post, 1000):
        items = [RecordIn(f"after-{i}", "SA-BIG", "2026-11-30T09:00:00Z",
                          "2026-11-30T09:00:00Z", 1, 0)
                 for i in range(start, min(post, start + 1000))]
        store.ingest(items, "bench", now)
    return store


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--units", type=int, nargs="+", default=[10_000, 100_000])
    ap.add_argument("--post", type=int, default=0,
                    help="records after the decision (in the 10,000-unit cycle's case)")
    args = ap.parse_args()
    folder = Path(tempfile.mkdtemp(prefix="seqaudit-bench-casefile-"))
    cases = [(u, 0) for u in args.units] + ([(10_000, args.post)] if args.post else [])
    print(f"{'units':>8} {'post':>7} {'json s':>8} {'json peak MB':>13} {'pdf s':>7} "
          f"{'pdf peak MB':>12} {'records in JSON':>16}")
    ok = True
    for units, post in cases:
        store = build(folder, units, post)
        cf, t_json, m_json = measure(lambda: build_casefile(store, "SA-BIG", 1))
        pdf, t_pdf, m_pdf = measure(lambda: render_pdf(cf))
        assert cf["decision"] == "flagged" and pdf.startswith(b"%PDF")
        print(f"{units:>8} {post:>7} {t_json:>8.3f} {m_json / 1e6:>13.1f} {t_pdf:>7.2f} "
              f"{m_pdf / 1e6:>12.1f} {len(cf['records']):>16}")
        if units == 10_000 and post == 0:
            ok = t_json < TARGET_S
        store.close()
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"process peak resident size {rss:.0f} MB; target: 10,000-unit case file (JSON) "
          f"under {TARGET_S:g} s: {'met' if ok else 'NOT met'}")
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
