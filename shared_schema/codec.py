"""Wire forms of the contract: a compact binary frame for indicators, JSON for everything.

Binary indicator frame, schema major 1 (all multi-byte integers big-endian unless noted)::

    offset  size  field
    0       2     magic b"WS"
    2       1     schema major version (1)
    3       1     kind: 1 = indicator message, 2 = batch of frames
    -- kind 1 --
    4       16    message UUID
    20      var   sequence (unsigned LEB128)
    ..      6     window start, milliseconds since the Unix epoch (unsigned 48 bit)
    ..      var   window length in microseconds (unsigned LEB128)
    ..      1     flags: bits 0-1 clock sync, bits 2-4 shaft-speed source, bit 5 values missing
    ..      8     layout digest
    ..      1     operating-condition presence bits, then the present fields, little-endian:
                  shaft_speed_hz f32, load_fraction f16, flow_m3_per_h f32,
                  suction_pressure_kpa f32, fluid_temperature_c f16
    ..      1     number of flagged channels, then per channel: name length (1), name (UTF-8),
                  flag bits (1, QualityFlag order), spike count (LEB128, only with that flag)
    ..      var   number of values (LEB128); a missing-value bitmap (LSB first) if flag bit 5;
                  then each present value, little-endian, f32 or f16 as the layout says
    -- kind 2 --
    4       var   number of frames (LEB128), then per frame: length (LEB128) and the frame

Site, gateway and asset are not repeated in the frame: the MQTT topic carries them, and the
decoder takes them as arguments. Status, alarms, layouts and drop reports are rare and travel as
JSON. Every decoding failure raises :class:`DecodeError` with a storable reason.
"""

from __future__ import annotations

import json
import math
import struct
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from typing import Any, TypeVar
from uuid import UUID

from pydantic import BaseModel, ValidationError

from shared_schema.errors import DecodeError, DecodeReason, EncodeError
from shared_schema.messages import (
    SCHEMA_MAJOR,
    ClockSync,
    IndicatorLayout,
    IndicatorMessage,
    QualityFlag,
    ShaftSpeedSource,
)

__all__ = [
    "MAX_BATCH_FRAMES",
    "MAX_FRAME_BYTES",
    "MAX_JSON_BYTES",
    "FrameHeader",
    "LayoutLookup",
    "decode_indicators",
    "decode_json",
    "encode_batch",
    "encode_indicators",
    "encode_json",
    "from_readable",
    "is_batch",
    "peek_header",
    "quantise",
    "split_batch",
    "to_readable",
]

MAGIC = b"WS"
KIND_INDICATORS = 1
KIND_BATCH = 2
MAX_FRAME_BYTES = 16 * 1024
MAX_BATCH_FRAMES = 10_000
MAX_JSON_BYTES = 4 * 1024 * 1024

_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
_CLOCK = [ClockSync.SYNCED, ClockSync.HOLDOVER, ClockSync.UNSYNCED]
_SPEED: list[ShaftSpeedSource | None] = [None, *ShaftSpeedSource]
_FLAGS = list(QualityFlag)
_OPERATING = (
    ("shaft_speed_hz", "f"),
    ("load_fraction", "e"),
    ("flow_m3_per_h", "f"),
    ("suction_pressure_kpa", "f"),
    ("fluid_temperature_c", "e"),
)
_MISSING_BIT = 0x20

LayoutLookup = Mapping[str, IndicatorLayout] | Callable[[str], IndicatorLayout | None]
"""Where the decoder finds a layout by digest: a mapping or a function returning None if unknown."""


@dataclass(frozen=True, slots=True)
class FrameHeader:
    """The identity of an indicator frame, readable even when its layout is unknown."""

    message_id: UUID
    sequence: int
    window_start: datetime
    layout_digest: str


# -- primitives -------------------------------------------------------------------------------


def _uvarint(n: int) -> bytes:
    out = bytearray()
    while True:
        b = n & 0x7F
        n >>= 7
        if n:
            out.append(b | 0x80)
        else:
            out.append(b)
            return bytes(out)


