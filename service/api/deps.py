"""Shared dependencies: the Monitor of this app, and key-based roles."""
from __future__ import annotations

import hmac
from typing import Annotated

from fastapi import Depends, Path, Query, Request

from ..operations import Monitor
from ..store import hash_key
from .problems import AuthProblem


class RateLimited(Exception):
    def __init__(self, wait_s: float):
        super().__init__(f"rate limited for {wait_s:.2f} s")
        self.wait_s = wait_s

RANK = {"field": 0, "analyst": 1, "admin": 2}


# Dependencies are async: they only read memory or one indexed row, and a sync dependency
# would cost a thread hop on every request.
async def monitor(request: Request) -> Monitor:
    return request.app.state.monitor


def _refused(request: Request, detail: str) -> AuthProblem:
    """The 401 for a request without a usable key; such requests share one bucket per client
    address, so guessing keys is rate-limited too (429 once it is empty)."""
    client = request.client.host if request.client else "?"
    wait = request.app.state.buckets.take("no key from " + client)
    if wait > 0:
        return RateLimited(wait)
    return AuthProblem(401, detail)


async def caller(request: Request) -> tuple[str, str]:
    """(label, role) of the key in ``Authorization: Bearer KEY``; 401 otherwise."""
    header = request.headers.get("authorization")
    if not header:
        raise _refused(request, "send an API key as 'Authorization: Bearer KEY'")
    scheme, _, key = header.partition(" ")
    if scheme.lower() != "bearer" or not key.strip():
        raise _refused(request, "the Authorization header must be 'Bearer KEY'")
    digest = hash_key(key.strip())
    row = request.app.state.monitor.store.key_by_hash(digest)
    if row is None or not hmac.compare_digest(row["key_hash"], digest):
        raise _refused(request, "this API key is not known")
    if row["revoked_at"] is not None:
        raise _refused(request, f"this API key was revoked at {row['revoked_at']}")
    if row["expires_at"] is not None and row["expires_at"] <= request.app.state.monitor.clock():
        raise _refused(request, f"this API key expired at {row['expires_at']}; ask an admin "
                                "for a new one")
    wait = request.app.state.buckets.take(str(row["id"]))
    if wait > 0:
        raise RateLimited(wait)
    return row["label"], row["role"]


def require(minimum: str):
    """Dependency: the caller's role ranks at least ``minimum``; 403 otherwise."""
    if minimum == min(RANK, key=RANK.get):
        return caller      # every role passes: spare the hot record route a dependency level

    async def check(actor: tuple[str, str] = Depends(caller)) -> tuple[str, str]:
        if RANK[actor[1]] < RANK[minimum]:
            raise AuthProblem(403, f"this needs a key with role {minimum} or higher; "
                                   f"this key's role is {actor[1]}")
        return actor

    check.seqaudit_role = minimum   # read by api/docs.py for the OpenAPI document
    return check


caller.seqaudit_role = "field"
field_or_above = require("field")
analyst = require("analyst")
admin = require("admin")


# Numbers from URLs stay within SQLite's 64-bit integers (found by fuzzing).
MAX_ID = 2 ** 62
Id = Annotated[int, Path(ge=1, le=MAX_ID)]
Offset = Annotated[int, Query(ge=0, le=MAX_ID, description="rows to skip")]
CycleNo = Annotated[int | None, Query(ge=1, le=MAX_ID)]
