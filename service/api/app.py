"""The FastAPI application: `create_app(settings)` builds it; nothing is global."""
from __future__ import annotations

import gc
from contextlib import asynccontextmanager
from typing import Callable

from fastapi import FastAPI

from ..clock import utc_now
from ..heavy import HeavyPool
from ..operations import Monitor, PlanBook
from ..settings import Settings, load_settings
from ..store import Store
from ..version import software_version
from .limits import BodyLimit, TokenBuckets
from . import actions, alerts, casefiles, draws, facilities, findings, health, keys, \
    metrics, plans, problems, records, storage, webhooks
from . import program as program_api

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
                      future_tolerance_s=settings.future_tolerance_s,
                      max_record_units=settings.max_record_units)
    heavy = HeavyPool(settings.heavy)

    @asynccontextmanager
    async def lifespan(app: FastAPI):
        from ..inuse import hold_shared
        in_use = hold_shared(settings.db_path)   # `seqaudit restore` refuses while held
        scheduler = None
        if settings.schedule.enabled:
            from ..scheduler import start_scheduler
            # each delivery run opens its own async client (None): see jobs/delivery.py
            scheduler = start_scheduler(settings, monitor, None)
        app.state.scheduler = scheduler
        from ..plan_check import warm_up
        warm_up(monitor.plans)   # full plan figures in the background: /healthz need not wait
        try:
            yield
        finally:
            if scheduler is not None:
                scheduler.shutdown(wait=True)
            heavy.close()
            store.close()
            in_use.release()

    # docs_public = false: no /docs, /redoc or /openapi.json at all (404)
    app = FastAPI(title="seqaudit", version=software_version(), description=DESCRIPTION,
                  lifespan=lifespan, docs_url=None, redoc_url=None,
                  openapi_url="/openapi.json" if settings.docs_public else None)
    app.state.settings = settings
    app.state.monitor = monitor
    app.state.heavy = heavy          # case files, plan designs: service/heavy.py
    app.state.buckets = TokenBuckets(settings.rate_per_s, settings.rate_burst)
    app.add_middleware(BodyLimit, limit=settings.max_body_bytes)
    problems.install(app)
    storage.install(app)           # storage failures as 503 problems; /readyz
    # Routes are matched in the order they were added, one by one: the record route, which
    # takes almost all the traffic, goes first and the dashboard's many pages last.
    for module in (records, health, storage, facilities, findings, casefiles, draws, alerts, plans,
                   metrics, actions, keys, webhooks, program_api):
        app.include_router(module.router)
    from .docs import install_docs
    if settings.docs_public:
        install_docs(app)
    else:
        install_docs(app, docs_url=None, redoc_url=None)
    records.define_body_schemas(app)
    from ..web.field_app import install_field_app
    from ..web.install import install_ui
    install_field_app(app)
    install_ui(app)
    return app


def app_from_env() -> FastAPI:
    """Factory for uvicorn workers: settings from SEQAUDIT_* variables and the config file."""
    import logging
    logging.basicConfig(level=logging.INFO, format="%(levelname)s:     %(name)s: %(message)s")
    for noisy in ("apscheduler", "httpx2", "httpcore2", "httpx", "httpcore"):
        logging.getLogger(noisy).setLevel(logging.WARNING)
    app = create_app(load_settings())
    app.state.heavy.warm()         # worker processes up before the first case file
    # Everything imported and built so far lives as long as the process. Freezing it keeps the
    # cyclic garbage collector from walking those millions of objects on each full
    # collection: otherwise every few thousand records a request stalls for 60-100 ms. A batch
    # of 1000 records makes tens of thousands of short-lived objects, almost none in cycles,
    # so the youngest generation is collected after 100,000 allocations instead of 700.
    gc.collect()
    gc.freeze()
    gc.set_threshold(100_000, 20, 10)
    return app