class _Reader:
    __slots__ = ("buf", "pos")

    def __init__(self, buf: bytes) -> None:
        self.buf = buf
        self.pos = 0

    def take(self, n: int, what: str) -> bytes:
        end = self.pos + n
        if end > len(self.buf):
            raise DecodeError(
                DecodeReason.TRUNCATED,
                f"frame ends at byte {len(self.buf)} while reading {what} "
                f"({n} bytes at {self.pos})",
            )
        chunk = self.buf[self.pos : end]
        self.pos = end
        return chunk

    def byte(self, what: str) -> int:
        return self.take(1, what)[0]

    def uvarint(self, what: str, limit: int = 2**63) -> int:
        shift = 0
        value = 0
        for _ in range(10):
            b = self.byte(what)
            value |= (b & 0x7F) << shift
            if not b & 0x80:
                if value >= limit:
                    raise DecodeError(DecodeReason.INVALID, f"{what} {value} exceeds {limit - 1}")
                return value
            shift += 7
        raise DecodeError(DecodeReason.MALFORMED, f"{what} is not a valid varint")

    def done(self) -> None:
        if self.pos != len(self.buf):
            raise DecodeError(
                DecodeReason.TRAILING_BYTES,
                f"{len(self.buf) - self.pos} bytes after the end of the frame",
            )


def _read_header(r: _Reader) -> int:
    if len(r.buf) > MAX_FRAME_BYTES * (MAX_BATCH_FRAMES + 1):
        raise DecodeError(DecodeReason.OVERSIZED, f"payload of {len(r.buf)} bytes is too large")
    head = r.take(4, "frame header")
    if head[:2] != MAGIC:
        raise DecodeError(DecodeReason.MALFORMED, f"not a wellspan frame (starts {head[:2]!r})")
    if head[2] != SCHEMA_MAJOR:
        raise DecodeError(
            DecodeReason.UNKNOWN_VERSION,
            f"schema major version {head[2]}; this receiver knows {SCHEMA_MAJOR}",
        )
    if head[3] not in (KIND_INDICATORS, KIND_BATCH):
        raise DecodeError(DecodeReason.UNKNOWN_KIND, f"frame kind {head[3]}")
    return head[3]


_CODES: dict[int, tuple[IndicatorLayout, tuple[str, ...]]] = {}


def _value_codes(layout: IndicatorLayout) -> tuple[str, ...]:
    # Cached by identity, not with lru_cache: hashing a frozen layout hashes every spec, which
    # cost more than decoding the frame. The entry keeps the layout alive, so its id stays unique.
    hit = _CODES.get(id(layout))
    if hit is not None and hit[0] is layout:
        return hit[1]
    codes = tuple("e" if s.encoding == "f16" else "f" for s in layout.indicators)
    if len(_CODES) >= 256:
        _CODES.clear()
    _CODES[id(layout)] = (layout, codes)
    return codes


def _resolve(layouts: LayoutLookup, digest: str) -> IndicatorLayout:
    found = layouts(digest) if callable(layouts) else layouts.get(digest)
    if found is None:
        raise DecodeError(DecodeReason.UNKNOWN_LAYOUT, f"layout {digest} is not known")
    return found


def _check_layout(msg: IndicatorMessage, layout: IndicatorLayout) -> None:
    if layout.digest != msg.layout_digest:
        raise EncodeError(f"message references layout {msg.layout_digest}, not {layout.digest}")
    if len(layout.indicators) != len(msg.values):
        raise EncodeError(
            f"layout {layout.digest} has {len(layout.indicators)} indicators, "
            f"message has {len(msg.values)} values"
        )


# -- indicator frames -------------------------------------------------------------------------


