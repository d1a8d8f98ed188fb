"""Gateway configuration: one TOML file per gateway, validated with errors naming file, key, line.

The file's top level holds ``gateway_id`` and ``site`` and the tables ``[broker]``, ``[schedule]``,
``[budget]``, ``[outbox]``, ``[source]``, ``[alarms]`` and one ``[[assets]]`` table per monitored
asset (the fields of :class:`edge_agent.assets.AssetConfig`). ``deploy/gateways/mallee.toml`` is
the commented sample of every key. Unknown keys are errors. Relative paths are taken relative to
the file's folder. ``WELLSPAN_BROKER_PASSWORD`` overrides the broker password file,
``WELLSPAN_BROKER_URL`` and ``WELLSPAN_BROKER_USERNAME`` the broker URL and user name.
"""

from __future__ import annotations

import os
import re
import tomllib
from collections.abc import Mapping, Sequence
from datetime import UTC, datetime
from pathlib import Path
from typing import Any, Literal
from urllib.parse import urlsplit

from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    ValidationError,
    field_validator,
    model_validator,
)

from edge_agent.assets import AssetConfig
from edge_agent.windows import ChannelKind
from shared_schema import ClockSync, Identifier

__all__ = [
    "AlarmConfig",
    "BrokerConfig",
    "BudgetConfig",
    "ConfigError",
    "Deadband",
    "GatewayConfig",
    "OutboxConfig",
    "ScheduleConfig",
    "SourceConfig",
    "ThresholdConfig",
    "load_config",
    "parse_config",
]


class ConfigError(ValueError):
    """A gateway configuration file is unusable; ``str()`` is one line naming file, line and key."""

    def __init__(self, path: str, line: int | None, key: str, message: str) -> None:
        where = f"{path}:{line}" if line else path
        super().__init__(f"{where}: {key}: {message}" if key else f"{where}: {message}")
        self.path = path
        self.line = line
        self.key = key
        self.message = message


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class BrokerConfig(_Strict):
    """Where and how the uplink connects (MQTT v5)."""

    url: str = "mqtt://127.0.0.1:1883"
    username: str | None = None
    password_file: Path | None = None
    ca_file: Path | None = None
    cert_file: Path | None = None
    key_file: Path | None = None
    client_id: str | None = Field(default=None, min_length=1, max_length=64)
    keepalive_s: int = Field(default=60, ge=5, le=3600)
    session_expiry_s: int = Field(default=7 * 86400, ge=0, le=2**32 - 1)
    reconnect_min_s: float = Field(default=1.0, gt=0, le=3600)
    reconnect_max_s: float = Field(default=120.0, gt=0, le=86400)
    inflight_max: int = Field(default=20, ge=1, le=1000)
    status_interval_s: float = Field(default=300.0, gt=0, le=86400)

    @field_validator("url")
    @classmethod
    def _url(cls, v: str) -> str:
        parts = urlsplit(v)
        if parts.scheme not in ("mqtt", "mqtts") or not parts.hostname:
            raise ValueError(f"must be mqtt://host[:port] or mqtts://host[:port], got {v!r}")
        try:
            parts.port  # noqa: B018 - raises on a bad port
        except ValueError as exc:
            raise ValueError(f"bad port in {v!r}: {exc}") from None
        return v

    @model_validator(mode="after")
    def _backoff(self) -> BrokerConfig:
        if self.reconnect_min_s > self.reconnect_max_s:
            raise ValueError(
                f"reconnect_min_s ({self.reconnect_min_s:g}) must not exceed "
                f"reconnect_max_s ({self.reconnect_max_s:g})"
            )
        if (self.cert_file is None) != (self.key_file is None):
            raise ValueError("cert_file and key_file must be given together")
        return self

    @property
    def host(self) -> str:
        return urlsplit(self.url).hostname or "127.0.0.1"

    @property
    def port(self) -> int:
        parts = urlsplit(self.url)
        return parts.port or (8883 if parts.scheme == "mqtts" else 1883)

    @property
    def tls(self) -> bool:
        return urlsplit(self.url).scheme == "mqtts"

    def password(self) -> str | None:
        """The broker password: ``WELLSPAN_BROKER_PASSWORD`` if set, else the password file."""
        env = os.environ.get("WELLSPAN_BROKER_PASSWORD")
        if env is not None:
            return env
        if self.password_file is None:
            return None
        return self.password_file.read_text(encoding="utf-8").strip()


