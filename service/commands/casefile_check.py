"""seqaudit casefile --check FILE.json --db PATH: confirm a case file against the database."""
from __future__ import annotations

import json
import sys
from pathlib import Path

from ..casefile.trail_refs import check_casefile
from ..store import Store

SHOWN = 20


def run(path: Path, db: Path) -> int:
    """0 if the case file matches the database and the database's trail verifies; 1 if not;
    2 if the file cannot be read as a JSON case file."""
    try:
        casefile = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        print(f"seqaudit casefile: error: cannot read {path} as JSON: {exc}", file=sys.stderr)
        return 2
    if not isinstance(casefile, dict):
        print(f"seqaudit casefile: error: {path} is not a case file (a JSON object)",
              file=sys.stderr)
        return 2
    store = Store(db)
    store.migrate()
    problems, summary = check_casefile(store, casefile)
    if not problems:
        print(summary)
        return 0
    for p in problems[:SHOWN]:
        print(f"CASEFILE {p}", file=sys.stderr)
    if len(problems) > SHOWN:
        print(f"CASEFILE ... and {len(problems) - SHOWN} more", file=sys.stderr)
    print(f"case file {path} does NOT match the database {db}: {len(problems)} problem(s); "
          f"the first: {problems[0]}")
    return 1
