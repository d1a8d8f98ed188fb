"""The message contract: binary and JSON forms round-trip, and every bad payload is refused
with one typed error whose reason can be stored."""

from __future__ import annotations

import contextlib
import json
import struct
from datetime import UTC, datetime, timedelta
from uuid import UUID, uuid4

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from shared_schema import (
    ChannelQuality,
    ClockSync,
    DecodeError,
    DecodeReason,
    DropReport,
    EdgeAlarm,
    EncodeError,
    GatewayStatus,
    IndicatorLayout,
    IndicatorMessage,
    IndicatorSpec,
    LayoutAnnouncement,
    OperatingCondition,
    QualityFlag,
    ShaftSpeedSource,
    decode_indicators,
    decode_json,
    encode_batch,
    encode_indicators,
    encode_json,
    from_readable,
    peek_header,
    quantise,
    split_batch,
    to_readable,
)

SITE, GATEWAY, ASSET = "saltbush-flats", "gw-mallee", "MAL-P1"
CTX = {"site": SITE, "gateway_id": GATEWAY, "asset_id": ASSET}

channels = st.sampled_from(["de_accel", "nde_accel", "discharge_pressure", "suction_pressure"])
quantities = st.from_regex(r"[a-z][a-z0-9_]{0,11}", fullmatch=True)


@st.composite
def layouts(draw: st.DrawFn) -> IndicatorLayout:
    names = draw(st.lists(st.tuples(channels, quantities), min_size=1, max_size=40, unique=True))
    specs = tuple(
        IndicatorSpec(
            name=f"{ch}.{q}",
            unit=draw(st.sampled_from(["g", "mm/s", "kPa", "Hz", "dB", "1"])),
            channel=ch,
            encoding=draw(st.sampled_from(["f16", "f32"])),
        )
        for ch, q in names
    )
    return IndicatorLayout(extractor_version="test-1", indicators=specs)


def _value(encoding: str) -> st.SearchStrategy[float | None]:
    bound = 6.0e4 if encoding == "f16" else 1.0e30
    return st.none() | st.floats(-bound, bound, allow_nan=False, allow_infinity=False)


@st.composite
def messages(draw: st.DrawFn, layout: IndicatorLayout) -> IndicatorMessage:
    speed = draw(st.none() | st.floats(0, 1000))
    return IndicatorMessage(
        message_id=UUID(int=draw(st.integers(0, 2**128 - 1))),
        gateway_id=GATEWAY,
        sequence=draw(st.integers(0, 2**63 - 1)),
        site=SITE,
        asset_id=ASSET,
        window_start=datetime(1970, 1, 1, tzinfo=UTC)
        + timedelta(milliseconds=draw(st.integers(0, 2**44))),
        window_s=draw(st.floats(1e-3, 3600)),
        clock_sync=draw(st.sampled_from(ClockSync)),
        operating=OperatingCondition(
            shaft_speed_hz=speed,
            shaft_speed_source=None if speed is None else draw(st.sampled_from(ShaftSpeedSource)),
            load_fraction=draw(st.none() | st.floats(0, 10)),
            flow_m3_per_h=draw(st.none() | st.floats(0, 1e6)),
            suction_pressure_kpa=draw(st.none() | st.floats(-200, 1e5)),
            fluid_temperature_c=draw(st.none() | st.floats(-100, 1000)),
        ),
        quality=tuple(
            ChannelQuality(
                channel=ch,
                flags=frozenset(fl),
                spikes_removed=draw(st.integers(1, 10**6))
                if QualityFlag.SPIKES_REMOVED in fl
                else 0,
            )
            for ch, fl in draw(
                st.dictionaries(channels, st.sets(st.sampled_from(QualityFlag)), max_size=4)
            ).items()
        ),
        layout_digest=layout.digest,
        values=tuple(draw(_value(s.encoding)) for s in layout.indicators),
    )


@st.composite
def layout_and_message(draw: st.DrawFn) -> tuple[IndicatorLayout, IndicatorMessage]:
    layout = draw(layouts())
    return layout, draw(messages(layout))


