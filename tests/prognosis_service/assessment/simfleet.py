"""Simulated pumps stored through the real chain: simulator → extractor → encode → pipeline."""

from __future__ import annotations

import functools
import uuid
from collections.abc import Sequence
from datetime import UTC, datetime, timedelta

from edge_agent.extractor import Extractor
from edge_agent.simulator import (
    SALTBUSH_SITE_ID,
    ConstantDuty,
    DutyPoint,
    FaultScenario,
    PumpSimulator,
    saltbush_asset,
)
from prognosis_service.domain.assets import AssetSpec, register_asset
from prognosis_service.ingest.pipeline import Inbound, Pipeline
from prognosis_service.store.engine import Store
from shared_schema import (
    IndicatorLayout,
    IndicatorMessage,
    LayoutAnnouncement,
    encode_indicators,
    encode_json,
    indicators_topic,
    layout_topic,
)

SITE = SALTBUSH_SITE_ID


def gateway_of(asset_id: str) -> str:
    """One test gateway per pump, so sequence numbers never collide."""
    return f"gw-{asset_id.lower()}"


START = datetime(2026, 3, 1, tzinfo=UTC)
ARRIVAL = datetime(2026, 11, 30, tzinfo=UTC)


@functools.lru_cache(maxsize=64)
def simulate(
    asset_id: str,
    scenario: FaultScenario,
    *,
    seed: int,
    hours: float,
    every_h: float,
    first_sequence: int = 0,
    constant_speed_rpm: float | None = None,
) -> tuple[IndicatorLayout, tuple[IndicatorMessage, ...]]:
    """Windows every ``every_h`` hours for ``hours`` hours from ``START`` (cached per session)."""
    asset = saltbush_asset(asset_id)
    duty = (
        None
        if constant_speed_rpm is None
        else ConstantDuty(point=DutyPoint(speed_reference_rpm=constant_speed_rpm))
    )
    sim = PumpSimulator(asset, scenario, seed=seed, duty=duty)
    extractor = Extractor(asset)
    messages = []
    n = int(hours // every_h)
    for i in range(n):
        t = START + timedelta(hours=i * every_h)
        messages.append(
            extractor.extract(
                sim.window(t),
                gateway_id=gateway_of(asset_id),
                site=SITE,
                sequence=first_sequence + i,
                message_id=uuid.uuid5(
                    uuid.NAMESPACE_URL, f"{asset_id}/{seed}/{first_sequence + i}"
                ),
            )
        )
    return extractor.layout, tuple(messages)


def register(store: Store, asset_id: str, asset_class: str = "end-suction-centrifugal") -> None:
    with store.write() as session:
        register_asset(
            session, Pipeline(), AssetSpec(asset_id=asset_id, site=SITE, asset_class=asset_class)
        )


def store_messages(
    store: Store, layout: IndicatorLayout, messages: Sequence[IndicatorMessage], *, batch: int = 500
) -> None:
    """Announce the layout and store the messages through the pipeline, in the given order."""
    if not messages:
        return
    pipe = Pipeline(clock=lambda: ARRIVAL)
    gateway = messages[0].gateway_id
    ann = LayoutAnnouncement(gateway_id=gateway, site=SITE, published_at=START, layouts=(layout,))
    with store.write() as session:
        pipe.handle(session, [Inbound(layout_topic(SITE, gateway), encode_json(ann), ARRIVAL)])
    for lo in range(0, len(messages), batch):
        items = [
            Inbound(
                indicators_topic(SITE, m.gateway_id, m.asset_id),
                encode_indicators(m, layout),
                ARRIVAL,
            )
            for m in messages[lo : lo + batch]
        ]
        with store.write() as session:
            out = pipe.handle(session, items)
        assert not out.quarantined, out.quarantined
