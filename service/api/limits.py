"""Request limits: a body-size cap for every route and a per-key rate limit.

The rate limit is a token bucket per API key held in each worker process (with N workers a
key may get up to N times the rate); it guards against a runaway client, not against a
determined attacker, who is stopped by the key itself.
"""
from __future__ import annotations

import json
import math
import threading
import time

from starlette.types import ASGIApp, Receive, Scope, Send

from .problems import PROBLEM_TYPE


class TokenBuckets:
    def __init__(self, rate_per_s: float, burst: float, clock=time.monotonic):
        self.rate, self.burst, self.clock = float(rate_per_s), float(burst), clock
        self._state: dict[str, tuple[float, float]] = {}
        self._lock = threading.Lock()

    def take(self, key: str) -> float:
        """0 if the request may go on, else the seconds to wait before the next one."""
        if self.rate <= 0:
            return 0.0
        now = self.clock()
        with self._lock:
            tokens, last = self._state.get(key, (self.burst, now))
            tokens = min(self.burst, tokens + (now - last) * self.rate)
            if tokens >= 1.0:
                self._state[key] = (tokens - 1.0, now)
                return 0.0
            self._state[key] = (tokens, now)
            return (1.0 - tokens) / self.rate


class _TooLarge(Exception):
    pass


class BodyLimit:
    """ASGI middleware: answer 413 once a request body passes ``limit`` bytes."""

    def __init__(self, app: ASGIApp, limit: int):
        self.app, self.limit = app, limit

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        declared = dict(scope.get("headers") or []).get(b"content-length")
        if declared is not None and declared.isdigit() and int(declared) > self.limit:
            await self._refuse(scope, send, int(declared))
            return
        seen = 0
        started = False

        async def counting_receive():
            nonlocal seen
            message = await receive()
            if message["type"] == "http.request":
                seen += len(message.get("body", b""))
                if seen > self.limit:
                    raise _TooLarge()
            return message

        async def tracking_send(message):
            nonlocal started
            if message["type"] == "http.response.start":
                started = True
            await send(message)

        try:
            await self.app(scope, counting_receive, tracking_send)
        except _TooLarge:
            if not started:
                await self._refuse(scope, send, seen)

    async def _refuse(self, scope: Scope, send: Send, size: int) -> None:
        body = json.dumps({"type": "/problems/too-large", "title": "Request too large",
                           "status": 413, "detail": f"the body is larger than {self.limit} bytes "
                           f"(at least {size}); send fewer records per request",
                           "instance": scope.get("path", "")}).encode()
        await send({"type": "http.response.start", "status": 413,
                    "headers": [(b"content-type", PROBLEM_TYPE.encode()),
                                (b"content-length", str(len(body)).encode()),
                                (b"connection", b"close")]})
        await send({"type": "http.response.body", "body": body})


def retry_after(seconds: float) -> str:
    return str(max(1, math.ceil(seconds)))
