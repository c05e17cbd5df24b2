"""A database file at an earlier schema version, for the tests of the migrations after it."""
import sqlite3

import sqlite_utils

from service.store.migrations import MIGRATIONS


def database_at(path, version: int) -> sqlite_utils.Database:
    """``path`` with the first ``version`` migrations applied and recorded, open in autocommit
    (the caller writes the rows that version's code wrote, then closes it)."""
    old = sqlite_utils.Database(sqlite3.connect(path, isolation_level=None))
    old.execute("CREATE TABLE schema_version (version INTEGER NOT NULL)")
    for number, step in enumerate(MIGRATIONS[:version], start=1):
        step(old)
        old.execute("INSERT INTO schema_version (version) VALUES (?)", [number])
    return old
