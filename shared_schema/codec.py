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
import re
import struct
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from itertools import repeat
from typing import Any, TypeVar
from uuid import UUID

import annotated_types
import msgspec
from pydantic import BaseModel, TypeAdapter, ValidationError

from shared_schema.errors import DecodeError, DecodeReason, EncodeError
from shared_schema.messages import (
    SCHEMA_MAJOR,
    ChannelQuality,
    ClockSync,
    Identifier,
    IndicatorLayout,
    IndicatorMessage,
    OperatingCondition,
    QualityFlag,
    ShaftSpeedSource,
)

__all__ = [
    "MAX_BATCH_FRAMES",
    "MAX_FRAME_BYTES",
    "MAX_JSON_BYTES",
    "FrameHeader",
    "LayoutLookup",
    "ReadableIndicator",
    "ReadableMessage",
    "decode_indicators",
    "decode_json",
    "encode_batch",
    "encode_indicators",
    "encode_json",
    "from_readable",
    "from_readable_struct",
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
_ZERO = timedelta(0)
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


@dataclass(frozen=True, slots=True)
class _LayoutCodec:
    """What coding needs of one layout, worked out once."""

    codes: tuple[str, ...]  # struct codes of the values, in layout order
    packed: struct.Struct  # all values present
    names: tuple[str, ...]
    units: dict[str, str]
    name_list: list[str]  # as lists, to compare with the readable form's in one go
    unit_list: list[str]


_CODECS: dict[int, tuple[IndicatorLayout, _LayoutCodec]] = {}


def _codec_of(layout: IndicatorLayout) -> _LayoutCodec:
    # Cached by identity, not by digest or with lru_cache: the digest is computed on each access
    # and hashing a frozen layout hashes every spec, either of which cost more than decoding the
    # frame. The entry keeps the layout alive, so its id stays unique.
    hit = _CODECS.get(id(layout))
    if hit is not None and hit[0] is layout:
        return hit[1]
    specs = layout.indicators
    codes = tuple("e" if s.encoding == "f16" else "f" for s in specs)
    codec = _LayoutCodec(
        codes=codes,
        packed=struct.Struct("<" + "".join(codes)),
        names=tuple(s.name for s in specs),
        units={s.name: s.unit for s in specs},
        name_list=[s.name for s in specs],
        unit_list=[s.unit for s in specs],
    )
    if len(_CODECS) >= 256:
        _CODECS.clear()
    _CODECS[id(layout)] = (layout, codec)
    return codec


def _value_codes(layout: IndicatorLayout) -> tuple[str, ...]:
    return _codec_of(layout).codes


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


# -- fast path for well-formed messages -------------------------------------------------------
#
# Nearly every message is well formed, and validating it through the pydantic models cost more
# than parsing it. The fast decoders below take only input they can prove valid with plain
# checks (types, the contract's own bounds, identifiers the contract has accepted before) and
# build the frozen models without validating them again; anything else, including every
# refusal, goes to the checked path, which decides and words the reason exactly as before.
# tests/shared_schema/test_codec_fast_path.py holds the two paths to the same results.


class _SlowPathError(Exception):
    """Input the fast decoder does not take: the checked decoder decides."""


_setattr = object.__setattr__


def _built(cls: type[M], fields: dict[str, Any], fields_set: set[str]) -> M:
    """A model from fields that passed the fast checks (what ``model_construct`` does, without
    its per-field default handling: ``fields`` holds every field, in declaration order)."""
    model = cls.__new__(cls)
    _setattr(model, "__dict__", fields)
    _setattr(model, "__pydantic_fields_set__", fields_set)
    _setattr(model, "__pydantic_extra__", None)
    _setattr(model, "__pydantic_private__", None)
    return model


_Bounds = tuple[float, float, bool, bool]  # low, high, low inclusive, high inclusive


def _bounds(model: type[BaseModel], name: str) -> _Bounds:
    """The numeric bounds the contract puts on a field (from its ``Field(ge=..., ...)``)."""
    lo, hi, lo_in, hi_in = -math.inf, math.inf, True, True
    for m in model.model_fields[name].metadata:
        if isinstance(m, annotated_types.Ge):
            lo, lo_in = float(m.ge), True  # type: ignore[arg-type]
        elif isinstance(m, annotated_types.Gt):
            lo, lo_in = float(m.gt), False  # type: ignore[arg-type]
        elif isinstance(m, annotated_types.Le):
            hi, hi_in = float(m.le), True  # type: ignore[arg-type]
        elif isinstance(m, annotated_types.Lt):
            hi, hi_in = float(m.lt), False  # type: ignore[arg-type]
    return lo, hi, lo_in, hi_in


def _within(v: float, b: _Bounds) -> bool:
    lo, hi, lo_in, hi_in = b
    return (v >= lo if lo_in else v > lo) and (v <= hi if hi_in else v < hi)


_OPERATING_BOUNDS = {f: _bounds(OperatingCondition, f) for f, _ in _OPERATING}
_WINDOW_S_BOUNDS = _bounds(IndicatorMessage, "window_s")
_SPIKES_BOUNDS = _bounds(ChannelQuality, "spikes_removed")
_SEQUENCE_LIMIT = 2**63  # IndicatorMessage.sequence: ge=0, lt=2**63 (the wire's varint limit)
_HEAD = MAGIC + bytes((SCHEMA_MAJOR, KIND_INDICATORS))
_OP_FIELDS = ("shaft_speed_hz", "shaft_speed_source", *(f for f, _ in _OPERATING[1:]))
_NO_OPERATING = dict.fromkeys(_OP_FIELDS)


@dataclass(frozen=True, slots=True)
class _OperatingPart:
    """For one operating-presence byte: how the present fields are packed and bounded."""

    packed: struct.Struct
    names: tuple[str, ...]
    bounds: tuple[_Bounds, ...]
    fields_set: frozenset[str]  # as model_validate records it (the source is always given)


_OP_PARTS = [
    _OperatingPart(
        packed=struct.Struct("<" + "".join(c for b, (_, c) in enumerate(_OPERATING) if p >> b & 1)),
        names=tuple(f for b, (f, _) in enumerate(_OPERATING) if p >> b & 1),
        bounds=tuple(_OPERATING_BOUNDS[f] for b, (f, _) in enumerate(_OPERATING) if p >> b & 1),
        fields_set=frozenset(
            ("shaft_speed_source", *(f for b, (f, _) in enumerate(_OPERATING) if p >> b & 1))
        ),
    )
    for p in range(1 << len(_OPERATING))
]
_MESSAGE_FIELDS = frozenset(IndicatorMessage.model_fields)
_OPERATING_KEYS = frozenset(OperatingCondition.model_fields)
_QUALITY_KEYS = frozenset(ChannelQuality.model_fields)
_DEFAULT_OPERATING = IndicatorMessage.model_fields["operating"].default
_CLOCK_BY_VALUE = {c.value: c for c in ClockSync}
_SPEED_BY_VALUE = {s.value: s for s in ShaftSpeedSource}
_FLAG_BY_VALUE = {f.value: f for f in QualityFlag}
_UUID_TEXT = re.compile(
    r"[0-9a-fA-F]{8}-[0-9a-fA-F]{4}-[0-9a-fA-F]{4}-[0-9a-fA-F]{4}-[0-9a-fA-F]{12}"
)
_ISO_UTC = re.compile(  # the form encode_json writes, ASCII digits only
    r"[0-9]{4}-[0-9]{2}-[0-9]{2}T[0-9]{2}:[0-9]{2}:[0-9]{2}(?:\.[0-9]{3}(?:[0-9]{3})?)?(?:Z|\+00:00)"
)
_DIGEST_TEXT = re.compile(r"[0-9a-f]{16}")

_IDENTIFIER = TypeAdapter(Identifier)
_good_ids: set[str] = set()
_good_channels: set[str] = set()


def _is_identifier(value: object) -> bool:
    """True for a string the contract accepts as a site, gateway or asset id."""
    if type(value) is not str:
        return False
    if value in _good_ids:
        return True
    try:
        _IDENTIFIER.validate_python(value)
    except ValidationError:
        return False
    if len(_good_ids) >= 4096:
        _good_ids.clear()
    _good_ids.add(value)
    return True


def _is_channel(value: object) -> bool:
    """True for a string the contract accepts as a channel name in quality flags."""
    if type(value) is not str:
        return False
    if value in _good_channels:
        return True
    try:
        ChannelQuality(channel=value)
    except ValidationError:
        return False
    if len(_good_channels) >= 4096:
        _good_channels.clear()
    _good_channels.add(value)
    return True


_QualityEntry = tuple[str, frozenset[QualityFlag], int, set[str]]  # and the fields given


def _quality_built(entries: list[_QualityEntry]) -> tuple[ChannelQuality, ...]:
    """Channel quality as the contract normalises it: no repeats, sorted, unflagged left out."""
    for channel, flags, spikes, _ in entries:
        if not _is_channel(channel) or not _within(spikes, _SPIKES_BOUNDS):
            raise _SlowPathError
        if (spikes > 0) != (QualityFlag.SPIKES_REMOVED in flags):
            raise _SlowPathError
    if len({e[0] for e in entries}) != len(entries):
        raise _SlowPathError
    return tuple(
        _built(
            ChannelQuality,
            {"channel": channel, "flags": flags, "spikes_removed": spikes},
            given,
        )
        for channel, flags, spikes, given in sorted(entries, key=lambda e: e[0])
        if flags
    )


def _uvarint_at(buf: bytes, pos: int, limit: int) -> tuple[int, int]:
    shift = value = 0
    for _ in range(10):
        b = buf[pos]
        pos += 1
        value |= (b & 0x7F) << shift
        if not b & 0x80:
            if value >= limit:
                raise _SlowPathError
            return value, pos
        shift += 7
    raise _SlowPathError


_BINARY_FIELDS = frozenset(
    ("message_id", "gateway_id", "sequence", "site", "asset_id", "window_start", "window_s",
     "clock_sync", "operating", "quality", "layout_digest", "values")
)  # fmt: skip


def _decode_fast(
    frame: bytes,
    layouts: LayoutLookup,
    resolved: dict[str, IndicatorLayout | None],
    site: str,
    gateway_id: str,
    asset_id: str,
) -> IndicatorMessage:
    """Decode a well-formed frame; raises _SlowPathError for anything else."""
    try:
        if type(frame) is not bytes or frame[:4] != _HEAD or len(frame) > MAX_FRAME_BYTES:
            raise _SlowPathError
        message_id = UUID(bytes=frame[4:20])
        sequence, pos = _uvarint_at(frame, 20, _SEQUENCE_LIMIT)
        ms = int.from_bytes(frame[pos : pos + 6], "big")
        window_us, pos = _uvarint_at(frame, pos + 6, 2**40)
        flags = frame[pos]
        digest = frame[pos + 1 : pos + 9].hex()
        op = _OP_PARTS[frame[pos + 9]]  # IndexError beyond the five presence bits
        pos += 10
        op_values = op.packed.unpack_from(frame, pos)
        pos += op.packed.size
        n_quality = frame[pos]
        pos += 1
        quality_entries: list[_QualityEntry] = []
        for _ in range(n_quality):
            end = pos + 1 + frame[pos]
            channel = frame[pos + 1 : end].decode()
            bits = frame[end]
            pos = end + 1
            if bits >> len(_FLAGS):
                raise _SlowPathError
            # Rebuilt from its own iteration order, as validation rebuilds it: a set's order
            # shows in the JSON form.
            qflags = frozenset(tuple(frozenset(f for i, f in enumerate(_FLAGS) if bits >> i & 1)))
            spikes = 0
            if bits & 0x04:  # QualityFlag.SPIKES_REMOVED
                spikes, pos = _uvarint_at(frame, pos, 2**63)
            quality_entries.append((channel, qflags, spikes, set(_QUALITY_KEYS)))
        n, pos = _uvarint_at(frame, pos, 1025)
        start = _EPOCH + timedelta(milliseconds=ms)
    except (IndexError, ValueError, OverflowError, struct.error, UnicodeDecodeError):
        raise _SlowPathError from None
    clock_code, speed_code = flags & 0x03, (flags >> 2) & 0x07
    if clock_code >= len(_CLOCK) or speed_code >= len(_SPEED) or flags & 0xC0:
        raise _SlowPathError
    if digest in resolved:
        layout = resolved[digest]
    else:
        layout = resolved[digest] = layouts(digest) if callable(layouts) else layouts.get(digest)
    if layout is None:
        raise _SlowPathError
    codec = _codec_of(layout)
    if n != len(codec.codes):
        raise _SlowPathError
    values: tuple[float | None, ...]
    try:
        if flags & _MISSING_BIT:
            size = (n + 7) // 8
            missing = int.from_bytes(frame[pos : pos + size], "little")
            pos += size
            if missing >> n or pos > len(frame):
                raise _SlowPathError
            packer = struct.Struct(
                "<" + "".join(c for i, c in enumerate(codec.codes) if not missing & (1 << i))
            )
            present = packer.unpack_from(frame, pos)
            it = iter(present)
            values = tuple(None if missing & (1 << i) else next(it) for i in range(n))
        else:
            packer = codec.packed
            values = present = packer.unpack_from(frame, pos)
    except struct.error:
        raise _SlowPathError from None
    window_s = window_us / 1e6
    # A sum is finite only if every term is (an overflow just takes the checked path); the
    # operating values are checked by their bounds, which NaN and infinities fail.
    if (
        pos + packer.size != len(frame)
        or not math.isfinite(sum(present))
        or (op.names[:1] == ("shaft_speed_hz",)) != (speed_code != 0)
        or not _within(window_s, _WINDOW_S_BOUNDS)
        or not (_is_identifier(site) and _is_identifier(gateway_id) and _is_identifier(asset_id))
    ):
        raise _SlowPathError
    for v, b in zip(op_values, op.bounds, strict=True):
        if not _within(v, b):
            raise _SlowPathError
    op_fields = _NO_OPERATING.copy()
    op_fields.update(zip(op.names, op_values, strict=True))
    op_fields["shaft_speed_source"] = _SPEED[speed_code]
    return _built(
        IndicatorMessage,
        {
            "schema_version": SCHEMA_MAJOR,
            "message_id": message_id,
            "gateway_id": gateway_id,
            "sequence": sequence,
            "site": site,
            "asset_id": asset_id,
            "window_start": start,
            "window_s": window_s,
            "clock_sync": _CLOCK[clock_code],
            "operating": _built(OperatingCondition, op_fields, set(op.fields_set)),
            "quality": _quality_built(quality_entries) if quality_entries else (),
            "layout_digest": digest,
            "values": values,
        },
        set(_BINARY_FIELDS),
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
    resolved: dict[str, IndicatorLayout | None] = {}
    try:
        return _decode_fast(frame, layouts, resolved, site, gateway_id, asset_id)
    except _SlowPathError:
        pass
    lookup: LayoutLookup = layouts
    if resolved:  # the layout was looked up already: do not ask the store twice
        lookup = resolved.get
    return _decode_checked(frame, lookup, site=site, gateway_id=gateway_id, asset_id=asset_id)


def _decode_checked(
    frame: bytes,
    layouts: LayoutLookup,
    *,
    site: str,
    gateway_id: str,
    asset_id: str,
) -> IndicatorMessage:
    """The reference decoder: checks every field in order and words every refusal."""
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
    codec = _codec_of(layout)
    if (  # the usual case, checked in bulk: every indicator in layout order, units right
        len(indicators) == len(codec.names)
        and set(map(type, indicators)) <= {dict}
        # map over dict.get rather than comprehensions: half the time for 24 indicators
        and list(map(_get, indicators, repeat("name"))) == codec.name_list
        and list(map(_get, indicators, repeat("unit"), codec.unit_list)) == codec.unit_list
    ):
        body["values"] = list(map(_get, indicators, repeat("value")))
    else:
        body["values"] = _values_by_name(indicators, codec, digest)
    try:
        return _readable_fast(body)
    except _SlowPathError:
        pass
    if _has_non_finite(body):
        raise DecodeError(DecodeReason.NON_FINITE, "JSON carries NaN or infinite numbers")
    return _validated(IndicatorMessage, body)


_get = dict.get


def _values_by_name(indicators: list[Any], codec: _LayoutCodec, digest: str) -> list[Any]:
    """The values of readable indicators in layout order, each name and unit checked."""
    units = codec.units
    by_name: dict[str, Any] = {}
    for item in indicators:
        if type(item) is not dict and not isinstance(item, Mapping):
            raise DecodeError(DecodeReason.INVALID, "indicators: each entry needs a name")
        name = item.get("name")
        if not isinstance(name, str):
            raise DecodeError(DecodeReason.INVALID, "indicators: each entry needs a name")
        unit = units.get(name)
        if unit is None:
            raise DecodeError(
                DecodeReason.LAYOUT_MISMATCH, f"indicator {name!r} is not in layout {digest}"
            )
        if "unit" in item and item["unit"] != unit:
            raise DecodeError(
                DecodeReason.LAYOUT_MISMATCH,
                f"indicator {name!r} has unit {item['unit']!r}; layout {digest} says {unit!r}",
            )
        if name in by_name:
            raise DecodeError(DecodeReason.INVALID, f"indicator {name!r} given twice")
        by_name[name] = item.get("value")
    return [by_name.get(n) for n in codec.names]


def _number(value: object, bounds: _Bounds) -> float:
    """A finite JSON number within ``bounds``, as a float (pydantic turns an int into one)."""
    if type(value) is float:
        if not math.isfinite(value):
            raise _SlowPathError
    elif type(value) is int and -(2**53) <= value <= 2**53:
        value = float(value)
    else:
        raise _SlowPathError
    if not _within(value, bounds):
        raise _SlowPathError
    return value


_ANY: _Bounds = (-math.inf, math.inf, True, True)
_SPIKES_LIMIT = 2**63


def _readable_fast(body: dict[str, Any]) -> IndicatorMessage:
    """Build a message from a well-formed readable body; raises _SlowPathError otherwise."""
    if not body.keys() <= _MESSAGE_FIELDS:
        raise _SlowPathError
    message_id = body.get("message_id")
    if type(message_id) is not str or not _UUID_TEXT.fullmatch(message_id):
        raise _SlowPathError
    return _fast_message(
        body.get("schema_version", SCHEMA_MAJOR),
        UUID(message_id),
        body.get("sequence"),
        body.get("window_start"),
        body.get("site"),
        body.get("gateway_id"),
        body.get("asset_id"),
        body.get("layout_digest"),
        body.get("window_s"),
        body.get("clock_sync", ClockSync.SYNCED),
        body.get("operating", msgspec.UNSET),
        body.get("quality", ()),
        body["values"],
        set(body),
    )


def _fast_message(
    version: Any,
    message_id: UUID,
    sequence: Any,
    window_start: Any,
    site: Any,
    gateway_id: Any,
    asset_id: Any,
    digest: Any,
    window_s: Any,
    clock: Any,
    operating: Any,
    quality: Any,
    raw_values: list[Any],
    fields_set: set[str],
) -> IndicatorMessage:
    """The checks and the build of :func:`_readable_fast`, on the fields of either decoding
    (a dict, or a :class:`ReadableMessage`); ``operating`` is ``msgspec.UNSET`` when absent."""
    if not (
        type(version) is int
        and version == SCHEMA_MAJOR
        and type(sequence) is int
        and 0 <= sequence < _SEQUENCE_LIMIT
        and type(window_start) is str
        and _ISO_UTC.fullmatch(window_start)
        and type(digest) is str
        and _DIGEST_TEXT.fullmatch(digest)
        and _is_identifier(site)
        and _is_identifier(gateway_id)
        and _is_identifier(asset_id)
    ):
        raise _SlowPathError
    try:
        start = datetime.fromisoformat(window_start)
    except ValueError:
        raise _SlowPathError from None
    if start.microsecond % 1000 or start.utcoffset() != _ZERO:
        raise _SlowPathError
    if start.tzinfo is not UTC:
        start = start.astimezone(UTC)
    if type(clock) is str:
        clock = _CLOCK_BY_VALUE.get(clock)
    if type(clock) is not ClockSync:
        raise _SlowPathError
    if operating is msgspec.UNSET:
        operating = _DEFAULT_OPERATING
    elif operating is None:
        raise _SlowPathError
    else:
        operating = _readable_operating(operating)
    if quality:
        quality = _readable_quality(quality)
    elif type(quality) is list or quality == ():
        quality = ()
    else:
        raise _SlowPathError
    values = tuple(raw_values)
    if set(map(type, values)) != {float} or not math.isfinite(sum(values)):
        values = tuple(
            v if v is None or (type(v) is float and math.isfinite(v)) else _number(v, _ANY)
            for v in values
        )
    return _built(
        IndicatorMessage,
        {
            "schema_version": SCHEMA_MAJOR,
            "message_id": message_id,
            "gateway_id": gateway_id,
            "sequence": sequence,
            "site": site,
            "asset_id": asset_id,
            "window_start": start,
            "window_s": _number(window_s, _WINDOW_S_BOUNDS),
            "clock_sync": clock,
            "operating": operating,
            "quality": quality,
            "layout_digest": digest,
            "values": values,
        },
        fields_set,
    )


def _readable_operating(obj: object) -> OperatingCondition:
    if type(obj) is not dict or not obj.keys() <= _OPERATING_KEYS:
        raise _SlowPathError
    fields = _NO_OPERATING.copy()
    for k, v in obj.items():
        if v is None:
            continue
        if k == "shaft_speed_source":
            v = _SPEED_BY_VALUE.get(v) if type(v) is str else None
            if v is None:
                raise _SlowPathError
        elif type(v) is not float or not _within(v, _OPERATING_BOUNDS[k]):
            v = _number(v, _OPERATING_BOUNDS[k])
        fields[k] = v
    if (fields["shaft_speed_hz"] is None) != (fields["shaft_speed_source"] is None):
        raise _SlowPathError
    return _built(OperatingCondition, fields, set(obj))


def _readable_quality(obj: object) -> tuple[ChannelQuality, ...]:
    if type(obj) is not list:
        raise _SlowPathError
    entries: list[_QualityEntry] = []
    for q in obj:
        if type(q) is not dict or not q.keys() <= _QUALITY_KEYS:
            raise _SlowPathError
        flags = q.get("flags", ())
        spikes = q.get("spikes_removed", 0)
        if type(flags) is not list and flags != ():
            raise _SlowPathError
        if type(spikes) is not int or not 0 <= spikes < _SPIKES_LIMIT:
            raise _SlowPathError
        qflags = []
        for f in flags:
            flag = _FLAG_BY_VALUE.get(f) if type(f) is str else None
            if flag is None:
                raise _SlowPathError
            qflags.append(flag)
        entries.append((q.get("channel"), frozenset(qflags), spikes, set(q)))  # type: ignore[arg-type]
    return _quality_built(entries)


# -- the readable form decoded by msgspec straight into structs --------------------------------
#
# For a batch of readable messages (POST /v1/indicators): msgspec builds these from the JSON
# bytes without a dict per message and per indicator, then from_readable_struct runs the very
# checks of the fast path above on them. A field's type is Any where the fast path checks the
# value itself, so a struct holds what the dict would have; the decoding refuses only what the
# fast path would refuse too (a key the contract does not know, an indicator entry that is not
# an object, a message id that is no UUID, a token msgspec does not parse such as NaN), and the
# caller then takes the dict path for the whole batch. The contract: from_readable_struct gives
# the very message (fields, types, fields set) from_readable gives for the same object, or None.


class ReadableIndicator(msgspec.Struct):
    """One entry of ``indicators``; other keys are ignored, as the dict path ignores them."""

    name: Any = msgspec.UNSET
    unit: Any = msgspec.UNSET
    value: Any = None


class ReadableMessage(msgspec.Struct, forbid_unknown_fields=True):
    """A readable indicator message as msgspec decodes it (``UNSET``: the key was absent)."""

    schema_version: Any = msgspec.UNSET
    message_id: UUID | msgspec.UnsetType = msgspec.UNSET
    gateway_id: Any = msgspec.UNSET
    sequence: Any = msgspec.UNSET
    site: Any = msgspec.UNSET
    asset_id: Any = msgspec.UNSET
    window_start: Any = msgspec.UNSET
    window_s: Any = msgspec.UNSET
    clock_sync: Any = msgspec.UNSET
    operating: Any = msgspec.UNSET
    quality: Any = msgspec.UNSET
    layout_digest: Any = msgspec.UNSET
    indicators: list[ReadableIndicator] | msgspec.UnsetType = msgspec.UNSET


_REQUIRED_SET = frozenset(
    ("message_id", "gateway_id", "sequence", "site", "asset_id", "window_start", "window_s",
     "layout_digest", "values")
)  # fmt: skip
_OPTIONAL = ("schema_version", "clock_sync", "operating", "quality")
# The fields given, by which of the optional ones were present (bit i: _OPTIONAL[i]).
_FIELDS_SET = [
    _REQUIRED_SET | {f for i, f in enumerate(_OPTIONAL) if mask >> i & 1}
    for mask in range(1 << len(_OPTIONAL))
]
_UNSET = msgspec.UNSET


def from_readable_struct(m: ReadableMessage, layouts: LayoutLookup) -> IndicatorMessage | None:
    """The message :func:`from_readable` would build from the same JSON object, or None where
    the fast path does not prove it well formed (then :func:`from_readable` decides on the
    dict, refusal and wording included)."""
    indicators = m.indicators
    digest = m.layout_digest
    message_id = m.message_id
    if indicators is _UNSET or type(digest) is not str or message_id is _UNSET:
        return None
    version, clock, operating, quality = m.schema_version, m.clock_sync, m.operating, m.quality
    mask = 0
    if version is _UNSET:
        version = SCHEMA_MAJOR
    else:
        mask = 1
    if clock is _UNSET:
        clock = ClockSync.SYNCED
    else:
        mask |= 2
    if operating is not _UNSET:
        mask |= 4
    if quality is _UNSET:
        quality = ()
    else:
        mask |= 8
    if version != SCHEMA_MAJOR:
        return None
    layout = layouts(digest) if callable(layouts) else layouts.get(digest)
    if layout is None:
        return None
    codec = _codec_of(layout)
    if len(indicators) != len(codec.names) or [i.name for i in indicators] != codec.name_list:
        return None
    units = [i.unit for i in indicators]
    if units != codec.unit_list and not all(
        u is _UNSET or u == want for u, want in zip(units, codec.unit_list, strict=True)
    ):
        return None
    try:
        return _fast_message(
            version,
            message_id,
            m.sequence,
            m.window_start,
            m.site,
            m.gateway_id,
            m.asset_id,
            digest,
            m.window_s,
            clock,
            operating,
            quality,
            [i.value for i in indicators],
            set(_FIELDS_SET[mask]),
        )
    except _SlowPathError:
        return None
