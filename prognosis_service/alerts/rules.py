"""Alert rules: typed settings, hysteresis, de-duplication and the alert lifecycle.

Pure over its inputs: readings come in, :class:`AlertChange` records come out, and everything the
engine remembers lives in an explicit :class:`AlertState` that serialises to plain JSON so the
service can persist it between evaluations (and between restarts).

How a condition becomes an alert
--------------------------------
Each rule turns one reading into two facts: is the reading *over* the raise limit, and is it
*under* the clear limit. The two limits differ (hysteresis), so a value wandering around one limit
cannot flap. A condition is raised once it was over in ``windows_over`` of the last
``windows_considered`` readings (or, when ``sustain_s`` is set, over without a break for that
long); it clears only after ``clear_windows`` readings in a row under the clear limit *and* at least
``min_hold_s`` after it was raised.

One condition key — (site, asset or gateway, alert kind, qualifier such as a channel) — has at most
one live alert (open or acknowledged). While it is live, further triggering readings only update
it when its severity rises (severity never falls while an alert is live, so noise cannot make it
bounce between warning and critical). Lifecycle: open → acknowledged → resolved. A condition that
clears resolves its alert (``resolved_by = "system"``). A person who resolves an alert whose
condition is still present has said "I know": the condition re-arms only after it has cleared, or
when its severity rises above the one that person resolved.

Alerts are advisory. They do not replace the machine's protective trips; qualified personnel and
local codes decide what is done on site.
"""

from __future__ import annotations

import re
import tomllib
import uuid
from collections import deque
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from datetime import UTC, datetime
from enum import StrEnum
from pathlib import Path
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator

from shared_schema.messages import Alert, AlertSeverity, FaultMode, QualityFlag

__all__ = [
    "ALERT_NAMESPACE",
    "AlertChange",
    "AlertEngine",
    "AlertKind",
    "AlertRecord",
    "AlertRulesConfig",
    "AlertRulesError",
    "AlertState",
    "AnomalyReading",
    "AnomalyRule",
    "ChangeKind",
    "ChannelQualityReading",
    "ConditionState",
    "DiagnosisReading",
    "DiagnosisRule",
    "LastHeardReading",
    "Reading",
    "RuleSet",
    "SensorFaultRule",
    "SilenceRule",
    "TimeToFailureReading",
    "TimeToFailureRule",
    "ZoneReading",
    "ZoneRule",
    "condition_key",
    "load_rules",
    "parse_rules",
    "severity_rank",
    "severity_zone",
]

ALERT_NAMESPACE = uuid.UUID("0b6f3f4e-5c2a-4c7e-9d51-2f6a8e1b7c30")
"""UUID namespace of alert and event ids: the same inputs always give the same ids."""

_SEVERITY_RANK = {AlertSeverity.INFO: 0, AlertSeverity.WARNING: 1, AlertSeverity.CRITICAL: 2}


def severity_rank(severity: AlertSeverity | str) -> int:
    """0 for info, 1 for warning, 2 for critical (for ``minimum severity`` filters)."""
    return _SEVERITY_RANK[AlertSeverity(severity)]


class AlertKind(StrEnum):
    """Causes of an alert; the value is the ``kind`` of :class:`shared_schema.messages.Alert`."""

    ANOMALY = "anomaly"  # anomaly score over its control limit, sustained
    SEVERITY_ZONE = "severity_zone"  # ISO 10816-3 vibration severity zone C or D
    TIME_TO_FAILURE = "time_to_failure"  # forecast failure sooner than the crew can get there
    DIAGNOSIS_CHANGED = "diagnosis_changed"  # the diagnosed failure mode changed
    GATEWAY_SILENT = "gateway_silent"  # nothing heard from a gateway for too long
    ASSET_SILENT = "asset_silent"  # no indicators from an asset for too long
    SENSOR_FAULT = "sensor_fault"  # a channel's quality checks fail persistently


class AlertRulesError(ValueError):
    """Rule settings are invalid; the message names the file, key and line where known."""


# ----------------------------------------------------------------------------------- settings


class _Settings(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, allow_inf_nan=False)


class _Persistence(_Settings):
    """How long a condition must persist to raise, and to clear."""

    enabled: bool = True
    windows_over: int = Field(default=3, ge=1, le=1000)
    windows_considered: int = Field(default=5, ge=1, le=1000)
    sustain_s: float | None = Field(default=None, gt=0)
    clear_windows: int = Field(default=3, ge=1, le=1000)
    min_hold_s: float = Field(default=900.0, ge=0)

    @model_validator(mode="after")
    def _n_of_m(self) -> _Persistence:
        if self.windows_over > self.windows_considered:
            raise ValueError(
                f"windows_over must be <= windows_considered = {self.windows_considered}, "
                f"got {self.windows_over}"
            )
        return self


