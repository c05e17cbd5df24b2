"""Heavy CPU work (case files, plan design and calibration, forecasts) in a bounded pool of
worker processes, so the event loop's process keeps answering records meanwhile.

One :class:`HeavyPool` per app (``app.state.heavy``); routes call :func:`run_heavy`::

    pdf = await run_heavy(request.app.state, casefile_pdf_job, db, fid, cycle, 0.95,
                          key=("casefile.pdf", fid, cycle, 0.95, fingerprint))

* ``fn`` must be a module-level function (it is pickled by reference) and its arguments and
  result picklable; it runs in a worker process at lower CPU priority (``nice``), so on a
  busy machine the record path keeps most of its core.
* At most ``workers`` jobs run at once and at most ``queue`` more wait; beyond that the call
  raises :class:`~service.errors.Busy` (503 with ``Retry-After``) at once.
* A job running longer than ``timeout_s`` is stopped (its process is killed and replaced)
  and the call raises :class:`~service.errors.TimedOut` (503).
* With a ``key`` (a hashable tuple of everything the result depends on) the result is kept
  in a bounded LRU cache and calls with the same key share one run. Keys that depend on the
  database carry a fingerprint read from it (e.g.
  :func:`service.store.fingerprints.cycle_fingerprint`), so a
  void or finding, which changes the fingerprint, is never answered from the cache.
* Errors raised by ``fn`` reach the caller as themselves (domain errors keep their fields).

Workers are started with the ``spawn`` method (a fresh interpreter: no fork of a process
that runs threads); the server starts them when it starts (``warm``), so the imports of the
heavy libraries are not paid by the first request.
"""
from __future__ import annotations

import asyncio
import math
import multiprocessing
import os
import pickle
import time
import traceback
from collections import OrderedDict
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any, Callable, Hashable

from .errors import Busy, TimedOut


@dataclass(frozen=True)
class HeavySettings:
    """[heavy]: the pool of worker processes for CPU-bound work."""

    workers: int = 1                 # processes running jobs at once (per server worker)
    queue: int = 4                   # further jobs that may wait; more get 503 at once
    timeout_s: float = 120.0         # a job running longer is stopped (503)
    nice: int = 10                   # CPU priority of the workers (0 = same as the server)
    cache_entries: int = 64          # results kept by key
    cache_mb: float = 64.0           # ... and at most this many megabytes of them


def _child(conn, nice: int) -> None:
    """A worker process: run (fn, args) messages until told to stop or the pipe closes."""
    if nice:
        try:
            os.nice(nice)
        except OSError:
            pass
    while True:
        try:
            msg = conn.recv_bytes()
        except (EOFError, OSError):
            return
        if not msg:
            return
        try:
            fn, args = pickle.loads(msg)
            out = pickle.dumps((True, fn(*args)), protocol=pickle.HIGHEST_PROTOCOL)
        except BaseException as exc:  # noqa: BLE001 - every failure goes back to the caller
            try:
                out = pickle.dumps((False, exc), protocol=pickle.HIGHEST_PROTOCOL)
                pickle.loads(out)
            except Exception:
                out = pickle.dumps((False, RuntimeError(
                    "heavy job failed: " + "".join(traceback.format_exception_only(exc)).strip())))
        try:
            conn.send_bytes(out)
        except (BrokenPipeError, OSError):
            return


class _Slot:
    """One worker process and the pipe to it; restarted when it was killed or died."""

    def __init__(self, ctx, nice: int):
        self._ctx, self._nice = ctx, nice
        self.proc = self.conn = None

    def ensure(self) -> None:
        if self.proc is not None and self.proc.is_alive():
            return
        self.discard()
        parent, child = self._ctx.Pipe()
        proc = self._ctx.Process(target=_child, args=(child, self._nice), daemon=True,
                                 name="seqaudit-heavy")
        proc.start()
        child.close()
        self.proc, self.conn = proc, parent

    def call(self, payload: bytes) -> tuple[bytes, int]:
        """Blocking: send one job and wait for its answer (raises EOFError if killed)."""
        self.ensure()
        self.conn.send_bytes(payload)
        answer = self.conn.recv_bytes()
        return answer, len(answer)

    def kill(self) -> None:
        proc = self.proc
        if proc is not None and proc.is_alive():
            proc.kill()

    def discard(self) -> None:
        if self.conn is not None:
            self.conn.close()
        if self.proc is not None:
            self.proc.join(5)
        self.proc = self.conn = None

    def stop(self) -> None:
        if self.conn is not None and self.proc is not None and self.proc.is_alive():
            try:
                self.conn.send_bytes(b"")
            except OSError:
                pass
            self.proc.join(2)
            self.kill()
        self.discard()


