"""Builds the FastAPI app: lifespan (migrations, store, optional ingest), handlers, routers."""

from __future__ import annotations

import gc
import logging
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager

from fastapi import FastAPI

from prognosis_service.alerts.runtime import AlertWorkers, build_alert_service
from prognosis_service.api import alerts as alerts_api
from prognosis_service.api import assessment as assessment_api
from prognosis_service.api import assets, gateways, health, indicators, quarantine
from prognosis_service.api import webhooks as webhooks_api
from prognosis_service.api.deps import Runtime
from prognosis_service.api.problems import install_problem_handlers
from prognosis_service.assessment.worker import AssessmentWorker
from prognosis_service.dashboard import router as dashboard_router
from prognosis_service.ingest.consumer import IngestService
from prognosis_service.ingest.pipeline import Pipeline
from prognosis_service.settings import Settings, load_settings
from prognosis_service.store.engine import Store
from prognosis_service.store.migrate import upgrade

__all__ = ["API_DESCRIPTION", "create_app", "start_runtime"]

log = logging.getLogger("wellspan.service")

API_DESCRIPTION = """\
The wellspan prognosis service: the fleet's indicator history, gateways and quarantine; each
pump's healthy baseline, anomaly score, likely fault and time to failure; alerts to dispatch
systems (webhooks, MQTT) and the operations dashboard at `/dashboard`.

**Safety.** Forecasts, diagnoses and anomaly findings are advisory. Alarms do not replace
protective trips or the machine's own protection. Local codes and qualified personnel decide what
is done to the machinery.

Authentication: `Authorization: Bearer <API key>`. Scopes: `read`; `ingest`; `operate`
(acknowledge and resolve alerts, record maintenance; implies read); `admin` (everything). A key
may be limited to sites. Errors are RFC 9457 problem details. Times are ISO 8601 UTC with `Z`;
list endpoints return `{items, count, next_cursor}`.
"""


def start_runtime(settings: Settings, *, run_ingest: bool) -> Runtime:
    """Apply migrations and open the store; with ``run_ingest``, also start the workers.

    Every replica serves the whole API from the store. The workers — MQTT ingest, assessment
    (baselines, anomaly, diagnosis, forecasts) and the alert workers (deliveries, MQTT alerts,
    silence checks) — run only where ingest runs. The assessor's readings feed the alert rules.
    """
    upgrade(settings.database_url)
    store = Store(settings.database_url)
    pipeline = Pipeline(future_tolerance_s=settings.future_tolerance_s)
    alerts = build_alert_service(settings, store)
    runtime = Runtime(settings=settings, store=store, pipeline=pipeline, alerts=alerts)
    if run_ingest:
        runtime.ingest = IngestService(settings, store, pipeline)
        runtime.ingest.start()
        runtime.alert_workers = AlertWorkers(settings, alerts)
        runtime.alert_workers.start()
        runtime.assessor = AssessmentWorker(
            store,
            interval_s=settings.assess_interval_s,
            diagnosis_model_path=settings.diagnosis_model_path or None,
            on_readings=alerts.evaluate,
        )
        runtime.assessor.start()
    return runtime


def stop_runtime(runtime: Runtime) -> None:
    if runtime.assessor is not None:
        runtime.assessor.stop()
    if runtime.alert_workers is not None:
        runtime.alert_workers.stop()
    if runtime.ingest is not None:
        runtime.ingest.stop()
    runtime.store.dispose()


def create_app(settings: Settings | None = None, *, run_ingest: bool = False) -> FastAPI:
    settings = settings or load_settings()

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        runtime = start_runtime(settings, run_ingest=run_ingest)
        app.state.runtime = runtime
        # The modules and caches loaded by now live as long as the process. Without this every
        # full collection walks them all: with numpy, scipy and scikit-learn loaded that took
        # about 100 ms, and one history request in ten (1,440 points) paid it.
        gc.freeze()
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
    app.include_router(dashboard_router)
    app.include_router(alerts_api.router)
    app.include_router(webhooks_api.router)
    app.include_router(assessment_api.router)
    return app
