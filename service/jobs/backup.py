"""Online backups with the SQLite backup API, each checked with PRAGMA integrity_check."""
from __future__ import annotations

import sqlite3
from datetime import datetime
from pathlib import Path

from ..clock import parse_rfc3339

PREFIX = "seqaudit-"


class BackupError(RuntimeError):
    pass


def check_database(path: Path) -> int:
    """Raise BackupError unless ``path`` is an intact seqaudit database; returns its schema version."""
    if not path.exists():
        raise BackupError(f"{path} does not exist")
    try:
        conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
        try:
            result = conn.execute("PRAGMA integrity_check").fetchall()
            if result != [("ok",)]:
                raise BackupError(f"{path} failed the integrity check: {result[:3]}")
            version = conn.execute("SELECT MAX(version) FROM schema_version").fetchone()[0]
        finally:
            conn.close()
    except sqlite3.DatabaseError as exc:
        raise BackupError(f"{path} is not a seqaudit database: {exc}") from None
    return int(version)


def backup_to(db_path: Path, out: Path) -> Path:
    """Copy the live database to ``out`` while others keep writing, then verify the copy."""
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.with_name(out.name + ".partial")
    tmp.unlink(missing_ok=True)
    src = sqlite3.connect(db_path, timeout=30.0)
    dst = sqlite3.connect(tmp)
    try:
        src.backup(dst, pages=256)  # page batches: writers are not blocked for long
        # the copy is one self-contained file: a copy left in WAL mode would have its check
        # (and any later reader) leave -wal and -shm files beside it
        dst.execute("PRAGMA journal_mode = DELETE")
    finally:
        dst.close()
        src.close()
    check_database(tmp)
    tmp.replace(out)
    return out


def scheduled_backup(db_path: Path, folder: Path, keep: int, now: str) -> Path:
    """A timestamped backup in ``folder``; only the newest ``keep`` are kept."""
    stamp = parse_rfc3339(now).strftime("%Y%m%dT%H%M%S%fZ")
    out = backup_to(db_path, folder / f"{PREFIX}{stamp}.db")
    olds = sorted(folder.glob(f"{PREFIX}*.db"))
    for stale in olds[:-keep] if keep > 0 else []:
        stale.unlink(missing_ok=True)
    return out


def restore(backup: Path, db_path: Path) -> int:
    """Bring a checked backup back into ``db_path``.

    Refused (BackupError) while a server holds the database: every running server holds
    the lock file beside it (:mod:`service.inuse`), and the restore needs it alone.
    """
    from ..inuse import InUse, hold_alone
    version = check_database(backup)
    try:
        held = hold_alone(db_path)
    except InUse as exc:
        raise BackupError(str(exc)) from None
    try:
        src = sqlite3.connect(f"file:{backup}?mode=ro", uri=True)
        dst = sqlite3.connect(db_path, timeout=30.0)
        try:
            src.backup(dst)
        finally:
            dst.close()
            src.close()
        check_database(db_path)
    finally:
        held.release()
    return version


def timestamp_of(path: Path) -> datetime | None:
    try:
        return datetime.strptime(path.stem[len(PREFIX):], "%Y%m%dT%H%M%S%fZ")
    except ValueError:
        return None
