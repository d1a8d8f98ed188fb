"""Builds the FastAPI app: lifespan (migrations, store, optional ingest), handlers, routers."""

from __future__ import annotations

import logging
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager

from fastapi import FastAPI

from prognosis_service.api import assets, gateways, health, indicators, quarantine
from prognosis_service.api.deps import Runtime
from prognosis_service.api.problems import install_problem_handlers
from prognosis_service.ingest.consumer import IngestService
from prognosis_service.ingest.pipeline import Pipeline
from prognosis_service.settings import Settings, load_settings
from prognosis_service.store.engine import Store
from prognosis_service.store.migrate import upgrade

__all__ = ["API_DESCRIPTION", "create_app", "start_runtime"]

log = logging.getLogger("wellspan.service")

API_DESCRIPTION = """\
The wellspan prognosis service: indicator history, gateways, quarantine and ingest for the
monitored pumps.

**Safety.** Forecasts and anomaly findings are advisory. Alarms do not replace protective trips
or the machine's own protection. Local codes and qualified personnel decide what is done to the
machinery.

Authentication: `Authorization: Bearer <API key>` (scopes `read`, `ingest`, `admin`; a key may
be limited to sites). Errors are RFC 9457 problem details. Times are ISO 8601 UTC with `Z`; list
endpoints return `{items, count, next_cursor}`.
"""


def start_runtime(settings: Settings, *, run_ingest: bool) -> Runtime:
    """Apply migrations, open the store and (optionally) start the MQTT ingest."""
    upgrade(settings.database_url)
    store = Store(settings.database_url)
    pipeline = Pipeline(future_tolerance_s=settings.future_tolerance_s)
    runtime = Runtime(settings=settings, store=store, pipeline=pipeline)
    if run_ingest:
        runtime.ingest = IngestService(settings, store, pipeline)
        runtime.ingest.start()
    return runtime


def stop_runtime(runtime: Runtime) -> None:
    if runtime.ingest is not None:
        runtime.ingest.stop()
    runtime.store.dispose()


def create_app(settings: Settings | None = None, *, run_ingest: bool = False) -> FastAPI:
    settings = settings or load_settings()

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        runtime = start_runtime(settings, run_ingest=run_ingest)
        app.state.runtime = runtime
        log.info("service ready (%s, ingest %s)", runtime.store, "on" if run_ingest else "off")
        try:
            yield
        finally:
            stop_runtime(runtime)

    app = FastAPI(
        title="wellspan prognosis service",
        version="0.1.0",
        description=API_DESCRIPTION,
        lifespan=lifespan,
    )
    install_problem_handlers(app)
    for module in (health, assets, gateways, quarantine, indicators):
        app.include_router(module.router)
    return app
