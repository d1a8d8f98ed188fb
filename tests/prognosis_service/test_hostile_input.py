"""Hostile input through the real pipeline and store, over MQTT-shaped items and over
``POST /v1/indicators``: truncated, oversized, deeply nested, wrong-typed, NaN/Inf, replayed,
future-dated and unknown-asset messages, mixed at random with good ones.

Each example asserts that every item ends where it belongs: good ones stored once, replays
counted as duplicates and not stored again, every bad one quarantined with the reason the
contract gives it (shared_schema.DecodeReason, plus unknown_asset and future_timestamp), none
through the catch-all for payloads that trip a bug, and the service answering no 5xx.

The example counts are small so CI stays short. For a long run set ``WELLSPAN_FUZZ_EXAMPLES``
(e.g. ``WELLSPAN_FUZZ_EXAMPLES=5000 .venv/bin/pytest tests/prognosis_service/test_hostile_input.py
tests/shared_schema -k hostile``); hypothesis keeps the failing examples it finds in
``.hypothesis/`` and replays them first on the next run.
"""

from __future__ import annotations

import itertools
import json
import math
import os
import re
import struct
from collections import Counter
from datetime import UTC, datetime, timedelta
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sqlalchemy import func, select

from prognosis_service.domain.assets import AssetSpec, register_asset
from prognosis_service.ingest.pipeline import QUARANTINE_REASONS, Inbound, Pipeline
from prognosis_service.store.engine import Store
from prognosis_service.store.models import MessageRow
from shared_schema import GatewayState, IndicatorMessage, to_readable
from shared_schema.codec import MAX_JSON_BYTES
from tests.prognosis_service import factories as f
from tests.prognosis_service.conftest import Service
from tests.prognosis_service.test_api import assert_problem, register

EXAMPLES = int(os.environ.get("WELLSPAN_FUZZ_EXAMPLES", "0")) or None
NOW = datetime(2026, 6, 2, tzinfo=UTC)
TOLERANCE_S = 600.0
BUG_DETAIL = "could not be processed"  # the pipeline's catch-all: hostile input must not need it

_sequences = itertools.count(100_000)  # fresh (gateway, sequence) identities across examples


def _fuzz(examples: int) -> Any:
    return settings(
        max_examples=EXAMPLES or examples,
        deadline=None,
        suppress_health_check=[
            HealthCheck.function_scoped_fixture,
            HealthCheck.too_slow,
            HealthCheck.data_too_large,
        ],
    )


def _now() -> datetime:
    return datetime.now(UTC).replace(microsecond=0)  # the contract keeps milliseconds at most


def _fresh(*, start: datetime, **kw: Any) -> IndicatorMessage:
    n = next(_sequences)
    return f.message(n, window_start=start - timedelta(minutes=n % 5000 + 1), **kw)


# -- value strategies ---------------------------------------------------------------------------

# float32 and float16 bit patterns that are not finite: ±inf and NaNs with any payload
_F32_NON_FINITE = st.one_of(
    st.sampled_from([0x7F800000, 0xFF800000]),
    st.integers(0x7F800001, 0x7FFFFFFF),
    st.integers(0xFF800001, 0xFFFFFFFF),
).map(lambda bits: struct.pack("<I", bits))
_F16_NON_FINITE = st.one_of(
    st.sampled_from([0x7C00, 0xFC00]),
    st.integers(0x7C01, 0x7FFF),
    st.integers(0xFC01, 0xFFFF),
).map(lambda bits: struct.pack("<H", bits))
# where each value of factories.LAYOUT sits from the end of a frame (f32, f32, f16, f32)
_VALUE_SLOTS = {0: (-14, -10), 1: (-10, -6), 2: (-6, -4), 3: (-4, None)}

