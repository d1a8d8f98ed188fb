"""Pydantic models of every message that crosses the wire.

All models are frozen and refuse unknown fields. Times are timezone-aware and normalised to UTC;
numbers must be finite. Field names carry their unit where the unit is not obvious.
"""

from __future__ import annotations

import hashlib
import json
from datetime import UTC, datetime
from enum import StrEnum
from typing import Annotated, Any, Literal
from uuid import UUID

from pydantic import (
    AfterValidator,
    BaseModel,
    ConfigDict,
    Field,
    ModelWrapValidatorHandler,
    PlainSerializer,
    computed_field,
    field_validator,
    model_validator,
)

__all__ = [
    "SCHEMA_MAJOR",
    "Alert",
    "AlertSeverity",
    "ChannelQuality",
    "ClockSync",
    "DropReport",
    "EdgeAlarm",
    "EdgeAlarmKind",
    "FaultMode",
    "GatewayState",
    "GatewayStatus",
    "Identifier",
    "IndicatorLayout",
    "IndicatorMessage",
    "IndicatorSpec",
    "LayoutAnnouncement",
    "MaintenanceEvent",
    "MaintenanceKind",
    "OperatingCondition",
    "QualityFlag",
    "ShaftSpeedSource",
]

SCHEMA_MAJOR = 1
"""Major version of the contract; it appears in every topic and payload."""

RESERVED_IDS = frozenset({"alerts", "layout", "status", "indicators", "alarm", "dropped"})


def _utc(value: datetime) -> datetime:
    if value.tzinfo is None or value.utcoffset() is None:
        raise ValueError("timestamp must carry a timezone (UTC), got a naive datetime")
    return value.astimezone(UTC)


def _not_reserved(value: str) -> str:
    if value in RESERVED_IDS:
        raise ValueError(f"{value!r} is reserved for topic names and cannot be an identifier")
    return value


def _iso_z(value: datetime) -> str:
    return value.isoformat().replace("+00:00", "Z")


UtcDatetime = Annotated[
    datetime, AfterValidator(_utc), PlainSerializer(_iso_z, return_type=str, when_used="json")
]
Identifier = Annotated[
    str,
    Field(pattern=r"^[A-Za-z0-9][A-Za-z0-9_.-]*$", min_length=1, max_length=64),
    AfterValidator(_not_reserved),
]
"""Site, gateway and asset identifiers: safe as MQTT topic levels and URL path segments."""


class _Message(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, allow_inf_nan=False)


class QualityFlag(StrEnum):
    """Data-quality findings on one channel's window. Append only: positions are wire bits."""

    CLIPPED = "clipped"
    FLATLINE = "flatline"
    SPIKES_REMOVED = "spikes_removed"
    DROPOUT = "dropout"
    DC_OFFSET = "dc_offset"
    DRIFT = "drift"
    OUT_OF_REGIME = "out_of_regime"


class ClockSync(StrEnum):
    """State of the gateway's clock when the window was taken."""

    SYNCED = "synced"  # disciplined by NTP/GNSS within tolerance
    HOLDOVER = "holdover"  # was synced, now free-running since the last sync
    UNSYNCED = "unsynced"  # never synced since boot: the timestamp is the gateway's guess


class ShaftSpeedSource(StrEnum):
    """Where the shaft speed in the operating condition came from, best first."""

    TACHO = "tacho"
    SPECTRUM = "spectrum"
    DRIVE = "drive"
    NOMINAL = "nominal"


class OperatingCondition(_Message):
    """The operating point during the window, so the service compares like with like."""

    shaft_speed_hz: float | None = Field(default=None, ge=0, le=1000)
    shaft_speed_source: ShaftSpeedSource | None = None
    load_fraction: float | None = Field(default=None, ge=0, le=10)
    flow_m3_per_h: float | None = Field(default=None, ge=0, le=1e6)
    suction_pressure_kpa: float | None = Field(default=None, ge=-200, le=1e5)
    fluid_temperature_c: float | None = Field(default=None, ge=-100, le=1000)

    @model_validator(mode="after")
    def _source_with_speed(self) -> OperatingCondition:
        if (self.shaft_speed_hz is None) != (self.shaft_speed_source is None):
            raise ValueError("shaft_speed_hz and shaft_speed_source must be given together")
        return self


