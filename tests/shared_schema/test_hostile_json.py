"""Hostile JSON into the contract's JSON decoders: whatever arrives, the only exception is a
DecodeError with a reason (the service quarantines by it); the binary codec has the same
property in test_codec.py. ``WELLSPAN_FUZZ_EXAMPLES`` raises the example count for a long run.
"""

from __future__ import annotations

import json
import os
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from shared_schema import (
    DecodeError,
    DecodeReason,
    EdgeAlarm,
    GatewayStatus,
    IndicatorLayout,
    IndicatorSpec,
    LayoutAnnouncement,
    decode_json,
    from_readable,
)

EXAMPLES = int(os.environ.get("WELLSPAN_FUZZ_EXAMPLES", "0")) or 200
FUZZ = settings(max_examples=EXAMPLES, deadline=None, suppress_health_check=[HealthCheck.too_slow])
MODELS: list[type[Any]] = [GatewayStatus, EdgeAlarm, LayoutAnnouncement]

LAYOUT = IndicatorLayout(
    extractor_version="fuzz-1",
    indicators=(
        IndicatorSpec(name="de_accel.velocity_rms", unit="mm/s", channel="de_accel"),
        IndicatorSpec(name="de_accel.env_bpfo", unit="g", channel="de_accel", encoding="f16"),
    ),
)
READABLE: dict[str, Any] = {
    "schema_version": 1,
    "message_id": "3f1d0c5e-2b7a-4c1e-9a55-0d6f4e8b2a10",
    "gateway_id": "mallee-gw1",
    "sequence": 7,
    "site": "mallee",
    "asset_id": "MAL-P1",
    "window_start": "2026-06-01T00:10:00Z",
    "window_s": 10.0,
    "clock_sync": "synced",
    "operating": {"shaft_speed_hz": 29.5, "shaft_speed_source": "tacho"},
    "quality": [],
    "layout_digest": LAYOUT.digest,
    "indicators": [
        {"name": "de_accel.velocity_rms", "unit": "mm/s", "value": 2.5},
        {"name": "de_accel.env_bpfo", "unit": "g", "value": 0.125},
    ],
}

# any JSON document, NaN and infinities included (Python's json reads and writes them)
JSON = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats() | st.text(max_size=20),
    lambda inner: (
        st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=12), inner, max_size=4)
    ),
    max_leaves=20,
)


def _reason(func: Any, *args: Any) -> DecodeReason | None:
    try:
        func(*args)
    except DecodeError as exc:
        assert exc.detail, exc
        return exc.reason
    return None


def test_the_readable_sample_is_valid() -> None:
    assert from_readable(READABLE, {LAYOUT.digest: LAYOUT}).sequence == 7


@FUZZ
@given(doc=JSON, model=st.sampled_from(MODELS))
def test_any_json_document_raises_only_decode_error(doc: Any, model: type[Any]) -> None:
    _reason(decode_json, json.dumps(doc), model)


@FUZZ
@given(data=st.binary(max_size=200) | st.text(max_size=200), model=st.sampled_from(MODELS))
def test_any_bytes_or_text_raise_only_decode_error(data: bytes | str, model: type[Any]) -> None:
    _reason(decode_json, data, model)


@FUZZ
@given(
    field=st.sampled_from(sorted(READABLE)),
    value=JSON,
    drop=st.booleans(),
)
def test_a_readable_message_with_any_field_replaced_raises_only_decode_error(
    field: str, value: Any, drop: bool
) -> None:
    doc = dict(READABLE)
    if drop:
        del doc[field]
    else:
        doc[field] = value
    _reason(from_readable, json.dumps(doc), {LAYOUT.digest: LAYOUT})


@pytest.mark.parametrize("token", ["NaN", "Infinity", "-Infinity"])
def test_non_finite_tokens_anywhere_are_non_finite(token: str) -> None:
    text = json.dumps(READABLE).replace("0.125", token)
    assert _reason(from_readable, text, {LAYOUT.digest: LAYOUT}) is DecodeReason.NON_FINITE
    text = json.dumps(READABLE).replace("29.5", token)
    assert _reason(from_readable, text, {LAYOUT.digest: LAYOUT}) is DecodeReason.NON_FINITE


@FUZZ
@given(depth=st.integers(2_000, 200_000), shape=st.sampled_from(["[", '{"a":']))
def test_deep_nesting_is_malformed_not_a_crash(depth: int, shape: str) -> None:
    for text in (shape * depth, shape * depth + "1" + ("]" if shape == "[" else "}") * depth):
        assert _reason(decode_json, text, GatewayStatus) is DecodeReason.MALFORMED
        assert _reason(from_readable, text, {LAYOUT.digest: LAYOUT}) is DecodeReason.MALFORMED
