"""POST /v1/indicators: HTTP ingest for gateways that can only speak HTTPS."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Header, Request, Response
from starlette.concurrency import run_in_threadpool

from prognosis_service.api.deps import IngestKey, RuntimeDep
from prognosis_service.api.schemas import IngestResult
from prognosis_service.domain.http_ingest import (
    MAX_BODY_BYTES,
    PayloadTooLargeError,
    check_idempotency_key,
    decode_batch,
    gc_paused,
    ingest_batch,
    parse_batch,
)
from prognosis_service.ingest.consumer import record_outcome
from prognosis_service.metrics import METRICS

router = APIRouter(prefix="/v1/indicators", tags=["ingest"])


@router.post("", response_model=IngestResult)
async def post_indicators(
    request: Request,
    runtime: RuntimeDep,
    principal: IngestKey,
    response: Response,
    idempotency_key: Annotated[str | None, Header(alias="Idempotency-Key")] = None,
) -> IngestResult:
    """Store a batch of indicator messages in their readable JSON form.

    Body: ``{"layouts": [...], "messages": [...]}`` (layouts optional, for those not sent
    before) or a bare list of messages. Idempotent on each message's identity; with an
    ``Idempotency-Key`` a retried request gets the first response back.
    """
    size = int(request.headers.get("content-length") or 0)
    if size > MAX_BODY_BYTES:
        raise PayloadTooLargeError(f"body of {size} bytes exceeds {MAX_BODY_BYTES}")
    body = await request.body()

    def work() -> tuple[dict[str, object], bool]:
        check_idempotency_key(idempotency_key)
        with gc_paused():
            batch = parse_batch(body, principal)
            with runtime.store.read() as session:  # decoding outside the write lock
                decode_batch(session, runtime.pipeline, batch)
            with runtime.store.write() as session:
                result, outcome = ingest_batch(
                    session, runtime.pipeline, principal, batch, idempotency_key=idempotency_key
                )
        if outcome is not None:
            record_outcome(METRICS, outcome, "http")
        return result, outcome is None

    result, replayed = await run_in_threadpool(work)
    if replayed:
        response.headers["Idempotent-Replayed"] = "true"
    return IngestResult.model_validate(result)