_NOT_A_STRING = st.one_of(
    st.integers(),
    st.booleans(),
    # finite only: an infinite value is quarantined as non-finite (its own test), not invalid
    st.floats(allow_nan=False, allow_infinity=False),
    st.lists(st.integers(), max_size=3),
    st.dictionaries(st.text(max_size=3), st.integers(), max_size=2),
)
_WORDS = st.text(alphabet="abcdefghijklmnopqrstuvwxyz", min_size=1, max_size=12)
_NEITHER_LIST_NOR_DICT = st.one_of(st.integers(), st.booleans(), st.none(), _WORDS)
# Wrong types the readable form refuses (pydantic's lax mode converts some others, e.g. a
# boolean to an integer; those are not "wrong" for the contract and are left out here).
_WRONG_READABLE: dict[str, st.SearchStrategy[Any]] = {
    "message_id": st.one_of(_NOT_A_STRING, st.none(), _WORDS),
    "gateway_id": st.one_of(_NOT_A_STRING, st.none()),
    "site": st.one_of(_NOT_A_STRING, st.none()),
    "asset_id": st.one_of(_NOT_A_STRING, st.none()),
    "sequence": st.one_of(
        st.none(), _WORDS, st.lists(st.integers(), max_size=2), st.floats(0.1, 0.9)
    ),
    "window_start": st.one_of(
        st.none(), st.booleans(), _WORDS, st.lists(st.integers(), max_size=2)
    ),
    "window_s": st.one_of(st.none(), _WORDS, st.lists(st.integers(), max_size=2), st.just({})),
    "clock_sync": st.one_of(
        st.integers(),
        st.none(),
        _WORDS.filter(lambda w: w not in ("synced", "holdover", "unsynced")),
    ),
    "operating": st.one_of(_NEITHER_LIST_NOR_DICT, st.lists(st.integers(), max_size=2)),
    "quality": st.one_of(st.integers(), st.none(), _WORDS, st.just({})),
    "indicators": st.one_of(_NEITHER_LIST_NOR_DICT, st.just({})),
    "layout_digest": _NOT_A_STRING,
}
_WRONG_STATUS: dict[str, st.SearchStrategy[Any]] = {
    "gateway_id": _NOT_A_STRING,
    "site": _NOT_A_STRING,
    "state": st.one_of(
        _NOT_A_STRING, _WORDS.filter(lambda w: w not in ("online", "offline", "lost"))
    ),
}
_UNKNOWN_ASSET_ID = st.from_regex(r"\A(UNK|ZZZ)-Q[0-9]{1,4}\Z")
_FUTURE_S = st.integers(1, 30 * 365 * 86400)


def _nested(depth: int, kind: str) -> bytes:
    if kind == "array":
        return b"[" * depth + b"]" * depth
    if kind == "object":
        return b'{"a":' * depth + b"1" + b"}" * depth
    return b"[" * depth  # unterminated as well


# -- MQTT-shaped items into the pipeline ---------------------------------------------------------

MQTT_KINDS = (
    "good",
    "replay",
    "truncated",
    "oversized",
    "nested",
    "wrong_typed",
    "non_finite",
    "future",
    "unknown_asset",
)


def _clock() -> datetime:
    return NOW


