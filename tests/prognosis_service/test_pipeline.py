"""The decode → store/quarantine pipeline on SQLite and PostgreSQL: idempotency, every
quarantine reason, re-admission, gateway status, alarms and drop reports."""

from __future__ import annotations

import json
import math
import struct
import uuid
from datetime import UTC, datetime, timedelta

import pytest
from sqlalchemy import func, select

from prognosis_service.domain.assets import AssetSpec, register_asset
from prognosis_service.domain.gateways import link_state
from prognosis_service.ingest.pipeline import QUARANTINE_REASONS, Inbound, Pipeline, unpack_values
from prognosis_service.store.engine import Store
from prognosis_service.store.models import (
    DropReportRow,
    EdgeAlarmRow,
    Gateway,
    LayoutRow,
    MessageRow,
    QuarantineRow,
)
from shared_schema import (
    DropReport,
    EdgeAlarm,
    EdgeAlarmKind,
    GatewayState,
    alarm_topic,
    dropped_topic,
    encode_batch,
    encode_json,
    to_readable,
)
from tests.prognosis_service import factories as f

NOW = datetime(2026, 6, 2, tzinfo=UTC)


def _clock() -> datetime:
    return NOW


@pytest.fixture
def pipe() -> Pipeline:
    return Pipeline(future_tolerance_s=600, clock=_clock)


def mqtt(topic: str, payload: bytes, *, retained: bool = False) -> Inbound:
    return Inbound(topic=topic, payload=payload, received_at=NOW, retained=retained)


def _setup(store: Store, pipe: Pipeline, *, layout: bool = True, asset: bool = True) -> None:
    with store.write() as s:
        if asset:
            register_asset(s, pipe, AssetSpec(asset_id=f.ASSET, site=f.SITE))
        if layout:
            pipe.handle(s, [mqtt(f.announcement_topic(), f.announcement(f.LAYOUT, f.LAYOUT_B))])


def _count(store: Store, model: type) -> int:
    with store.read() as s:
        return int(s.scalar(select(func.count()).select_from(model)) or 0)


def _reasons(store: Store) -> list[str]:
    with store.read() as s:
        return list(
            s.scalars(
                select(QuarantineRow.reason)
                .where(QuarantineRow.resolved_at.is_(None))
                .order_by(QuarantineRow.id)
            )
        )


def test_messages_are_stored_once_whatever_the_redelivery(store: Store, pipe: Pipeline) -> None:
    _setup(store, pipe)
    msgs = [f.message(i) for i in range(20)]
    items = [mqtt(f.topic(), f.frame(m)) for m in msgs]
    with store.write() as s:
        out = pipe.handle(s, items)
    assert (out.stored, out.duplicates, out.quarantined) == (20, 0, [])
    # QoS 1 redelivery of the same frames, and an outbox replay as one batch payload
    with store.write() as s:
        again = pipe.handle(
            s, [*items[:5], mqtt(f.topic(), encode_batch([i.payload for i in items]))]
        )
    assert (again.stored, again.duplicates) == (0, 25)
    # same (gateway, sequence) under a new message id, and same id under a new sequence
    clash = f.message(3).model_copy(update={"message_id": uuid.uuid4()})
    clash2 = f.message(50).model_copy(update={"message_id": msgs[4].message_id})
    with store.write() as s:
        out3 = pipe.handle(s, [mqtt(f.topic(), f.frame(clash)), mqtt(f.topic(), f.frame(clash2))])
    assert (out3.stored, out3.duplicates) == (0, 2)
    assert _count(store, MessageRow) == 20
    with store.read() as s:
        row = s.scalars(select(MessageRow).where(MessageRow.sequence == 7)).one()
        assert row.window_start == msgs[7].window_start
        assert unpack_values(row.values_f32) == list(msgs[7].values)
        assert row.received_at == NOW
        assert row.shaft_speed_hz == pytest.approx(29.5)
        gw = s.get(Gateway, f.GATEWAY)
        assert gw is not None and gw.last_sequence == 19 and gw.last_seen_at == NOW