class ScheduleConfig(_Strict):
    """When windows are taken, and which clock drives the schedule."""

    interval_s: float = Field(default=60.0, gt=0, le=86400)
    asset_interval_s: dict[str, float] = Field(default_factory=dict)
    jitter_s: float = Field(default=0.0, ge=0, le=3600)
    max_late_intervals: int = Field(default=2, ge=0, le=1000)
    clock: Literal["real", "simulated"] = "real"
    simulated_start: datetime | None = None
    simulated_speed: float = Field(default=0.0, ge=0)
    clock_sync: Literal["auto", "synced", "holdover", "unsynced"] = "auto"

    @field_validator("asset_interval_s")
    @classmethod
    def _positive(cls, v: dict[str, float]) -> dict[str, float]:
        for asset, s in v.items():
            if not 0 < s <= 86400:
                raise ValueError(f"interval for {asset!r} must be in (0, 86400] s, got {s!r}")
        return v

    @field_validator("simulated_start")
    @classmethod
    def _aware(cls, v: datetime | None) -> datetime | None:
        if v is None:
            return None
        if v.tzinfo is None:
            raise ValueError("simulated_start needs a time zone, e.g. 2026-01-01T00:00:00Z")
        return v.astimezone(UTC)

    def interval_for(self, asset_id: str) -> float:
        return self.asset_interval_s.get(asset_id, self.interval_s)

    def clock_sync_state(self) -> ClockSync:
        """The clock-sync state reported with every window."""
        if self.clock == "simulated":
            return ClockSync.SYNCED
        if self.clock_sync != "auto":
            return ClockSync(self.clock_sync)
        # systemd-timesyncd and chrony's helper both create this flag file once synchronised.
        synced = Path("/run/systemd/timesync/synchronized").exists()
        return ClockSync.SYNCED if synced else ClockSync.UNSYNCED


class Deadband(_Strict):
    """Change of an indicator that counts as news: relative (fraction) or absolute (its unit)."""

    relative: float | None = Field(default=None, ge=0, le=100)
    absolute: float | None = Field(default=None, ge=0)

    @model_validator(mode="after")
    def _one(self) -> Deadband:
        if (self.relative is None) == (self.absolute is None):
            raise ValueError("give exactly one of relative or absolute")
        return self


class BudgetConfig(_Strict):
    """Report-by-exception within a daily byte budget for the whole gateway."""

    bytes_per_day: int = Field(default=5_000_000, ge=1000)
    heartbeat_s: float = Field(default=3600.0, gt=0, le=7 * 86400)
    default_relative: float = Field(default=0.05, ge=0, le=100)
    deadbands: dict[str, Deadband] = Field(default_factory=dict)
    adapt: bool = True
    min_scale: float = Field(default=0.25, gt=0)
    max_scale: float = Field(default=64.0, gt=0)
    reserve_fraction: float = Field(default=0.1, ge=0, lt=1)

    @model_validator(mode="after")
    def _scales(self) -> BudgetConfig:
        if self.min_scale > self.max_scale:
            raise ValueError(
                f"min_scale ({self.min_scale:g}) must not exceed max_scale ({self.max_scale:g})"
            )
        return self


class OutboxConfig(_Strict):
    """The durable queue on the gateway's disk."""

    path: Path = Path("outbox.sqlite")
    max_bytes: int = Field(default=50_000_000, ge=10_000)
    batch_frames: int = Field(default=500, ge=1, le=10_000)


class SourceConfig(_Strict):
    """Where windows come from."""

    kind: Literal["simulator", "drop_folder", "replay"] = "simulator"
    folder: Path | None = None
    pace: float = Field(default=1.0, ge=0)
    seed: int = 0
    scenarios: dict[str, str] = Field(default_factory=dict)

    @model_validator(mode="after")
    def _folder(self) -> SourceConfig:
        if self.kind in ("drop_folder", "replay") and self.folder is None:
            raise ValueError(f"source kind {self.kind!r} needs a folder")
        return self