def _mqtt_case(
    data: st.DataObject, kind: str, sent: list[bytes]
) -> tuple[Inbound, str, IndicatorMessage | None]:
    """One item and where it must end: "stored", "duplicate" or a quarantine reason."""
    if kind == "replay" and sent:
        return Inbound(f.topic(), data.draw(st.sampled_from(sent)), NOW), "duplicate", None
    if kind in ("good", "replay"):
        msg = _fresh(start=NOW)
        frame = f.frame(msg)
        sent.append(frame)
        return Inbound(f.topic(), frame, NOW), "stored", msg
    if kind == "truncated":
        frame = f.frame(_fresh(start=NOW))
        cut = data.draw(st.integers(0, len(frame) - 1), label="cut")
        return Inbound(f.topic(), frame[:cut], NOW), "truncated", None
    topic, status = f.status(GatewayState.ONLINE, NOW)
    if kind == "oversized":
        # two sizes only: every oversized payload is kept in quarantine with its raw bytes
        extra = data.draw(st.sampled_from([1, 4096]), label="extra bytes")
        where = data.draw(st.sampled_from([topic, f.announcement_topic()]))
        return Inbound(where, b" " * (MAX_JSON_BYTES + extra), NOW), "oversized", None
    if kind == "nested":
        depth = data.draw(st.integers(5_000, 200_000), label="depth")
        shape = data.draw(st.sampled_from(["array", "object", "open"]))
        where = data.draw(st.sampled_from([topic, f.announcement_topic()]))
        return Inbound(where, _nested(depth, shape), NOW), "malformed", None
    if kind == "wrong_typed":
        doc = json.loads(status)
        field = data.draw(st.sampled_from(sorted(_WRONG_STATUS)), label="field")
        doc[field] = data.draw(_WRONG_STATUS[field], label="value")
        return Inbound(topic, json.dumps(doc).encode(), NOW), "invalid", None
    if kind == "non_finite":
        frame = bytearray(f.frame(_fresh(start=NOW)))
        slot = data.draw(st.sampled_from(sorted(_VALUE_SLOTS)), label="value index")
        lo, hi = _VALUE_SLOTS[slot]
        frame[lo:hi] = data.draw(_F16_NON_FINITE if slot == 2 else _F32_NON_FINITE)
        return Inbound(f.topic(), bytes(frame), NOW), "non_finite", None
    if kind == "future":
        ahead = timedelta(seconds=TOLERANCE_S + data.draw(_FUTURE_S, label="seconds ahead"))
        msg = f.message(next(_sequences), window_start=NOW + ahead)
        return Inbound(f.topic(), f.frame(msg), NOW), "future_timestamp", None
    assert kind == "unknown_asset"
    asset = data.draw(_UNKNOWN_ASSET_ID, label="asset id")
    msg = f.message(next(_sequences), asset_id=asset, window_start=NOW - timedelta(hours=1))
    return Inbound(f.topic(asset), f.frame(msg), NOW), "unknown_asset", None


def _stored_once(store: Store, messages: list[IndicatorMessage]) -> None:
    ids = [m.message_id for m in messages]
    with store.read() as s:
        counts = Counter(
            s.scalars(select(MessageRow.message_id).where(MessageRow.message_id.in_(ids)))
        )
    assert all(counts[i] == 1 for i in ids), counts


def test_every_mqtt_kind_has_its_quarantine_reason() -> None:
    reasons = {
        "truncated",
        "oversized",
        "malformed",
        "invalid",
        "non_finite",
        "future_timestamp",
        "unknown_asset",
    }
    assert reasons <= set(QUARANTINE_REASONS)


@_fuzz(25)
@given(data=st.data())
def test_hostile_mqtt_items_are_stored_once_or_quarantined_with_their_reason(
    store: Store, data: st.DataObject
) -> None:
    pipe = Pipeline(future_tolerance_s=TOLERANCE_S, clock=_clock)
    with store.write() as s:
        register_asset(s, pipe, AssetSpec(asset_id=f.ASSET, site=f.SITE))
        pipe.handle(s, [Inbound(f.announcement_topic(), f.announcement(), NOW)])
    kinds = data.draw(st.lists(st.sampled_from(MQTT_KINDS), min_size=1, max_size=12), label="kinds")
    sent: list[bytes] = []
    cases = [_mqtt_case(data, kind, sent) for kind in kinds]
    # a batch may be redelivered whole (QoS 1 after a lost acknowledgement)
    redeliver = data.draw(st.booleans(), label="redeliver the batch")
    with store.write() as s:
        out = pipe.handle(s, [item for item, _, _ in cases])
    expected = Counter(where for _, where, _ in cases)
    assert out.stored == expected["stored"]
    assert out.duplicates == expected["duplicate"]
    got = {q.index: q for q in out.quarantined}
    for index, (_, where, _) in enumerate(cases):
        if where in ("stored", "duplicate"):
            assert index not in got, (kinds[index], got.get(index))
        else:
            assert got[index].reason == where, (kinds[index], got[index])
            assert BUG_DETAIL not in got[index].detail, got[index]
    if redeliver:
        with store.write() as s:
            again = pipe.handle(s, [item for item, _, _ in cases])
        assert again.stored == 0
        assert again.duplicates == expected["stored"] + expected["duplicate"]
        assert [q.reason for q in again.quarantined] == [q.reason for q in out.quarantined]
    _stored_once(store, [m for _, _, m in cases if m is not None])


# -- POST /v1/indicators ---------------------------------------------------------------------------

