"""Quarantine administration: list, inspect, re-admit (once the cause is fixed), purge."""

from __future__ import annotations

from sqlalchemy import Select, delete, select
from sqlalchemy.orm import Session

from prognosis_service.auth import Principal
from prognosis_service.domain.errors import InvalidInputError, NotFoundError
from prognosis_service.domain.pagination import decode_cursor, encode_cursor
from prognosis_service.ingest.pipeline import QUARANTINE_REASONS, Pipeline
from prognosis_service.store.models import QuarantineRow

__all__ = ["get_entry", "list_entries", "purge", "readmit"]


def _check_reason(reason: str | None) -> None:
    if reason is not None and reason not in QUARANTINE_REASONS:
        raise InvalidInputError(f"reason must be one of {list(QUARANTINE_REASONS)}, got {reason!r}")


def _scoped(stmt: Select[QuarantineRow], principal: Principal) -> Select[QuarantineRow]:
    if principal.sites is not None:
        stmt = stmt.where(QuarantineRow.site_id.in_(sorted(principal.sites)))
    return stmt


def list_entries(
    session: Session,
    principal: Principal,
    *,
    reason: str | None = None,
    asset_id: str | None = None,
    include_resolved: bool = False,
    limit: int = 100,
    cursor: str | None = None,
) -> tuple[list[QuarantineRow], str | None]:
    _check_reason(reason)
    stmt = _scoped(select(QuarantineRow).order_by(QuarantineRow.id).limit(limit + 1), principal)
    if reason is not None:
        stmt = stmt.where(QuarantineRow.reason == reason)
    if asset_id is not None:
        stmt = stmt.where(QuarantineRow.asset_id == asset_id)
    if not include_resolved:
        stmt = stmt.where(QuarantineRow.resolved_at.is_(None))
    if cursor:
        (after,) = decode_cursor(cursor, 1)
        stmt = stmt.where(QuarantineRow.id > int(after))
    rows = list(session.scalars(stmt))
    more = len(rows) > limit
    rows = rows[:limit]
    return rows, encode_cursor(rows[-1].id) if more else None


def get_entry(session: Session, entry_id: int, principal: Principal) -> QuarantineRow:
    row = session.get(QuarantineRow, entry_id)
    # another site's entry answers exactly as a missing one: its existence must not leak
    if row is None or (principal.sites is not None and row.site_id not in principal.sites):
        raise NotFoundError("quarantine entry not found")
    return row


def readmit(
    session: Session,
    pipeline: Pipeline,
    principal: Principal,
    *,
    ids: list[int] | None = None,
    reason: str | None = None,
    asset_id: str | None = None,
    limit: int = 10_000,
) -> list[tuple[int, str]]:
    """Run open entries through the pipeline again; (id, "readmitted" or the reason held)."""
    _check_reason(reason)
    if ids is not None:
        rows = [get_entry(session, i, principal) for i in ids]
        rows = [r for r in rows if r.resolved_at is None]
    else:
        stmt = _scoped(
            select(QuarantineRow)
            .where(QuarantineRow.resolved_at.is_(None))
            .order_by(QuarantineRow.id)
            .limit(limit),
            principal,
        )
        if reason is not None:
            stmt = stmt.where(QuarantineRow.reason == reason)
        if asset_id is not None:
            stmt = stmt.where(QuarantineRow.asset_id == asset_id)
        rows = list(session.scalars(stmt))
    return pipeline.readmit(session, rows)


def purge(
    session: Session,
    principal: Principal,
    *,
    ids: list[int] | None = None,
    reason: str | None = None,
    resolved_only: bool = False,
) -> int:
    """Delete entries for good (the raw bytes are gone afterwards)."""
    _check_reason(reason)
    if ids is not None:
        for i in ids:
            get_entry(session, i, principal)
    stmt = delete(QuarantineRow)
    if ids is not None:
        stmt = stmt.where(QuarantineRow.id.in_(ids))
    if reason is not None:
        stmt = stmt.where(QuarantineRow.reason == reason)
    if resolved_only:
        stmt = stmt.where(QuarantineRow.resolved_at.is_not(None))
    if principal.sites is not None:
        stmt = stmt.where(QuarantineRow.site_id.in_(sorted(principal.sites)))
    result = session.execute(stmt)
    return int(result.rowcount)  # type: ignore[attr-defined]
