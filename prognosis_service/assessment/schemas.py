"""Bodies of the assessment routes (shapes of the shared HTTP contract; times UTC with ``Z``)."""

from __future__ import annotations

import uuid
from datetime import datetime
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, field_validator

from prognosis_service.diagnosis import ADVISORY as _DIAGNOSIS_ADVISORY
from prognosis_service.prognosis import ADVISORY
from shared_schema import FaultMode

__all__ = [
    "ADVISORY",
    "DIAGNOSIS_ADVISORY",
    "AnomalyOut",
    "DiagnosisOut",
    "DiagnosisSummaryOut",
    "FleetRiskItem",
    "FleetRiskOut",
    "ForecastOut",
    "HealthOut",
    "HealthPointOut",
    "IndicatorOut",
    "MaintenanceEventIn",
    "MaintenanceEventOut",
    "MaintenanceEventPage",
    "ModelOut",
    "TimeToFailureOut",
]

DIAGNOSIS_ADVISORY = _DIAGNOSIS_ADVISORY

Status = Literal["forecast", "no_degradation", "not_enough_data", "no_baseline"]


class AnomalyOut(BaseModel):
    score: float
    control_limit: float
    over_limit: bool


class ForecastOut(BaseModel):
    """Time to failure after the last observation, hours; ``None`` where never reached."""

    p10_h: float | None
    p50_h: float | None
    p90_h: float | None
    p10_at: datetime | None
    p50_at: datetime | None
    p90_at: datetime | None
    horizon_h: float
    probability_within_horizon: float
    risk: float
    latest_maintenance_at: datetime | None
    latest_maintenance_h: float | None = None
    observed_at: datetime = Field(description="The last observation the forecast starts from.")


class ModelOut(BaseModel):
    name: str
    fit_quality: dict[str, float | None]
    n_points: int
    life_segment_start: datetime
    fitted_at: datetime
    prior: str = Field(description='"fleet" (learned from recorded failures) or "default".')


class DiagnosisSummaryOut(BaseModel):
    fault: str
    confidence: float
    evidence: list[str]


class TimeToFailureOut(BaseModel):
    asset_id: str
    site_id: str
    asset_class: str
    as_of: datetime | None
    status: Status
    message: str
    failure_mode: str | None
    health_index: float | None
    failure_threshold: float | None
    anomaly: AnomalyOut | None
    forecast: ForecastOut | None
    model: ModelOut | None
    diagnosis: DiagnosisSummaryOut | None
    advisory: str = ADVISORY


class FleetRiskItem(BaseModel):
    asset_id: str
    site_id: str
    asset_class: str
    status: Status
    probability_within_horizon: float | None
    p50_h: float | None
    p50_at: datetime | None
    health_index: float | None
    failure_threshold: float | None
    likely_fault: str | None
    fault_confidence: float | None
    anomaly_over_limit: bool | None
    zone: Literal["A", "B", "C", "D"] | None
    as_of: datetime | None


class FleetRiskOut(BaseModel):
    items: list[FleetRiskItem]
    count: int
    horizon_h: float
    advisory: str = ADVISORY


class MaintenanceEventIn(BaseModel):
    """A maintenance outcome. Repairs, replacements and failures start a new life segment."""

    model_config = ConfigDict(extra="forbid")

    at: datetime
    kind: Literal["inspection", "repair", "replacement", "failure"]
    component: str = Field(default="", max_length=64)
    failure_mode: FaultMode | None = None
    notes: str = Field(default="", max_length=4000)
    performed_by: str = Field(default="", max_length=100)

    @field_validator("at")
    @classmethod
    def _aware(cls, v: datetime) -> datetime:
        if v.tzinfo is None or v.utcoffset() is None:
            raise ValueError("at must carry a time zone (e.g. 2026-06-01T08:00:00Z)")
        return v


class MaintenanceEventOut(BaseModel):
    event_id: uuid.UUID
    asset_id: str
    at: datetime
    kind: str
    component: str
    failure_mode: str | None
    notes: str
    performed_by: str
    recorded_at: datetime


class MaintenanceEventPage(BaseModel):
    items: list[MaintenanceEventOut]
    count: int
    next_cursor: str | None = None


class HealthPointOut(BaseModel):
    t: datetime
    health_index: float | None
    anomaly_score: float | None = Field(
        description="Hotelling T² of the window's health indices against its baseline; "
        "negative when they departed downwards on balance (healthier than the baseline), "
        "which is never an anomaly. Over control_limit: anomalous. Advisory only."
    )
    control_limit: float | None
    regime: str | None
    excluded: bool
    excluded_reason: str | None


class HealthOut(BaseModel):
    asset_id: str
    failure_mode: str | None
    failure_threshold: float | None
    points: list[HealthPointOut]
    excluded_count: int
    maintenance_events: list[MaintenanceEventOut]
    forecast: ForecastOut | None
    next_cursor: str | None = None
    advisory: str = ADVISORY


class IndicatorOut(BaseModel):
    name: str
    unit: str
    value: float
    baseline: float | None
    db_over_baseline: float | None


class DiagnosisOut(BaseModel):
    asset_id: str
    as_of: datetime | None
    fault: str | None
    confidence: float | None
    probabilities: dict[str, float]
    evidence: list[str]
    indicators: list[IndicatorOut]
    summary: str | None = None
    advisory: str = DIAGNOSIS_ADVISORY
