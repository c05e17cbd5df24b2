"""SQLite trouble as problems a person can act on: a full disk is 503 naming the cause
(not a generic 500), and /readyz runs SQLite's quick integrity check."""
from __future__ import annotations

import logging
import sqlite3
import time

from fastapi import APIRouter, FastAPI, Request
from fastapi.responses import JSONResponse

from ..errors import ServiceError, Unavailable
from ..operations import Monitor

log = logging.getLogger("seqaudit.storage")
router = APIRouter(tags=["health"])

# (text in SQLite's message, problem slug, what to tell the operator, Retry-After seconds)
_CAUSES = (
    ("database or disk is full", "storage-full",
     "the database could not be written: the disk is full (SQLite: {msg}). Nothing of this "
     "request was stored; free space on the volume that holds the database, then retry", 60),
    ("disk i/o error", "storage-error",
     "the database could not be read or written: disk I/O error (SQLite: {msg}). Nothing of "
     "this request was stored; check the volume that holds the database", 60),
    ("readonly database", "storage-read-only",
     "the database is read-only for the service (SQLite: {msg}); check the file's "
     "permissions and the volume's mount", 60),
    ("database is locked", "storage-busy",
     "the database stayed locked by another process beyond the wait (SQLite: {msg}); retry",
     1),
)


def storage_problem(exc: sqlite3.Error) -> Unavailable | None:
    """The problem for a known storage failure, or None (then it stays a 500)."""
    msg = str(exc)
    for text, slug, detail, retry in _CAUSES:
        if text in msg.lower():
            return Unavailable(detail.format(msg=msg), slug=slug, retry_after_s=retry)
    return None


def install(app: FastAPI) -> None:
    @app.exception_handler(sqlite3.OperationalError)
    async def _storage(request: Request, exc: sqlite3.OperationalError):
        problem = storage_problem(exc)
        if problem is None:
            return await request.app.exception_handlers[Exception](request, exc)
        log.error("storage failure on %s %s: %s", request.method, request.url.path, exc)
        # the ServiceError handler in force (the dashboard's own answers HTML on /ui)
        response = await request.app.exception_handlers[ServiceError](request, problem)
        response.headers["Retry-After"] = str(problem.retry_after_s)
        return response


_CHECK_EVERY_S = 10.0   # quick_check reads every page: at most one run per 10 s per worker


@router.get("/readyz", summary="Readiness: SQLite's PRAGMA quick_check on the database "
                               "(no key needed; run at most every 10 s)")
def readyz(request: Request) -> dict:
    state = request.app.state
    last = getattr(state, "quick_check", None)
    if last is None or time.monotonic() - last[0] > _CHECK_EVERY_S:
        m: Monitor = state.monitor
        try:
            rows = m.store.read("PRAGMA quick_check")
            found = [next(iter(r.values())) for r in rows]
        except sqlite3.DatabaseError as exc:
            found = [str(exc)]
        last = state.quick_check = (time.monotonic(), found)
    found = last[1]
    if state.monitor.store.ids_duplicated:
        found = [f"record ids stored twice ({state.monitor.store.merge_failure})"]
    if found != ["ok"]:
        raise Unavailable("PRAGMA quick_check found the database damaged: "
                          + "; ".join(found[:3]) + ". Stop the service and restore the latest "
                          "good backup (seqaudit restore)", slug="storage-corrupt")
    return {"status": "ready", "quick_check": "ok"}