HTTP_KINDS = (
    "good",
    "replay",
    "wrong_typed",
    "non_finite",
    "future",
    "unknown_asset",
    "not_an_object",
    "nested",
)


def _http_case(
    data: st.DataObject, kind: str, sent: list[dict[str, Any]], now: datetime
) -> tuple[Any, str, IndicatorMessage | None]:
    if kind == "replay" and sent:
        return data.draw(st.sampled_from(sent)), "duplicate", None
    if kind in ("good", "replay"):
        msg = _fresh(start=now)
        doc = to_readable(msg, f.LAYOUT)
        sent.append(doc)
        return doc, "stored", msg
    if kind == "wrong_typed":
        doc = to_readable(_fresh(start=now), f.LAYOUT)
        field = data.draw(st.sampled_from(sorted(_WRONG_READABLE)), label="field")
        doc[field] = data.draw(_WRONG_READABLE[field], label="value")
        return doc, "invalid", None
    if kind == "non_finite":
        doc = to_readable(_fresh(start=now), f.LAYOUT)
        slot = data.draw(st.integers(0, len(doc["indicators"]) - 1), label="value index")
        doc["indicators"][slot]["value"] = data.draw(
            st.sampled_from([math.nan, math.inf, -math.inf])
        )
        return doc, "non_finite", None
    if kind == "future":
        ahead = timedelta(seconds=TOLERANCE_S + 120 + data.draw(_FUTURE_S, label="seconds ahead"))
        msg = f.message(next(_sequences), window_start=now + ahead)
        return to_readable(msg, f.LAYOUT), "future_timestamp", None
    if kind == "unknown_asset":
        asset = data.draw(_UNKNOWN_ASSET_ID, label="asset id")
        msg = f.message(next(_sequences), asset_id=asset, window_start=now - timedelta(hours=1))
        return to_readable(msg, f.LAYOUT), "unknown_asset", None
    if kind == "not_an_object":
        value = data.draw(
            st.one_of(st.integers(), st.booleans(), _WORDS, st.lists(st.integers(), max_size=3))
        )
        return value, "malformed", None
    assert kind == "nested"  # as deep as a JSON encoder will write: a field that is no object
    doc = to_readable(_fresh(start=now), f.LAYOUT)
    depth = data.draw(st.integers(10, 400), label="depth")
    inner: Any = 1
    for _ in range(depth):
        inner = [inner]
    doc[data.draw(st.sampled_from(["operating", "indicators", "window_start"]))] = inner
    return doc, "invalid", None


@_fuzz(20)
@given(data=st.data())
def test_hostile_http_batches_are_stored_once_or_quarantined_with_their_reason(
    service: Service, data: st.DataObject
) -> None:
    register(service)  # idempotent across examples
    now = _now()
    kinds = data.draw(st.lists(st.sampled_from(HTTP_KINDS), min_size=1, max_size=12), label="kinds")
    sent: list[dict[str, Any]] = []
    cases = [_http_case(data, kind, sent, now) for kind in kinds]
    body = {"layouts": [f.LAYOUT.model_dump(mode="json")], "messages": [c for c, _, _ in cases]}
    resp = service.client.post(
        "/v1/indicators",
        content=json.dumps(body, allow_nan=True),  # NaN and Infinity as Python's JSON writes them
        headers={**service.auth(service.keys.ingest), "content-type": "application/json"},
    )
    assert resp.status_code == 200, resp.text
    result = resp.json()
    expected = Counter(where for _, where, _ in cases)
    assert (result["received"], result["stored"], result["duplicates"]) == (
        len(cases),
        expected["stored"],
        expected["duplicate"],
    )
    got = {q["index"]: q for q in result["quarantined"]}
    for index, (_, where, _) in enumerate(cases):
        if where in ("stored", "duplicate"):
            assert index not in got, (kinds[index], got.get(index))
        else:
            assert got[index]["reason"] == where, (kinds[index], got[index])
            assert BUG_DETAIL not in got[index]["detail"], got[index]
    _stored_once(service.store, [m for _, _, m in cases if m is not None])


def _good_body() -> bytes:
    msg = _fresh(start=_now())
    doc = {"layouts": [f.LAYOUT.model_dump(mode="json")], "messages": [to_readable(msg, f.LAYOUT)]}
    return json.dumps(doc).encode()


