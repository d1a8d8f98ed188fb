"""The alert engine on the store: storms, lifecycle and persistence across restarts."""

from __future__ import annotations

from datetime import timedelta

import pytest
from sqlalchemy import func, select

from prognosis_service.alerts.models import AlertRow, DeliveryRow
from prognosis_service.alerts.rules import AlertEngine, AnomalyReading, ChangeKind
from prognosis_service.alerts.service import AlertService, get_alert, list_alerts
from prognosis_service.domain.errors import ConflictError, NotFoundError
from tests.prognosis_service.alerts.conftest import FakeClock
from tests.prognosis_service.alerts.test_delivery import subscribe


def reading(i: int, ratio: float, asset: str = "MAL-P1") -> AnomalyReading:
    return AnomalyReading(
        site="Mallee",
        asset_id=asset,
        at=FakeClock().now + timedelta(minutes=10 * i),
        score=10.0 * ratio,
        control_limit=10.0,
    )


def count(store, model) -> int:
    with store.read() as s:
        return int(s.scalar(select(func.count()).select_from(model)) or 0)


def test_storm_of_1000_is_one_alert_and_one_delivery(
    store, receiver, sealer, local_policy, clock
) -> None:
    subscribe(store, receiver, sealer, local_policy, clock)
    published = []
    service = AlertService(
        store, AlertEngine(), clock=clock, on_event=lambda c, e: published.append(e)
    )
    changes = []
    for start in range(0, 1000, 100):  # ten batches, as ingest would hand them over
        changes += service.evaluate(reading(i, 1.5) for i in range(start, start + 100))
    assert [c.change for c in changes] == [ChangeKind.OPENED]
    assert count(store, AlertRow) == 1
    assert count(store, DeliveryRow) == 1
    assert [e["type"] for e in published] == ["org.wellspan.alert.opened"]


def test_state_survives_a_restart_and_lifecycle_is_stored(store, clock) -> None:
    first = AlertService(store, AlertEngine(), clock=clock)
    first.evaluate([reading(0, 1.5), reading(1, 1.5)])  # two of the three windows needed
    restarted = AlertService(store, AlertEngine(), clock=clock)
    (opened,) = restarted.evaluate([reading(2, 1.5)])
    assert opened.change is ChangeKind.OPENED
    alert_id = opened.alert.alert_id

    ack = restarted.acknowledge(alert_id, by="r.ngata", note="crew dispatched")
    assert ack.alert.state == "acknowledged"
    with pytest.raises(ConflictError, match="only an open alert"):
        restarted.acknowledge(alert_id, by="r.ngata")
    res = restarted.resolve(alert_id, by="j.moss", note="coupling realigned")
    with store.read() as s:
        row = get_alert(s, alert_id)
        assert (row.state, row.acknowledged_by, row.resolved_by) == (
            "resolved",
            "r.ngata",
            "j.moss",
        )
        assert row.resolution == "coupling realigned"
        assert row.revision == res.revision == 3
        assert [r.alert_id for r in list_alerts(s, site="Mallee")[0]] == [alert_id]
        assert list_alerts(s, site="Mallee", state="open") == ([], None)
    with pytest.raises(ConflictError, match="already resolved"):
        restarted.resolve(alert_id, by="j.moss")
    with store.read() as s, pytest.raises(NotFoundError):
        get_alert(s, opened.event_id)
    # resolved by hand while still over the limit: no new alert until it clears
    assert restarted.evaluate(reading(3 + i, 1.5) for i in range(20)) == []
    assert [c.change for c in restarted.evaluate(reading(50 + i, 0.1) for i in range(3))] == []
    (again,) = restarted.evaluate(reading(60 + i, 1.5) for i in range(3))
    assert again.change is ChangeKind.OPENED and again.alert.alert_id != alert_id


def test_silence_sweep_over_the_store(store, clock) -> None:
    import uuid as _uuid

    from prognosis_service.alerts.rules import AlertKind
    from prognosis_service.store.models import Asset, Gateway, LayoutRow, MessageRow

    t0 = clock()
    with store.write() as s:
        s.add(Gateway(gateway_id="mallee-gw1", site_id="Mallee", last_seen_at=t0))
        for asset in ("MAL-P1", "MAL-P2"):
            s.add(
                Asset(
                    asset_id=asset,
                    site_id="Mallee",
                    gateway_id="mallee-gw1",
                    asset_class="end_suction_pump",
                    description="",
                    registered_at=t0 - timedelta(days=30),
                )
            )
        s.add(LayoutRow(digest="0123456789abcdef", body={}, first_seen_at=t0))
        s.flush()
        s.add(
            MessageRow(
                message_id=_uuid.uuid4(),
                gateway_id="mallee-gw1",
                sequence=1,
                site_id="Mallee",
                asset_id="MAL-P1",
                window_start=t0,
                window_s=1.0,
                clock_sync="synced",
                quality=None,
                layout_digest="0123456789abcdef",
                values_f32=b"",
                received_at=t0,
            )
        )
    service = AlertService(store, AlertEngine(), clock=clock)
    # 30 min later: the gateway and MAL-P1 are fine; MAL-P2 never sent anything in 30 days
    (p2,) = service.check_silence(now=t0 + timedelta(minutes=30))
    assert (p2.alert.kind, p2.alert.asset_id) == (AlertKind.ASSET_SILENT, "MAL-P2")
    # two hours later everything is silent
    later = service.check_silence(now=t0 + timedelta(hours=2))
    assert sorted((c.alert.kind, c.alert.asset_id or c.alert.gateway_id) for c in later) == [
        ("asset_silent", "MAL-P1"),
        ("gateway_silent", "mallee-gw1"),
    ]
    # the gateway is heard again: its alert clears
    with store.write() as s:
        gw = s.get(Gateway, "mallee-gw1")
        assert gw is not None
        gw.last_seen_at = t0 + timedelta(hours=2, minutes=5)
    (cleared,) = service.check_silence(now=t0 + timedelta(hours=2, minutes=10))
    assert (cleared.change, cleared.alert.gateway_id) == (ChangeKind.RESOLVED, "mallee-gw1")
