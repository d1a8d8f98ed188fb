"""The MQTT topic layout (MQTT v5).

``wellspan/v1/{site}/{gateway}/layout``            retained LayoutAnnouncement (JSON)
``wellspan/v1/{site}/{gateway}/status``            retained GatewayStatus, Last Will (JSON)
``wellspan/v1/{site}/{gateway}/dropped``           DropReport (JSON)
``wellspan/v1/{site}/{gateway}/{asset}/indicators`` indicator frame or batch (binary)
``wellspan/v1/{site}/{gateway}/{asset}/alarm``     EdgeAlarm (JSON), sent ahead of the queue
``wellspan/v1/alerts/{site}/{asset}``              service alerts out (JSON)
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

from shared_schema.messages import SCHEMA_MAJOR

__all__ = [
    "INGEST_FILTERS",
    "TopicParts",
    "alarm_topic",
    "alerts_topic",
    "dropped_topic",
    "indicators_topic",
    "layout_topic",
    "parse_topic",
    "shared_subscription",
    "status_topic",
]

ROOT = "wellspan"
_V = f"v{SCHEMA_MAJOR}"

TopicKind = Literal["layout", "status", "dropped", "indicators", "alarm"]

INGEST_FILTERS: tuple[str, ...] = (
    f"{ROOT}/+/+/+/layout",
    f"{ROOT}/+/+/+/status",
    f"{ROOT}/+/+/+/dropped",
    f"{ROOT}/+/+/+/+/indicators",
    f"{ROOT}/+/+/+/+/alarm",
)
"""What the service subscribes to. The version level is a wildcard on purpose: payloads of an
unknown version arrive and are quarantined with a reason instead of being silently ignored."""


def _check(*levels: str) -> None:
    for level in levels:
        if not level or any(c in level for c in "/+#\x00"):
            raise ValueError(f"topic level must be non-empty without '/', '+', '#': {level!r}")


def layout_topic(site: str, gateway_id: str) -> str:
    _check(site, gateway_id)
    return f"{ROOT}/{_V}/{site}/{gateway_id}/layout"


def status_topic(site: str, gateway_id: str) -> str:
    _check(site, gateway_id)
    return f"{ROOT}/{_V}/{site}/{gateway_id}/status"


def dropped_topic(site: str, gateway_id: str) -> str:
    _check(site, gateway_id)
    return f"{ROOT}/{_V}/{site}/{gateway_id}/dropped"


def indicators_topic(site: str, gateway_id: str, asset_id: str) -> str:
    _check(site, gateway_id, asset_id)
    return f"{ROOT}/{_V}/{site}/{gateway_id}/{asset_id}/indicators"


def alarm_topic(site: str, gateway_id: str, asset_id: str) -> str:
    _check(site, gateway_id, asset_id)
    return f"{ROOT}/{_V}/{site}/{gateway_id}/{asset_id}/alarm"


def alerts_topic(site: str, asset_id: str) -> str:
    _check(site, asset_id)
    return f"{ROOT}/{_V}/alerts/{site}/{asset_id}"


def shared_subscription(group: str, topic_filter: str) -> str:
    """MQTT v5 shared subscription: the broker spreads matching messages over the group."""
    _check(group)
    return f"$share/{group}/{topic_filter}"


@dataclass(frozen=True, slots=True)
class TopicParts:
    version: str
    site: str
    gateway_id: str
    kind: TopicKind
    asset_id: str | None = None


def parse_topic(topic: str) -> TopicParts | None:
    """Split a gateway topic into its parts; None when it is not one of ours."""
    levels = topic.split("/")
    if len(levels) < 5 or levels[0] != ROOT or levels[2] == "alerts":
        return None
    if len(levels) == 5 and levels[4] in ("layout", "status", "dropped"):
        return TopicParts(levels[1], levels[2], levels[3], levels[4])  # type: ignore[arg-type]
    if len(levels) == 6 and levels[5] in ("indicators", "alarm"):
        return TopicParts(levels[1], levels[2], levels[3], levels[5], levels[4])  # type: ignore[arg-type]
    return None
