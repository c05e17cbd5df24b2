"""Run a job once per tick across processes: a lease row, then a (job, tick) claim."""
from __future__ import annotations

import logging
import math
import os
import socket
import time
from typing import Callable

from ..store import Store

log = logging.getLogger("seqaudit.jobs")


def holder_id() -> str:
    return f"{socket.gethostname()}:{os.getpid()}"


def run_once_per_tick(store: Store, job: str, period_s: float, fn: Callable[[], object],
                      clock: Callable[[], str], now_s: Callable[[], float] = time.time,
                      lease_ttl_s: float = 120.0, holder: str | None = None) -> bool:
    """Run ``fn`` if this process holds the job's lease and nobody ran this tick yet.

    The lease makes the job run in one process at a time; a crashed holder's lease
    expires after ``lease_ttl_s``. The tick claim (job, floor(now / period)) makes each
    tick run once even when two processes' timers fire a moment apart.
    """
    holder = holder or holder_id()
    now = now_s()
    if not store.acquire_lease(f"job:{job}", holder, now, lease_ttl_s):
        return False
    try:
        tick = int(math.floor(now / period_s))
        if not store.claim_tick(job, tick, holder, clock()):
            return False
        outcome = "ok"
        try:
            fn()
        except Exception as exc:  # logged and recorded; the next tick tries again
            outcome = f"error: {type(exc).__name__}: {exc}"[:500]
            log.exception("job %s failed", job)
        store.finish_tick(job, tick, clock(), outcome)
        return True
    finally:
        store.release_lease(f"job:{job}", holder)
