"""What the assessment routes return, built from what is stored (the worker may be off here).

Forecast numbers for a chosen risk and horizon are computed from the stored fitted model
(``to_state()``), so any replica answers the same without refitting.
"""

from __future__ import annotations

import math
import uuid
from datetime import UTC, datetime, timedelta
from typing import Any

from sqlalchemy import Select, and_, case, or_, select, type_coerce
from sqlalchemy.orm import InstrumentedAttribute, Session

from prognosis_service.alerts.rules import ZoneRule, severity_zone
from prognosis_service.assessment.assessor import fleet_summary, model_from_state
from prognosis_service.assessment.baseline import mode_of_fault
from prognosis_service.assessment.models import (
    AssetAssessment,
    HealthPointRow,
    MaintenanceEventRow,
)
from prognosis_service.assessment.schemas import (
    AnomalyOut,
    DiagnosisOut,
    DiagnosisSummaryOut,
    FleetRiskItem,
    FleetRiskOut,
    ForecastOut,
    HealthOut,
    HealthPointOut,
    IndicatorOut,
    MaintenanceEventIn,
    MaintenanceEventOut,
    MaintenanceEventPage,
    ModelOut,
    TimeToFailureOut,
)
from prognosis_service.auth import Principal
from prognosis_service.domain.assets import get_asset
from prognosis_service.domain.errors import ForbiddenError, InvalidInputError
from prognosis_service.domain.pagination import decode_cursor, encode_cursor
from prognosis_service.prognosis import ExponentialDegradation, WienerDegradation
from prognosis_service.store.models import Asset

__all__ = [
    "diagnosis_view",
    "fleet_risk",
    "health_history",
    "list_maintenance_events",
    "record_maintenance_event",
    "time_to_failure",
]

_FUTURE_TOLERANCE = timedelta(minutes=10)


def _check_risk(risk: float, horizon_h: float) -> None:
    if not 0.0 < risk < 1.0:
        raise InvalidInputError(f"risk must lie in (0, 1), got {risk!r}")
    if not (math.isfinite(horizon_h) and horizon_h > 0):
        raise InvalidInputError(f"horizon_h must be a number of hours > 0, got {horizon_h!r}")


def _finite(x: float) -> float | None:
    return float(x) if math.isfinite(x) else None


def _at(base: datetime, hours: float | None) -> datetime | None:
    if hours is None or hours > 1e7:  # beyond a thousand years: no date worth printing
        return None
    return base + timedelta(hours=hours)


_MODELS: dict[str, ExponentialDegradation | WienerDegradation] = {}


def _model(state: dict[str, Any]) -> ExponentialDegradation | WienerDegradation:
    """The fitted model of a stored state, rebuilt (and its parameters checked) once per state.

    Rebuilding took about half of the fleet view's time per forecast asset (cProfile); a fitted
    model's queries do not change it, so one instance serves every request. The key is the
    state's ``repr`` (exact for the JSON values it holds: floats print round-trip).
    """
    key = repr(state)
    model = _MODELS.get(key)
    if model is None:
        model = model_from_state(state)
        if len(_MODELS) >= 10_000:
            _MODELS.clear()
        _MODELS[key] = model
    return model


def _forecast(
    result: dict[str, Any],
    seg: datetime | None,
    risk: float,
    horizon_h: float,
    *,
    with_latest: bool = True,
) -> ForecastOut | None:
    state = result.get("model_state")
    if not state or seg is None:
        return None
    model = _model(state)
    stored = result.get("quantiles_h")  # computed once at fit time: they need a root search
    if stored is None:
        stored = [_finite(float(v)) for v in model.time_to_failure_quantiles((0.1, 0.5, 0.9))]
    q10, q50, q90 = stored
    base = seg + timedelta(hours=float(result.get("last_time_h", model.last_time_)))
    latest = _finite(float(model.latest_maintenance_time(risk))) if with_latest else None
    return ForecastOut(
        p10_h=q10,
        p50_h=q50,
        p90_h=q90,
        p10_at=_at(base, q10),
        p50_at=_at(base, q50),
        p90_at=_at(base, q90),
        horizon_h=horizon_h,
        probability_within_horizon=float(model.prob_failure_within(horizon_h)),
        risk=risk,
        latest_maintenance_at=_at(base, latest),
        latest_maintenance_h=latest,
        observed_at=base,
    )


