"""Assessment routes: time to failure, fleet risk, health history, diagnosis, maintenance events.

Every answer is advisory: forecasts and diagnoses do not replace protective trips or alarms, and
local codes and qualified personnel decide on maintenance and operation. The GET routes serve
what is stored, so they work on a replica without the assessment worker.
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Annotated

from fastapi import APIRouter, Path, Query, status

from prognosis_service.api.deps import OperatorKey, ReaderKey, ReadSessionDep, RuntimeDep
from prognosis_service.assessment import views
from prognosis_service.assessment.schemas import (
    DiagnosisOut,
    FleetRiskOut,
    HealthOut,
    MaintenanceEventIn,
    MaintenanceEventOut,
    MaintenanceEventPage,
    TimeToFailureOut,
)
from prognosis_service.prognosis import ADVISORY

router = APIRouter(tags=["assessment"])

AssetIdPath = Annotated[str, Path(pattern=r"^[A-Za-z0-9][A-Za-z0-9_.-]*$", max_length=64)]
RiskQuery = Annotated[
    float,
    Query(
        gt=0,
        lt=1,
        description="Failure probability accepted before maintenance; sets latest_maintenance_at.",
    ),
]
HorizonQuery = Annotated[float, Query(gt=0, le=87_600, description="Horizon in hours.")]
_ADVICE = f"\n\n**{ADVISORY}**"


def _aware(value: datetime | None) -> datetime | None:
    if value is None:
        return None
    return value.replace(tzinfo=UTC) if value.tzinfo is None else value.astimezone(UTC)


@router.get(
    "/v1/assets/{asset_id}/time-to-failure",
    response_model=TimeToFailureOut,
    description="P10/P50/P90 time to failure, the probability of failure within the horizon, "
    "the latest maintenance date for the chosen risk, the model and its fit quality, and the "
    "diagnosis. `status` says when there is no forecast and why (`message`)." + _ADVICE,
)
def get_time_to_failure(
    asset_id: AssetIdPath,
    session: ReadSessionDep,
    principal: ReaderKey,
    risk: RiskQuery = 0.1,
    horizon_h: HorizonQuery = 720.0,
) -> TimeToFailureOut:
    return views.time_to_failure(session, asset_id, principal, risk=risk, horizon_h=horizon_h)


@router.get(
    "/v1/fleet/risk",
    response_model=FleetRiskOut,
    description="Every asset the key may see, most at risk first: probability of failure "
    "within the horizon, then a sustained anomaly, then the health index." + _ADVICE,
)
def get_fleet_risk(
    session: ReadSessionDep,
    principal: ReaderKey,
    site: str | None = None,
    horizon_h: HorizonQuery = 720.0,
    limit: Annotated[int, Query(ge=1, le=10_000)] = 1000,
) -> FleetRiskOut:
    return views.fleet_risk(session, principal, site=site, horizon_h=horizon_h, limit=limit)


@router.get(
    "/v1/assets/{asset_id}/health",
    response_model=HealthOut,
    description="Health points per window (oldest first): health index of the leading failure "
    "mode, T² anomaly score and its control limit, operating regime, and excluded windows with "
    "the reason; plus maintenance events and the current forecast." + _ADVICE,
)
def get_health(
    asset_id: AssetIdPath,
    session: ReadSessionDep,
    principal: ReaderKey,
    start: Annotated[datetime | None, Query(description="Inclusive, ISO 8601.")] = None,
    end: Annotated[datetime | None, Query(description="Exclusive, ISO 8601.")] = None,
    limit: Annotated[int, Query(ge=1, le=10_000)] = 2000,
    cursor: str | None = None,
) -> HealthOut:
    return views.health_history(
        session,
        asset_id,
        principal,
        start=_aware(start),
        end=_aware(end),
        limit=limit,
        cursor=cursor,
    )


@router.get(
    "/v1/assets/{asset_id}/diagnosis",
    response_model=DiagnosisOut,
    description="The likely fault over the latest usable windows (up to six of the last two "
    "days, their probabilities averaged), its confidence, every mode's probability, and the "
    "latest window's evidence in plain words and indicators against their baseline. "
    "Advisory: a diagnosis supports, and does not replace, inspection by qualified personnel.",
)
def get_diagnosis(
    asset_id: AssetIdPath, session: ReadSessionDep, principal: ReaderKey
) -> DiagnosisOut:
    return views.diagnosis_view(session, asset_id, principal)


@router.post(
    "/v1/assets/{asset_id}/maintenance-events",
    status_code=status.HTTP_201_CREATED,
    response_model=MaintenanceEventOut,
    description="Record an inspection, repair, replacement or failure (scope `operate`). "
    "Repairs, replacements and failures start a new life segment: a new healthy baseline is "
    "learned and the forecast starts again. Events label history for `wellspan "
    "train-diagnosis`, and failures feed the fleet prior of the asset class." + _ADVICE,
)
def post_maintenance_event(
    asset_id: AssetIdPath, body: MaintenanceEventIn, runtime: RuntimeDep, principal: OperatorKey
) -> MaintenanceEventOut:
    with runtime.store.write() as session:
        return views.record_maintenance_event(session, asset_id, principal, body)


@router.get("/v1/assets/{asset_id}/maintenance-events", response_model=MaintenanceEventPage)
def get_maintenance_events(
    asset_id: AssetIdPath,
    session: ReadSessionDep,
    principal: ReaderKey,
    limit: Annotated[int, Query(ge=1, le=1000)] = 100,
    cursor: str | None = None,
) -> MaintenanceEventPage:
    """The asset's maintenance events, oldest first."""
    return views.list_maintenance_events(session, asset_id, principal, limit=limit, cursor=cursor)
