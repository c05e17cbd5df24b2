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


def serve(settings: Settings, log_level: str = "info") -> int:
    import uvicorn

    from ..plan_check import cache_file, check_plans
    from ..plans import ConfigError
    from ..store import Store

    try:   # a plan whose own figures are incomplete is refused before anything starts
        check_plans(settings.plans, cache_file(settings.db_path))
    except ConfigError as exc:
        raise SystemExit(f"seqaudit: error: {exc}") from None
    Store(settings.db_path).migrate()  # once, before workers start
    export_settings(settings)
    uvicorn.run("service.api.app:app_from_env", factory=True, host=settings.host,
                port=settings.port, workers=settings.workers, log_level=log_level,
                access_log=False)
    return 0
