"""Request and response bodies of the HTTP API (times ISO 8601 UTC with ``Z``)."""

from __future__ import annotations

from datetime import datetime
from typing import Annotated, Generic, Literal, TypeVar

from pydantic import BaseModel, ConfigDict, Field

from prognosis_service.domain.assets import AssetSpec

__all__ = [
    "AssetIn",
    "AssetOut",
    "BucketOut",
    "GatewayOut",
    "HistoryOut",
    "IndicatorNameOut",
    "IngestResult",
    "Page",
    "PointOut",
    "QuarantineDetailOut",
    "QuarantineOut",
    "ReadmitIn",
    "ReadmitOut",
]

T = TypeVar("T")


class Page(BaseModel, Generic[T]):
    """A page of a list; pass ``next_cursor`` back as ``cursor`` for the next one."""

    items: list[T]
    count: int
    next_cursor: str | None = None


AssetIn = AssetSpec


class AssetOut(BaseModel):
    model_config = ConfigDict(from_attributes=True)

    asset_id: str
    site: str
    gateway_id: str | None
    asset_class: str
    description: str
    registered_at: datetime
    last_window_start: datetime | None = None


class AssetRegistered(AssetOut):
    created: bool
    readmitted: int = Field(description="Quarantined messages of this asset stored now.")


class IndicatorNameOut(BaseModel):
    name: str
    unit: str


class PointOut(BaseModel):
    window_start: datetime
    value: float | None = Field(description="None: not computed at the gateway for this window.")
    quality_flags: list[str] = Field(description="Quality flags of the indicator's channel.")


class BucketOut(BaseModel):
    start: datetime
    count: int
    flagged: int = Field(description="Values in the bucket whose channel carried a quality flag.")
    mean: float | None
    min: float | None
    max: float | None


class HistoryOut(BaseModel):
    asset_id: str
    indicator: str
    unit: str
    every: str | None
    items: list[PointOut] | list[BucketOut]
    count: int
    next_cursor: str | None


class GatewayOut(BaseModel):
    gateway_id: str
    site: str
    link_state: Literal["online", "offline", "lost", "silent", "unknown"]
    state: str | None = Field(description="State from the last status message, if any.")
    state_at: datetime | None
    last_seen_at: datetime | None
    last_sequence: int | None
    agent_version: str | None
    last_status: dict[str, object] | None


class QuarantineOut(BaseModel):
    id: int
    received_at: datetime
    source: str
    topic: str | None
    reason: str
    detail: str
    site: str | None
    gateway_id: str | None
    asset_id: str | None
    message_id: str | None
    sequence: int | None
    layout_digest: str | None
    attempts: int
    payload_bytes: int
    resolved_at: datetime | None
    resolution: str | None


class QuarantineDetailOut(QuarantineOut):
    payload_base64: str
    payload_text: str | None = Field(description="The payload as text when it is UTF-8 (JSON).")


class ReadmitIn(BaseModel):
    model_config = ConfigDict(extra="forbid")

    ids: list[Annotated[int, Field(ge=1, le=2**63 - 1)]] | None = Field(
        default=None, max_length=10_000
    )
    reason: str | None = None
    asset_id: str | None = None


class ReadmitOut(BaseModel):
    readmitted: int
    still_held: int
    results: list[dict[str, object]]


class IngestResult(BaseModel):
    received: int
    stored: int
    duplicates: int
    layouts_stored: int
    readmitted: int
    quarantined: list[dict[str, object]]