class ChannelQuality(_Message):
    """Quality flags of one channel; a channel with no findings is simply not listed."""

    channel: str = Field(pattern=r"^[a-z][a-z0-9_]*$", max_length=32)
    flags: frozenset[QualityFlag] = frozenset()
    spikes_removed: int = Field(default=0, ge=0, le=1_000_000)

    @model_validator(mode="after")
    def _spikes_flagged(self) -> ChannelQuality:
        if (self.spikes_removed > 0) != (QualityFlag.SPIKES_REMOVED in self.flags):
            raise ValueError("spikes_removed > 0 exactly when the spikes_removed flag is set")
        return self


class IndicatorSpec(_Message):
    """One entry of a layout: an indicator's name, its unit and how its value is packed."""

    name: str = Field(pattern=r"^[a-z][a-z0-9_]*\.[a-z][a-z0-9_]*$", max_length=64)
    unit: str = Field(min_length=1, max_length=16)
    channel: str = Field(pattern=r"^[a-z][a-z0-9_]*$", max_length=32)
    encoding: Literal["f32", "f16"] = "f32"

    @model_validator(mode="after")
    def _name_starts_with_channel(self) -> IndicatorSpec:
        if self.name.split(".", 1)[0] != self.channel:
            raise ValueError(
                f"indicator name must be '{{channel}}.{{quantity}}'; "
                f"name {self.name!r} does not start with channel {self.channel!r}"
            )
        return self


class IndicatorLayout(_Message):
    """Ordered indicator names, units and channels that a packed value vector refers to.

    The digest is derived from the content, so two gateways with the same extractor and channel
    set share a layout, and any change of names, units, order or encoding makes a new one.
    """

    schema_version: Literal[1] = 1
    extractor_version: str = Field(min_length=1, max_length=32)
    indicators: tuple[IndicatorSpec, ...] = Field(min_length=1, max_length=1024)

    @model_validator(mode="wrap")
    @classmethod
    def _check_claimed_digest(cls, data: Any, handler: ModelWrapValidatorHandler[Any]) -> Any:
        claimed = None
        if isinstance(data, dict) and "digest" in data:
            data = dict(data)
            claimed = data.pop("digest")
        layout = handler(data)
        if claimed is not None and claimed != layout.digest:
            raise ValueError(f"digest {claimed!r} does not match the layout's content")
        return layout

    @field_validator("indicators")
    @classmethod
    def _unique_names(cls, v: tuple[IndicatorSpec, ...]) -> tuple[IndicatorSpec, ...]:
        names = [s.name for s in v]
        if len(set(names)) != len(names):
            dup = sorted({n for n in names if names.count(n) > 1})
            raise ValueError(f"indicator names must be unique; repeated: {dup}")
        return v

    @computed_field  # type: ignore[prop-decorator]
    @property
    def digest(self) -> str:
        """16 lowercase hex characters (64 bits of SHA-256 over the canonical content)."""
        canon = json.dumps(
            {
                "schema_version": self.schema_version,
                "extractor_version": self.extractor_version,
                "indicators": [[s.name, s.unit, s.channel, s.encoding] for s in self.indicators],
            },
            separators=(",", ":"),
        )
        return hashlib.sha256(canon.encode()).hexdigest()[:16]

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(s.name for s in self.indicators)

    @property
    def channels(self) -> tuple[str, ...]:
        """Channel names in order of first appearance."""
        return tuple(dict.fromkeys(s.channel for s in self.indicators))

    def index(self, name: str) -> int:
        for i, s in enumerate(self.indicators):
            if s.name == name:
                return i
        raise KeyError(name)