@settings(max_examples=300, suppress_health_check=[HealthCheck.too_slow])
@given(layout_and_message())
def test_binary_round_trip_is_stable(case: tuple[IndicatorLayout, IndicatorMessage]) -> None:
    """decode(encode(m)) is m up to the float rounding of the wire; re-encoding is stable."""
    layout, msg = case
    frame = encode_indicators(msg, layout)
    decoded = decode_indicators(frame, {layout.digest: layout}, **CTX)
    assert encode_indicators(decoded, layout) == frame
    assert decoded.message_id == msg.message_id
    assert decoded.sequence == msg.sequence
    assert decoded.window_start == msg.window_start
    assert decoded.quality == msg.quality
    assert decoded.clock_sync == msg.clock_sync
    assert [v is None for v in decoded.values] == [v is None for v in msg.values]
    for spec, a, b in zip(layout.indicators, msg.values, decoded.values, strict=True):
        if a is None or b is None:
            continue
        # f16 keeps 11 significant bits, f32 24 (IEEE 754; common practice, no source).
        rel = 2.0**-11 if spec.encoding == "f16" else 2.0**-24
        assert abs(a - b) <= rel * abs(a) + 6.0e-8


@settings(max_examples=200, suppress_health_check=[HealthCheck.too_slow])
@given(layout_and_message())
def test_readable_json_round_trip(case: tuple[IndicatorLayout, IndicatorMessage]) -> None:
    layout, msg = case
    text = json.dumps(to_readable(msg, layout))
    assert from_readable(text, {layout.digest: layout}) == msg


@settings(max_examples=100)
@given(layout_and_message())
def test_binary_and_json_forms_are_equivalent(
    case: tuple[IndicatorLayout, IndicatorMessage],
) -> None:
    layout, msg = case
    wire = quantise(msg, layout)
    via_json = from_readable(json.dumps(to_readable(wire, layout)), {layout.digest: layout})
    assert via_json == wire


@settings(max_examples=300, suppress_health_check=[HealthCheck.too_slow])
@given(layout_and_message(), st.data())
def test_any_corruption_raises_only_decode_error(
    case: tuple[IndicatorLayout, IndicatorMessage], data: st.DataObject
) -> None:
    """Truncation or flipped bytes never surface as a bare exception."""
    layout, msg = case
    frame = bytearray(encode_indicators(msg, layout))
    cut = data.draw(st.integers(0, len(frame) - 1))
    pos = data.draw(st.integers(0, len(frame) - 1))
    flipped = bytearray(frame)
    flipped[pos] ^= data.draw(st.integers(1, 255))
    for payload in (bytes(frame[:cut]), bytes(flipped), bytes(frame) + b"\x00"):
        try:
            decode_indicators(payload, {layout.digest: layout}, **CTX)
        except DecodeError as exc:
            assert isinstance(exc.reason, DecodeReason)
            assert exc.detail


@given(st.binary(max_size=300))
def test_random_bytes_raise_only_decode_error(blob: bytes) -> None:
    for fn in (lambda b: decode_indicators(b, {}, **CTX), split_batch, peek_header):
        with contextlib.suppress(DecodeError):
            fn(blob)


@pytest.fixture
def layout() -> IndicatorLayout:
    return IndicatorLayout(
        extractor_version="test-1",
        indicators=(
            IndicatorSpec(name="de_accel.rms", unit="g", channel="de_accel", encoding="f16"),
            IndicatorSpec(name="de_accel.velocity_rms", unit="mm/s", channel="de_accel"),
            IndicatorSpec(name="de_accel.peak_frequency", unit="Hz", channel="de_accel"),
        ),
    )


@pytest.fixture
def message(layout: IndicatorLayout) -> IndicatorMessage:
    return IndicatorMessage(
        message_id=uuid4(),
        gateway_id=GATEWAY,
        sequence=7,
        site=SITE,
        asset_id=ASSET,
        window_start=datetime(2026, 3, 1, 6, 0, tzinfo=UTC),
        window_s=1.0,
        operating=OperatingCondition(shaft_speed_hz=29.5, shaft_speed_source="spectrum"),
        layout_digest=layout.digest,
        values=(0.25, 2.1, 29.5),
    )


