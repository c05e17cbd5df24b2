"""Send due webhook deliveries from the outbox, with exponential backoff and jitter."""
from __future__ import annotations

import json
import random
import time
from datetime import timedelta
from typing import Callable

from ..clock import format_time, parse_rfc3339
from ..settings import DeliverySettings
from ..store import Store
from ..webhooks import headers


def retry_delay(attempts: int, cfg: DeliverySettings, rng: random.Random) -> float:
    """Seconds before attempt ``attempts + 1``: cfg.first_retry_s * 2**(attempts-1), capped at
    cfg.max_delay_s, times a jitter factor in [0.5, 1] so receivers are not hit in waves."""
    base = min(cfg.first_retry_s * (2 ** max(attempts - 1, 0)), cfg.max_delay_s)
    return base * (0.5 + 0.5 * rng.random())


def deliver_due(store: Store, http, cfg: DeliverySettings, clock: Callable[[], str],
                rng: random.Random | None = None) -> dict[str, int]:
    """Send every due delivery once. ``http`` is an httpx2-style client with ``post``.

    Outcomes: 2xx delivered; 410 Gone disables the subscription; anything else (timeouts,
    connection errors, 5xx, other 4xx) is retried until ``cfg.give_up_after_s`` has passed
    since the delivery's window started, then marked failed with an alert to analysts.
    """
    rng = rng or random.Random()
    counts = {"delivered": 0, "retry": 0, "failed": 0, "gone": 0}
    now = clock()
    for item in store.due_deliveries(now, cfg.batch):
        stamp = int(parse_rfc3339(clock()).timestamp())
        hdrs = headers(item["secret"], item["msg_id"], stamp, item["payload"])
        started = time.perf_counter()
        code, error = None, None
        try:
            resp = http.post(item["url"], content=item["payload"].encode("utf-8"), headers=hdrs,
                             timeout=cfg.timeout_s)
            code = resp.status_code
            if not 200 <= code < 300:
                error = f"HTTP {code}"
        except Exception as exc:  # timeouts, refused connections, bad URLs: all retried
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
            elapsed = (at_dt - parse_rfc3339(item["window_start"])).total_seconds()
            if elapsed >= cfg.give_up_after_s:
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
        counts[outcome] += 1
    return counts