def test_missing_values_round_trip_as_none(store: Store, pipe: Pipeline) -> None:
    _setup(store, pipe)
    msg = f.message(1, values=(1.5, None, 2.0, None))
    with store.write() as s:
        pipe.handle(s, [mqtt(f.topic(), f.frame(msg))])
    with store.read() as s:
        blob = s.scalars(select(MessageRow.values_f32)).one()
    assert unpack_values(blob) == [1.5, None, 2.0, None]


def _patched(frame: bytes, old: bytes, new: bytes) -> bytes:
    assert frame.count(old) == 1
    return frame.replace(old, new)


def test_every_quarantine_reason_is_stored_with_raw_bytes(store: Store, pipe: Pipeline) -> None:
    _setup(store, pipe)
    good = f.frame(f.message(1))
    three = f.frame(f.message(2, layout=f.LAYOUT_B), f.LAYOUT_B)
    cases: dict[str, Inbound] = {
        "malformed": mqtt(f.topic(), b"not a frame"),
        "truncated": mqtt(f.topic(), good[:-3]),
        "trailing_bytes": mqtt(f.topic(), good + b"\x00"),
        "unknown_version": mqtt(f.topic(), good[:2] + b"\x07" + good[3:]),
        "unknown_kind": mqtt(f.topic(), good[:3] + b"\x09" + good[4:]),
        "unknown_layout": mqtt(
            f.topic(), _patched(good, bytes.fromhex(f.LAYOUT.digest), b"\xab" * 8)
        ),
        # a 3-value frame claiming the 4-indicator layout
        "layout_mismatch": mqtt(
            f.topic(),
            _patched(three, bytes.fromhex(f.LAYOUT_B.digest), bytes.fromhex(f.LAYOUT.digest)),
        ),
        "non_finite": mqtt(f.topic(), good[:-4] + struct.pack("<f", math.inf)),
        # the topic says one site, the payload another
        "invalid": mqtt(
            f.status(GatewayState.ONLINE, NOW)[0],
            f.status(GatewayState.ONLINE, NOW, site="gibber")[1],
        ),
        "oversized": mqtt(f.status(GatewayState.ONLINE, NOW)[0], b" " * (4 * 1024 * 1024 + 1)),
        "unknown_asset": mqtt(f.topic("MAL-P9"), f.frame(f.message(3, asset_id="MAL-P9"))),
        "future_timestamp": mqtt(
            f.topic(), f.frame(f.message(4, window_start=NOW + timedelta(minutes=11)))
        ),
    }
    assert set(cases) == set(QUARANTINE_REASONS)
    with store.write() as s:
        out = pipe.handle(s, list(cases.values()))
    assert out.stored == 0
    assert [q.reason for q in out.quarantined] == list(cases)
    assert _reasons(store) == list(cases)
    with store.read() as s:
        rows = {r.reason: r for r in s.scalars(select(QuarantineRow))}
    for reason, item in cases.items():
        assert rows[reason].payload == item.payload, reason
        assert rows[reason].topic == item.topic
        assert rows[reason].detail
    assert rows["truncated"].sequence == 1  # identity read from the header despite the cut
    assert rows["unknown_asset"].asset_id == "MAL-P9"
    assert rows["unknown_asset"].message_id == f.message(3, asset_id="MAL-P9").message_id
    # a topic of an unknown contract version is quarantined too, not ignored
    v2 = f.topic().replace("/v1/", "/v2/")
    with store.write() as s:
        pipe.handle(s, [mqtt(v2, good)])
    assert _reasons(store)[-1] == "unknown_version"
    # the same bad payload arriving again is counted, not stored twice
    with store.write() as s:
        pipe.handle(s, [cases["malformed"]])
    with store.read() as s:
        row = s.scalars(select(QuarantineRow).where(QuarantineRow.reason == "malformed")).one()
        assert row.attempts == 2


