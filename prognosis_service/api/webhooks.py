"""/v1/webhooks: alert webhook subscriptions and their deliveries (scope admin)."""

from __future__ import annotations

import uuid
from datetime import UTC, datetime
from typing import Annotated, Literal

from fastapi import APIRouter, Query, Response, status
from pydantic import BaseModel, Field

from prognosis_service.alerts import webhooks as domain
from prognosis_service.alerts.models import DeliveryRow
from prognosis_service.alerts.runtime import sealer_for, target_policy_for
from prognosis_service.alerts.webhooks import SubscriptionIn, SubscriptionOut
from prognosis_service.api.alerts import ADVISORY
from prognosis_service.api.deps import AdminKey, ReadSessionDep, RuntimeDep
from prognosis_service.api.schemas import Page

__all__ = ["DeliveryOut", "SecretRotated", "SubscriptionCreated", "router"]

router = APIRouter(prefix="/v1/webhooks", tags=["webhooks"])

_NOTES = (
    "\n\nA key limited to sites manages only subscriptions filtered to one of its sites. "
    f"Deliveries are signed CloudEvents; see docs/webhooks.md.\n\n**Caution.** {ADVISORY}"
)
_ACTIVE = ("pending", "in_flight")


class SubscriptionCreated(SubscriptionOut):
    secret: str = Field(
        description="The signing secret, shown this once: keep it in a secret store."
    )


class SecretRotated(BaseModel):
    subscription_id: uuid.UUID
    secret: str = Field(description="The new signing secret, shown this once.")
    secret_rotated_at: datetime
    previous_secret_expires_at: datetime | None = Field(
        description="Until then the previous secret signs too (a second v1 entry)."
    )


class DeliveryOut(BaseModel):
    """One event for one subscription: where it stands and why it failed, if it did."""

    delivery_id: int
    event_id: uuid.UUID = Field(description="The CloudEvent id (header Wellspan-Event-Id).")
    event_type: str
    state: Literal["pending", "in_flight", "delivered", "failed", "cancelled"]
    attempts: int
    last_status: int | None = Field(description="HTTP status of the last attempt, if any.")
    last_error: str | None
    last_attempt_at: datetime | None
    next_attempt_at: datetime | None = Field(description="Set while the delivery is pending.")
    delivered_at: datetime | None
    created_at: datetime

    @classmethod
    def from_row(cls, row: DeliveryRow) -> DeliveryOut:
        return cls(
            delivery_id=row.delivery_id,
            event_id=row.event_id,
            event_type=row.event_type,
            state=row.state,
            attempts=row.attempts,
            last_status=row.last_status,
            last_error=row.last_error,
            last_attempt_at=row.last_attempt_at,
            next_attempt_at=row.next_attempt_at if row.state in _ACTIVE else None,
            delivered_at=row.delivered_at,
            created_at=row.created_at,
        )


SubscriptionId = uuid.UUID


@router.post(
    "",
    status_code=status.HTTP_201_CREATED,
    response_model=SubscriptionCreated,
    summary="Register a webhook subscription",
    description="A URL and a filter (site, asset, kinds, minimum severity; left out = all). The "
    "answer carries the signing secret, which is never shown again (rotate it if lost). URLs "
    "that are not https, or whose host resolves to loopback, link-local or private addresses, "
    "are refused with 422 unless the service settings `webhook_allow_http` / "
    "`webhook_allow_private` allow them (on-premise dispatch)." + _NOTES,
    responses={422: {"description": "Invalid body, or the URL is refused."}},
)
def create_subscription(
    spec: SubscriptionIn, runtime: RuntimeDep, principal: AdminKey
) -> SubscriptionCreated:
    domain.check_may_subscribe(spec, principal)
    with runtime.store.write() as session:
        row, secret = domain.create_subscription(
            session,
            spec,
            sealer=sealer_for(runtime.settings),
            policy=target_policy_for(runtime.settings),
            now=datetime.now(UTC),
        )
        out = SubscriptionOut.from_row(row)
    return SubscriptionCreated(**out.model_dump(), secret=secret)


