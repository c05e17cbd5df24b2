"""seqaudit keys add|list|revoke"""
from __future__ import annotations

import sys

from ..clock import utc_now
from ..errors import ServiceError
from ..store import Store


def add(db, role: str, label: str) -> int:
    store = Store(db)
    store.migrate()
    _, key = store.add_key(role, label, utc_now())
    print(key)  # only the key on stdout, so that scripts can capture it
    return 0


def list_keys(db) -> int:
    store = Store(db)
    store.migrate()
    rows = store.keys()
    print(f"{'id':>4}  {'role':<8} {'label':<30} {'prefix':<11} {'created':<28} revoked")
    for r in rows:
        print(f"{r['id']:>4}  {r['role']:<8} {r['label'][:30]:<30} {r['prefix'] or '':<11} "
              f"{r['created_at']:<28} {r['revoked_at'] or '-'}")
    return 0


def revoke(db, key_id: int) -> int:
    store = Store(db)
    store.migrate()
    try:
        row = store.revoke_key(key_id, utc_now())
    except ServiceError as exc:
        print(f"seqaudit keys revoke: error: {exc.detail}", file=sys.stderr)
        return 2
    print(f"revoked key {row['id']} ({row['role']}, {row['label']}) at {row['revoked_at']}")
    return 0
