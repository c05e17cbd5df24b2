"""Send due webhook deliveries from the outbox, with exponential backoff and jitter.

Each attempt is bounded as a whole (``timeout_s`` covers connecting, sending and reading the
whole answer, however slowly a receiver trickles it). Different subscriptions are served at
the same time (at most ``parallel`` at once); one subscription's deliveries go out in order,
and after one of them fails the rest of that subscription wait as long as its retry does,
without an attempt being counted: a slow or dead receiver costs one deadline per retry
period and nobody else's time.
"""
from __future__ import annotations

import asyncio
import json
import random
import time
from datetime import timedelta
from typing import Callable

from ..clock import format_time, parse_rfc3339
from ..settings import DeliverySettings
from ..store import Store
from ..webhooks import headers

#: A delivery is given up only after this many attempts, even if its window has run out
#: (a delivery that waited, e.g. while the service was down, still gets a real retry).
MIN_ATTEMPTS_BEFORE_GIVING_UP = 2


def retry_delay(attempts: int, cfg: DeliverySettings, rng: random.Random) -> float:
    """Seconds before attempt ``attempts + 1``: cfg.first_retry_s * 2**(attempts-1), capped at
    cfg.max_delay_s, times a jitter factor in [0.5, 1] so receivers are not hit in waves."""
    base = min(cfg.first_retry_s * (2 ** max(attempts - 1, 0)), cfg.max_delay_s)
    return base * (0.5 + 0.5 * rng.random())


def deliver_due(store: Store, http, cfg: DeliverySettings, clock: Callable[[], str],
                rng: random.Random | None = None) -> dict[str, int]:
    """Send every due delivery once (a plain function: runs its own event loop).

    ``http`` is an ``httpx2.AsyncClient`` to send with, or None for a fresh one per run.

    Outcomes: 2xx delivered; 410 Gone disables the subscription; anything else (timeouts,
    connection errors, 5xx, other 4xx) is retried until ``cfg.give_up_after_s`` has passed
    between the start of the delivery's window and the start of an attempt (and at least
    two attempts were made), then marked failed with an alert to analysts.
    """
    rng = rng or random.Random()
    counts = {"delivered": 0, "retry": 0, "failed": 0, "gone": 0}
    by_hook: dict[int, list[dict]] = {}
    for item in store.due_deliveries(clock(), cfg.batch):
        by_hook.setdefault(item["webhook_id"], []).append(item)
    if by_hook:
        asyncio.run(_run(store, http, cfg, clock, rng, list(by_hook.values()), counts))
    return counts


async def _run(store, http, cfg, clock, rng, groups, counts) -> None:
    import httpx2
    client = http or httpx2.AsyncClient(follow_redirects=False)
    gate = asyncio.Semaphore(max(1, cfg.parallel))
    try:
        async def serve(items: list[dict]) -> None:
            async with gate:
                for i, item in enumerate(items):
                    outcome, next_at = await _attempt(store, client, cfg, clock, rng, item)
                    counts[outcome] += 1
                    if outcome != "delivered":
                        # the rest wait with the retry (410: they were cancelled with the
                        # subscription); waiting is not an attempt
                        if next_at is not None:
                            store.defer_deliveries([x["id"] for x in items[i + 1:]], next_at)
                        break

        await asyncio.gather(*(serve(items) for items in groups))
    finally:
        if http is None:
            await client.aclose()


async def _attempt(store, client, cfg, clock, rng, item: dict) -> tuple[str, str | None]:
    """One attempt, recorded; (outcome, when a retry is due or None)."""
    begun = clock()
    stamp = int(parse_rfc3339(begun).timestamp())
    hdrs = headers(item["secret"], item["msg_id"], stamp, item["payload"])
    started = time.perf_counter()
    code, error = None, None
    try:
        async with asyncio.timeout(cfg.timeout_s):
            resp = await client.post(item["url"], content=item["payload"].encode("utf-8"),
                                     headers=hdrs, timeout=cfg.timeout_s)
        code = resp.status_code
        if not 200 <= code < 300:
            error = f"HTTP {code}"
    except TimeoutError:
        error = f"no complete answer within {cfg.timeout_s:g} s"
    except Exception as exc:  # refused connections, bad URLs, protocol errors: all retried
        error = f"{type(exc).__name__}: {exc}"[:500]
    duration_ms = 1000 * (time.perf_counter() - started)
    at = clock()
    at_dt = parse_rfc3339(at)
    failed_alert, disable, next_at = None, None, None
    if code is not None and 200 <= code < 300:
        outcome = "delivered"
    elif code == 410:
        outcome, disable = "gone", "receiver answered 410 Gone"
    else:
        elapsed = (parse_rfc3339(begun) - parse_rfc3339(item["window_start"])).total_seconds()
        if (elapsed >= cfg.give_up_after_s
                and item["attempts"] + 1 >= MIN_ATTEMPTS_BEFORE_GIVING_UP):
            outcome = "failed"
            alert = json.loads(item["payload"])["data"]["alert"]
            failed_alert = {"facility_id": alert["facility_id"], "cycle": alert["cycle"],
                            "webhook_id": item["webhook_id"], "delivery_id": item["id"],
                            "alert_id": item["alert_id"], "attempts": item["attempts"] + 1,
                            "last_error": error, "url": item["url"]}
        else:
            outcome = "retry"
            delay = retry_delay(item["attempts"] + 1, cfg, rng)
            next_at = format_time(at_dt + timedelta(seconds=delay))
    store.record_attempt(item["id"], at, code, error, duration_ms, outcome, next_at,
                         failed_alert=failed_alert, disable_reason=disable)
    return outcome, next_at
