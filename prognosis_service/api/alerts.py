"""/v1/alerts (list, detail: read; acknowledge, resolve: operate) and /v1/alert-rules (admin)."""

from __future__ import annotations

import uuid
from datetime import UTC, datetime
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Body, Query
from pydantic import BaseModel, ConfigDict, Field, field_validator

from prognosis_service.alerts.models import AlertRow
from prognosis_service.alerts.rules import AlertKind, AlertRulesError
from prognosis_service.alerts.rules_source import RulesInForce, rules_in_force, store_rules
from prognosis_service.alerts.service import AlertService, get_alert, list_alerts
from prognosis_service.api.deps import (
    AdminKey,
    OperatorKey,
    ReaderKey,
    ReadSessionDep,
    Runtime,
    RuntimeDep,
)
from prognosis_service.api.problems import ProblemError
from prognosis_service.api.schemas import Page

__all__ = ["ADVISORY", "AlertOut", "AlertRulesOut", "LifecycleIn", "router"]

router = APIRouter(tags=["alerts"])

ADVISORY = (
    "Alerts are advisory. Alarms do not replace the machine's protective trips or safety "
    "systems; local codes and qualified personnel decide what is done on site."
)
_CAUTION = f"\n\n**Caution.** {ADVISORY}"


class AlertOut(BaseModel):
    """One alert and its lifecycle (who acknowledged or resolved it, and when)."""

    alert_id: uuid.UUID
    kind: str = Field(description=f"One of {[k.value for k in AlertKind]}.")
    severity: Literal["info", "warning", "critical"]
    state: Literal["open", "acknowledged", "resolved"]
    site_id: str
    asset_id: str | None
    gateway_id: str | None
    qualifier: str = Field(description="What within the asset, e.g. a channel; may be empty.")
    title: str = Field(description="One line in plain words.")
    detail: dict[str, Any] = Field(description="The readings behind the alert.")
    opened_at: datetime
    updated_at: datetime
    acknowledged_at: datetime | None
    acknowledged_by: str | None
    resolved_at: datetime | None
    resolved_by: str | None = Field(description='"system" when the condition cleared itself.')
    resolution: str | None
    revision: int = Field(description="Changes published about this alert (CloudEvents).")

    @classmethod
    def from_row(cls, row: AlertRow) -> AlertOut:
        return cls(
            alert_id=row.alert_id,
            kind=row.kind,
            severity=row.severity,
            state=row.state,
            site_id=row.site_id,
            asset_id=row.asset_id,
            gateway_id=row.gateway_id,
            qualifier=row.qualifier,
            title=row.summary,
            detail=row.detail,
            opened_at=row.opened_at,
            updated_at=row.updated_at,
            acknowledged_at=row.acknowledged_at,
            acknowledged_by=row.acknowledged_by,
            resolved_at=row.resolved_at,
            resolved_by=row.resolved_by,
            resolution=row.resolution,
            revision=row.revision,
        )


class AlertPage(Page[AlertOut]):
    advisory: str = ADVISORY


class LifecycleIn(BaseModel):
    """Who acknowledges or resolves, and an optional note (e.g. what was done)."""

    model_config = ConfigDict(extra="forbid")

    by: str = Field(min_length=1, max_length=100, description="A person, e.g. 'r.ngata'.")
    note: str = Field(default="", max_length=200)

    @field_validator("by")
    @classmethod
    def _named(cls, v: str) -> str:
        v = v.strip()
        if not v:
            raise ValueError("by must name a person, got only spaces")
        return v


class AlertRulesOut(BaseModel):
    """The alert rules in force and where they came from."""

    source: Literal["api", "file", "defaults"] = Field(
        description="api: set by PUT /v1/alert-rules (overrides the file); file: the "
        "alert_rules_path setting; defaults: neither."
    )
    version: int | None = Field(description="Version of the API document (source api).")
    set_by: str | None = Field(description="Name of the API key that set it (source api).")
    set_at: datetime | None
    path: str | None = Field(description="The rules file (source file).")
    rules: dict[str, Any] = Field(description="Every setting in force, defaults included.")

    @classmethod
    def of(cls, found: RulesInForce) -> AlertRulesOut:
        return cls(
            source=found.source,
            version=found.version,
            set_by=found.set_by,
            set_at=found.set_at,
            path=found.path,
            rules=found.document(),
        )


def _service(runtime: Runtime) -> AlertService:
    if runtime.alerts is None:
        raise ProblemError(503, "the alert service is not running in this process")
    return runtime.alerts


AlertState = Literal["live", "open", "acknowledged", "resolved"]