def _reason(fn, *args, **kwargs) -> DecodeReason:  # type: ignore[no-untyped-def]
    with pytest.raises(DecodeError) as info:
        fn(*args, **kwargs)
    return info.value.reason


def test_each_binary_failure_has_its_reason(
    layout: IndicatorLayout, message: IndicatorMessage
) -> None:
    frame = encode_indicators(message, layout)
    known = {layout.digest: layout}
    assert _reason(decode_indicators, frame[:-1], known, **CTX) is DecodeReason.TRUNCATED
    assert _reason(decode_indicators, frame + b"x", known, **CTX) is DecodeReason.TRAILING_BYTES
    assert _reason(decode_indicators, b"XX" + frame[2:], known, **CTX) is DecodeReason.MALFORMED
    v2 = frame[:2] + b"\x02" + frame[3:]
    assert _reason(decode_indicators, v2, known, **CTX) is DecodeReason.UNKNOWN_VERSION
    k9 = frame[:3] + b"\x09" + frame[4:]
    assert _reason(decode_indicators, k9, known, **CTX) is DecodeReason.UNKNOWN_KIND
    assert _reason(decode_indicators, frame, {}, **CTX) is DecodeReason.UNKNOWN_LAYOUT
    nan = frame[:-4] + struct.pack("<f", float("nan"))
    assert _reason(decode_indicators, nan, known, **CTX) is DecodeReason.NON_FINITE
    bad_asset = {**CTX, "asset_id": "no/slash"}
    assert _reason(decode_indicators, frame, known, **bad_asset) is DecodeReason.INVALID


def test_layout_mismatch_is_named(layout: IndicatorLayout, message: IndicatorMessage) -> None:
    frame = encode_indicators(message, layout)
    shorter = IndicatorLayout(extractor_version="test-1", indicators=layout.indicators[:2])
    # Same digest position, different layout content: the receiver's layout has 2 entries.
    assert (
        _reason(decode_indicators, frame, lambda _d: shorter, **CTX) is DecodeReason.LAYOUT_MISMATCH
    )


def test_frame_is_compact(layout: IndicatorLayout, message: IndicatorMessage) -> None:
    # Fixed part: header 4, uuid 16, seq 1, time 6, window 3, flags 1, digest 8, operating 1+4,
    # quality 1, values count 1 + 2 + 4 + 4.
    assert len(encode_indicators(message, layout)) == 56


def test_header_is_readable_without_layout(
    layout: IndicatorLayout, message: IndicatorMessage
) -> None:
    header = peek_header(encode_indicators(message, layout))
    assert (header.message_id, header.sequence) == (message.message_id, message.sequence)
    assert header.layout_digest == layout.digest
    assert header.window_start == message.window_start


def test_batch_round_trip(layout: IndicatorLayout, message: IndicatorMessage) -> None:
    frames = [
        encode_indicators(message.model_copy(update={"sequence": i, "message_id": uuid4()}), layout)
        for i in range(50)
    ]
    assert split_batch(encode_batch(frames)) == frames
    assert split_batch(frames[0]) == [frames[0]]
    assert _reason(split_batch, encode_batch(frames)[:-1]) is DecodeReason.TRUNCATED
    # a batch of no frames (the encoder never writes one; found by tests/fuzz) is refused
    empty = encode_batch(frames[:1])[:4] + b"\x00"  # magic, major version, kind; count 0
    assert _reason(split_batch, empty) is DecodeReason.INVALID


def test_f16_overflow_refused_at_encode(layout: IndicatorLayout, message: IndicatorMessage) -> None:
    too_big = message.model_copy(update={"values": (70000.0, 1.0, 1.0)})
    with pytest.raises(EncodeError, match=r"de_accel\.rms"):
        encode_indicators(too_big, layout)