_GOOD_BODY = _good_body()
_HOSTILE_BODIES = st.one_of(
    st.integers(0, len(_GOOD_BODY) - 1).map(lambda k: _GOOD_BODY[:k]),  # truncated
    st.binary(max_size=300),  # not JSON, or not UTF-8
    st.integers(5_000, 100_000).flatmap(
        lambda d: st.sampled_from([_nested(d, "array"), _nested(d, "object"), _nested(d, "open")])
    ),
    st.one_of(st.integers(), st.text(max_size=20), st.none(), st.booleans()).map(
        lambda v: json.dumps(v).encode()
    ),  # JSON, but neither a list of messages nor the envelope
    st.dictionaries(
        st.text(max_size=8).filter(lambda k: k not in ("layouts", "messages")),
        st.integers(),
        min_size=1,
        max_size=3,
    ).map(lambda d: json.dumps(d).encode()),  # unknown keys
    st.sampled_from(
        [
            b'{"messages": 5}',
            b'{"layouts": 1, "messages": []}',
            b'{"layouts": [7], "messages": []}',
            b'{"layouts": [{"extractor_version": []}], "messages": []}',
        ]
    ),
)


@_fuzz(40)
@given(body=_HOSTILE_BODIES)
def test_a_hostile_request_body_is_a_4xx_problem_and_the_service_stays_up(
    service: Service, body: bytes
) -> None:
    headers = {**service.auth(service.keys.ingest), "content-type": "application/json"}
    resp = service.client.post("/v1/indicators", content=body, headers=headers)
    if body == b"[]":
        assert resp.status_code == 200
    else:
        assert_problem(resp, 422)
    assert service.client.get("/livez").status_code == 200


def test_the_service_still_stores_good_traffic_after_hostile_traffic(service: Service) -> None:
    register(service)
    headers = {**service.auth(service.keys.ingest), "content-type": "application/json"}
    for body in (b"[" * 100_000, b"\xff\xfe", _GOOD_BODY[:-1], b'{"messages": 5}'):
        assert_problem(service.client.post("/v1/indicators", content=body, headers=headers), 422)
    ok = service.client.post("/v1/indicators", content=_good_body(), headers=headers)
    assert ok.status_code == 200 and ok.json()["stored"] == 1, ok.text
    with service.store.read() as s:
        assert s.scalar(select(func.count()).select_from(MessageRow)) == 1


@pytest.mark.parametrize("value", ["NaN", "Infinity", "-Infinity"])
def test_json_nan_tokens_in_a_value_are_non_finite(service: Service, value: str) -> None:
    register(service)
    doc = to_readable(_fresh(start=_now()), f.LAYOUT)
    text = json.dumps({"layouts": [f.LAYOUT.model_dump(mode="json")], "messages": [doc]})
    # The first value, whatever number it is, becomes the bare token.
    text, n = re.subn(r'"value": -?[0-9][0-9.eE+-]*', f'"value": {value}', text, count=1)
    assert n == 1
    resp = service.client.post(
        "/v1/indicators",
        content=text,
        headers={**service.auth(service.keys.ingest), "content-type": "application/json"},
    )
    assert resp.status_code == 200, resp.text
    assert [q["reason"] for q in resp.json()["quarantined"]] == ["non_finite"]


def test_ids_beyond_the_stores_64_bits_are_invalid_input_not_a_server_error(
    service: Service,
) -> None:
    """Found by the schemathesis run: a quarantine id of 2**63 overflowed the SQLite driver."""
    admin = service.auth(service.keys.admin)
    huge = 2**63
    for method, path, body in [
        ("GET", f"/v1/quarantine/{huge}", None),
        ("DELETE", f"/v1/quarantine/{huge}", None),
        ("POST", f"/v1/quarantine/{huge}/readmit", None),
        ("POST", "/v1/quarantine/readmit", {"ids": [huge]}),
        ("GET", "/v1/quarantine/0", None),
    ]:
        assert_problem(service.client.request(method, path, json=body, headers=admin), 422)
    assert_problem(service.client.get(f"/v1/quarantine/{2**63 - 1}", headers=admin), 404)