class ThresholdConfig(_Strict):
    """Edge alarm levels of one indicator (in the indicator's unit)."""

    high: float | None = None
    low: float | None = None
    hysteresis: float = Field(default=0.05, ge=0, lt=1)

    @model_validator(mode="after")
    def _some(self) -> ThresholdConfig:
        if self.high is None and self.low is None:
            raise ValueError("give high, low or both")
        if self.high is not None and self.low is not None and self.low >= self.high:
            raise ValueError(f"low ({self.low:g}) must be below high ({self.high:g})")
        return self


class AlarmConfig(_Strict):
    """Alarms raised on the gateway and sent ahead of the routine queue."""

    thresholds: dict[str, ThresholdConfig] = Field(default_factory=dict)
    zone_change: bool = True
    sensor_fault_windows: int = Field(default=3, ge=0, le=1000)
    sensor_fault_kinds: tuple[ChannelKind, ...] = ("accel", "pressure", "current", "tacho")


class GatewayConfig(_Strict):
    """Everything one gateway needs; see ``deploy/gateways/mallee.toml``."""

    gateway_id: Identifier
    site: Identifier
    broker: BrokerConfig = BrokerConfig()
    schedule: ScheduleConfig = ScheduleConfig()
    budget: BudgetConfig = BudgetConfig()
    outbox: OutboxConfig = OutboxConfig()
    source: SourceConfig = SourceConfig()
    alarms: AlarmConfig = AlarmConfig()
    assets: tuple[AssetConfig, ...] = Field(min_length=1, max_length=64)

    @model_validator(mode="after")
    def _asset_refs(self) -> GatewayConfig:
        ids = [a.asset_id for a in self.assets]
        if len(set(ids)) != len(ids):
            raise ValueError(f"asset_id values must be unique, got {ids}")
        for key, refs in (
            ("schedule.asset_interval_s", self.schedule.asset_interval_s),
            ("source.scenarios", self.source.scenarios),
        ):
            unknown = sorted(set(refs) - set(ids))
            if unknown:
                raise ValueError(f"{key} names unknown assets {unknown}; assets are {ids}")
        return self

    @property
    def client_id(self) -> str:
        return self.broker.client_id or f"wellspan-{self.gateway_id}"

    def asset(self, asset_id: str) -> AssetConfig:
        for a in self.assets:
            if a.asset_id == asset_id:
                return a
        raise KeyError(asset_id)


# -- loading ------------------------------------------------------------------------------------

_PATH_KEYS = {
    ("broker", "password_file"),
    ("broker", "ca_file"),
    ("broker", "cert_file"),
    ("broker", "key_file"),
    ("outbox", "path"),
    ("source", "folder"),
}


def load_config(path: str | Path) -> GatewayConfig:
    """Read, validate and resolve one gateway configuration file.

    Raises
    ------
    ConfigError
        One line naming the file, the line, the key and what is wrong.
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except OSError as exc:
        raise ConfigError(str(p), None, "", f"cannot read: {exc.strerror or exc}") from None
    except UnicodeDecodeError:
        raise ConfigError(str(p), None, "", "not UTF-8 text") from None
    return parse_config(text, source=str(p), base=p.parent)


def parse_config(text: str, *, source: str = "<config>", base: Path | None = None) -> GatewayConfig:
    """Validate configuration text (see :func:`load_config`)."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        msg = str(exc)
        m = re.search(r"\(at line (\d+), column \d+\)", msg)
        line = int(m.group(1)) if m else None
        reason = re.sub(r" \(at line.*", "", msg)
        raise ConfigError(source, line, "", f"invalid TOML: {reason}") from None
    _apply_env(data)
    if base is not None:
        _resolve_paths(data, base)
    try:
        return GatewayConfig.model_validate(data)
    except ValidationError as exc:
        err = exc.errors()[0]
        loc = tuple(err["loc"])
        lines = _key_lines(text)
        line = _line_of(lines, loc)
        key = _dotted(loc)
        detail = err["msg"].removeprefix("Value error, ")
        if err["type"] == "extra_forbidden":
            detail = "unknown key"
        elif err["type"] == "missing":
            detail = "required key is missing"
        elif "input" in err and not isinstance(err["input"], dict | list):
            detail += f" (got {err['input']!r})"
        more = exc.error_count() - 1
        if more:
            detail += f" (+{more} more error{'s' if more > 1 else ''})"
        raise ConfigError(source, line, key, detail) from None


