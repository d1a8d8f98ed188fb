"""``POST /v1/indicators``: the readable JSON form in batches, inline layouts, Idempotency-Key.

Body: ``{"layouts": [IndicatorLayout, ...], "messages": [readable message, ...]}`` (layouts
optional), or a bare list of messages. Every message is stored, recognised as a duplicate or
quarantined, and the response says which; the envelope itself being wrong is a 4xx.

Three steps, so that only the last holds the write lock (SQLite has one writer at a time):
:func:`parse_batch` (JSON and envelope, no database), :func:`decode_batch` (the messages against
their layouts, in a read session) and :func:`ingest_batch` (store, in the write transaction).
"""

from __future__ import annotations

import gc
import hashlib
import json
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import UTC, datetime
from functools import partial
from typing import Any

import msgspec
from sqlalchemy.orm import Session

from prognosis_service.auth import Principal
from prognosis_service.domain.errors import DomainError, ForbiddenError, InvalidInputError
from prognosis_service.ingest.pipeline import BatchOutcome, Inbound, Pipeline
from prognosis_service.store.engine import insert_for
from prognosis_service.store.models import IdempotencyRecord
from shared_schema import DecodeError, IndicatorLayout, IndicatorMessage, decode_json
from shared_schema.codec import ReadableMessage

__all__ = [
    "MAX_BODY_BYTES",
    "MAX_MESSAGES",
    "ParsedBatch",
    "PayloadTooLargeError",
    "check_idempotency_key",
    "decode_batch",
    "gc_paused",
    "ingest_batch",
    "loads",
    "parse_batch",
]

MAX_BODY_BYTES = 64 * 1024 * 1024
MAX_MESSAGES = 50_000


class PayloadTooLargeError(DomainError):
    status = 413
    title = "Payload too large"
    slug = "payload-too-large"


class IdempotencyConflictError(DomainError):
    status = 422
    title = "Idempotency-Key reused"
    slug = "idempotency-key-reused"


@dataclass(slots=True)
class ParsedBatch:
    """A request body parsed and its envelope checked; ``decoded`` is filled by
    :func:`decode_batch` (None for an entry left to the pipeline to decode and quarantine).

    A body msgspec could decode into :class:`ReadableMessage` structs (nearly all) keeps those
    in ``typed`` and is parsed into plain objects (``messages``) only if one of its messages
    needs them: to be decoded the long way, or to be quarantined with its JSON form.
    """

    body: bytes
    layouts: list[IndicatorLayout]
    objects: list[Any] | None
    typed: list[ReadableMessage] | None = None
    decoded: list[IndicatorMessage | None] = field(default_factory=list)

    def __len__(self) -> int:
        return len(self.typed) if self.typed is not None else len(self.messages)

    @property
    def messages(self) -> list[Any]:
        """The messages as parsed JSON objects (what :func:`loads` gives)."""
        if self.objects is None:
            doc = loads(self.body)
            self.objects = doc["messages"] if isinstance(doc, dict) else doc
            assert self.typed is None or len(self.objects) == len(self.typed)
        return self.objects

    def message(self, index: int) -> Any:
        return self.messages[index]

    @property
    def sha256(self) -> str:
        """The body's digest, for an Idempotency-Key only (4 ms for a 2 MB body here)."""
        return hashlib.sha256(self.body).hexdigest()


class _TypedBody(msgspec.Struct, forbid_unknown_fields=True):
    messages: list[ReadableMessage]
    layouts: list[Any] = []


_TYPED_JSON = msgspec.json.Decoder(_TypedBody | list[ReadableMessage])


def _parse_typed(body: bytes) -> tuple[list[IndicatorLayout], list[ReadableMessage]] | None:
    """The envelope and its messages decoded into structs, or None for a body msgspec does not
    take so (any odd message, key or token): :func:`_parse` then decides on the whole body."""
    try:
        doc = _TYPED_JSON.decode(body)
    except (msgspec.MsgspecError, RecursionError):
        return None
    if isinstance(doc, list):
        messages, raw_layouts = doc, []
    else:
        messages, raw_layouts = doc.messages, doc.layouts
    if len(messages) > MAX_MESSAGES:
        raise PayloadTooLargeError(f"{len(messages)} messages exceed {MAX_MESSAGES} per request")
    return _layouts(raw_layouts), messages


def _layouts(raw_layouts: list[Any]) -> list[IndicatorLayout]:
    layouts = []
    for i, obj in enumerate(raw_layouts):
        if not isinstance(obj, dict):
            raise InvalidInputError(f"layouts[{i}]: an object is required")
        try:
            layouts.append(decode_json(obj, IndicatorLayout))
        except DecodeError as exc:
            raise InvalidInputError(f"layouts[{i}]: {exc.reason.value}: {exc.detail}") from None
    return layouts


def _parse(body: bytes) -> tuple[list[IndicatorLayout], list[Any]]:
    try:
        doc = loads(body)
    except (ValueError, RecursionError) as exc:
        raise InvalidInputError(f"body is not valid JSON: {exc}") from None
    raw_layouts: Any = []
    if isinstance(doc, dict):
        unknown = sorted(set(doc) - {"layouts", "messages"})
        if unknown:
            raise InvalidInputError(
                f"unknown top-level key {unknown[0]!r}; allowed: layouts, messages"
            )
        raw_layouts = doc.get("layouts", [])
        messages = doc.get("messages")
    else:
        messages = doc
    if not isinstance(messages, list):
        raise InvalidInputError("messages: a list of indicator messages is required")
    if len(messages) > MAX_MESSAGES:
        raise PayloadTooLargeError(f"{len(messages)} messages exceed {MAX_MESSAGES} per request")
    if not isinstance(raw_layouts, list):
        raise InvalidInputError("layouts: a list of indicator layouts is required")
    return _layouts(raw_layouts), messages


