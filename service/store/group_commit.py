"""Group commit: one writer thread per store commits whatever records have queued.

A request handler on the event loop puts its job on a queue and awaits it. The writer thread
first waits for its turn to write (the store's locks, shared with other server processes),
then takes every job that is waiting at that moment, writes them all in one transaction (one
fsync) and then tells each caller, who is answered only after its records are on disk. Jobs
that queue while another process writes therefore join the next commit: with several
processes the batches grow instead of the number of fsyncs. Handlers on the event loop
await the commit without a worker thread of their own, so a request costs no thread
hand-over and the GIL has two contenders, not dozens. Upkeep (the merge of record ids) runs
between groups, a transaction at a time, while no job waits.
"""
from __future__ import annotations

import asyncio
import queue
import threading
from typing import Callable

_STOP = object()


class Job:
    """One caller's records waiting for a group commit."""

    __slots__ = ("items", "key_label", "now", "rejected_before", "outcomes", "error", "notify")

    def __init__(self, items, key_label, now, rejected_before):
        self.items, self.key_label, self.now = items, key_label, now
        self.rejected_before = rejected_before
        self.outcomes = None
        self.error: BaseException | None = None
        self.notify: Callable[[], None] = lambda: None

    def result(self):
        if self.error is not None:
            raise self.error
        return self.outcomes


def _settle(future: asyncio.Future) -> None:
    if not future.done():          # the waiting request may have been cancelled
        future.set_result(None)


class GroupCommitter:
    """Runs ``commit(take)`` on a writer thread for every group of jobs that queued up.

    ``commit`` gets its turn to write, then calls ``take()`` for the jobs waiting at that
    moment (a list), and sets each job's outcomes or error; ``after`` runs once the group's
    callers are told (upkeep that need not delay their answers; it must not raise): it does
    one step and returns True while it has more, and the writer runs its next step only
    when no job is waiting, so jobs wait for at most one step;
    ``on_exit`` runs on the writer thread when it stops (to close that thread's database
    connection).
    """

    def __init__(self, commit: Callable[[Callable[[], list[Job]]], None],
                 on_exit: Callable[[], None], after: Callable[[], bool] = lambda: False,
                 name: str = "seqaudit-writer"):
        self._commit, self._on_exit, self._after, self._name = commit, on_exit, after, name
        self._jobs: queue.SimpleQueue = queue.SimpleQueue()
        self._thread: threading.Thread | None = None
        self._lock = threading.Lock()

    async def run_async(self, job: Job) -> Job:
        """Queue ``job`` and await its commit. If the awaiting task is cancelled the job is
        still committed; only the answer is lost (a retry then finds a duplicate)."""
        loop = asyncio.get_running_loop()
        future = loop.create_future()

        def notify() -> None:
            try:
                loop.call_soon_threadsafe(_settle, future)
            except RuntimeError:    # the loop has closed: nobody is waiting any more
                pass

        job.notify = notify
        self._submit(job)
        await future
        return job

    def stop(self, timeout: float = 30.0) -> None:
        """Let the writer finish what is queued, then end it (a later job starts a new one)."""
        with self._lock:
            thread, self._thread = self._thread, None
            if thread is None or not thread.is_alive():
                return
            self._jobs.put(_STOP)
        # (should a job slip in meanwhile, a new writer takes it; commits stay serial
        # whatever the number of writers, since each holds the store's write lock)
        thread.join(timeout)

    def _submit(self, job: Job) -> None:
        with self._lock:
            if self._thread is None or not self._thread.is_alive():
                self._thread = threading.Thread(target=self._loop, name=self._name, daemon=True)
                self._thread.start()
            self._jobs.put(job)

    def _loop(self) -> None:
        more = False            # upkeep under way
        try:
            while True:
                if more and self._jobs.empty():
                    more = self._after()
                    continue
                first = self._jobs.get()
                if first is _STOP:
                    return
                jobs, stop = [first], False

                def take() -> list[Job]:
                    """Every job already waiting joins this commit."""
                    nonlocal stop
                    while not stop:
                        try:
                            more = self._jobs.get_nowait()
                        except queue.Empty:
                            break
                        if more is _STOP:
                            stop = True
                            break
                        jobs.append(more)
                    return jobs

                try:
                    self._commit(take)
                except BaseException as exc:    # never leave a caller waiting
                    for job in jobs:
                        if job.outcomes is None and job.error is None:
                            job.error = exc
                for job in jobs:
                    job.notify()
                more = self._after()
                if stop:
                    return
        finally:
            self._on_exit()
