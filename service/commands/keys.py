"""seqaudit keys add|list|revoke"""
from __future__ import annotations

import re
import sys
from datetime import datetime, timedelta, timezone

from ..clock import format_time, normalize_rfc3339, utc_now
from ..errors import ServiceError
from ..store import Store

_SPAN = re.compile(r"^\s*(\d{1,6})\s*([hdw])\s*$")
_UNIT = {"h": timedelta(hours=1), "d": timedelta(days=1), "w": timedelta(weeks=1)}


def expiry(text: str, now: datetime) -> str:
    """The instant a key given ``--expires text`` stops working, as UTC text: a span from
    ``now`` (``90d``, ``12h``, ``2w``) or an RFC 3339 date-time. ValueError if neither."""
    span = _SPAN.match(text)
    if span:
        if int(span.group(1)) == 0:
            raise ValueError(f"--expires must be a span longer than zero, got {text!r}")
        return format_time(now + int(span.group(1)) * _UNIT[span.group(2)])
    try:
        return normalize_rfc3339(text)[1]
    except ValueError:
        raise ValueError(f"--expires must be a span such as 90d, 12h or 2w, or an RFC 3339 "
                         f"date-time such as 2027-03-01T00:00:00Z; got {text!r}") from None


def add(db, role: str, label: str, expires: str | None = None) -> int:
    now = datetime.now(timezone.utc)
    try:
        until = None if expires is None else expiry(expires, now)
    except ValueError as exc:
        print(f"seqaudit keys add: error: {exc}", file=sys.stderr)
        return 2
    store = Store(db)
    store.migrate()
    try:
        _, key = store.add_key(role, label, format_time(now), expires_at=until)
    except ServiceError as exc:
        print(f"seqaudit keys add: error: {exc.detail}", file=sys.stderr)
        return 2
    print(key)  # only the key on stdout, so that scripts can capture it
    if until is not None:
        print(f"the key expires at {until}", file=sys.stderr)
    return 0


def list_keys(db) -> int:
    store = Store(db)
    store.migrate()
    rows = store.keys()
    now = utc_now()
    print(f"{'id':>4}  {'role':<8} {'label':<30} {'prefix':<11} {'created':<28} "
          f"{'expires':<28} revoked")
    for r in rows:
        ends = r["expires_at"] or "-"
        if r["expires_at"] and r["expires_at"] <= now:
            ends = "expired " + r["expires_at"][:10]
        print(f"{r['id']:>4}  {r['role']:<8} {r['label'][:30]:<30} {r['prefix'] or '':<11} "
              f"{r['created_at']:<28} {ends:<28} {r['revoked_at'] or '-'}")
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
