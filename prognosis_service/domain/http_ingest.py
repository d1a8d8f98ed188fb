"""``POST /v1/indicators``: the readable JSON form in batches, inline layouts, Idempotency-Key.

Body: ``{"layouts": [IndicatorLayout, ...], "messages": [readable message, ...]}`` (layouts
optional), or a bare list of messages. Every message is stored, recognised as a duplicate or
quarantined, and the response says which; the envelope itself being wrong is a 4xx.
"""

from __future__ import annotations

import hashlib
import json
from datetime import UTC, datetime
from typing import Any

from sqlalchemy.orm import Session

from prognosis_service.auth import Principal
from prognosis_service.domain.errors import DomainError, ForbiddenError, InvalidInputError
from prognosis_service.ingest.pipeline import BatchOutcome, Inbound, Pipeline
from prognosis_service.store.engine import insert_for
from prognosis_service.store.models import IdempotencyRecord
from shared_schema import DecodeError, IndicatorLayout, decode_json

__all__ = ["MAX_BODY_BYTES", "MAX_MESSAGES", "PayloadTooLargeError", "ingest_batch"]

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


def _parse(body: bytes) -> tuple[list[IndicatorLayout], list[Any]]:
    if len(body) > MAX_BODY_BYTES:
        raise PayloadTooLargeError(f"body of {len(body)} bytes exceeds {MAX_BODY_BYTES}")
    try:
        doc = json.loads(body)
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
    layouts = []
    for i, obj in enumerate(raw_layouts):
        if not isinstance(obj, dict):
            raise InvalidInputError(f"layouts[{i}]: an object is required")
        try:
            layouts.append(decode_json(obj, IndicatorLayout))
        except DecodeError as exc:
            raise InvalidInputError(f"layouts[{i}]: {exc.reason.value}: {exc.detail}") from None
    return layouts, messages


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


def ingest_batch(
    session: Session,
    pipeline: Pipeline,
    principal: Principal,
    body: bytes,
    *,
    idempotency_key: str | None = None,
) -> tuple[dict[str, Any], BatchOutcome | None]:
    """Store one HTTP batch inside the caller's write transaction.

    Returns the response body and the outcome (None when an earlier response was replayed for
    the same Idempotency-Key and body).
    """
    digest = hashlib.sha256(body).hexdigest()
    if idempotency_key is not None:
        if not 1 <= len(idempotency_key) <= 200:
            raise InvalidInputError("Idempotency-Key must be 1 to 200 characters")
        earlier = session.get(IdempotencyRecord, (principal.key_id, idempotency_key))
        if earlier is not None:
            if earlier.request_sha256 != digest:
                raise IdempotencyConflictError(
                    "this Idempotency-Key was used before with a different body"
                )
            return dict(earlier.response), None
    layouts, messages = _parse(body)
    if principal.sites is not None:
        for i, m in enumerate(messages):
            site = m.get("site") if isinstance(m, dict) else None
            if isinstance(site, str) and not principal.may_see(site):
                raise ForbiddenError(f"messages[{i}]: this key may not send data for site {site!r}")
    now = datetime.now(UTC)
    items = [
        Inbound(topic=None, payload=b"", received_at=now, source="http", obj=m) for m in messages
    ]
    out = pipeline.handle(session, items, layouts=layouts, layouts_from=None)
    response = _response(len(messages), len(layouts), out)
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