class AnomalyRule(_Persistence):
    """Anomaly score over its control limit. Limits are ratios score / control limit."""

    limit: float = Field(default=1.0, gt=0)
    clear_limit: float = Field(default=0.8, gt=0)
    critical_limit: float | None = Field(default=2.0, gt=0)

    @model_validator(mode="after")
    def _ordered(self) -> AnomalyRule:
        if not self.clear_limit < self.limit:
            raise ValueError(
                f"clear_limit must be below limit = {self.limit:g}, got {self.clear_limit:g}"
            )
        if self.critical_limit is not None and self.critical_limit < self.limit:
            raise ValueError(
                f"critical_limit must be >= limit = {self.limit:g}, got {self.critical_limit:g}"
            )
        return self


class ZoneRule(_Persistence):
    """Vibration severity zone (r.m.s. velocity, mm/s). Zone C warns, zone D is critical.

    Defaults: ISO 10816-3:2009 Annex A, machine group 2 (15–300 kW), rigid foundation:
    B/C 2.8 mm/s, C/D 4.5 mm/s. The condition clears below ``(1 - clear_margin) × B/C``.
    """

    ab_boundary_mm_s: float = Field(default=1.4, gt=0)
    bc_boundary_mm_s: float = Field(default=2.8, gt=0)
    cd_boundary_mm_s: float = Field(default=4.5, gt=0)
    clear_margin: float = Field(default=0.1, gt=0, lt=1)

    @model_validator(mode="after")
    def _ordered(self) -> ZoneRule:
        if not self.ab_boundary_mm_s < self.bc_boundary_mm_s < self.cd_boundary_mm_s:
            raise ValueError(
                "zone boundaries must rise: ab_boundary_mm_s < bc_boundary_mm_s < "
                f"cd_boundary_mm_s, got {self.ab_boundary_mm_s:g}, {self.bc_boundary_mm_s:g}, "
                f"{self.cd_boundary_mm_s:g}"
            )
        return self


class TimeToFailureRule(_Persistence):
    """Forecast time to failure at ``risk`` shorter than the crew's lead time."""

    windows_over: int = Field(default=2, ge=1, le=1000)
    windows_considered: int = Field(default=3, ge=1, le=1000)
    clear_windows: int = Field(default=2, ge=1, le=1000)
    risk: float = Field(default=0.1, gt=0, lt=1)
    crew_lead_time_s: float = Field(default=7 * 86400.0, gt=0)
    clear_factor: float = Field(default=1.25, gt=1)
    critical_fraction: float | None = Field(default=0.5, gt=0, lt=1)


class DiagnosisRule(_Persistence):
    """The confirmed failure mode changed to a fault (or from one fault to another)."""

    windows_over: int = Field(default=3, ge=1, le=1000)
    windows_considered: int = Field(default=3, ge=1, le=1000)
    min_confidence: float = Field(default=0.6, ge=0, le=1)
    severity: AlertSeverity = AlertSeverity.WARNING


class SilenceRule(_Settings):
    """A gateway or an asset not heard from for ``silent_after_s``."""

    enabled: bool = True
    silent_after_s: float = Field(default=3600.0, gt=0)
    min_hold_s: float = Field(default=0.0, ge=0)
    severity: AlertSeverity = AlertSeverity.WARNING


class SensorFaultRule(_Persistence):
    """A channel whose quality flags show a sensor or cabling fault, persistently."""

    fault_flags: frozenset[QualityFlag] = frozenset(
        {QualityFlag.CLIPPED, QualityFlag.FLATLINE, QualityFlag.DROPOUT}
    )
    severity: AlertSeverity = AlertSeverity.WARNING


class RuleSet(_Settings):
    """The settings of every rule, as they apply to one asset."""

    anomaly: AnomalyRule = AnomalyRule()
    severity_zone: ZoneRule = ZoneRule()
    time_to_failure: TimeToFailureRule = TimeToFailureRule()
    diagnosis: DiagnosisRule = DiagnosisRule()
    silence: SilenceRule = SilenceRule()
    sensor_fault: SensorFaultRule = SensorFaultRule()


def _merge(base: dict[str, Any], over: Mapping[str, Any]) -> dict[str, Any]:
    out = dict(base)
    for k, v in over.items():
        out[k] = _merge(out[k], v) if isinstance(v, Mapping) and isinstance(out.get(k), dict) else v
    return out


class AlertRulesConfig(_Settings):
    """Rule settings: defaults, then per asset class, then per site (the site wins).

    Overrides are partial (only the keys that differ); each one is validated against the defaults
    when the configuration is built, so an unknown key or a bad value is refused up front.
    """

    defaults: RuleSet = RuleSet()
    asset_classes: dict[str, dict[str, dict[str, Any]]] = Field(default_factory=dict)
    sites: dict[str, dict[str, dict[str, Any]]] = Field(default_factory=dict)

    @model_validator(mode="after")
    def _overrides_valid(self) -> AlertRulesConfig:
        base = self.defaults.model_dump()
        for section, table in (("asset_classes", self.asset_classes), ("sites", self.sites)):
            for name, over in table.items():
                try:
                    RuleSet.model_validate(_merge(base, over))
                except ValidationError as exc:
                    err = exc.errors()[0]
                    loc = ".".join(str(p) for p in err["loc"])
                    msg = err["msg"].removeprefix("Value error, ")
                    raise ValueError(f"{section}.{name}.{loc}: {msg}") from None
        return self

    def for_asset(self, site: str, asset_class: str = "") -> RuleSet:
        """The rule settings that apply to an asset of ``asset_class`` at ``site``."""
        merged = self.defaults.model_dump()
        if asset_class in self.asset_classes:
            merged = _merge(merged, self.asset_classes[asset_class])
        if site in self.sites:
            merged = _merge(merged, self.sites[site])
        return RuleSet.model_validate(merged)