def _row(session: Session, asset_id: str) -> AssetAssessment | None:
    return session.get(AssetAssessment, asset_id)


def _status(row: AssetAssessment | None) -> tuple[str, str]:
    if row is None:
        return "no_baseline", "not assessed yet: no windows processed for this asset"
    return row.status, row.message


def time_to_failure(
    session: Session, asset_id: str, principal: Principal, *, risk: float, horizon_h: float
) -> TimeToFailureOut:
    """The asset's time-to-failure forecast at ``risk`` and ``horizon_h`` (hours)."""
    _check_risk(risk, horizon_h)
    asset = get_asset(session, asset_id, principal)
    row = _row(session, asset_id)
    status, message = _status(row)
    result = (row.result if row is not None else None) or {}
    model = result.get("model")
    diag = result.get("diagnosis")
    anomaly = result.get("anomaly")
    return TimeToFailureOut(
        asset_id=asset.asset_id,
        site_id=asset.site_id,
        asset_class=asset.asset_class,
        as_of=row.as_of if row is not None else None,
        status=status,
        message=message,
        failure_mode=result.get("failure_mode"),
        health_index=result.get("health_index"),
        failure_threshold=result.get("failure_threshold"),
        anomaly=AnomalyOut(**anomaly)
        if anomaly and anomaly.get("score") is not None and anomaly.get("control_limit")
        else None,
        forecast=_forecast(result, row.segment_start if row else None, risk, horizon_h)
        if status == "forecast"
        else None,
        model=ModelOut(
            name=model["name"],
            fit_quality=model["fit_quality"],
            n_points=model["n_points"],
            life_segment_start=datetime.fromisoformat(model["life_segment_start"]),
            fitted_at=datetime.fromisoformat(model["fitted_at"]),
            prior=model.get("prior", "default"),
        )
        if model and status == "forecast"
        else None,
        diagnosis=DiagnosisSummaryOut(
            fault=diag["fault"], confidence=diag["confidence"], evidence=diag["evidence"]
        )
        if diag
        else None,
    )


def _zone(result: dict[str, Any]) -> str | None:
    """The ISO 10816-3 zone of the result's overall velocity (None without a diagnosis)."""
    v = result.get("velocity_rms_mm_s")
    return severity_zone(v, ZoneRule()) if result.get("diagnosis") and v is not None else None


