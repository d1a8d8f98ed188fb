"""/v1/quarantine (admin): list, inspect, re-admit once the cause is fixed, purge."""

from __future__ import annotations

import base64
from typing import Annotated

from fastapi import APIRouter, Path, Query

from prognosis_service.api.deps import AdminKey, ReadSessionDep, RuntimeDep
from prognosis_service.api.schemas import (
    Page,
    QuarantineDetailOut,
    QuarantineOut,
    ReadmitIn,
    ReadmitOut,
)
from prognosis_service.domain import quarantine as domain
from prognosis_service.store.models import QuarantineRow

router = APIRouter(prefix="/v1/quarantine", tags=["quarantine"])
# the store's ids are 64-bit: a larger number could not name an entry (and must not reach SQL)
EntryIdPath = Annotated[int, Path(ge=1, le=2**63 - 1)]


def _out(row: QuarantineRow) -> QuarantineOut:
    return QuarantineOut(
        id=row.id,
        received_at=row.received_at,
        source=row.source,
        topic=row.topic,
        reason=row.reason,
        detail=row.detail,
        site=row.site_id,
        gateway_id=row.gateway_id,
        asset_id=row.asset_id,
        message_id=str(row.message_id) if row.message_id else None,
        sequence=row.sequence,
        layout_digest=row.layout_digest,
        attempts=row.attempts,
        payload_bytes=len(row.payload),
        resolved_at=row.resolved_at,
        resolution=row.resolution,
    )


@router.get("", response_model=Page[QuarantineOut])
def list_quarantine(
    session: ReadSessionDep,
    principal: AdminKey,
    reason: str | None = None,
    asset_id: str | None = None,
    include_resolved: bool = False,
    limit: Annotated[int, Query(ge=1, le=1000)] = 100,
    cursor: str | None = None,
) -> Page[QuarantineOut]:
    rows, nxt = domain.list_entries(
        session,
        principal,
        reason=reason,
        asset_id=asset_id,
        include_resolved=include_resolved,
        limit=limit,
        cursor=cursor,
    )
    return Page(items=[_out(r) for r in rows], count=len(rows), next_cursor=nxt)


@router.get("/{entry_id}", response_model=QuarantineDetailOut)
def get_quarantine_entry(
    entry_id: EntryIdPath, session: ReadSessionDep, principal: AdminKey
) -> QuarantineDetailOut:
    row = domain.get_entry(session, entry_id, principal)
    try:
        text: str | None = row.payload.decode("utf-8")
    except UnicodeDecodeError:
        text = None
    return QuarantineDetailOut(
        **_out(row).model_dump(),
        payload_base64=base64.b64encode(row.payload).decode(),
        payload_text=text,
    )


def _readmit_out(results: list[tuple[int, str]]) -> ReadmitOut:
    ok = sum(1 for _, r in results if r == "readmitted")
    return ReadmitOut(
        readmitted=ok,
        still_held=len(results) - ok,
        results=[{"id": i, "result": r} for i, r in results],
    )


@router.post("/{entry_id}/readmit", response_model=ReadmitOut)
def readmit_entry(entry_id: EntryIdPath, runtime: RuntimeDep, principal: AdminKey) -> ReadmitOut:
    """Run one entry through ingest again; it stays (with its new reason) if still refused."""
    with runtime.store.write() as session:
        domain.get_entry(session, entry_id, principal)
        results = domain.readmit(session, runtime.pipeline, principal, ids=[entry_id])
    return _readmit_out(results)


@router.post("/readmit", response_model=ReadmitOut)
def readmit_many(body: ReadmitIn, runtime: RuntimeDep, principal: AdminKey) -> ReadmitOut:
    """Re-admit open entries by ids, or all with a reason and/or asset."""
    with runtime.store.write() as session:
        results = domain.readmit(
            session,
            runtime.pipeline,
            principal,
            ids=body.ids,
            reason=body.reason,
            asset_id=body.asset_id,
        )
    return _readmit_out(results)


@router.delete("/{entry_id}", status_code=204)
def purge_entry(entry_id: EntryIdPath, runtime: RuntimeDep, principal: AdminKey) -> None:
    with runtime.store.write() as session:
        domain.purge(session, principal, ids=[entry_id])


@router.delete("", response_model=dict[str, int])
def purge_many(
    runtime: RuntimeDep,
    principal: AdminKey,
    reason: str | None = None,
    resolved_only: bool = True,
) -> dict[str, int]:
    """Delete entries for good: by default only those already re-admitted."""
    with runtime.store.write() as session:
        n = domain.purge(session, principal, reason=reason, resolved_only=resolved_only)
    return {"purged": n}