def test_a_bad_frame_in_a_batch_leaves_the_others_stored(store: Store, pipe: Pipeline) -> None:
    _setup(store, pipe)
    frames = [f.frame(f.message(i)) for i in range(5)]
    frames[2] = frames[2][:-4] + struct.pack("<f", math.nan)
    with store.write() as s:
        out = pipe.handle(s, [mqtt(f.topic(), encode_batch(frames))])
    assert out.stored == 4
    assert _reasons(store) == ["non_finite"]
    with store.read() as s:
        row = s.scalars(select(QuarantineRow)).one()
    assert row.payload == frames[2] and row.sequence == 2


def test_unknown_asset_is_readmitted_when_registered(store: Store, pipe: Pipeline) -> None:
    _setup(store, pipe, asset=False)
    with store.write() as s:
        out = pipe.handle(s, [mqtt(f.topic(), f.frame(f.message(i))) for i in range(3)])
    assert out.stored == 0 and _reasons(store) == ["unknown_asset"] * 3
    with store.write() as s:
        reg = register_asset(s, pipe, AssetSpec(asset_id=f.ASSET, site=f.SITE))
    assert reg.readmitted == 3
    assert _reasons(store) == [] and _count(store, MessageRow) == 3


def test_asset_at_another_site_is_unknown(store: Store, pipe: Pipeline) -> None:
    _setup(store, pipe)
    msg = f.message(1, site="gibber")
    with store.write() as s:
        pipe.handle(s, [mqtt(f.topic(site="gibber"), f.frame(msg))])
    assert _reasons(store) == ["unknown_asset"]


def test_unknown_layout_is_readmitted_when_the_layout_arrives(store: Store, pipe: Pipeline) -> None:
    _setup(store, pipe, layout=False)
    with store.write() as s:
        pipe.handle(s, [mqtt(f.topic(), f.frame(f.message(i))) for i in range(4)])
    assert _reasons(store) == ["unknown_layout"] * 4
    with store.write() as s:
        out = pipe.handle(s, [mqtt(f.announcement_topic(), f.announcement(), retained=True)])
    assert out.readmitted == 4 and out.new_layouts == {f.LAYOUT.digest}
    assert _reasons(store) == [] and _count(store, MessageRow) == 4
    assert _count(store, LayoutRow) == 1


def test_readmission_that_still_fails_keeps_the_entry(store: Store, pipe: Pipeline) -> None:
    _setup(store, pipe, asset=False)
    with store.write() as s:
        pipe.handle(s, [mqtt(f.topic(), f.frame(f.message(1)))])
        rows = list(s.scalars(select(QuarantineRow)))
        assert pipe.readmit(s, rows) == [(rows[0].id, "unknown_asset")]
        assert rows[0].attempts == 2 and rows[0].resolved_at is None


def test_future_timestamp_within_tolerance_is_stored(store: Store, pipe: Pipeline) -> None:
    _setup(store, pipe)
    msg = f.message(1, window_start=NOW + timedelta(minutes=9))
    with store.write() as s:
        assert pipe.handle(s, [mqtt(f.topic(), f.frame(msg))]).stored == 1


def test_http_readable_form_shares_the_pipeline(store: Store, pipe: Pipeline) -> None:
    _setup(store, pipe)
    ok = to_readable(f.message(1), f.LAYOUT)
    bad = to_readable(f.message(2), f.LAYOUT)
    bad["indicators"][0]["unit"] = "in/s"
    items = [
        Inbound(topic=None, payload=b"", received_at=NOW, source="http", obj=o)
        for o in (ok, bad, 17)
    ]
    with store.write() as s:
        out = pipe.handle(s, items)
    assert out.stored == 1
    assert [q.reason for q in out.quarantined] == ["layout_mismatch", "malformed"]
    with store.read() as s:
        row = s.scalars(select(QuarantineRow).order_by(QuarantineRow.id)).first()
    assert row is not None and json.loads(row.payload) == bad and row.source == "http"