def fleet_risk(
    session: Session,
    principal: Principal,
    *,
    site: str | None,
    horizon_h: float,
    limit: int,
    risk: float = 0.1,
) -> FleetRiskOut:
    """Every visible asset, most at risk first (forecast probability, then anomaly, then index)."""
    _check_risk(risk, horizon_h)
    # Only the columns the list shows: the summary, not the fitted state or the result (about
    # 11 and 6 kB per asset; see fleet_summary). A row assessed before the summary column
    # existed has none: its result is read instead.
    stmt = select(
        Asset.asset_id,
        Asset.site_id,
        Asset.asset_class,
        AssetAssessment.asset_id.label("assessed"),
        AssetAssessment.status,
        AssetAssessment.segment_start,
        AssetAssessment.as_of,
        AssetAssessment.summary,
        type_coerce(
            case((AssetAssessment.summary.is_(None), AssetAssessment.result)),
            AssetAssessment.result.type,
        ).label("result"),
    ).outerjoin(AssetAssessment, AssetAssessment.asset_id == Asset.asset_id)
    if site is not None:
        if not principal.may_see(site):
            raise ForbiddenError(f"this key may not read site {site!r}")
        stmt = stmt.where(Asset.site_id == site)
    if principal.sites is not None:
        stmt = stmt.where(Asset.site_id.in_(sorted(principal.sites)))
    items = []
    for row in session.execute(stmt.order_by(Asset.asset_id)):
        assessed = row.assessed is not None
        status = row.status if assessed else "no_baseline"
        if row.summary is not None:
            result = row.summary
        else:
            result = fleet_summary(row.result) if row.result else {}
        forecast = (
            _forecast(result, row.segment_start, risk, horizon_h, with_latest=False)
            if assessed and status == "forecast"
            else None
        )
        diag = result.get("diagnosis")
        anomaly = result.get("anomaly")
        items.append(
            FleetRiskItem(
                asset_id=row.asset_id,
                site_id=row.site_id,
                asset_class=row.asset_class,
                status=status,
                probability_within_horizon=None
                if forecast is None
                else forecast.probability_within_horizon,
                p50_h=None if forecast is None else forecast.p50_h,
                p50_at=None if forecast is None else forecast.p50_at,
                health_index=result.get("health_index"),
                failure_threshold=result.get("failure_threshold"),
                likely_fault=None if not diag else diag["fault"],
                fault_confidence=None if not diag else diag["confidence"],
                anomaly_over_limit=None if not anomaly else anomaly.get("over_limit"),
                zone=_zone(result),
                as_of=row.as_of if assessed else None,
            )
        )

    def rank(i: FleetRiskItem) -> tuple[float, float, float, str]:
        hi = i.health_index if i.health_index is not None else -math.inf
        ratio = hi / i.failure_threshold if i.failure_threshold else hi
        return (
            -(i.probability_within_horizon or 0.0),
            -float(bool(i.anomaly_over_limit)),
            -ratio,
            i.asset_id,
        )

    items.sort(key=rank)
    items = items[:limit]
    return FleetRiskOut(items=items, count=len(items), horizon_h=horizon_h)


def _event_out(e: MaintenanceEventRow) -> MaintenanceEventOut:
    return MaintenanceEventOut(
        event_id=e.event_id,
        asset_id=e.asset_id,
        at=e.at,
        kind=e.kind,
        component=e.component,
        failure_mode=e.failure_mode,
        notes=e.notes,
        performed_by=e.performed_by,
        recorded_at=e.recorded_at,
    )


def _keyset_page(
    session: Session,
    stmt: Select[Any],
    time_col: InstrumentedAttribute[datetime],
    id_col: InstrumentedAttribute[uuid.UUID],
    cursor: str | None,
    limit: int,
) -> tuple[list[Any], str | None]:
    """One page of ``stmt`` in (time, id) order after ``cursor``, and the next page's cursor."""
    if cursor:
        t_text, id_text = decode_cursor(cursor, 2)
        try:
            t, i = datetime.fromisoformat(str(t_text)), uuid.UUID(str(id_text))
        except ValueError:
            raise InvalidInputError(
                "cursor is not valid; pass next_cursor back unchanged"
            ) from None
        stmt = stmt.where(or_(time_col > t, and_(time_col == t, id_col > i)))
    rows = list(session.scalars(stmt.order_by(time_col, id_col).limit(limit + 1)))
    if len(rows) <= limit:
        return rows, None
    rows = rows[:limit]
    last = rows[-1]
    return rows, encode_cursor(
        getattr(last, time_col.key).isoformat(), getattr(last, id_col.key).hex
    )


