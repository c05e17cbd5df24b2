"""The FastAPI application: `create_app(settings)` builds it; nothing is global."""
from __future__ import annotations

from contextlib import asynccontextmanager
from typing import Callable

from fastapi import FastAPI

from ..clock import utc_now
from ..operations import Monitor, PlanBook
from ..settings import Settings, load_settings
from ..store import Store
from . import actions, alerts, facilities, health, keys, metrics, plans, problems, records

DESCRIPTION = (
    "Sequential audit monitor: Wald's SPRT per facility on the rate of nonconforming passes. "
    "A boundary crossing is a statistical signal for review under the agency's own procedures, "
    "not a verdict. The test assumes randomly selected audited units, independent outcomes and "
    "a stable rate.")


def create_app(settings: Settings, clock: Callable[[], str] | None = None) -> FastAPI:
    store = Store(settings.db_path)
    store.migrate()
    monitor = Monitor(store=store, plans=PlanBook(settings.plans), clock=clock or utc_now,
                      max_batch=settings.max_batch,
                      future_tolerance_s=settings.future_tolerance_s)

    @asynccontextmanager
    async def lifespan(app: FastAPI):
        yield
        store.close()

    app = FastAPI(title="seqaudit", version="0.1.0", description=DESCRIPTION, lifespan=lifespan)
    app.state.settings = settings
    app.state.monitor = monitor
    problems.install(app)
    for module in (health, facilities, records, alerts, plans, metrics, actions, keys):
        app.include_router(module.router)
    return app


def app_from_env() -> FastAPI:
    """Factory for uvicorn workers: settings from SEQAUDIT_* variables and the config file."""
    return create_app(load_settings())