def test_gateway_status_birth_will_and_silence(store: Store, pipe: Pipeline) -> None:
    _setup(store, pipe)
    t_birth = NOW - timedelta(hours=3)
    with store.write() as s:
        pipe.handle(s, [mqtt(*f.status(GatewayState.ONLINE, t_birth))])
    with store.read() as s:
        gw = s.get(Gateway, f.GATEWAY)
        assert gw is not None and gw.state == "online" and gw.last_seen_at == NOW
        assert link_state(gw, now=NOW + timedelta(minutes=5), silent_after_s=3600) == "online"
        assert link_state(gw, now=NOW + timedelta(hours=2), silent_after_s=3600) == "silent"
    # the Last Will carries no time: the arrival time stands in
    with store.write() as s:
        pipe.handle(s, [mqtt(*f.status(GatewayState.LOST, None))])
    with store.read() as s:
        gw = s.get(Gateway, f.GATEWAY)
        assert gw is not None and gw.state == "lost" and gw.state_at == NOW
        assert link_state(gw, now=NOW, silent_after_s=3600) == "lost"
    # an older status arriving late does not overwrite the newer one
    with store.write() as s:
        pipe.handle(s, [mqtt(*f.status(GatewayState.ONLINE, t_birth), retained=True)])
    with store.read() as s:
        gw = s.get(Gateway, f.GATEWAY)
        assert gw is not None and gw.state == "lost"


def test_retained_status_does_not_count_as_being_heard(store: Store, pipe: Pipeline) -> None:
    with store.write() as s:
        pipe.handle(
            s, [mqtt(*f.status(GatewayState.ONLINE, NOW - timedelta(days=2)), retained=True)]
        )
    with store.read() as s:
        gw = s.get(Gateway, f.GATEWAY)
        assert gw is not None and gw.last_seen_at is None


def test_alarms_and_drop_reports_are_stored_once(store: Store, pipe: Pipeline) -> None:
    _setup(store, pipe)
    alarm = EdgeAlarm(
        message_id=uuid.uuid4(),
        gateway_id=f.GATEWAY,
        site=f.SITE,
        asset_id=f.ASSET,
        raised_at=NOW,
        kind=EdgeAlarmKind.ZONE_CHANGE,
        zone_from="B",
        zone_to="C",
    )
    report = DropReport(
        message_id=uuid.uuid4(),
        gateway_id=f.GATEWAY,
        site=f.SITE,
        at=NOW,
        dropped_count=12,
        sequence_ranges=((100, 111),),
        rule="thin oldest first",
    )
    items = [
        mqtt(alarm_topic(f.SITE, f.GATEWAY, f.ASSET), encode_json(alarm)),
        mqtt(dropped_topic(f.SITE, f.GATEWAY), encode_json(report)),
    ]
    with store.write() as s:
        out = pipe.handle(s, items + items)
    assert out.other["alarm"] == 2 and out.other["dropped"] == 2 and not out.quarantined
    assert _count(store, EdgeAlarmRow) == 1 and _count(store, DropReportRow) == 1
    with store.read() as s:
        row = s.scalars(select(EdgeAlarmRow)).one()
        assert row.kind == "zone_change" and row.body["zone_to"] == "C"


def test_a_payload_that_trips_a_bug_is_kept_not_fatal(
    store: Store, pipe: Pipeline, monkeypatch: pytest.MonkeyPatch
) -> None:
    _setup(store, pipe)
    import prognosis_service.ingest.pipeline as module

    real = module.decode_indicators

    def flaky(frame: bytes, *args: object, **kwargs: object) -> object:
        if frame.endswith(b"\x00\x00\x80\x7f"):  # a marker no valid frame here ends with
            raise RuntimeError("boom")
        return real(frame, *args, **kwargs)  # type: ignore[arg-type]

    monkeypatch.setattr(module, "decode_indicators", flaky)
    good = [f.frame(f.message(i)) for i in range(2)]
    items = [
        mqtt(f.topic(), good[0]),
        mqtt(f.topic(), b"WS\x01\x01" + b"\x00\x00\x80\x7f"),
        mqtt(f.topic(), good[1]),
    ]
    with store.write() as s:
        out = pipe.handle(s, items)
    assert out.stored == 2
    assert [(q.index, q.reason) for q in out.quarantined] == [(1, "malformed")]
    assert "RuntimeError: boom" in out.quarantined[0].detail
