"""The decoders' fast paths give exactly what the checked paths give.

Both decoders first try a fast path that builds the models without pydantic validation, and hand
anything unusual to the checked path. These tests hold the two to the same outcome — the same
message (values, types, the fields recorded as given) or the same refusal (reason and detail) —
on valid messages, on corrupted frames and on readable bodies with fields swapped for odd
values. The reference is the checked path itself, run with the fast path switched off.
"""

from __future__ import annotations

import json
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any
from unittest import mock

import msgspec
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from pydantic import BaseModel

from shared_schema import (
    DecodeError,
    IndicatorLayout,
    IndicatorMessage,
    codec,
    decode_indicators,
    encode_indicators,
    from_readable,
    to_readable,
)
from tests.shared_schema.test_codec import CTX, layout_and_message


def _off(*_args: Any, **_kwargs: Any) -> Any:
    raise codec._SlowPathError


@contextmanager
def _checked_only() -> Iterator[None]:
    with (
        mock.patch.object(codec, "_decode_fast", _off),
        mock.patch.object(codec, "_readable_fast", _off),
    ):
        yield


def _outcome(fn: Callable[[], IndicatorMessage]) -> IndicatorMessage | tuple[str, str]:
    try:
        return fn()
    except DecodeError as exc:
        return (exc.reason.value, exc.detail)


def _assert_same(a: object, b: object) -> None:
    """Equal, of the same types all the way down, with the same fields recorded as given."""
    assert type(a) is type(b)
    if isinstance(a, BaseModel):
        assert isinstance(b, BaseModel)
        assert a == b
        assert a.model_fields_set == b.model_fields_set
        assert a.__pydantic_extra__ == b.__pydantic_extra__
        assert a.__pydantic_private__ == b.__pydantic_private__
        assert a.model_dump_json() == b.model_dump_json()
        assert hash(a) == hash(b)
        for name in type(a).model_fields:
            _assert_same(getattr(a, name), getattr(b, name))
    elif isinstance(a, tuple | list):
        assert isinstance(b, tuple | list)
        assert len(a) == len(b)
        for x, y in zip(a, b, strict=True):
            _assert_same(x, y)
    elif isinstance(a, frozenset):
        assert a == b
        assert {type(x) for x in a} == {type(x) for x in b}  # type: ignore[union-attr]
    else:
        assert a == b


def _assert_same_outcome(a: object, b: object) -> None:
    if isinstance(a, tuple):
        assert a == b  # the same refusal: reason and detail
    else:
        _assert_same(a, b)


@settings(max_examples=300, suppress_health_check=[HealthCheck.too_slow])
@given(layout_and_message())
def test_valid_frames_take_the_fast_path(case: tuple[IndicatorLayout, IndicatorMessage]) -> None:
    layout, msg = case
    frame = encode_indicators(msg, layout)
    known = {layout.digest: layout}
    fast = codec._decode_fast(frame, known, {}, CTX["site"], CTX["gateway_id"], CTX["asset_id"])
    with _checked_only():
        checked = decode_indicators(frame, known, **CTX)
    _assert_same(fast, checked)


@settings(max_examples=500, suppress_health_check=[HealthCheck.too_slow])
@given(layout_and_message(), st.data())
def test_corrupted_frames_get_the_checked_outcome(
    case: tuple[IndicatorLayout, IndicatorMessage], data: st.DataObject
) -> None:
    layout, msg = case
    frame = bytearray(encode_indicators(msg, layout))
    for _ in range(data.draw(st.integers(1, 3))):
        how = data.draw(st.sampled_from(["flip", "cut", "insert"]))
        at = data.draw(st.integers(0, len(frame) - 1))
        if how == "flip":
            frame[at] = data.draw(st.integers(0, 255))
        elif how == "cut":
            del frame[at:]
            if not frame:
                frame.append(0)
        else:
            frame.insert(at, data.draw(st.integers(0, 255)))
    raw = bytes(frame)
    known = {layout.digest: layout}
    ctx = data.draw(st.sampled_from([CTX, {**CTX, "asset_id": "status"}, {**CTX, "site": "a/b"}]))
    fast = _outcome(lambda: decode_indicators(raw, known, **ctx))
    with _checked_only():
        checked = _outcome(lambda: decode_indicators(raw, known, **ctx))
    _assert_same_outcome(fast, checked)


@settings(max_examples=200, suppress_health_check=[HealthCheck.too_slow])
@given(layout_and_message())
def test_valid_readable_bodies_take_the_fast_path(
    case: tuple[IndicatorLayout, IndicatorMessage],
) -> None:
    layout, msg = case
    obj = json.loads(json.dumps(to_readable(msg, layout)))
    known = {layout.digest: layout}
    with mock.patch.object(codec, "_has_non_finite", _off):  # proves the fast path answered
        fast = from_readable(obj, known)
    with _checked_only():
        checked = from_readable(obj, known)
    _assert_same(fast, checked)


