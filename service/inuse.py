"""A lock file beside the database that every running server holds (shared), so that
`seqaudit restore` can refuse to overwrite a database in use (it needs the lock alone).

``fcntl.flock`` locks belong to the open file description: closing some other descriptor of
the database file (which would drop SQLite's own POSIX locks) does not release them, and the
kernel releases them when the process dies, so a crashed server leaves no stale lock.
"""
from __future__ import annotations

import fcntl
import os
from pathlib import Path


class InUse(RuntimeError):
    """The database is held by a running server (or the lock cannot be taken)."""


def lock_path(db_path: Path) -> Path:
    db_path = Path(db_path)
    return db_path.with_name(db_path.name + ".inuse")


class _Held:
    def __init__(self, fd: int):
        self.fd = fd

    def release(self) -> None:
        if self.fd is not None:
            os.close(self.fd)        # closing the descriptor releases the flock
            self.fd = None


def _take(db_path: Path, mode: int) -> _Held:
    path = lock_path(db_path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
    try:
        fcntl.flock(fd, mode | fcntl.LOCK_NB)
    except BlockingIOError:
        os.close(fd)
        raise InUse(str(path)) from None
    return _Held(fd)


def hold_shared(db_path: Path) -> _Held:
    """What a server holds while it runs (any number of workers share it)."""
    try:
        return _take(db_path, fcntl.LOCK_SH)
    except InUse:
        raise InUse(f"the database {db_path} is being restored (lock {lock_path(db_path)} "
                    "is held); start the server when the restore has finished") from None


def hold_alone(db_path: Path) -> _Held:
    """What a restore holds: refused while any server holds the database."""
    try:
        return _take(db_path, fcntl.LOCK_EX)
    except InUse:
        raise InUse(f"the database {db_path} is in use by a running seqaudit server "
                    f"(lock {lock_path(db_path)}); stop the server first, then restore") \
            from None