def _apply_env(data: dict[str, Any]) -> None:
    broker = data.get("broker")
    for env, key in (("WELLSPAN_BROKER_URL", "url"), ("WELLSPAN_BROKER_USERNAME", "username")):
        value = os.environ.get(env)
        if value is not None:
            if not isinstance(broker, dict):
                broker = data["broker"] = {}
            broker[key] = value


def _resolve_paths(data: dict[str, Any], base: Path) -> None:
    outbox = data.setdefault("outbox", {})
    if isinstance(outbox, dict):
        outbox.setdefault("path", str(OutboxConfig().path))
    for table, key in _PATH_KEYS:
        section = data.get(table)
        if isinstance(section, dict) and isinstance(section.get(key), str):
            p = Path(section[key]).expanduser()
            section[key] = str(p if p.is_absolute() else base / p)


def _dotted(loc: Sequence[int | str]) -> str:
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            needs_quote = not re.fullmatch(r"[A-Za-z0-9_-]+", part)
            name = f'"{part}"' if needs_quote else part
            out += f".{name}" if out else name
    return out


# A small locator for keys in TOML text: enough for error messages, not a TOML parser.
_HEADER = re.compile(r"^\s*(\[\[?)\s*([^\]]+?)\s*\]\]?\s*(?:#.*)?$")
_KEY = re.compile(
    r"""^\s*((?:[A-Za-z0-9_-]+|"[^"]*"|'[^']*')(?:\s*\.\s*(?:[A-Za-z0-9_-]+|"[^"]*"|'[^']*'))*)\s*="""
)
_PART = re.compile(r"""[A-Za-z0-9_-]+|"([^"]*)"|'([^']*)'""")


def _split_key(key: str) -> tuple[str, ...]:
    parts = []
    for m in _PART.finditer(key):
        if m.group(1) is not None:
            parts.append(m.group(1))
        elif m.group(2) is not None:
            parts.append(m.group(2))
        else:
            parts.append(m.group(0))
    return tuple(parts)


def _key_lines(text: str) -> dict[tuple[int | str, ...], int]:
    """Map each key path (with array-of-table indices) to the line (1-based) that defines it."""
    found: dict[tuple[int | str, ...], int] = {}
    counts: dict[tuple[int | str, ...], int] = {}
    table: tuple[int | str, ...] = ()
    in_multiline = False
    for n, raw in enumerate(text.splitlines(), start=1):
        if in_multiline:
            if raw.count('"""') % 2 or raw.count("'''") % 2:
                in_multiline = False
            continue
        h = _HEADER.match(raw)
        if h:
            names = _split_key(h.group(2))
            resolved = _resolve_table(names, counts)
            if h.group(1) == "[[":
                prefix = resolved[:-1] if resolved and isinstance(resolved[-1], int) else resolved
                idx = counts.get(prefix, 0)
                counts[prefix] = idx + 1
                # forget nested arrays of the previous element
                nested = [c for c in counts if len(c) > len(prefix) and c[: len(prefix)] == prefix]
                for c in nested:
                    del counts[c]
                table = (*prefix, idx)
            else:
                table = resolved
            for i in range(1, len(table) + 1):
                found.setdefault(table[:i], n)
            continue
        key = _KEY.match(raw)
        if key:
            path = (*table, *_split_key(key.group(1)))
            for i in range(len(table) + 1, len(path) + 1):
                found.setdefault(path[:i], n)
            if raw.count('"""') % 2 or raw.count("'''") % 2:
                in_multiline = True
    return found


def _resolve_table(
    names: tuple[str, ...], counts: Mapping[tuple[int | str, ...], int]
) -> tuple[int | str, ...]:
    """Insert the current index of every array of tables the header path passes through."""
    out: list[int | str] = []
    for name in names:
        out.append(name)
        key = tuple(out)
        if key in counts:
            out.append(counts[key] - 1)
    return tuple(out)


def _line_of(lines: Mapping[tuple[int | str, ...], int], loc: tuple[int | str, ...]) -> int | None:
    for i in range(len(loc), 0, -1):
        if loc[:i] in lines:
            return lines[loc[:i]]
    return None
