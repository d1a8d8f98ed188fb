"""/livez, /readyz (store and broker), /metrics (Prometheus text). No key needed."""

from __future__ import annotations

import socket

from fastapi import APIRouter
from fastapi.responses import JSONResponse, PlainTextResponse

from prognosis_service.api.deps import RuntimeDep
from prognosis_service.api.problems import problem_response
from prognosis_service.metrics import METRICS

router = APIRouter(tags=["health"])


@router.get("/livez")
def livez() -> dict[str, str]:
    """The process is up."""
    return {"status": "ok"}


def _broker_reachable(host: str, port: int) -> bool:
    try:
        with socket.create_connection((host, port), timeout=1.0):
            return True
    except OSError:
        return False


@router.get("/readyz", response_model=None)
def readyz(runtime: RuntimeDep) -> JSONResponse | dict[str, object]:
    """Ready when the store answers and the broker is connected (ingest in this process) or
    reachable (API only)."""
    checks: dict[str, str] = {}
    try:
        runtime.store.ping()
        checks["store"] = "ok"
    except Exception as exc:
        checks["store"] = f"failing: {type(exc).__name__}"
    if runtime.ingest is not None:
        checks["broker"] = "ok" if runtime.ingest.connected else "not connected"
        if runtime.ingest.last_error:
            checks["ingest"] = runtime.ingest.last_error
    else:
        host, port, *_ = runtime.settings.broker
        checks["broker"] = "ok" if _broker_reachable(host, port) else "unreachable"
    if checks["store"] != "ok" or checks["broker"] != "ok":
        failing = ", ".join(f"{k}: {v}" for k, v in checks.items() if v != "ok")
        return problem_response(503, "Service unavailable", failing, "not-ready", checks=checks)
    return {"status": "ok", "checks": checks}


@router.get("/metrics", response_class=PlainTextResponse)
def metrics() -> PlainTextResponse:
    return PlainTextResponse(METRICS.render(), media_type="text/plain; version=0.0.4")
