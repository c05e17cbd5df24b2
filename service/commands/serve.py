"""seqaudit serve: uvicorn over the app factory, settings passed to workers by environment."""
from __future__ import annotations

import os

from ..settings import Settings


def export_settings(settings: Settings) -> None:
    """Workers are separate processes: they rebuild settings from these variables."""
    os.environ["SEQAUDIT_CONFIG"] = str(settings.config_path)
    os.environ["SEQAUDIT_DB"] = str(settings.db_path)
    os.environ["SEQAUDIT_HOST"] = settings.host
    os.environ["SEQAUDIT_PORT"] = str(settings.port)
    os.environ["SEQAUDIT_WORKERS"] = str(settings.workers)
    os.environ["SEQAUDIT_REQUEST_READ_TIMEOUT_S"] = str(settings.request_read_timeout_s)
    os.environ["SEQAUDIT_REQUIRE_DRAW"] = "true" if settings.require_draw else "false"


def check_database(settings: Settings) -> str | None:
    """Why the service cannot start on its database (one line), or None: opened, migrated
    (once, before workers start) and not being restored."""
    import sqlite3

    from ..errors import SchemaTooNew
    from ..inuse import InUse, hold_shared
    from ..store import Store
    try:
        hold_shared(settings.db_path).release()
        store = Store(settings.db_path)
        try:
            store.migrate()
        finally:
            store.close()
    except (InUse, SchemaTooNew) as exc:
        return str(exc)
    except (sqlite3.Error, OSError) as exc:
        return f"cannot open the database {settings.db_path}: {exc}"
    return None


def serve(settings: Settings, log_level: str = "info") -> int:
    import sys

    import uvicorn

    problem = check_database(settings)
    if problem is not None:
        print(f"seqaudit serve: error: {problem}", file=sys.stderr)
        return 1
    from ..plan_check import cache_file, check_plans
    from ..plans import ConfigError
    try:   # a plan whose own figures are incomplete is refused before anything starts
        check_plans(settings.plans, cache_file(settings.db_path))
    except ConfigError as exc:
        raise SystemExit(f"seqaudit serve: error: {exc}") from None
    export_settings(settings)
    # http=: each request's headers and body must arrive within request_read_timeout_s (an
    # import path, which worker processes import themselves)
    uvicorn.run("service.api.app:app_from_env", factory=True, host=settings.host,
                port=settings.port, workers=settings.workers, log_level=log_level,
                access_log=False, http="service.api.read_deadline:DeadlineHttpToolsProtocol")
    return 0
