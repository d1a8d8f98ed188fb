"""What the bulk insert writes: every column of a stored message row, on both dialects and
both ingest paths (binary MQTT frame, readable HTTP form), equals the message that was sent.

The insert bypasses the ORM (binary COPY on PostgreSQL, a driver-level multi-row VALUES on
SQLite), so this reads the rows back through the ORM models and compares field by field.
"""

from __future__ import annotations

import json
import math
from datetime import UTC, datetime

import pytest
from sqlalchemy import select, update

from prognosis_service.auth import Principal
from prognosis_service.domain.http_ingest import decode_batch, ingest_batch, parse_batch
from prognosis_service.ingest.pipeline import Inbound, Pipeline, unpack_values
from prognosis_service.store.engine import Store
from prognosis_service.store.models import Gateway, MessageRow
from shared_schema import (
    ChannelQuality,
    ClockSync,
    IndicatorMessage,
    OperatingCondition,
    QualityFlag,
    ShaftSpeedSource,
    to_readable,
)
from tests.prognosis_service import factories as f
from tests.prognosis_service.test_pipeline import _setup

NOW = datetime(2026, 6, 2, 3, 4, 5, 678901, tzinfo=UTC)
INGEST = Principal("k", "test", frozenset({"ingest"}), None)


def _rich(sequence: int) -> IndicatorMessage:
    """A message using every optional field: all operating values, quality, a missing value."""
    base = f.message(sequence, values=(1.5, None, 0.25, 310.0))
    return base.model_copy(
        update={
            "clock_sync": ClockSync.HOLDOVER,
            "operating": OperatingCondition(
                shaft_speed_hz=29.5,
                shaft_speed_source=ShaftSpeedSource.SPECTRUM,
                load_fraction=0.75,
                flow_m3_per_h=41.0,
                suction_pressure_kpa=-12.5,
                fluid_temperature_c=38.5,
            ),
            "quality": (
                ChannelQuality(
                    channel="de_accel",
                    flags=frozenset({QualityFlag.SPIKES_REMOVED, QualityFlag.CLIPPED}),
                    spikes_removed=3,
                ),
            ),
        }
    )


def _check(store: Store, sent: list[IndicatorMessage]) -> None:
    with store.read() as s:
        rows = s.scalars(select(MessageRow).order_by(MessageRow.sequence)).all()
        gw = s.get(Gateway, f.GATEWAY)
    assert len(rows) == len(sent)
    for row, msg in zip(rows, sent, strict=True):
        op = msg.operating
        assert row.message_id == msg.message_id
        assert (row.gateway_id, row.sequence, row.site_id, row.asset_id) == (
            msg.gateway_id, msg.sequence, msg.site, msg.asset_id,
        )  # fmt: skip
        assert row.window_start == msg.window_start
        assert row.received_at == NOW  # microseconds kept on both dialects
        assert row.window_s == msg.window_s
        assert row.clock_sync == msg.clock_sync.value
        assert row.shaft_speed_hz == pytest.approx(op.shaft_speed_hz)
        assert row.shaft_speed_source == (op.shaft_speed_source and op.shaft_speed_source.value)
        for name in ("load_fraction", "flow_m3_per_h", "suction_pressure_kpa",
                     "fluid_temperature_c"):  # fmt: skip
            assert getattr(row, name) == getattr(op, name), name
        expected_quality = {
            q.channel: {"flags": sorted(q.flags), "spikes_removed": q.spikes_removed}
            for q in msg.quality
        }
        assert row.quality == (expected_quality or None)
        assert row.layout_digest == msg.layout_digest
        stored = unpack_values(row.values_f32)
        assert [None if v is None else round(v, 4) for v in stored] == [
            None if v is None else round(v, 4) for v in msg.values
        ]
    assert gw is not None and gw.last_sequence == max(m.sequence for m in sent)


def test_rows_from_binary_frames(store: Store) -> None:
    pipe = Pipeline(clock=lambda: NOW)
    _setup(store, pipe)
    sent = [_rich(1), f.message(2), _rich(3)]
    items = [Inbound(topic=f.topic(), payload=f.frame(m), received_at=NOW) for m in sent]
    with store.write() as s:
        out = pipe.handle(s, items)
    assert (out.stored, out.duplicates, out.quarantined) == (3, 0, [])
    _check(store, sent)
    with store.write() as s:  # the same again: nothing new
        again = pipe.handle(s, items)
    assert (again.stored, again.duplicates) == (0, 3)
    _check(store, sent)


def test_rows_from_the_readable_form_decoded_ahead(store: Store) -> None:
    pipe = Pipeline(clock=lambda: NOW)
    _setup(store, pipe)
    sent = [_rich(1), f.message(2)]
    bad = dict(to_readable(f.message(3), f.LAYOUT), window_s=-1.0)
    body = json.dumps({"messages": [to_readable(m, f.LAYOUT) for m in sent] + [bad]}).encode()
    batch = parse_batch(body, INGEST)
    with store.read() as s:
        decode_batch(s, pipe, batch)
    assert [d is not None for d in batch.decoded] == [True, True, False]
    with store.write() as s:
        response, _ = ingest_batch(s, pipe, INGEST, batch)
    assert (response["stored"], response["duplicates"]) == (2, 0)
    assert [(q["index"], q["reason"]) for q in response["quarantined"]] == [(2, "invalid")]
    # received_at is the request's own arrival time, not NOW: set it to compare the rest
    with store.write() as s:
        s.execute(update(MessageRow).values(received_at=NOW))
    _check(store, sent)


def test_non_finite_json_is_quarantined_per_message_not_refused(store: Store) -> None:
    """A NaN token (accepted by Python's json, refused by strict parsers) quarantines only its
    message: the body is still parsed and the rest stored."""
    pipe = Pipeline(clock=lambda: NOW)
    _setup(store, pipe)
    good = to_readable(f.message(1), f.LAYOUT)
    nan = to_readable(f.message(2), f.LAYOUT)
    nan["indicators"][0]["value"] = math.nan
    body = json.dumps({"messages": [good, nan]}).encode()  # writes the bare token NaN
    assert b"NaN" in body
    with store.write() as s:
        response, _ = ingest_batch(s, pipe, INGEST, body)
    assert response["stored"] == 1
    assert [(q["index"], q["reason"]) for q in response["quarantined"]] == [(1, "non_finite")]