class LayoutAnnouncement(_Message):
    """The layouts a gateway currently uses, published retained on its layout topic."""

    schema_version: Literal[1] = 1
    gateway_id: Identifier
    site: Identifier
    published_at: UtcDatetime
    layouts: tuple[IndicatorLayout, ...] = Field(min_length=1, max_length=64)


class IndicatorMessage(_Message):
    """Indicators computed from one asset's window set: the bulk of all traffic.

    Identity is (gateway_id, sequence) and, independently, message_id; either one is unique.
    ``values`` follow the referenced layout's order; ``None`` means the indicator could not be
    computed from this window (e.g. a flatlined channel) and is never a stand-in number.
    """

    schema_version: Literal[1] = 1
    message_id: UUID
    gateway_id: Identifier
    sequence: int = Field(ge=0, lt=2**63)
    site: Identifier
    asset_id: Identifier
    window_start: UtcDatetime
    window_s: float = Field(gt=0, le=3600)
    clock_sync: ClockSync = ClockSync.SYNCED
    operating: OperatingCondition = OperatingCondition()
    quality: tuple[ChannelQuality, ...] = ()
    layout_digest: str = Field(pattern=r"^[0-9a-f]{16}$")
    values: tuple[float | None, ...] = Field(max_length=1024)

    @field_validator("quality")
    @classmethod
    def _normalise_quality(cls, v: tuple[ChannelQuality, ...]) -> tuple[ChannelQuality, ...]:
        seen: set[str] = set()
        for q in v:
            if q.channel in seen:
                raise ValueError(f"channel {q.channel!r} listed twice in quality")
            seen.add(q.channel)
        return tuple(sorted((q for q in v if q.flags), key=lambda q: q.channel))

    @field_validator("window_start")
    @classmethod
    def _millisecond_resolution(cls, v: datetime) -> datetime:
        # The wire carries milliseconds; refusing finer times keeps both forms equivalent.
        if v.microsecond % 1000:
            raise ValueError("window_start has sub-millisecond digits; round to milliseconds")
        return v

    def values_by_name(self, layout: IndicatorLayout) -> dict[str, float | None]:
        """Pair the packed values with the names of the layout this message references."""
        if layout.digest != self.layout_digest:
            raise ValueError(
                f"message references layout {self.layout_digest}, got layout {layout.digest}"
            )
        if len(layout.indicators) != len(self.values):
            raise ValueError(
                f"layout has {len(layout.indicators)} indicators, message has {len(self.values)}"
            )
        return dict(zip(layout.names, self.values, strict=True))

    def quality_of(self, channel: str) -> ChannelQuality:
        for q in self.quality:
            if q.channel == channel:
                return q
        return ChannelQuality(channel=channel)


class GatewayState(StrEnum):
    ONLINE = "online"  # birth message on connect
    OFFLINE = "offline"  # clean shutdown
    LOST = "lost"  # Last Will: the broker lost the connection


class GatewayStatus(_Message):
    """Retained status of a gateway: birth on connect, periodic updates, Last Will on loss."""

    schema_version: Literal[1] = 1
    gateway_id: Identifier
    site: Identifier
    state: GatewayState
    at: UtcDatetime | None = None  # None only in the Last Will, fixed at connect time
    agent_version: str | None = Field(default=None, max_length=32)
    assets: tuple[Identifier, ...] = ()
    clock_sync: ClockSync | None = None
    outbox_messages: int | None = Field(default=None, ge=0)
    outbox_bytes: int | None = Field(default=None, ge=0)
    oldest_queued_at: UtcDatetime | None = None
    dropped_total: int | None = Field(default=None, ge=0)
    bytes_sent_today: int | None = Field(default=None, ge=0)
    budget_bytes_per_day: int | None = Field(default=None, ge=0)
    deadband_scale: float | None = Field(default=None, ge=0)
    lag_s: float | None = Field(default=None, ge=0)
    cpu_fraction: float | None = Field(default=None, ge=0)
    last_sequence: int | None = Field(default=None, ge=0)


