"""A deadline for reading each request: uvicorn's HTTP protocols wait without limit for the
rest of a request's headers or body, so a client sending one byte at a time could hold a
connection (and a worker's slot) for as long as it liked.

:class:`DeadlineHttpToolsProtocol` (what `seqaudit serve` runs; httptools' C parser costs
less per request than h11's pure-Python one) arms a timer when a connection opens and again
whenever it is ready for the next request; if the request's headers and body have not fully
arrived when it fires, the connection is answered 408 (if nothing was sent yet) and closed. The limit is ``request_read_timeout_s`` (setting, seconds;
0 turns it off), passed to workers in the ``SEQAUDIT_REQUEST_READ_TIMEOUT_S`` environment
variable and read once per process.
"""
from __future__ import annotations

import functools
import os

from uvicorn.protocols.http.httptools_impl import HttpToolsProtocol

ENV = "SEQAUDIT_REQUEST_READ_TIMEOUT_S"
_ANSWER = (b"HTTP/1.1 408 Request Timeout\r\ncontent-type: application/problem+json\r\n"
           b"connection: close\r\ncontent-length: %d\r\n\r\n%s")
_BODY = (b'{"type":"/problems/request-timeout","title":"Request timeout","status":408,'
         b'"detail":"the request did not arrive in time"}')


@functools.cache
def read_timeout_s() -> float:
    try:
        return max(0.0, float(os.environ.get(ENV, "30")))
    except ValueError:
        return 30.0


class DeadlineHttpToolsProtocol(HttpToolsProtocol):
    """uvicorn's httptools protocol with the read deadline: the timer is armed when the
    connection opens and whenever it is ready for the next request, and is cut short only by
    the whole of the awaited request (headers and body) having arrived."""

    def connection_made(self, transport) -> None:
        super().connection_made(transport)
        self._arm_read_deadline()

    def on_message_complete(self) -> None:
        super().on_message_complete()
        self._request_arrived = True

    def on_response_complete(self) -> None:
        super().on_response_complete()
        if not self.transport.is_closing():
            self._arm_read_deadline()

    def connection_lost(self, exc) -> None:
        timer = getattr(self, "_read_deadline", None)
        if timer is not None:
            timer.cancel()
        super().connection_lost(exc)

    def _arm_read_deadline(self) -> None:
        timer = getattr(self, "_read_deadline", None)
        if timer is not None:
            timer.cancel()
        # a pipelined request that had fully arrived is being answered now: nothing to await
        cycle = self.cycle
        self._request_arrived = bool(self.pipeline) or (
            cycle is not None and not cycle.response_complete and not cycle.more_body)
        limit = read_timeout_s()
        self._read_deadline = self.loop.call_later(limit, self._read_deadline_passed) \
            if limit > 0 else None

    def _read_deadline_passed(self) -> None:
        self._read_deadline = None
        if self.transport.is_closing() or self._request_arrived:
            return
        # a connection that has had an answer (an idle keep-alive one) is closed without another
        answered = self.cycle is not None and self.cycle.response_started
        if not answered:
            self.transport.write(_ANSWER % (len(_BODY), _BODY))
        self.transport.close()