class HeavyPool:
    """A bounded pool of worker processes with a timeout and a result cache (see module)."""

    def __init__(self, settings: HeavySettings | None = None):
        s = self.settings = settings or HeavySettings()
        # spawn: a fresh interpreter per worker (no fork of a process that runs threads);
        # a fork server fails to start inside uvicorn's own spawned worker processes
        ctx = multiprocessing.get_context("spawn")
        self._slots = [_Slot(ctx, s.nice) for _ in range(max(1, s.workers))]
        self._free = list(self._slots)
        self._threads: ThreadPoolExecutor | None = None
        self._waiting: list[asyncio.Future] = []
        self._admitted = 0                     # running + waiting jobs
        self._running: dict[Hashable, asyncio.Future] = {}
        self._cache: OrderedDict[Hashable, tuple[Any, int]] = OrderedDict()
        self._cache_bytes = 0
        self._mean_s = 1.0                     # running mean job time, for Retry-After
        self.stats = {"runs": 0, "cache_hits": 0, "shared": 0, "busy": 0, "timed_out": 0}

    # -- public -----------------------------------------------------------------------
    @property
    def capacity(self) -> int:
        return len(self._slots) + self.settings.queue

    def warm(self) -> None:
        """Start the worker processes now (the server does, so the first job is fast)."""
        for slot in self._slots:
            slot.ensure()

    async def run(self, fn: Callable, *args, key: Hashable | None = None,
                  timeout_s: float | None = None):
        """``fn(*args)`` in a worker process; see the module docstring."""
        if key is not None:
            hit = self._cache.get(key)
            if hit is not None:
                self._cache.move_to_end(key)
                self.stats["cache_hits"] += 1
                return hit[0]
            shared = self._running.get(key)
            if shared is not None:
                self.stats["shared"] += 1
                return await asyncio.shield(shared)
        if self._admitted >= self.capacity:
            self.stats["busy"] += 1
            raise Busy(f"the service is busy with {self._admitted} heavy jobs (case files, "
                       "plan designs); try again shortly", retry_after=self._retry_after())
        payload = pickle.dumps((fn, args), protocol=pickle.HIGHEST_PROTOCOL)
        self._admitted += 1
        task = asyncio.ensure_future(self._execute(payload, key, timeout_s
                                                   or self.settings.timeout_s))
        task.add_done_callback(_retrieve)
        if key is not None:
            self._running[key] = task
        return await asyncio.shield(task)

    def forget(self, match: Callable[[Hashable], bool] | None = None) -> int:
        """Drop cached results whose key matches (all if no test); the count dropped."""
        gone = [k for k in self._cache if match is None or match(k)]
        for k in gone:
            self._cache_bytes -= self._cache.pop(k)[1]
        return len(gone)

    def close(self) -> None:
        """Stop the worker processes (the app's lifespan ends); the pool starts them again
        if it is used after this (a test client may enter the lifespan more than once)."""
        if self._threads is not None:
            self._threads.shutdown(wait=False, cancel_futures=True)
            self._threads = None
        for slot in self._slots:
            slot.stop()

    # -- inside -----------------------------------------------------------------------
    def _retry_after(self) -> int:
        rounds = math.ceil(max(1, self._admitted) / len(self._slots))
        return max(1, min(int(self.settings.timeout_s), math.ceil(rounds * self._mean_s)))

    async def _execute(self, payload: bytes, key, timeout_s: float):
        try:
            slot = await self._take_slot()
            try:
                return await self._on_slot(slot, payload, key, timeout_s)
            finally:
                self._give_back(slot)
        finally:
            self._admitted -= 1
            if key is not None:
                self._running.pop(key, None)

    async def _take_slot(self) -> _Slot:
        if self._free:
            return self._free.pop()
        waiter = asyncio.get_running_loop().create_future()
        self._waiting.append(waiter)
        return await waiter

    def _give_back(self, slot: _Slot) -> None:
        while self._waiting:
            waiter = self._waiting.pop(0)
            if not waiter.done():
                waiter.set_result(slot)
                return
        self._free.append(slot)

    async def _on_slot(self, slot: _Slot, payload: bytes, key, timeout_s: float):
        loop = asyncio.get_running_loop()
        start = time.monotonic()
        if self._threads is None:
            self._threads = ThreadPoolExecutor(max_workers=len(self._slots),
                                               thread_name_prefix="seqaudit-heavy")
        call = loop.run_in_executor(self._threads, slot.call, payload)
        try:
            answer, size = await asyncio.wait_for(asyncio.shield(call), timeout_s)
        except asyncio.TimeoutError:
            self.stats["timed_out"] += 1
            slot.kill()
            try:
                await call               # returns once the killed process closes the pipe
            except (EOFError, OSError):
                pass
            slot.discard()
            raise TimedOut(f"the job took longer than {timeout_s:g} s and was stopped; "
                           "try a smaller request or ask an administrator to raise "
                           "[heavy] timeout_s", retry_after=1) from None
        except (EOFError, OSError):
            slot.discard()
            raise RuntimeError("a heavy worker process died during the job") from None
        took = time.monotonic() - start
        self._mean_s = 0.8 * self._mean_s + 0.2 * took
        self.stats["runs"] += 1
        ok, value = pickle.loads(answer)
        if not ok:
            raise value
        if key is not None:
            self._remember(key, value, size)
        return value

    def _remember(self, key, value, size: int) -> None:
        s = self.settings
        if size > s.cache_mb * 1e6:
            return
        old = self._cache.pop(key, None)
        if old is not None:
            self._cache_bytes -= old[1]
        self._cache[key] = (value, size)
        self._cache_bytes += size
        while self._cache and (len(self._cache) > s.cache_entries
                               or self._cache_bytes > s.cache_mb * 1e6):
            self._cache_bytes -= self._cache.popitem(last=False)[1][1]


def _retrieve(task: asyncio.Future) -> None:
    """A job's error is its callers' to see; if they all went away, it is dropped here."""
    if not task.cancelled():
        task.exception()


async def run_heavy(app_state, fn: Callable, *args, key: Hashable | None = None,
                    timeout_s: float | None = None):
    """``fn(*args)`` in the app's heavy pool (``app_state.heavy``): the one call for routes."""
    return await app_state.heavy.run(fn, *args, key=key, timeout_s=timeout_s)