def _line_of(text: str, key_path: list[str]) -> int | None:
    """Best-effort line number of the last key of ``key_path`` in a TOML text."""
    if not key_path:
        return None
    last = re.escape(key_path[-1])
    pattern = re.compile(rf'^\s*(\[\[?[^\]]*\b{last}\b[^\]]*\]|"?{last}"?\s*=)')
    for i, line in enumerate(text.splitlines(), start=1):
        if pattern.search(line):
            return i
    return None


def load_rules(path: str | Path) -> AlertRulesConfig:
    """Read rule settings from a TOML file; unknown keys and bad values are errors.

    ``alert_rules.sample.toml`` beside this module shows every key with its default.

    Raises
    ------
    AlertRulesError
        Naming the file, the key and (where it can be found) the line.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
        data = tomllib.loads(text)
    except OSError as exc:
        raise AlertRulesError(f"{path}: cannot read: {exc.strerror}") from None
    except tomllib.TOMLDecodeError as exc:
        raise AlertRulesError(f"{path}: not valid TOML: {exc}") from None
    try:
        return AlertRulesConfig.model_validate(data)
    except ValidationError as exc:
        loc, msg = _first_problem(exc)
        line = _line_of(text, loc)
        where = f", line {line}" if line else ""
        raise AlertRulesError(f"{path}{where}: {'.'.join(loc)}: {msg}") from None


def _first_problem(exc: ValidationError) -> tuple[list[str], str]:
    """The key path and message of the first error of a rules validation."""
    err = exc.errors()[0]
    loc = [str(p) for p in err["loc"]]
    msg = err["msg"].removeprefix("Value error, ")
    if not loc:
        # an override's own message carries its dotted key first
        key, _, msg = msg.partition(": ")
        loc = key.split(".")
    return loc, msg


def parse_rules(data: object) -> AlertRulesConfig:
    """Rule settings from a JSON-like mapping (same keys as the TOML file).

    Raises
    ------
    AlertRulesError
        ``"<dotted key>: <what is wrong>"``, e.g. ``"defaults.anomaly.limit: Input should be
        greater than 0"``.
    """
    if not isinstance(data, Mapping):
        raise AlertRulesError(f"rules must be an object, got {type(data).__name__}")
    try:
        return AlertRulesConfig.model_validate(data)
    except ValidationError as exc:
        loc, msg = _first_problem(exc)
        raise AlertRulesError(f"{'.'.join(loc)}: {msg}") from None


# ----------------------------------------------------------------------------------- readings


@dataclass(frozen=True, slots=True, kw_only=True)
class _ReadingBase:
    site: str
    at: datetime
    asset_id: str | None = None
    gateway_id: str | None = None
    asset_class: str = ""

    def __post_init__(self) -> None:
        if self.at.tzinfo is None or self.at.utcoffset() is None:
            raise ValueError("at must be a timezone-aware UTC datetime, got a naive datetime")


@dataclass(frozen=True, slots=True, kw_only=True)
class AnomalyReading(_ReadingBase):
    """One window's anomaly score and the control limit it is judged against."""

    score: float
    control_limit: float

    def __post_init__(self) -> None:
        _ReadingBase.__post_init__(self)
        if not self.control_limit > 0:
            raise ValueError(f"control_limit must be > 0, got {self.control_limit!r}")


@dataclass(frozen=True, slots=True, kw_only=True)
class ZoneReading(_ReadingBase):
    """Overall r.m.s. velocity of one window (mm/s), for the ISO 10816-3 severity zone."""

    velocity_rms_mm_s: float
    channel: str = ""


@dataclass(frozen=True, slots=True, kw_only=True)
class TimeToFailureReading(_ReadingBase):
    """Forecast time to failure (s) at ``risk``; ``None`` when no failure is forecast."""

    risk: float
    time_to_failure_s: float | None


@dataclass(frozen=True, slots=True, kw_only=True)
class DiagnosisReading(_ReadingBase):
    """The diagnosed failure mode of one window and its confidence in [0, 1]."""

    fault_mode: FaultMode
    confidence: float = 1.0


@dataclass(frozen=True, slots=True, kw_only=True)
class LastHeardReading(_ReadingBase):
    """When a gateway (``asset_id`` None) or an asset was last heard from, checked at ``at``."""

    last_heard_at: datetime | None