class EdgeAlarmKind(StrEnum):
    ZONE_CHANGE = "zone_change"  # ISO 10816-3 severity zone changed
    THRESHOLD = "threshold"  # a configured indicator threshold was crossed
    SENSOR_FAULT = "sensor_fault"  # a channel's quality check failed persistently


class EdgeAlarm(_Message):
    """A threshold crossing seen at the gateway, sent ahead of the routine queue."""

    schema_version: Literal[1] = 1
    message_id: UUID
    gateway_id: Identifier
    site: Identifier
    asset_id: Identifier
    raised_at: UtcDatetime
    kind: EdgeAlarmKind
    indicator: str | None = Field(default=None, max_length=64)
    channel: str | None = Field(default=None, max_length=32)
    value: float | None = None
    threshold: float | None = None
    unit: str | None = Field(default=None, max_length=16)
    zone_from: Literal["A", "B", "C", "D"] | None = None
    zone_to: Literal["A", "B", "C", "D"] | None = None
    cleared: bool = False
    detail: str = Field(default="", max_length=500)


class DropReport(_Message):
    """What a full outbox thinned away, exactly, so a sequence gap is explained, not a loss."""

    schema_version: Literal[1] = 1
    message_id: UUID
    gateway_id: Identifier
    site: Identifier
    at: UtcDatetime
    dropped_count: int = Field(ge=1)
    sequence_ranges: tuple[tuple[int, int], ...] = Field(min_length=1)
    asset_counts: dict[Identifier, int] = Field(default_factory=dict)
    rule: str = Field(max_length=200)

    @field_validator("sequence_ranges")
    @classmethod
    def _ranges_ordered(cls, v: tuple[tuple[int, int], ...]) -> tuple[tuple[int, int], ...]:
        for lo, hi in v:
            if not 0 <= lo <= hi:
                raise ValueError(f"sequence range must satisfy 0 <= first <= last, got {lo, hi}")
        return v


class FaultMode(StrEnum):
    """Failure modes the system diagnoses; also the vocabulary of maintenance records."""

    HEALTHY = "healthy"
    OUTER_RACE = "outer_race"
    INNER_RACE = "inner_race"
    ROLLING_ELEMENT = "rolling_element"
    CAGE = "cage"
    IMBALANCE = "imbalance"
    MISALIGNMENT = "misalignment"
    CAVITATION = "cavitation"
    IMPELLER_WEAR = "impeller_wear"
    OTHER = "other"


class MaintenanceKind(StrEnum):
    INSPECTION = "inspection"
    REPAIR = "repair"
    REPLACEMENT = "replacement"
    FAILURE = "failure"


class MaintenanceEvent(_Message):
    """A maintenance outcome reported back: it labels history and resets baselines."""

    schema_version: Literal[1] = 1
    asset_id: Identifier
    at: UtcDatetime
    kind: MaintenanceKind
    component: str = Field(default="", max_length=64)
    failure_mode: FaultMode | None = None
    notes: str = Field(default="", max_length=4000)


class AlertSeverity(StrEnum):
    INFO = "info"
    WARNING = "warning"
    CRITICAL = "critical"


class Alert(_Message):
    """An alert raised by the service, as published to integrators."""

    schema_version: Literal[1] = 1
    alert_id: UUID
    site: Identifier
    asset_id: Identifier | None = None
    gateway_id: Identifier | None = None
    kind: str = Field(max_length=64)
    severity: AlertSeverity
    state: Literal["open", "acknowledged", "resolved"]
    opened_at: UtcDatetime
    summary: str = Field(max_length=500)
    detail: dict[str, str | float | int | None] = Field(default_factory=dict)
