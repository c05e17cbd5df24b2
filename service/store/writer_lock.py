"""The queue of writers across processes: an ``flock`` on a file beside the database, taken
before ``BEGIN IMMEDIATE`` and released after ``COMMIT``.

Without it, a process that finds the database locked waits in SQLite's busy handler, which
sleeps in growing steps (up to 100 ms) and retries: with two server processes most of the
waiting time is sleep after the lock has already been freed, and the unlucky request waits
several steps in a row (a long p99). A process blocked in ``flock`` is woken by the kernel
the moment the holder releases it. With two processes there is at most one waiter, so the
order is first come, first served; with more, the kernel wakes the waiters together and one
wins (no starvation in practice, but no strict FIFO either).

The lock is per open file description, so two ``Store`` objects on one file in one process
also exclude each other; threads of one process queue on the store's thread lock first, so
only one thread per store ever waits here. Never start a write through one ``Store`` while
the same thread holds a write through another on the same file: it would wait forever.
"""
from __future__ import annotations

import fcntl
import os
from pathlib import Path


class WriterLock:
    """Exclusive lock on ``<database>-writer.lock``; a context manager, not re-entrant."""

    def __init__(self, db_path: Path):
        self.path = Path(str(db_path) + "-writer.lock")
        self._fd: int | None = None

    def _open(self) -> int:
        if self._fd is None:
            self._fd = os.open(self.path, os.O_RDWR | os.O_CREAT | os.O_CLOEXEC, 0o644)
        return self._fd

    def __enter__(self) -> "WriterLock":
        fcntl.flock(self._open(), fcntl.LOCK_EX)
        return self

    def __exit__(self, *exc) -> None:
        fcntl.flock(self._fd, fcntl.LOCK_UN)

    def close(self) -> None:
        if self._fd is not None:
            os.close(self._fd)
            self._fd = None
