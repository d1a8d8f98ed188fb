"""Gateways with last-seen time and link state, so a silent gateway is known to be silent."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

from sqlalchemy import select
from sqlalchemy.orm import Session

from prognosis_service.auth import Principal
from prognosis_service.domain.errors import ForbiddenError, InvalidInputError, NotFoundError
from prognosis_service.domain.pagination import decode_cursor, encode_cursor
from prognosis_service.store.models import Gateway

__all__ = ["LINK_STATES", "get_gateway", "link_state", "list_gateways"]

LINK_STATES = ("online", "offline", "lost", "silent", "unknown")


def link_state(gw: Gateway, *, now: datetime, silent_after_s: float) -> str:
    """``offline`` (clean shutdown) and ``lost`` (Last Will) come from the gateway's status;
    an ``online`` gateway (or one that never sent a status) unheard for ``silent_after_s`` is
    ``silent``; one never heard at all is ``unknown``."""
    if gw.state in ("offline", "lost") and (
        gw.last_seen_at is None or gw.state_at is None or gw.state_at >= gw.last_seen_at
    ):
        return gw.state
    if gw.last_seen_at is None:
        return "unknown" if gw.state is None else gw.state
    if now - gw.last_seen_at > timedelta(seconds=silent_after_s):
        return "silent"
    return "online"


def get_gateway(session: Session, gateway_id: str, principal: Principal) -> Gateway:
    gw = session.get(Gateway, gateway_id)
    # another site's gateway answers exactly as a missing one: its existence must not leak
    if gw is None or not principal.may_see(gw.site_id):
        raise NotFoundError("gateway not found")
    return gw


def list_gateways(
    session: Session,
    principal: Principal,
    *,
    site: str | None = None,
    state: str | None = None,
    silent_after_s: float,
    limit: int = 100,
    cursor: str | None = None,
) -> tuple[list[tuple[Gateway, str]], str | None]:
    if state is not None and state not in LINK_STATES:
        raise InvalidInputError(f"state must be one of {list(LINK_STATES)}, got {state!r}")
    stmt = select(Gateway).order_by(Gateway.gateway_id)
    if site is not None:
        if not principal.may_see(site):
            raise ForbiddenError(f"this key may not read site {site!r}")
        stmt = stmt.where(Gateway.site_id == site)
    if principal.sites is not None:
        stmt = stmt.where(Gateway.site_id.in_(sorted(principal.sites)))
    if cursor:
        (after,) = decode_cursor(cursor, 1)
        stmt = stmt.where(Gateway.gateway_id > str(after))
    now = datetime.now(UTC)
    out: list[tuple[Gateway, str]] = []
    more = False
    # The link state is computed, not stored, so filtering by it happens here.
    for gw in session.scalars(stmt):
        ls = link_state(gw, now=now, silent_after_s=silent_after_s)
        if state is not None and ls != state:
            continue
        if len(out) == limit:
            more = True
            break
        out.append((gw, ls))
    return out, encode_cursor(out[-1][0].gateway_id) if more else None