def health_history(
    session: Session,
    asset_id: str,
    principal: Principal,
    *,
    start: datetime | None,
    end: datetime | None,
    limit: int,
    cursor: str | None = None,
) -> HealthOut:
    """Health points (oldest first), exclusions with their reasons, and maintenance events."""
    get_asset(session, asset_id, principal)
    if start is not None and end is not None and end <= start:
        raise InvalidInputError(f"end must be after start, got start={start} end={end}")
    row = _row(session, asset_id)
    result = (row.result if row is not None else None) or {}
    mode = mode_of_fault(result.get("failure_mode")) or result.get("failure_mode")
    stmt = select(HealthPointRow).where(HealthPointRow.asset_id == asset_id)
    if start is not None:
        stmt = stmt.where(HealthPointRow.window_start >= start)
    if end is not None:
        stmt = stmt.where(HealthPointRow.window_start < end)
    rows, nxt = _keyset_page(
        session, stmt, HealthPointRow.window_start, HealthPointRow.message_id, cursor, limit
    )
    points = [
        HealthPointOut(
            t=p.window_start,
            health_index=None if not p.health or mode is None else p.health.get(mode),
            anomaly_score=p.anomaly_score,
            control_limit=p.control_limit,
            regime=None if p.regime is None else str(p.regime),
            excluded=p.excluded,
            excluded_reason=p.excluded_reason,
        )
        for p in rows
    ]
    events = session.scalars(
        select(MaintenanceEventRow)
        .where(MaintenanceEventRow.asset_id == asset_id)
        .order_by(MaintenanceEventRow.at, MaintenanceEventRow.event_id)
    )
    status = row.status if row is not None else None
    return HealthOut(
        asset_id=asset_id,
        failure_mode=result.get("failure_mode"),
        failure_threshold=result.get("failure_threshold"),
        points=points,
        excluded_count=sum(1 for p in points if p.excluded),
        maintenance_events=[_event_out(e) for e in events],
        forecast=_forecast(result, row.segment_start, 0.1, 720.0)
        if row is not None and status == "forecast"
        else None,
        next_cursor=nxt,
    )


def diagnosis_view(session: Session, asset_id: str, principal: Principal) -> DiagnosisOut:
    """The latest diagnosis: fault, confidence, probabilities, evidence and the indicators."""
    get_asset(session, asset_id, principal)
    row = _row(session, asset_id)
    diag = ((row.result if row is not None else None) or {}).get("diagnosis")
    if not diag:
        return DiagnosisOut(
            asset_id=asset_id,
            as_of=None,
            fault=None,
            confidence=None,
            probabilities={},
            evidence=[],
            indicators=[],
        )
    return DiagnosisOut(
        asset_id=asset_id,
        as_of=datetime.fromisoformat(diag["at"]),
        fault=diag["fault"],
        confidence=diag["confidence"],
        probabilities=diag["probabilities"],
        evidence=diag["evidence"],
        indicators=[IndicatorOut(**i) for i in diag["indicators"]],
        summary=diag.get("summary"),
    )


def record_maintenance_event(
    session: Session, asset_id: str, principal: Principal, spec: MaintenanceEventIn
) -> MaintenanceEventOut:
    """Store a maintenance event and mark the asset for reassessment.

    A repair, replacement or failure starts a new life segment: the next assessment learns a new
    baseline from the windows after it and refits the forecast.
    """
    get_asset(session, asset_id, principal)
    now = datetime.now(UTC)
    at = spec.at.astimezone(UTC)
    if at > now + _FUTURE_TOLERANCE:
        raise InvalidInputError(f"at {at.isoformat()} is in the future; record events once done")
    event = MaintenanceEventRow(
        event_id=uuid.uuid4(),
        asset_id=asset_id,
        at=at,
        kind=spec.kind,
        component=spec.component,
        failure_mode=None if spec.failure_mode is None else str(spec.failure_mode.value),
        notes=spec.notes,
        performed_by=spec.performed_by,
        recorded_at=now,
        recorded_by=principal.key_id,
    )
    session.add(event)
    row = _row(session, asset_id)
    if row is not None:
        row.backlog = True  # the worker reassesses it on its next cycle
    session.flush()
    return _event_out(event)


def list_maintenance_events(
    session: Session, asset_id: str, principal: Principal, *, limit: int, cursor: str | None
) -> MaintenanceEventPage:
    """The asset's maintenance events, oldest first."""
    get_asset(session, asset_id, principal)
    stmt = select(MaintenanceEventRow).where(MaintenanceEventRow.asset_id == asset_id)
    rows, nxt = _keyset_page(
        session, stmt, MaintenanceEventRow.at, MaintenanceEventRow.event_id, cursor, limit
    )
    return MaintenanceEventPage(
        items=[_event_out(e) for e in rows], count=len(rows), next_cursor=nxt
    )
