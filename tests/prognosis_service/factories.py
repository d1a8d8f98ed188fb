"""Valid contract messages for the service tests, built with shared_schema directly."""

from __future__ import annotations

import uuid
from datetime import UTC, datetime, timedelta

from shared_schema import (
    ClockSync,
    GatewayState,
    GatewayStatus,
    IndicatorLayout,
    IndicatorMessage,
    IndicatorSpec,
    LayoutAnnouncement,
    OperatingCondition,
    ShaftSpeedSource,
    encode_indicators,
    encode_json,
    indicators_topic,
    layout_topic,
    status_topic,
)

SITE = "mallee"
GATEWAY = "mallee-gw1"
ASSET = "MAL-P1"
T0 = datetime(2026, 6, 1, tzinfo=UTC)

LAYOUT = IndicatorLayout(
    extractor_version="test-1",
    indicators=(
        IndicatorSpec(name="de_accel.velocity_rms", unit="mm/s", channel="de_accel"),
        IndicatorSpec(name="de_accel.kurtosis", unit="1", channel="de_accel"),
        IndicatorSpec(name="de_accel.env_bpfo", unit="g", channel="de_accel", encoding="f16"),
        IndicatorSpec(name="discharge_pressure.mean", unit="kPa", channel="discharge_pressure"),
    ),
)
LAYOUT_B = IndicatorLayout(
    extractor_version="test-2",
    indicators=(
        IndicatorSpec(name="de_accel.velocity_rms", unit="mm/s", channel="de_accel"),
        IndicatorSpec(name="de_accel.crest_factor", unit="1", channel="de_accel"),
        IndicatorSpec(name="bearing_temperature.mean", unit="degC", channel="bearing_temperature"),
    ),
)


def message(
    sequence: int = 0,
    *,
    asset_id: str = ASSET,
    site: str = SITE,
    gateway_id: str = GATEWAY,
    window_start: datetime | None = None,
    values: tuple[float | None, ...] | None = None,
    layout: IndicatorLayout = LAYOUT,
) -> IndicatorMessage:
    """One indicator message; values default to a simple function of the sequence number
    (exactly representable in f16 and f32, so round trips compare equal)."""
    n = len(layout.indicators)
    if values is None:
        values = tuple(float(sequence % 64) + 0.25 * i for i in range(n))
    return IndicatorMessage(
        message_id=uuid.uuid5(uuid.NAMESPACE_URL, f"{gateway_id}/{sequence}"),
        gateway_id=gateway_id,
        sequence=sequence,
        site=site,
        asset_id=asset_id,
        window_start=window_start or T0 + timedelta(minutes=10 * sequence),
        window_s=10.0,
        clock_sync=ClockSync.SYNCED,
        operating=OperatingCondition(
            shaft_speed_hz=29.5, shaft_speed_source=ShaftSpeedSource.TACHO, load_fraction=0.75
        ),
        layout_digest=layout.digest,
        values=values,
    )


def frame(msg: IndicatorMessage, layout: IndicatorLayout = LAYOUT) -> bytes:
    return encode_indicators(msg, layout)


def topic(asset_id: str = ASSET, site: str = SITE, gateway_id: str = GATEWAY) -> str:
    return indicators_topic(site, gateway_id, asset_id)


def announcement(*layouts: IndicatorLayout, site: str = SITE, gateway_id: str = GATEWAY) -> bytes:
    return encode_json(
        LayoutAnnouncement(
            gateway_id=gateway_id,
            site=site,
            published_at=T0,
            layouts=layouts or (LAYOUT,),
        )
    )


def announcement_topic(site: str = SITE, gateway_id: str = GATEWAY) -> str:
    return layout_topic(site, gateway_id)


def status(
    state: GatewayState, at: datetime | None, *, site: str = SITE, gateway_id: str = GATEWAY
) -> tuple[str, bytes]:
    body = GatewayStatus(gateway_id=gateway_id, site=site, state=state, at=at, agent_version="0.1")
    return status_topic(site, gateway_id), encode_json(body)