_SPECIAL = st.sampled_from(
    [
        "alerts", "a" * 64, "a" * 65, "A-1", "a\n", "-a", "MAL-P1", "gw.1",
        "2026-03-01T06:00:00Z", "2026-03-01T06:00:00.123Z", "2026-03-01T06:00:00.000001Z",
        "2026-03-01T06:00:00.123000+00:00", "2026-03-01T06:00:00+01:00",
        "2026-03-01T06:00:00-00:00",
        "2026-02-30T00:00:00Z", "2026-03-01T24:00:00Z", "2026-03-01 06:00:00Z",
        "0000-01-01T00:00:00Z", "2026-03-01T06:00:00", "1772344800", "2026-03-01T06:00:00.1Z",
        "0f1e2d3c-4b5a-6978-8796-a5b4c3d2e1f0", "0F1E2D3C-4B5A-6978-8796-A5B4C3D2E1F0",
        "0f1e2d3c4b5a69788796a5b4c3d2e1f0", "{0f1e2d3c-4b5a-6978-8796-a5b4c3d2e1f0}",
        "synced", "holdover", "SYNCED", "tacho", "drive", "clipped", "spikes_removed",
        "0123456789abcdef", "0123456789ABCDEF", "de_accel", "De_accel",
    ]
)  # fmt: skip
_ODD_VALUES = st.one_of(
    _SPECIAL,
    st.none(),
    st.booleans(),
    st.integers(-(2**64), 2**64),
    st.floats(),
    st.text(max_size=8),
    st.lists(st.sampled_from(["clipped", "spikes_removed", "drift", "nope", 1]), max_size=3),
    st.builds(dict),
    st.builds(list),
    st.floats(-1e7, 1e7),
)
_TOP = [*IndicatorMessage.model_fields, "extra_key"]
_OPERATING = ["shaft_speed_hz", "shaft_speed_source", "load_fraction", "flow_m3_per_h",
              "suction_pressure_kpa", "fluid_temperature_c", "extra_key"]  # fmt: skip
_QUALITY = ["channel", "flags", "spikes_removed", "extra_key"]


def _odd(obj: dict[str, Any], data: st.DataObject) -> dict[str, Any]:
    """``obj`` with one to three keys or values changed, added or deleted."""
    for _ in range(data.draw(st.integers(1, 3))):
        where = data.draw(st.sampled_from(["top", "operating", "quality", "value", "delete"]))
        value = data.draw(_SPECIAL if data.draw(st.booleans()) else _ODD_VALUES)
        if where == "top":
            obj[data.draw(st.sampled_from(_TOP))] = value
        elif where == "operating" and isinstance(obj.get("operating"), dict):
            obj["operating"][data.draw(st.sampled_from(_OPERATING))] = value
        elif where == "quality" and isinstance(obj.get("quality"), list):
            if not obj["quality"] or data.draw(st.booleans()):
                obj["quality"].append({"channel": "de_accel", "flags": ["clipped"]})
            obj["quality"][-1][data.draw(st.sampled_from(_QUALITY))] = value
        elif where == "value" and obj.get("indicators"):
            obj["indicators"][data.draw(st.integers(0, len(obj["indicators"]) - 1))]["value"] = (
                value
            )
        elif where == "delete":
            obj.pop(data.draw(st.sampled_from(_TOP)), None)
    return obj


@settings(max_examples=600, suppress_health_check=[HealthCheck.too_slow])
@given(layout_and_message(), st.data())
def test_odd_readable_bodies_get_the_checked_outcome(
    case: tuple[IndicatorLayout, IndicatorMessage], data: st.DataObject
) -> None:
    layout, msg = case
    obj = _odd(json.loads(json.dumps(to_readable(msg, layout))), data)
    known = {layout.digest: layout}
    fast = _outcome(lambda: from_readable(obj, known))
    with _checked_only():
        checked = _outcome(lambda: from_readable(obj, known))
    _assert_same_outcome(fast, checked)


_STRUCT = msgspec.json.Decoder(codec.ReadableMessage)


@settings(max_examples=600, suppress_health_check=[HealthCheck.too_slow])
@given(layout_and_message(), st.data())
def test_the_struct_path_builds_what_the_checked_path_builds_or_declines(
    case: tuple[IndicatorLayout, IndicatorMessage], data: st.DataObject
) -> None:
    """HTTP ingest decodes bodies into ReadableMessage structs (msgspec) and builds messages
    from them; where it declines (None) or msgspec refuses, the dict path decides."""
    layout, msg = case
    valid = json.loads(json.dumps(to_readable(msg, layout)))
    known = {layout.digest: layout}
    built = codec.from_readable_struct(_STRUCT.decode(json.dumps(valid)), known)
    assert built is not None  # a well-formed message is never sent the long way
    with _checked_only():
        _assert_same(built, from_readable(valid, known))
    obj = _odd(valid, data)
    try:
        struct = _STRUCT.decode(json.dumps(obj))
    except (msgspec.MsgspecError, ValueError):
        return  # the whole body then takes the dict path
    fast = codec.from_readable_struct(struct, known)
    if fast is not None:
        with _checked_only():
            _assert_same(fast, from_readable(obj, known))