@dataclass(frozen=True, slots=True, kw_only=True)
class ChannelQualityReading(_ReadingBase):
    """One window's quality flags on one channel."""

    channel: str
    flags: frozenset[QualityFlag] = frozenset()


Reading = (
    AnomalyReading
    | ZoneReading
    | TimeToFailureReading
    | DiagnosisReading
    | LastHeardReading
    | ChannelQualityReading
)


# --------------------------------------------------------------------------------------- state


def _iso(t: datetime | None) -> str | None:
    return None if t is None else t.astimezone(UTC).isoformat().replace("+00:00", "Z")


def _time(s: str | None) -> datetime | None:
    return None if s is None else datetime.fromisoformat(s.replace("Z", "+00:00"))


AlertStateName = Literal["open", "acknowledged", "resolved"]


@dataclass(slots=True, kw_only=True)
class AlertRecord:
    """One alert and its lifecycle. ``revision`` counts the changes published about it."""

    alert_id: uuid.UUID
    site: str
    asset_id: str | None
    gateway_id: str | None
    kind: AlertKind
    qualifier: str
    severity: AlertSeverity
    state: AlertStateName
    opened_at: datetime
    summary: str
    detail: dict[str, str | float | int | None] = field(default_factory=dict)
    acknowledged_at: datetime | None = None
    acknowledged_by: str | None = None
    resolved_at: datetime | None = None
    resolved_by: str | None = None
    resolution: str | None = None
    revision: int = 0

    @property
    def is_live(self) -> bool:
        return self.state != "resolved"

    def to_alert(self) -> Alert:
        """The contract's form, with the lifecycle (who and when) in ``detail``."""
        detail = dict(self.detail)
        if self.qualifier:
            detail["qualifier"] = self.qualifier
        for name in ("acknowledged_at", "resolved_at"):
            value = getattr(self, name)
            if value is not None:
                detail[name] = _iso(value)
        for name in ("acknowledged_by", "resolved_by", "resolution"):
            value = getattr(self, name)
            if value is not None:
                detail[name] = value
        return Alert(
            alert_id=self.alert_id,
            site=self.site,
            asset_id=self.asset_id,
            gateway_id=self.gateway_id,
            kind=self.kind.value,
            severity=self.severity,
            state=self.state,
            opened_at=self.opened_at,
            summary=self.summary,
            detail=detail,
        )

    def to_dict(self) -> dict[str, Any]:
        return {
            "alert_id": str(self.alert_id),
            "site": self.site,
            "asset_id": self.asset_id,
            "gateway_id": self.gateway_id,
            "kind": self.kind.value,
            "qualifier": self.qualifier,
            "severity": self.severity.value,
            "state": self.state,
            "opened_at": _iso(self.opened_at),
            "summary": self.summary,
            "detail": dict(self.detail),
            "acknowledged_at": _iso(self.acknowledged_at),
            "acknowledged_by": self.acknowledged_by,
            "resolved_at": _iso(self.resolved_at),
            "resolved_by": self.resolved_by,
            "resolution": self.resolution,
            "revision": self.revision,
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> AlertRecord:
        opened_at = _time(d["opened_at"])
        assert opened_at is not None
        return cls(
            alert_id=uuid.UUID(d["alert_id"]),
            site=d["site"],
            asset_id=d["asset_id"],
            gateway_id=d["gateway_id"],
            kind=AlertKind(d["kind"]),
            qualifier=d["qualifier"],
            severity=AlertSeverity(d["severity"]),
            state=d["state"],
            opened_at=opened_at,
            summary=d["summary"],
            detail=dict(d["detail"]),
            acknowledged_at=_time(d["acknowledged_at"]),
            acknowledged_by=d["acknowledged_by"],
            resolved_at=_time(d["resolved_at"]),
            resolved_by=d["resolved_by"],
            resolution=d["resolution"],
            revision=int(d["revision"]),
        )


@dataclass(slots=True, kw_only=True)
class ConditionState:
    """What the engine remembers about one condition key between readings."""

    recent: deque[bool] = field(default_factory=deque)  # over-limit flags, newest last
    over_since: datetime | None = None
    clear_streak: int = 0
    raised: bool = False
    raised_at: datetime | None = None
    suppressed_severity: AlertSeverity | None = None  # resolved by a person while still raised
    memo: dict[str, str] = field(default_factory=dict)  # rule-specific (e.g. confirmed diagnosis)
    alert: AlertRecord | None = None
    last_at: datetime | None = None

    def to_dict(self) -> dict[str, Any]:
        return {
            "recent": [int(b) for b in self.recent],
            "over_since": _iso(self.over_since),
            "clear_streak": self.clear_streak,
            "raised": self.raised,
            "raised_at": _iso(self.raised_at),
            "suppressed_severity": self.suppressed_severity,
            "memo": dict(self.memo),
            "alert": None if self.alert is None else self.alert.to_dict(),
            "last_at": _iso(self.last_at),
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> ConditionState:
        sup = d.get("suppressed_severity")
        return cls(
            recent=deque(bool(b) for b in d["recent"]),
            over_since=_time(d["over_since"]),
            clear_streak=int(d["clear_streak"]),
            raised=bool(d["raised"]),
            raised_at=_time(d["raised_at"]),
            suppressed_severity=None if sup is None else AlertSeverity(sup),
            memo=dict(d.get("memo", {})),
            alert=None if d["alert"] is None else AlertRecord.from_dict(d["alert"]),
            last_at=_time(d.get("last_at")),
        )


@dataclass(slots=True)
class AlertState:
    """Every condition the engine tracks, by key ``site/target/kind/qualifier``.

    ``to_dict``/``from_dict`` give a JSON-ready form; the store persists one row per key.
    """

    conditions: dict[str, ConditionState] = field(default_factory=dict)

    def live_alerts(self) -> list[AlertRecord]:
        return [c.alert for c in self.conditions.values() if c.alert and c.alert.is_live]

    def find(self, alert_id: uuid.UUID) -> tuple[str, ConditionState]:
        for key, cond in self.conditions.items():
            if cond.alert is not None and cond.alert.alert_id == alert_id:
                return key, cond
        raise KeyError(f"alert {alert_id} is not live in this state")

    def to_dict(self) -> dict[str, Any]:
        return {k: c.to_dict() for k, c in self.conditions.items()}

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> AlertState:
        return cls({k: ConditionState.from_dict(v) for k, v in d.items()})


class ChangeKind(StrEnum):
    OPENED = "opened"
    UPDATED = "updated"  # severity rose or the diagnosis moved on while the alert was live
    ACKNOWLEDGED = "acknowledged"
    RESOLVED = "resolved"


@dataclass(frozen=True, slots=True)
class AlertChange:
    """One published change of one alert; ``event_id`` is stable for (alert, revision)."""

    change: ChangeKind
    alert: Alert
    at: datetime
    revision: int
    qualifier: str = ""

    @property
    def event_id(self) -> uuid.UUID:
        return uuid.uuid5(ALERT_NAMESPACE, f"{self.alert.alert_id}:{self.revision}")


# -------------------------------------------------------------------------------------- engine


def condition_key(site: str, target: str, kind: AlertKind | str, qualifier: str = "") -> str:
    """``site/target/kind/qualifier``: one live alert at most per key (target = asset or
    gateway id)."""
    return f"{site}/{target}/{AlertKind(kind).value}/{qualifier}"


def severity_zone(velocity_rms_mm_s: float, rule: ZoneRule) -> Literal["A", "B", "C", "D"]:
    """ISO 10816-3 evaluation zone of an r.m.s. velocity under ``rule``'s boundaries."""
    if velocity_rms_mm_s >= rule.cd_boundary_mm_s:
        return "D"
    if velocity_rms_mm_s >= rule.bc_boundary_mm_s:
        return "C"
    if velocity_rms_mm_s >= rule.ab_boundary_mm_s:
        return "B"
    return "A"


@dataclass(frozen=True, slots=True)
class _Judgement:
    """A rule's verdict on one reading."""

    over: bool
    under: bool
    severity: AlertSeverity
    summary: str
    detail: dict[str, str | float | int | None]
    qualifier: str = ""


def _fmt_s(seconds: float) -> str:
    return f"{seconds / 86400:.1f} d" if seconds >= 86400 else f"{seconds / 3600:.1f} h"


class AlertEngine:
    """Evaluate readings against rule settings; raise, update and clear alerts.

    Parameters
    ----------
    rules : AlertRulesConfig
        The settings; :meth:`AlertRulesConfig.for_asset` picks an asset's rules per reading.

    Examples
    --------
    >>> from datetime import datetime, timedelta, UTC
    >>> engine = AlertEngine(AlertRulesConfig())
    >>> state = AlertState()
    >>> t0 = datetime(2026, 3, 1, tzinfo=UTC)
    >>> changes = []
    >>> for i in range(5):
    ...     r = AnomalyReading(site="Mallee", asset_id="MAL-P1", at=t0 + timedelta(minutes=i),
    ...                        score=15.0, control_limit=10.0)
    ...     changes += engine.evaluate(state, r)
    >>> [c.change.value for c in changes], changes[0].alert.severity.value
    (['opened'], 'warning')
    """

    def __init__(self, rules: AlertRulesConfig | None = None) -> None:
        self._rule_sets: dict[tuple[str, str], RuleSet] = {}
        self.rules = rules if rules is not None else AlertRulesConfig()
        self._judges: dict[type, Callable[[Any, RuleSet, ConditionState], _Judgement | None]] = {
            AnomalyReading: self._judge_anomaly,
            ZoneReading: self._judge_zone,
            TimeToFailureReading: self._judge_ttf,
            DiagnosisReading: self._judge_diagnosis,
            LastHeardReading: self._judge_silence,
            ChannelQualityReading: self._judge_sensor,
        }

    def __repr__(self) -> str:
        return f"AlertEngine(rules={self.rules!r})"

    @property
    def rules(self) -> AlertRulesConfig:
        """The settings; assign a new :class:`AlertRulesConfig` to change them (e.g. from the
        API). Conditions already raised keep their alerts and are judged by the new settings."""
        return self._rules

    @rules.setter
    def rules(self, value: AlertRulesConfig) -> None:
        if not isinstance(value, AlertRulesConfig):
            raise TypeError(f"rules must be an AlertRulesConfig, got {type(value).__name__}")
        self._rules = value
        self._rule_sets = {}

    def rules_for(self, site: str, asset_class: str = "") -> RuleSet:
        key = (site, asset_class)
        if key not in self._rule_sets:
            self._rule_sets[key] = self._rules.for_asset(site, asset_class)
        return self._rule_sets[key]

    # ---- public

    def evaluate(self, state: AlertState, reading: Reading) -> list[AlertChange]:
        """Feed one reading; returns the alert changes it causes (usually none).

        ``state`` is updated in place. A reading not newer than the last one seen for the same
        condition is ignored: a late or repeated reading cannot count twice, reopen or clear
        anything. (Zone readings of several channels must therefore carry their ``channel``.)
        """
        try:
            judge = self._judges[type(reading)]
        except KeyError:
            raise TypeError(
                f"reading must be one of {sorted(t.__name__ for t in self._judges)}, "
                f"got {type(reading).__name__}"
            ) from None
        rules = self.rules_for(reading.site, reading.asset_class)
        kind, rule, qualifier = self._route(reading, rules)
        if not rule.enabled:
            return []
        key = self._key(reading, kind, qualifier)
        cond = state.conditions.setdefault(key, ConditionState())
        if cond.last_at is not None and reading.at <= cond.last_at:
            return []
        cond.last_at = reading.at
        verdict = judge(reading, rules, cond)
        if verdict is None:
            return []
        return self._step(cond, reading, kind, rule, verdict)

    def acknowledge(
        self, state: AlertState, alert_id: uuid.UUID, *, by: str, at: datetime, note: str = ""
    ) -> AlertChange:
        """Mark a live alert acknowledged by ``by`` at ``at``.

        Raises
        ------
        KeyError
            When the alert is not live in ``state``.
        ValueError
            When it is already acknowledged, or ``by`` is empty.
        """
        _, cond = state.find(alert_id)
        rec = cond.alert
        assert rec is not None
        if not by.strip():
            raise ValueError("by must name who acknowledges, got an empty string")
        if rec.state != "open":
            raise ValueError(f"alert {alert_id} is {rec.state}; only an open alert is acknowledged")
        rec.state = "acknowledged"
        rec.acknowledged_at = at
        rec.acknowledged_by = by
        if note:
            rec.detail["acknowledge_note"] = note[:200]
        return self._publish(rec, ChangeKind.ACKNOWLEDGED, at)

    def resolve(
        self, state: AlertState, alert_id: uuid.UUID, *, by: str, at: datetime, note: str = ""
    ) -> AlertChange:
        """Resolve a live alert by hand; its condition re-arms after it clears (or worsens)."""
        _, cond = state.find(alert_id)
        rec = cond.alert
        assert rec is not None
        if not by.strip():
            raise ValueError("by must name who resolves, got an empty string")
        if cond.raised:
            cond.suppressed_severity = rec.severity
        change = self._close(rec, at, by=by, resolution=note or "resolved by hand")
        cond.alert = None
        return change

    def condition_key(self, reading: Reading) -> str:
        """The key of the condition ``reading`` feeds: ``site/target/kind/qualifier``."""
        rules = self.rules_for(reading.site, reading.asset_class)
        kind, _, qualifier = self._route(reading, rules)
        return self._key(reading, kind, qualifier)

    # ---- routing

    @staticmethod
    def _route(reading: Reading, rules: RuleSet) -> tuple[AlertKind, Any, str]:
        if isinstance(reading, AnomalyReading):
            return AlertKind.ANOMALY, rules.anomaly, ""
        if isinstance(reading, ZoneReading):
            return AlertKind.SEVERITY_ZONE, rules.severity_zone, reading.channel
        if isinstance(reading, TimeToFailureReading):
            return AlertKind.TIME_TO_FAILURE, rules.time_to_failure, ""
        if isinstance(reading, DiagnosisReading):
            return AlertKind.DIAGNOSIS_CHANGED, rules.diagnosis, ""
        if isinstance(reading, LastHeardReading):
            kind = AlertKind.ASSET_SILENT if reading.asset_id else AlertKind.GATEWAY_SILENT
            return kind, rules.silence, ""
        return AlertKind.SENSOR_FAULT, rules.sensor_fault, reading.channel

    @staticmethod
    def _key(reading: Reading, kind: AlertKind, qualifier: str) -> str:
        target = reading.asset_id or reading.gateway_id
        if not target:
            raise ValueError(f"a {kind.value} reading needs asset_id or gateway_id, got neither")
        return condition_key(reading.site, target, kind, qualifier)

    # ---- judges

    @staticmethod
    def _judge_anomaly(r: AnomalyReading, rules: RuleSet, _c: ConditionState) -> _Judgement:
        rule = rules.anomaly
        ratio = r.score / r.control_limit
        critical = rule.critical_limit is not None and ratio >= rule.critical_limit
        return _Judgement(
            over=ratio > rule.limit,
            under=ratio < rule.clear_limit,
            severity=AlertSeverity.CRITICAL if critical else AlertSeverity.WARNING,
            summary=f"anomaly score {ratio:.2f}× its control limit",
            detail={"score": r.score, "control_limit": r.control_limit, "ratio": round(ratio, 4)},
        )

    @staticmethod
    def _judge_zone(r: ZoneReading, rules: RuleSet, c: ConditionState) -> _Judgement:
        rule = rules.severity_zone
        v = r.velocity_rms_mm_s
        zone = severity_zone(v, rule)
        if c.alert is not None and c.alert.is_live:
            zone_from = str(c.alert.detail.get("zone_to", "C"))  # what was last reported
        else:
            zone_from = c.memo.get("calm_zone", "A")  # the zone before the condition arose
        if zone in ("A", "B"):
            c.memo["calm_zone"] = zone
        return _Judgement(
            over=zone in ("C", "D"),
            under=v < (1.0 - rule.clear_margin) * rule.bc_boundary_mm_s,
            severity=AlertSeverity.CRITICAL if zone == "D" else AlertSeverity.WARNING,
            summary=f"vibration severity zone {zone} ({v:.2f} mm/s r.m.s. velocity)",
            detail={"velocity_rms_mm_s": v, "zone_from": zone_from, "zone_to": zone},
            qualifier=r.channel,
        )

    @staticmethod
    def _judge_ttf(r: TimeToFailureReading, rules: RuleSet, _c: ConditionState) -> _Judgement:
        rule = rules.time_to_failure
        if abs(r.risk - rule.risk) > 1e-9:
            raise ValueError(
                f"risk of the time-to-failure reading must be the rule's risk = {rule.risk:g}, "
                f"got {r.risk:g}"
            )
        ttf = r.time_to_failure_s
        lead = rule.crew_lead_time_s
        critical = (
            ttf is not None
            and rule.critical_fraction is not None
            and ttf < rule.critical_fraction * lead
        )
        text = "no failure forecast" if ttf is None else _fmt_s(ttf)
        return _Judgement(
            over=ttf is not None and ttf < lead,
            under=ttf is None or ttf > rule.clear_factor * lead,
            severity=AlertSeverity.CRITICAL if critical else AlertSeverity.WARNING,
            summary=(
                f"time to failure at {rule.risk:.0%} risk is {text}, "
                f"shorter than the crew lead time of {_fmt_s(lead)}"
            ),
            detail={"time_to_failure_s": ttf, "risk": r.risk, "crew_lead_time_s": lead},
        )

    @staticmethod
    def _judge_diagnosis(
        r: DiagnosisReading, rules: RuleSet, c: ConditionState
    ) -> _Judgement | None:
        rule = rules.diagnosis
        if r.confidence < rule.min_confidence:
            return None  # an unsure diagnosis neither raises nor clears
        mode = FaultMode(r.fault_mode)
        candidate = c.memo.get("candidate")
        if mode.value != candidate:
            c.memo["candidate"] = mode.value
            c.recent.clear()  # a new mode starts its own confirmation run
            c.clear_streak = 0
        faulty = mode is not FaultMode.HEALTHY
        return _Judgement(
            over=faulty,
            under=not faulty,
            severity=rule.severity,
            summary=f"diagnosis changed to {mode.value} (confidence {r.confidence:.0%})",
            detail={"fault_mode": mode.value, "confidence": r.confidence},
        )

    @staticmethod
    def _judge_silence(r: LastHeardReading, rules: RuleSet, _c: ConditionState) -> _Judgement:
        rule = rules.silence
        silent_s = None if r.last_heard_at is None else (r.at - r.last_heard_at).total_seconds()
        silent = silent_s is None or silent_s > rule.silent_after_s
        what = f"asset {r.asset_id}" if r.asset_id else f"gateway {r.gateway_id}"
        heard = "never heard from" if silent_s is None else f"silent for {_fmt_s(silent_s)}"
        return _Judgement(
            over=silent,
            under=not silent,
            severity=rule.severity,
            summary=f"{what} {heard}",
            detail={"last_heard_at": _iso(r.last_heard_at), "silent_after_s": rule.silent_after_s},
        )

    @staticmethod
    def _judge_sensor(r: ChannelQualityReading, rules: RuleSet, _c: ConditionState) -> _Judgement:
        rule = rules.sensor_fault
        faults = sorted(f.value for f in r.flags & rule.fault_flags)
        return _Judgement(
            over=bool(faults),
            under=not faults,
            severity=rule.severity,
            summary=f"sensor fault on channel {r.channel}: {', '.join(faults) or 'none'}",
            detail={"channel": r.channel, "flags": ",".join(faults)},
            qualifier=r.channel,
        )

    # ---- the state machine shared by every rule

    def _step(
        self,
        cond: ConditionState,
        reading: Reading,
        kind: AlertKind,
        rule: Any,
        verdict: _Judgement,
    ) -> list[AlertChange]:
        at = reading.at
        if isinstance(rule, SilenceRule):
            windows_over = windows_considered = clear_windows = 1
            sustain_s = None
        else:
            windows_over, windows_considered = rule.windows_over, rule.windows_considered
            clear_windows, sustain_s = rule.clear_windows, rule.sustain_s
        cond.recent.append(verdict.over)
        while len(cond.recent) > windows_considered:
            cond.recent.popleft()
        if verdict.over:
            cond.over_since = cond.over_since or at
        else:
            cond.over_since = None
        cond.clear_streak = cond.clear_streak + 1 if verdict.under else 0

        if sustain_s is not None:
            persistent = (
                cond.over_since is not None and (at - cond.over_since).total_seconds() >= sustain_s
            )
        else:
            persistent = sum(cond.recent) >= windows_over

        changes: list[AlertChange] = []
        if not cond.raised:
            if persistent:
                cond.raised = True
                cond.raised_at = at
                cond.clear_streak = 0
                if not self._suppressed(cond, verdict.severity):
                    changes.append(self._open(cond, reading, kind, verdict))
            return changes

        # raised: escalate, follow, or clear
        assert cond.raised_at is not None
        held = (at - cond.raised_at).total_seconds() >= rule.min_hold_s
        if cond.clear_streak >= clear_windows and held:
            cond.raised = False
            cond.raised_at = None
            cond.suppressed_severity = None
            cond.recent.clear()
            cond.over_since = None
            if kind is AlertKind.DIAGNOSIS_CHANGED:
                cond.memo["confirmed"] = FaultMode.HEALTHY.value
            if cond.alert is not None:
                changes.append(self._close(cond.alert, at, by="system", resolution="cleared"))
                cond.alert = None
            return changes

        if not (verdict.over and persistent):
            return changes
        rec = cond.alert
        if kind is AlertKind.DIAGNOSIS_CHANGED and verdict.detail["fault_mode"] != cond.memo.get(
            "confirmed"
        ):
            cond.suppressed_severity = None  # a different fault is news even after a hand resolve
        if rec is None:
            if not self._suppressed(cond, verdict.severity):
                changes.append(self._open(cond, reading, kind, verdict))
            return changes
        if severity_rank(verdict.severity) > severity_rank(rec.severity):
            rec.severity = verdict.severity
            rec.summary = verdict.summary
            rec.detail.update(verdict.detail)
            changes.append(self._publish(rec, ChangeKind.UPDATED, at))
        elif (
            kind is AlertKind.DIAGNOSIS_CHANGED
            and rec.detail.get("fault_mode") != verdict.detail["fault_mode"]
        ):
            rec.detail["fault_mode_before"] = rec.detail.get("fault_mode")
            rec.summary = verdict.summary
            rec.detail.update(verdict.detail)
            cond.memo["confirmed"] = str(verdict.detail["fault_mode"])
            changes.append(self._publish(rec, ChangeKind.UPDATED, at))
        return changes

    @staticmethod
    def _suppressed(cond: ConditionState, severity: AlertSeverity) -> bool:
        sup = cond.suppressed_severity
        if sup is None or severity_rank(severity) > severity_rank(sup):
            cond.suppressed_severity = None
            return False
        return True

    def _open(
        self, cond: ConditionState, reading: Reading, kind: AlertKind, verdict: _Judgement
    ) -> AlertChange:
        target = reading.asset_id or reading.gateway_id
        detail = dict(verdict.detail)
        if kind is AlertKind.DIAGNOSIS_CHANGED:
            detail["fault_mode_before"] = cond.memo.get("confirmed", FaultMode.HEALTHY.value)
            cond.memo["confirmed"] = str(verdict.detail["fault_mode"])
        rec = AlertRecord(
            alert_id=uuid.uuid5(
                ALERT_NAMESPACE,
                f"{reading.site}/{target}/{kind.value}/{verdict.qualifier}@{_iso(reading.at)}",
            ),
            site=reading.site,
            asset_id=reading.asset_id,
            gateway_id=reading.gateway_id,
            kind=kind,
            qualifier=verdict.qualifier,
            severity=verdict.severity,
            state="open",
            opened_at=reading.at,
            summary=verdict.summary,
            detail=detail,
        )
        cond.alert = rec
        return self._publish(rec, ChangeKind.OPENED, reading.at)

    def _close(self, rec: AlertRecord, at: datetime, *, by: str, resolution: str) -> AlertChange:
        rec.state = "resolved"
        rec.resolved_at = at
        rec.resolved_by = by
        rec.resolution = resolution[:200]
        return self._publish(rec, ChangeKind.RESOLVED, at)

    @staticmethod
    def _publish(rec: AlertRecord, change: ChangeKind, at: datetime) -> AlertChange:
        rec.revision += 1
        return AlertChange(change, rec.to_alert(), at, rec.revision, rec.qualifier)
