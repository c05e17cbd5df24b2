#!/usr/bin/env python
"""Dashboard overview with 10,000 facilities: time of the page, in one run.

Builds a fresh SQLite file with N facilities (a share of them with records), signs in, and
times GET /ui/overview for the default sort (LLR position), a status filter, a search and the
last page, through the in-process ASGI app, then prints a table and JSON.

Run:  .venv/bin/python scripts/bench_ui.py [--facilities 10000] [--repeat 5]
Target: each page well under one second (goal 0.25 s).
"""
from __future__ import annotations

import argparse
import json
import re
import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from fastapi.testclient import TestClient  # noqa: E402

from service.api import create_app  # noqa: E402
from service.settings import load_settings  # noqa: E402

TARGET_S = 0.25


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--facilities", type=int, default=10_000)
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args()
    folder = Path(tempfile.mkdtemp(prefix="seqaudit-bench-ui-"))
    base = load_settings(db_path=folder / "bench.db")
    settings = base.with_overrides(schedule=replace(base.schedule, enabled=False))
    app = create_app(settings)
    m = app.state.monitor
    _, key = m.store.add_key("analyst", "bench", m.clock())
    rows = [(f"SA-{i:05d}", f"Agency {i}", "dispensers" if i % 2 else "scales",
             m.plans.snapshot("dispensers" if i % 2 else "scales"))
            for i in range(args.facilities)]
    t0 = time.perf_counter()
    for start in range(0, len(rows), 1000):
        m.store.add_facilities(rows[start:start + 1000], m.clock(), ("bench", "admin"))
    actor = ("bench", "admin")
    recs = [{"record_id": f"r{i}-{k}", "facility_id": f"SA-{i:05d}",
             "observed_at": "2026-11-30T08:00:00Z", "units": 1, "nonconforming": int(k == i % 7)}
            for i in range(0, args.facilities, 3) for k in range(6)]
    for start in range(0, len(recs), 1000):
        m.post_records({"records": recs[start:start + 1000]}, actor, with_state=False)
    print(f"built {args.facilities} facilities and {len(recs)} records in "
          f"{time.perf_counter() - t0:.1f} s")
    pages = {"overview (LLR position)": "/ui/overview",
             "flagged only": "/ui/overview?status=flagged",
             "search": "/ui/overview?q=SA-0777",
             "last page by units": f"/ui/overview?sort=units&page_no={args.facilities // 50}"}
    results = {}
    with TestClient(app) as c:
        token = re.search(r'name="csrf" value="([^"]+)"', c.get("/ui/signin").text).group(1)
        c.post("/ui/signin", data={"key": key, "csrf": token})
        for name, path in pages.items():
            times = []
            for _ in range(args.repeat):
                start = time.perf_counter()
                r = c.get(path)
                times.append(time.perf_counter() - start)
                assert r.status_code == 200, r.text[:300]
            results[name] = {"best_s": min(times), "median_s": sorted(times)[len(times) // 2]}
    print(f"{'page':<28}{'best ms':>10}{'median ms':>12}")
    for name, r in results.items():
        print(f"{name:<28}{1e3 * r['best_s']:>10.1f}{1e3 * r['median_s']:>12.1f}")
    worst = max(r["median_s"] for r in results.values())
    ok = worst < TARGET_S
    print(f"slowest median {1e3 * worst:.0f} ms (target < {1e3 * TARGET_S:.0f} ms): "
          f"{'met' if ok else 'NOT met'}")
    print(json.dumps({"facilities": args.facilities, "pages": results, "target_s": TARGET_S,
                      "target_met": ok}))
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