@router.get(
    "",
    response_model=Page[SubscriptionOut],
    summary="List webhook subscriptions",
    description="Each with its delivery health (status, last status and error, consecutive "
    "failures, paused_at and why); never the secret." + _NOTES,
)
def list_subscriptions(session: ReadSessionDep, principal: AdminKey) -> Page[SubscriptionOut]:
    items = [SubscriptionOut.from_row(r) for r in domain.list_subscriptions(session, principal)]
    return Page(items=items, count=len(items))


@router.get(
    "/{subscription_id}",
    response_model=SubscriptionOut,
    summary="One webhook subscription",
    description="Its filter and delivery health; never the secret." + _NOTES,
)
def get_subscription(
    subscription_id: SubscriptionId, session: ReadSessionDep, principal: AdminKey
) -> SubscriptionOut:
    return SubscriptionOut.from_row(domain.get_subscription(session, subscription_id, principal))


@router.delete(
    "/{subscription_id}",
    status_code=status.HTTP_204_NO_CONTENT,
    summary="Delete a webhook subscription",
    description="The subscription and its queued and past deliveries are removed." + _NOTES,
)
def delete_subscription(
    subscription_id: SubscriptionId, runtime: RuntimeDep, principal: AdminKey
) -> Response:
    with runtime.store.write() as session:
        domain.get_subscription(session, subscription_id, principal)
        domain.delete_subscription(session, subscription_id)
    return Response(status_code=status.HTTP_204_NO_CONTENT)


@router.post(
    "/{subscription_id}/rotate-secret",
    response_model=SecretRotated,
    summary="Rotate a subscription's signing secret",
    description="Returns the new secret, shown this once. For `grace_s` seconds (default one "
    "day) requests carry a signature with the previous secret as well, so the receiver can "
    "switch over without refusing requests; `grace_s=0` drops the old secret at once." + _NOTES,
)
def rotate_secret(
    subscription_id: SubscriptionId,
    runtime: RuntimeDep,
    principal: AdminKey,
    grace_s: Annotated[float, Query(ge=0, le=30 * 86400)] = 86400.0,
) -> SecretRotated:
    with runtime.store.write() as session:
        domain.get_subscription(session, subscription_id, principal)
        secret = domain.rotate_secret(
            session,
            subscription_id,
            sealer=sealer_for(runtime.settings),
            now=datetime.now(UTC),
            grace_s=grace_s,
        )
        row = domain.get_subscription(session, subscription_id)
        assert row.secret_rotated_at is not None
        return SecretRotated(
            subscription_id=row.subscription_id,
            secret=secret,
            secret_rotated_at=row.secret_rotated_at,
            previous_secret_expires_at=row.previous_secret_expires_at,
        )


@router.post(
    "/{subscription_id}/resume",
    response_model=SubscriptionOut,
    summary="Resume a paused subscription",
    description="After persistent failure a subscription is paused (its events keep queueing). "
    "Resuming delivers the queue, including the events that were given up, with fresh attempt "
    "counts. The URL is checked against the target policy again first (422 if refused)." + _NOTES,
)
def resume_subscription(
    subscription_id: SubscriptionId, runtime: RuntimeDep, principal: AdminKey
) -> SubscriptionOut:
    with runtime.store.write() as session:
        domain.get_subscription(session, subscription_id, principal)
        row = domain.resume_subscription(
            session,
            subscription_id,
            now=datetime.now(UTC),
            policy=target_policy_for(runtime.settings),
        )
        return SubscriptionOut.from_row(row)


@router.get(
    "/{subscription_id}/deliveries",
    response_model=Page[DeliveryOut],
    summary="A subscription's deliveries, newest first",
    description="State, attempts, last HTTP status and error, and when the next attempt is "
    "due: what to look at when a receiver did not get an event." + _NOTES,
)
def list_deliveries(
    subscription_id: SubscriptionId,
    session: ReadSessionDep,
    principal: AdminKey,
    state: Literal["pending", "in_flight", "delivered", "failed", "cancelled"] | None = None,
    limit: Annotated[int, Query(ge=1, le=1000)] = 100,
    cursor: str | None = None,
) -> Page[DeliveryOut]:
    domain.get_subscription(session, subscription_id, principal)
    rows, nxt = domain.page_deliveries(
        session, subscription_id, states=[state] if state else None, limit=limit, cursor=cursor
    )
    return Page(items=[DeliveryOut.from_row(r) for r in rows], count=len(rows), next_cursor=nxt)
