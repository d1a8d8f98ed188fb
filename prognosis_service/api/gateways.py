"""/v1/gateways: last seen and link state (online, offline, lost, silent, unknown)."""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Annotated

from fastapi import APIRouter, Path, Query

from prognosis_service.api.deps import ReaderKey, ReadSessionDep, RuntimeDep
from prognosis_service.api.schemas import GatewayOut, Page
from prognosis_service.domain import gateways as domain
from prognosis_service.store.models import Gateway

router = APIRouter(prefix="/v1/gateways", tags=["gateways"])


def _out(gw: Gateway, link_state: str) -> GatewayOut:
    return GatewayOut(
        gateway_id=gw.gateway_id,
        site=gw.site_id,
        link_state=link_state,
        state=gw.state,
        state_at=gw.state_at,
        last_seen_at=gw.last_seen_at,
        last_sequence=gw.last_sequence,
        agent_version=gw.agent_version,
        last_status=gw.last_status,
    )


@router.get("", response_model=Page[GatewayOut])
def list_gateways(
    session: ReadSessionDep,
    principal: ReaderKey,
    runtime: RuntimeDep,
    site: str | None = None,
    state: Annotated[str | None, Query(description="Filter by link state.")] = None,
    limit: Annotated[int, Query(ge=1, le=1000)] = 100,
    cursor: str | None = None,
) -> Page[GatewayOut]:
    rows, nxt = domain.list_gateways(
        session,
        principal,
        site=site,
        state=state,
        silent_after_s=runtime.settings.silent_after_s,
        limit=limit,
        cursor=cursor,
    )
    return Page(items=[_out(g, s) for g, s in rows], count=len(rows), next_cursor=nxt)


@router.get("/{gateway_id}", response_model=GatewayOut)
def get_gateway(
    gateway_id: Annotated[str, Path(max_length=64)],
    session: ReadSessionDep,
    principal: ReaderKey,
    runtime: RuntimeDep,
) -> GatewayOut:
    gw = domain.get_gateway(session, gateway_id, principal)
    state = domain.link_state(
        gw, now=datetime.now(UTC), silent_after_s=runtime.settings.silent_after_s
    )
    return _out(gw, state)