_FAST_JSON = msgspec.json.Decoder()


def loads(body: bytes) -> Any:
    """``json.loads(body)``, in less time where it can be.

    msgspec's decoder gives the very objects json does for every document it accepts (integers
    beyond 64 bits stay exact ``int``; tests/prognosis_service/test_http_ingest_json.py holds the
    two to the same results). What it refuses goes to json, which decides as before: the NaN and
    Infinity tokens and numbers that overflow to infinity (a message to quarantine as
    non-finite, not a body to refuse), lone surrogates, a BOM or UTF-16/32, and every syntax
    error, worded by json. Measured on a 1,000-message body (2 MB, this machine): 13.6 against
    19.5 µs a message; orjson was no faster and turns integers beyond 64 bits into floats.
    """
    try:
        return _FAST_JSON.decode(body)
    except (msgspec.MsgspecError, RecursionError):
        return json.loads(body)


@contextmanager
def gc_paused() -> Iterator[None]:
    """The cyclic garbage collector held off for one request's decoding and storing.

    A batch builds tens of thousands of containers that live until it is stored; as they pass
    the collector's thresholds it walks every object of the process again and again, which
    cost 30 to 55 µs a message on top of 80 to 95 µs for the work itself (1,000-message
    requests in process, SQLite, this machine). What a batch builds is freed by reference
    counting; the few cycles of a request (a session's) wait for the collector's next run.
    The collector is switched back on when the request that switched it off is done, never
    left off.
    """
    owner = gc.isenabled()
    if owner:
        gc.disable()
    try:
        yield
    finally:
        if owner:
            gc.enable()


def _response(n: int, layouts: int, out: BatchOutcome) -> dict[str, Any]:
    return {
        "received": n,
        "stored": out.stored,
        "duplicates": out.duplicates,
        "layouts_stored": len(out.new_layouts),
        "readmitted": out.readmitted,
        "quarantined": [
            {"index": q.index, "reason": q.reason, "detail": q.detail} for q in out.quarantined
        ],
    }


def check_idempotency_key(key: str | None) -> None:
    if key is not None and not 1 <= len(key) <= 200:
        raise InvalidInputError("Idempotency-Key must be 1 to 200 characters")


def parse_batch(body: bytes, principal: Principal) -> ParsedBatch:
    """Parse a request body and check its envelope and the caller's sites (no database).

    Raises
    ------
    InvalidInputError, PayloadTooLargeError, ForbiddenError
        For an envelope that is not JSON, too large or malformed, or a message for a site the
        key may not send for.
    """
    if len(body) > MAX_BODY_BYTES:
        raise PayloadTooLargeError(f"body of {len(body)} bytes exceeds {MAX_BODY_BYTES}")
    typed = _parse_typed(body)
    if typed is not None:
        batch = ParsedBatch(body, typed[0], None, typed[1])
    else:
        layouts, messages = _parse(body)
        batch = ParsedBatch(body, layouts, messages)
    if principal.sites is not None:
        if batch.typed is not None:
            sites = [m.site for m in batch.typed]
        else:
            sites = [m.get("site") if isinstance(m, dict) else None for m in batch.messages]
        for i, site in enumerate(sites):
            if isinstance(site, str) and not principal.may_see(site):
                raise ForbiddenError(f"messages[{i}]: this key may not send data for site {site!r}")
    return batch


def decode_batch(session: Session, pipeline: Pipeline, batch: ParsedBatch) -> None:
    """Decode the batch's messages in a read ``session``, before the write transaction."""
    batch.decoded = pipeline.decode_readable(
        session, lambda: batch.messages, batch.layouts, typed=batch.typed
    )


def ingest_batch(
    session: Session,
    pipeline: Pipeline,
    principal: Principal,
    body: bytes | ParsedBatch,
    *,
    idempotency_key: str | None = None,
) -> tuple[dict[str, Any], BatchOutcome | None]:
    """Store one HTTP batch (raw ``body`` or from :func:`parse_batch`) inside the caller's
    write transaction.

    Returns the response body and the outcome (None when an earlier response was replayed for
    the same Idempotency-Key and body).
    """
    check_idempotency_key(idempotency_key)
    batch = parse_batch(body, principal) if isinstance(body, bytes) else body
    digest = "" if idempotency_key is None else batch.sha256
    if idempotency_key is not None:
        earlier = session.get(IdempotencyRecord, (principal.key_id, idempotency_key))
        if earlier is not None:
            if earlier.request_sha256 != digest:
                raise IdempotencyConflictError(
                    "this Idempotency-Key was used before with a different body"
                )
            return dict(earlier.response), None
    now = datetime.now(UTC)
    if batch.decoded and batch.objects is None:  # built from structs: objects only if needed
        items = [
            Inbound(
                topic=None,
                payload=b"",
                received_at=now,
                source="http",
                decoded=d,
                obj_of=partial(batch.message, i),
            )
            for i, d in enumerate(batch.decoded)
        ]
    else:
        decoded = batch.decoded or [None] * len(batch)
        items = [
            Inbound(topic=None, payload=b"", received_at=now, source="http", obj=m, decoded=d)
            for m, d in zip(batch.messages, decoded, strict=True)
        ]
    out = pipeline.handle(session, items, layouts=batch.layouts, layouts_from=None)
    response = _response(len(batch), len(batch.layouts), out)
    if idempotency_key is not None:
        session.execute(
            insert_for(session)(IdempotencyRecord)
            .values(
                key_id=principal.key_id,
                idempotency_key=idempotency_key,
                request_sha256=digest,
                status_code=200,
                response=response,
                created_at=now,
            )
            .on_conflict_do_nothing()
        )
    return response, out