def encode_indicators(msg: IndicatorMessage, layout: IndicatorLayout) -> bytes:
    """Encode one indicator message as a binary frame.

    Raises
    ------
    EncodeError
        If ``layout`` is not the one the message references, or a value does not fit its
        encoding (an f16 value beyond ±65504).
    """
    _check_layout(msg, layout)
    ms = (msg.window_start - _EPOCH) // timedelta(milliseconds=1)
    if not 0 <= ms < 2**48:
        raise EncodeError(f"window_start {msg.window_start.isoformat()} is outside 1970..10889")
    missing = [v is None for v in msg.values]
    flags = _CLOCK.index(msg.clock_sync) | (_SPEED.index(msg.operating.shaft_speed_source) << 2)
    if any(missing):
        flags |= _MISSING_BIT
    out = bytearray(MAGIC)
    out += bytes((SCHEMA_MAJOR, KIND_INDICATORS))
    out += msg.message_id.bytes
    out += _uvarint(msg.sequence)
    out += ms.to_bytes(6, "big")
    out += _uvarint(round(msg.window_s * 1e6))
    out.append(flags)
    out += bytes.fromhex(msg.layout_digest)
    present = 0
    op_fmt = "<"
    op_vals: list[float] = []
    for bit, (field, code) in enumerate(_OPERATING):
        v = getattr(msg.operating, field)
        if v is not None:
            present |= 1 << bit
            op_fmt += code
            op_vals.append(v)
    out.append(present)
    try:
        out += struct.pack(op_fmt, *op_vals)
    except OverflowError as exc:
        raise EncodeError(f"operating condition value out of range: {exc}") from None
    out.append(len(msg.quality))
    for q in msg.quality:
        name = q.channel.encode()
        out.append(len(name))
        out += name
        out.append(sum(1 << _FLAGS.index(f) for f in q.flags))
        if q.spikes_removed:
            out += _uvarint(q.spikes_removed)
    n = len(msg.values)
    out += _uvarint(n)
    codes = _value_codes(layout)
    if any(missing):
        bitmap = sum(1 << i for i, m in enumerate(missing) if m)
        out += bitmap.to_bytes((n + 7) // 8, "little")
    fmt = "<" + "".join(c for c, m in zip(codes, missing, strict=True) if not m)
    try:
        out += struct.pack(fmt, *(v for v in msg.values if v is not None))
    except OverflowError:
        bad = [
            layout.indicators[i].name
            for i, (c, v) in enumerate(zip(codes, msg.values, strict=True))
            if c == "e" and v is not None and abs(v) > 65504
        ]
        raise EncodeError(f"values beyond the f16 range (±65504) for {bad}") from None
    if len(out) > MAX_FRAME_BYTES:
        raise EncodeError(f"frame of {len(out)} bytes exceeds {MAX_FRAME_BYTES}")
    return bytes(out)


def _read_identity(r: _Reader) -> tuple[UUID, int, datetime, float, int, str]:
    message_id = UUID(bytes=r.take(16, "message id"))
    sequence = r.uvarint("sequence")
    ms = int.from_bytes(r.take(6, "window start"), "big")
    window_us = r.uvarint("window length", limit=2**40)
    flags = r.byte("flags")
    digest = r.take(8, "layout digest").hex()
    try:
        start = _EPOCH + timedelta(milliseconds=ms)
    except OverflowError:  # 48 bits of milliseconds reach past the year 9999 of datetime
        raise DecodeError(DecodeReason.INVALID, f"window start {ms} ms is out of range") from None
    return message_id, sequence, start, window_us / 1e6, flags, digest


def peek_header(frame: bytes) -> FrameHeader:
    """Read a frame's identity without its layout (for quarantine and de-duplication)."""
    r = _Reader(frame)
    if _read_header(r) != KIND_INDICATORS:
        raise DecodeError(DecodeReason.UNKNOWN_KIND, "expected an indicator frame, got a batch")
    message_id, sequence, start, _, _, digest = _read_identity(r)
    return FrameHeader(message_id, sequence, start, digest)


def decode_indicators(
    frame: bytes,
    layouts: LayoutLookup,
    *,
    site: str,
    gateway_id: str,
    asset_id: str,
) -> IndicatorMessage:
    """Decode one binary indicator frame.

    Parameters
    ----------
    frame : bytes
        One kind-1 frame (use :func:`split_batch` first for a batch).
    layouts : mapping or callable
        Layouts by digest.
    site, gateway_id, asset_id : str
        Taken from the MQTT topic the frame arrived on.

    Raises
    ------
    DecodeError
        For anything that is not a valid frame of a known version and layout.
    """
    r = _Reader(frame)
    if _read_header(r) != KIND_INDICATORS:
        raise DecodeError(DecodeReason.UNKNOWN_KIND, "expected an indicator frame, got a batch")
    message_id, sequence, start, window_s, flags, digest = _read_identity(r)
    clock_code, speed_code = flags & 0x03, (flags >> 2) & 0x07
    if clock_code >= len(_CLOCK) or speed_code >= len(_SPEED) or flags & 0xC0:
        raise DecodeError(DecodeReason.MALFORMED, f"flags byte {flags:#04x} has unknown bits")
    present = r.byte("operating presence")
    if present >> len(_OPERATING):
        raise DecodeError(DecodeReason.MALFORMED, f"operating presence {present:#04x} unknown")
    operating: dict[str, Any] = {"shaft_speed_source": _SPEED[speed_code]}
    for bit, (field, code) in enumerate(_OPERATING):
        if present & (1 << bit):
            (operating[field],) = struct.unpack("<" + code, r.take(struct.calcsize(code), field))
    quality = []
    for _ in range(r.byte("quality count")):
        name = r.take(r.byte("channel name length"), "channel name")
        bits = r.byte("quality flags")
        if bits >> len(_FLAGS):
            raise DecodeError(DecodeReason.MALFORMED, f"quality flags {bits:#04x} unknown")
        qflags = frozenset(f for i, f in enumerate(_FLAGS) if bits & (1 << i))
        spikes = r.uvarint("spike count") if QualityFlag.SPIKES_REMOVED in qflags else 0
        try:
            channel = name.decode()
        except UnicodeDecodeError:
            raise DecodeError(DecodeReason.MALFORMED, "channel name is not UTF-8") from None
        quality.append({"channel": channel, "flags": qflags, "spikes_removed": spikes})
    n = r.uvarint("value count", limit=1025)
    layout = _resolve(layouts, digest)
    codes = _value_codes(layout)
    if n != len(codes):
        raise DecodeError(
            DecodeReason.LAYOUT_MISMATCH,
            f"frame has {n} values, layout {digest} has {len(codes)} indicators",
        )
    missing = 0
    if flags & _MISSING_BIT:
        missing = int.from_bytes(r.take((n + 7) // 8, "missing-value bitmap"), "little")
        if missing >> n:
            raise DecodeError(DecodeReason.MALFORMED, "missing-value bitmap has bits beyond n")
    fmt = "<" + "".join(c for i, c in enumerate(codes) if not missing & (1 << i))
    packed = iter(struct.unpack(fmt, r.take(struct.calcsize(fmt), "values")))
    values = [None if missing & (1 << i) else next(packed) for i in range(n)]
    r.done()
    numbers = [*(v for v in values if v is not None), *_operating_values(operating)]
    if not all(math.isfinite(v) for v in numbers):
        raise DecodeError(DecodeReason.NON_FINITE, "frame carries NaN or infinite values")
    return _validated(
        IndicatorMessage,
        {
            "message_id": message_id,
            "gateway_id": gateway_id,
            "sequence": sequence,
            "site": site,
            "asset_id": asset_id,
            "window_start": start,
            "window_s": window_s,
            "clock_sync": _CLOCK[clock_code],
            "operating": operating,
            "quality": quality,
            "layout_digest": digest,
            "values": values,
        },
    )


def _operating_values(operating: Mapping[str, Any]) -> list[float]:
    return [v for k, v in operating.items() if k != "shaft_speed_source" and v is not None]


def quantise(msg: IndicatorMessage, layout: IndicatorLayout) -> IndicatorMessage:
    """The message as the binary frame carries it (f16/f32 rounding, microsecond window)."""
    return decode_indicators(
        encode_indicators(msg, layout),
        {layout.digest: layout},
        site=msg.site,
        gateway_id=msg.gateway_id,
        asset_id=msg.asset_id,
    )


# -- batches ----------------------------------------------------------------------------------


def encode_batch(frames: list[bytes]) -> bytes:
    """Wrap several indicator frames (of one asset) into one payload for catch-up after outages."""
    if not 1 <= len(frames) <= MAX_BATCH_FRAMES:
        raise EncodeError(f"a batch holds 1..{MAX_BATCH_FRAMES} frames, got {len(frames)}")
    out = bytearray(MAGIC)
    out += bytes((SCHEMA_MAJOR, KIND_BATCH))
    out += _uvarint(len(frames))
    for f in frames:
        out += _uvarint(len(f))
        out += f
    return bytes(out)


def is_batch(payload: bytes) -> bool:
    return len(payload) >= 4 and payload[:2] == MAGIC and payload[3] == KIND_BATCH


def split_batch(payload: bytes) -> list[bytes]:
    """The frames of a payload: a batch's frames, or the payload itself if it is one frame."""
    r = _Reader(payload)
    if _read_header(r) == KIND_INDICATORS:
        return [payload]
    count = r.uvarint("batch count", limit=MAX_BATCH_FRAMES + 1)
    if count == 0:  # encode_batch never writes one; accepted, it would vanish without a trace
        raise DecodeError(DecodeReason.INVALID, "a batch holds 1.. frames, got 0")
    frames = []
    for i in range(count):
        size = r.uvarint(f"length of frame {i}", limit=MAX_FRAME_BYTES + 1)
        frames.append(r.take(size, f"frame {i}"))
    r.done()
    return frames


# -- JSON forms -------------------------------------------------------------------------------

M = TypeVar("M", bound=BaseModel)


def _reason_of(exc: ValidationError) -> DecodeReason:
    types = {e["type"] for e in exc.errors()}
    if "json_invalid" in types or "json_type" in types:
        return DecodeReason.MALFORMED
    if "finite_number" in types:
        return DecodeReason.NON_FINITE
    return DecodeReason.INVALID


def _detail_of(exc: ValidationError) -> str:
    first = exc.errors()[0]
    loc = ".".join(str(p) for p in first["loc"]) or "message"
    more = f" (+{exc.error_count() - 1} more)" if exc.error_count() > 1 else ""
    return f"{loc}: {first['msg']}{more}"


def _validated(cls: type[M], data: Any) -> M:
    try:
        return cls.model_validate(data)
    except ValidationError as exc:
        raise DecodeError(_reason_of(exc), _detail_of(exc)) from None


def encode_json(model: BaseModel) -> bytes:
    """The readable JSON form of any contract model (UTC times with ``Z``)."""
    return model.model_dump_json().encode()


def _load_json(data: bytes | str) -> Any:
    if len(data) > MAX_JSON_BYTES:
        raise DecodeError(DecodeReason.OVERSIZED, f"JSON of {len(data)} bytes is too large")
    try:
        return json.loads(data)
    except (ValueError, RecursionError) as exc:
        raise DecodeError(DecodeReason.MALFORMED, f"not valid JSON: {exc}") from None


def _has_non_finite(obj: Any) -> bool:
    if isinstance(obj, float):
        return not math.isfinite(obj)
    if isinstance(obj, dict):
        return any(_has_non_finite(v) for v in obj.values())
    if isinstance(obj, list):
        return any(_has_non_finite(v) for v in obj)
    return False


def decode_json(data: bytes | str | Mapping[str, Any], cls: type[M]) -> M:
    """Parse and validate a JSON payload (bytes, text or an already-parsed object) as ``cls``."""
    obj = data if isinstance(data, Mapping) else _load_json(data)
    if not isinstance(obj, Mapping):
        raise DecodeError(
            DecodeReason.MALFORMED, f"expected a JSON object, got {type(obj).__name__}"
        )
    version = obj.get("schema_version", SCHEMA_MAJOR)
    if version != SCHEMA_MAJOR:
        raise DecodeError(
            DecodeReason.UNKNOWN_VERSION,
            f"schema_version {version!r}; this receiver knows {SCHEMA_MAJOR}",
        )
    if _has_non_finite(obj):
        raise DecodeError(DecodeReason.NON_FINITE, "JSON carries NaN or infinite numbers")
    return _validated(cls, obj)


def to_readable(msg: IndicatorMessage, layout: IndicatorLayout) -> dict[str, Any]:
    """The readable JSON form of an indicator message: each indicator's name, unit and value."""
    _check_layout(msg, layout)
    body = json.loads(encode_json(msg))
    del body["values"]
    body["indicators"] = [
        {"name": s.name, "unit": s.unit, "value": v}
        for s, v in zip(layout.indicators, msg.values, strict=True)
    ]
    return body


def from_readable(data: bytes | str | Mapping[str, Any], layouts: LayoutLookup) -> IndicatorMessage:
    """Parse the readable JSON form back into a message, checking names and units against the
    layout it references (order of the indicators does not matter; an absent name is missing)."""
    obj = data if isinstance(data, Mapping) else _load_json(data)
    if not isinstance(obj, Mapping):
        raise DecodeError(
            DecodeReason.MALFORMED, f"expected a JSON object, got {type(obj).__name__}"
        )
    body = dict(obj)
    indicators = body.pop("indicators", None)
    if not isinstance(indicators, list):
        raise DecodeError(
            DecodeReason.INVALID, "indicators: a list of {name, unit, value} is required"
        )
    digest = body.get("layout_digest")
    if not isinstance(digest, str):
        raise DecodeError(DecodeReason.INVALID, "layout_digest: a string is required")
    if body.get("schema_version", SCHEMA_MAJOR) != SCHEMA_MAJOR:
        raise DecodeError(
            DecodeReason.UNKNOWN_VERSION, f"schema_version {body.get('schema_version')!r}"
        )
    layout = _resolve(layouts, digest)
    by_name: dict[str, Any] = {}
    units = {s.name: s.unit for s in layout.indicators}
    for item in indicators:
        if not isinstance(item, Mapping) or not isinstance(item.get("name"), str):
            raise DecodeError(DecodeReason.INVALID, "indicators: each entry needs a name")
        name = item["name"]
        if name not in units:
            raise DecodeError(
                DecodeReason.LAYOUT_MISMATCH, f"indicator {name!r} is not in layout {digest}"
            )
        if "unit" in item and item["unit"] != units[name]:
            raise DecodeError(
                DecodeReason.LAYOUT_MISMATCH,
                f"indicator {name!r} has unit {item['unit']!r}; "
                f"layout {digest} says {units[name]!r}",
            )
        if name in by_name:
            raise DecodeError(DecodeReason.INVALID, f"indicator {name!r} given twice")
        by_name[name] = item.get("value")
    body["values"] = [by_name.get(s.name) for s in layout.indicators]
    if _has_non_finite(body):
        raise DecodeError(DecodeReason.NON_FINITE, "JSON carries NaN or infinite numbers")
    return _validated(IndicatorMessage, body)