def test_readable_form_names_units(layout: IndicatorLayout, message: IndicatorMessage) -> None:
    body = to_readable(message, layout)
    assert body["window_start"] == "2026-03-01T06:00:00Z"
    assert body["indicators"][1] == {"name": "de_accel.velocity_rms", "unit": "mm/s", "value": 2.1}
    known = {layout.digest: layout}
    wrong_unit = json.loads(json.dumps(body))
    wrong_unit["indicators"][1]["unit"] = "in/s"
    assert _reason(from_readable, wrong_unit, known) is DecodeReason.LAYOUT_MISMATCH
    stranger = json.loads(json.dumps(body))
    stranger["indicators"].append({"name": "de_accel.other", "unit": "g", "value": 1})
    assert _reason(from_readable, stranger, known) is DecodeReason.LAYOUT_MISMATCH
    text = json.dumps(body).replace("2.1", "NaN")
    assert _reason(from_readable, text, known) is DecodeReason.NON_FINITE
    future = dict(body, schema_version=2)
    assert _reason(from_readable, future, known) is DecodeReason.UNKNOWN_VERSION
    assert _reason(from_readable, "{not json", known) is DecodeReason.MALFORMED


NOW = datetime(2026, 3, 1, tzinfo=UTC)
JSON_MODELS = [
    GatewayStatus(gateway_id=GATEWAY, site=SITE, state="online", at=NOW, outbox_messages=3),
    EdgeAlarm(
        message_id=uuid4(),
        gateway_id=GATEWAY,
        site=SITE,
        asset_id=ASSET,
        raised_at=NOW,
        kind="zone_change",
        indicator="de_accel.velocity_rms",
        value=4.9,
        unit="mm/s",
        zone_from="B",
        zone_to="D",
    ),
    DropReport(
        message_id=uuid4(),
        gateway_id=GATEWAY,
        site=SITE,
        at=NOW,
        dropped_count=3,
        sequence_ranges=((10, 10), (12, 13)),
        asset_counts={ASSET: 3},
        rule="every second routine message of the oldest day",
    ),
]


@pytest.mark.parametrize("model", JSON_MODELS, ids=lambda m: type(m).__name__)
def test_json_messages_round_trip(model: object) -> None:
    assert decode_json(encode_json(model), type(model)) == model  # type: ignore[arg-type]


def test_layout_announcement_round_trip_checks_digest(layout: IndicatorLayout) -> None:
    ann = LayoutAnnouncement(gateway_id=GATEWAY, site=SITE, published_at=NOW, layouts=(layout,))
    raw = encode_json(ann)
    assert decode_json(raw, LayoutAnnouncement) == ann
    tampered = raw.replace(layout.digest.encode(), b"0" * 16)
    assert _reason(decode_json, tampered, LayoutAnnouncement) is DecodeReason.INVALID


def test_json_failures_have_reasons() -> None:
    assert _reason(decode_json, b"[1, 2]", GatewayStatus) is DecodeReason.MALFORMED
    assert (
        _reason(decode_json, b'{"schema_version": 9}', GatewayStatus)
        is DecodeReason.UNKNOWN_VERSION
    )
    body = json.loads(encode_json(JSON_MODELS[1]))
    body["value"] = float("inf")
    assert _reason(decode_json, json.dumps(body), EdgeAlarm) is DecodeReason.NON_FINITE
    body["value"] = 1.0
    body["surprise"] = True
    assert _reason(decode_json, json.dumps(body), EdgeAlarm) is DecodeReason.INVALID
    assert _reason(decode_json, b"{" * 100_000, EdgeAlarm) is DecodeReason.MALFORMED
    assert _reason(decode_json, b" " * (5 * 1024 * 1024), EdgeAlarm) is DecodeReason.OVERSIZED


def test_naive_timestamps_are_refused() -> None:
    with pytest.raises(ValueError, match="timezone"):
        GatewayStatus(gateway_id=GATEWAY, site=SITE, state="online", at=datetime(2026, 3, 1))


def test_reserved_identifiers_are_refused() -> None:
    with pytest.raises(ValueError, match="reserved"):
        GatewayStatus(gateway_id=GATEWAY, site="alerts", state="online", at=NOW)
