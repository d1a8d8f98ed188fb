"""/dashboard: the page, its static files, which contract routes this service offers, and the
SVG charts of one asset.

The charts draw what the JSON routes return, from the same domain calls: the health history and
the diagnosis of :mod:`prognosis_service.assessment.views` (the bodies of
``GET /v1/assets/{id}/health`` and ``/diagnosis``) and the indicator history of
:mod:`prognosis_service.domain.history`.
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from importlib import resources
from typing import Annotated, Any

from fastapi import APIRouter, Path, Query, Request, Response
from fastapi.responses import HTMLResponse
from sqlalchemy.orm import Session

from prognosis_service.api.deps import ReaderKey, ReadSessionDep
from prognosis_service.api.problems import ProblemError
from prognosis_service.assessment import views as assessment_views
from prognosis_service.dashboard import charts
from prognosis_service.domain import assets as asset_domain
from prognosis_service.domain.history import indicator_history, indicator_names

__all__ = ["CONTRACT_ROUTES", "MAX_HEALTH_POINTS", "router"]

router = APIRouter(prefix="/dashboard", tags=["dashboard"])

# The JSON routes of the shared contract that the page reads, by the name the page uses.
CONTRACT_ROUTES: dict[str, tuple[str, str]] = {
    "fleet_risk": ("GET", "/v1/fleet/risk"),
    "time_to_failure": ("GET", "/v1/assets/{asset_id}/time-to-failure"),
    "health": ("GET", "/v1/assets/{asset_id}/health"),
    "diagnosis": ("GET", "/v1/assets/{asset_id}/diagnosis"),
    "maintenance_events": ("GET", "/v1/assets/{asset_id}/maintenance-events"),
    "alerts": ("GET", "/v1/alerts"),
    "alert_acknowledge": ("POST", "/v1/alerts/{alert_id}/acknowledge"),
    "alert_resolve": ("POST", "/v1/alerts/{alert_id}/resolve"),
}
MAX_HEALTH_POINTS = 10_000  # the health route's own page limit
_STATIC = {"dashboard.js": "text/javascript", "dashboard.css": "text/css"}
_SVG = "image/svg+xml"
# The page loads nothing from elsewhere and runs no inline script: data shown as text can
# never become code even if an escape were missed.
_PAGE_HEADERS = {
    "Content-Security-Policy": (
        "default-src 'self'; script-src 'self'; style-src 'self'; img-src 'self' data:; "
        "connect-src 'self'; frame-ancestors 'none'; base-uri 'none'; form-action 'self'"
    ),
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "no-referrer",
    "Cache-Control": "no-cache",
}
AssetIdPath = Annotated[str, Path(pattern=r"^[A-Za-z0-9][A-Za-z0-9_.-]*$", max_length=64)]
WidthQuery = Annotated[
    int, Query(ge=320, le=2400, description="Width of the chart in pixels (CSS px).")
]


def _asset_file(name: str) -> bytes:
    return (resources.files("prognosis_service.dashboard") / "static" / name).read_bytes()


@router.get("", include_in_schema=False, response_class=HTMLResponse)
def page() -> Response:
    """The dashboard page. It holds no data: the script asks for a key and reads the API."""
    return Response(_asset_file("index.html"), media_type="text/html", headers=_PAGE_HEADERS)


@router.get("/static/{name}", include_in_schema=False)
def static_file(name: str) -> Response:
    if name not in _STATIC:
        raise ProblemError(404, "no such dashboard file")
    return Response(_asset_file(name), media_type=_STATIC[name], headers=_PAGE_HEADERS)


def _offers(request: Request, name: str) -> bool:
    """Whether this app serves the contract route ``name``, read from its OpenAPI document
    (FastAPI builds it once and caches it)."""
    method, template = CONTRACT_ROUTES[name]
    paths: dict[str, dict[str, Any]] = request.app.openapi().get("paths", {})
    return method.lower() in paths.get(template, {})


@router.get("/capabilities")
def capabilities(request: Request, principal: ReaderKey) -> dict[str, Any]:
    """Which contract routes this service offers (the page says "not available yet" for the
    rest) and the scopes of the calling key."""
    return {
        "routes": {name: _offers(request, name) for name in CONTRACT_ROUTES},
        "scopes": sorted(principal.scopes),
        "may_operate": principal.has_scope("operate"),
    }


def _last_window(session: Session, asset_id: str) -> datetime | None:
    last = asset_domain.last_window_start(session, asset_id)
    return last if last is None or last.tzinfo else last.replace(tzinfo=UTC)


@router.get("/assets/{asset_id}/health.svg", response_class=Response)
def health_chart(
    asset_id: AssetIdPath,
    session: ReadSessionDep,
    principal: ReaderKey,
    days: Annotated[float, Query(gt=0, le=3660, description="Days before the last window.")] = 60,
    width: WidthQuery = 720,
) -> Response:
    """The health-index trend over the ``days`` before the last window, its failure threshold,
    the P10–P90 window of the forecast threshold crossing and the maintenance events, as SVG:
    what ``GET /v1/assets/{asset_id}/health`` returns, drawn."""
    asset_domain.get_asset(session, asset_id, principal)
    last = _last_window(session, asset_id)
    start = None if last is None else last - timedelta(days=days)
    body = assessment_views.health_history(
        session, asset_id, principal, start=start, end=None, limit=MAX_HEALTH_POINTS
    )
    svg_text = charts.health_svg(body.model_dump(mode="json"), title=asset_id, width=width)
    return Response(svg_text, media_type=_SVG)


@router.get("/assets/{asset_id}/diagnosis.svg", response_class=Response)
def diagnosis_chart(
    asset_id: AssetIdPath, session: ReadSessionDep, principal: ReaderKey, width: WidthQuery = 720
) -> Response:
    """The defect-frequency and order indicators behind the latest diagnosis against their
    healthy baselines, as SVG: the ``indicators`` of ``GET /v1/assets/{asset_id}/diagnosis``."""
    body = assessment_views.diagnosis_view(session, asset_id, principal)
    svg_text = charts.diagnosis_svg(body.model_dump(mode="json"), title=asset_id, width=width)
    return Response(svg_text, media_type=_SVG)


@router.get("/assets/{asset_id}/indicators.svg", response_class=Response)
def indicators_chart(
    asset_id: AssetIdPath,
    session: ReadSessionDep,
    principal: ReaderKey,
    days: Annotated[float, Query(gt=0, le=366, description="Days before the last window.")] = 7,
    count: Annotated[int, Query(ge=1, le=8, description="How many indicators.")] = 4,
    width: WidthQuery = 720,
) -> Response:
    """The asset's key indicators over the ``days`` before its last window, as SVG panels."""
    asset_domain.get_asset(session, asset_id, principal)
    last = _last_window(session, asset_id)
    chosen = charts.choose_key_indicators(indicator_names(session, asset_id), count)
    histories = []
    if last is not None:
        end = last + timedelta(seconds=1)
        span = timedelta(days=days)
        every = charts.bucket_width(span)
        histories = [
            indicator_history(session, asset_id, name, start=end - span, end=end, every=every)
            for name, _ in chosen
        ]
    return Response(charts.indicators_svg(histories, width=width), media_type=_SVG)