@router.get(
    "/v1/alerts",
    response_model=AlertPage,
    summary="List alerts, newest first",
    description="Filter by site, asset, state (`live` = open or acknowledged) and kind; page "
    "with `cursor` = the previous page's `next_cursor`. A key limited to sites sees only its "
    "sites' alerts." + _CAUTION,
)
def list_alerts_route(
    session: ReadSessionDep,
    principal: ReaderKey,
    site: str | None = None,
    asset_id: str | None = None,
    state: AlertState | None = None,
    kind: Annotated[AlertKind | None, Query(description="An alert kind.")] = None,
    limit: Annotated[int, Query(ge=1, le=1000)] = 100,
    cursor: str | None = None,
) -> AlertPage:
    rows, nxt = list_alerts(
        session,
        principal,
        site=site,
        asset_id=asset_id,
        state=state,
        kind=None if kind is None else kind.value,
        limit=limit,
        cursor=cursor,
    )
    return AlertPage(items=[AlertOut.from_row(r) for r in rows], count=len(rows), next_cursor=nxt)


@router.get(
    "/v1/alerts/{alert_id}",
    response_model=AlertOut,
    summary="One alert",
    description="An alert with its lifecycle." + _CAUTION,
)
def get_alert_route(alert_id: uuid.UUID, session: ReadSessionDep, principal: ReaderKey) -> AlertOut:
    return AlertOut.from_row(get_alert(session, alert_id, principal))


def _after(runtime: Runtime, alert_id: uuid.UUID) -> AlertOut:
    with runtime.store.read() as session:
        return AlertOut.from_row(get_alert(session, alert_id))


@router.post(
    "/v1/alerts/{alert_id}/acknowledge",
    response_model=AlertOut,
    summary="Acknowledge an open alert (scope operate)",
    description="open → acknowledged, recording who and when. 409 when the alert is not open "
    "(already acknowledged or resolved). Acknowledging does not clear the condition; the alert "
    "resolves itself once the condition clears." + _CAUTION,
    responses={409: {"description": "The alert is not open."}},
)
def acknowledge_alert(
    alert_id: uuid.UUID, body: LifecycleIn, runtime: RuntimeDep, principal: OperatorKey
) -> AlertOut:
    _service(runtime).acknowledge(alert_id, by=body.by, note=body.note, principal=principal)
    return _after(runtime, alert_id)


@router.post(
    "/v1/alerts/{alert_id}/resolve",
    response_model=AlertOut,
    summary="Resolve an alert by hand (scope operate)",
    description="open or acknowledged → resolved, recording who, when and the note. 409 when "
    "it is already resolved. While the condition persists no new alert is raised for it unless "
    "it worsens; once it clears, it is armed again." + _CAUTION,
    responses={409: {"description": "The alert is already resolved."}},
)
def resolve_alert(
    alert_id: uuid.UUID, body: LifecycleIn, runtime: RuntimeDep, principal: OperatorKey
) -> AlertOut:
    _service(runtime).resolve(alert_id, by=body.by, note=body.note, principal=principal)
    return _after(runtime, alert_id)


@router.get(
    "/v1/alert-rules",
    response_model=AlertRulesOut,
    summary="The alert rules in force (scope admin)",
    description="The newest rules set through the API, else the rules file "
    "(`alert_rules_path`), else the built-in defaults; `source` says which." + _CAUTION,
)
def get_alert_rules(
    session: ReadSessionDep, runtime: RuntimeDep, principal: AdminKey
) -> AlertRulesOut:
    try:
        found = rules_in_force(session, path=runtime.settings.alert_rules_path)
    except AlertRulesError as exc:  # e.g. the rules file was edited badly since the start
        raise ProblemError(
            503, f"the rules source is not valid ({exc}); the last valid rules stay in force"
        ) from None
    return AlertRulesOut.of(found)


@router.put(
    "/v1/alert-rules",
    response_model=AlertRulesOut,
    summary="Set the alert rules (scope admin)",
    description="The body has the keys of the rules file (`defaults`, `asset_classes`, `sites`; "
    "see `alert_rules.sample.toml`), as JSON; keys left out keep their defaults. Bad rules are "
    "refused with a 422 problem naming the key. The rules are stored as a new version, which "
    "overrides the rules file, and apply at once in this process and within "
    "`alerts_check_interval_s` in the others. A key limited to sites may not set them." + _CAUTION,
    responses={422: {"description": "The rules are not valid; `detail` names the key."}},
)
def put_alert_rules(
    runtime: RuntimeDep,
    principal: AdminKey,
    body: Annotated[dict[str, Any], Body(examples=[{"defaults": {"anomaly": {"limit": 1.2}}}])],
) -> AlertRulesOut:
    with runtime.store.write() as session:
        found = store_rules(session, body, principal=principal, now=datetime.now(UTC))
    _service(runtime).engine.rules = found.rules
    return AlertRulesOut.of(found)
