"""Webhook subscriptions and the CloudEvents that carry alert changes to them.

An alert change becomes one CloudEvents 1.0 event in structured JSON mode
(``Content-Type: application/cloudevents+json``)::

    {"specversion": "1.0", "id": "<uuid>", "source": "/wellspan/prognosis-service",
     "type": "org.wellspan.alert.opened", "time": "2026-03-01T06:00:00Z",
     "subject": "Mallee/MAL-P1", "datacontenttype": "application/json",
     "alertrevision": 1, "data": {<shared_schema Alert>}}

``type`` is ``org.wellspan.alert.{opened|updated|acknowledged|resolved}``; ``id`` is stable for one
(alert, revision), so a retried or re-published change keeps its id and receivers can de-duplicate
by it. :func:`enqueue_deliveries` writes one delivery row per matching subscription, at most once
per (event, subscription), in the caller's transaction.
"""

from __future__ import annotations

import json
import uuid
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from typing import Annotated, Any

from pydantic import BaseModel, ConfigDict, Field, HttpUrl, UrlConstraints, field_validator
from sqlalchemy import delete, func, select, update
from sqlalchemy.orm import Session

from prognosis_service.alerts.models import DeliveryRow, SubscriptionRow
from prognosis_service.alerts.rules import AlertChange, AlertKind, severity_rank
from prognosis_service.alerts.signing import SecretSealer, new_secret
from prognosis_service.alerts.ssrf import TargetPolicy, TargetRefusedError, check_target
from prognosis_service.auth import Principal
from prognosis_service.domain.errors import ForbiddenError, InvalidInputError, NotFoundError
from prognosis_service.domain.pagination import decode_cursor, encode_cursor
from prognosis_service.store.engine import insert_for
from shared_schema.messages import Alert, AlertSeverity, Identifier

__all__ = [
    "CONTENT_TYPE",
    "DEFAULT_SOURCE",
    "EVENT_TYPE_PREFIX",
    "EnqueueResult",
    "SubscriptionIn",
    "SubscriptionOut",
    "check_may_subscribe",
    "cloudevent",
    "cloudevent_body",
    "create_subscription",
    "delete_subscription",
    "enqueue_deliveries",
    "get_subscription",
    "insert_deliveries",
    "list_deliveries",
    "list_subscriptions",
    "matches",
    "page_deliveries",
    "pause_subscription",
    "prune_deliveries",
    "queue_summary",
    "resume_subscription",
    "rotate_secret",
]

CONTENT_TYPE = "application/cloudevents+json"
DEFAULT_SOURCE = "/wellspan/prognosis-service"
EVENT_TYPE_PREFIX = "org.wellspan.alert."
LIVE_STATUSES = ("active", "paused")  # a paused subscription still queues; "gone" does not


def _iso_z(t: datetime) -> str:
    return t.astimezone(UTC).isoformat().replace("+00:00", "Z")


def cloudevent(change: AlertChange, *, source: str = DEFAULT_SOURCE) -> dict[str, Any]:
    """The CloudEvents 1.0 structured-mode form of one alert change."""
    alert = change.alert
    target = alert.asset_id or f"gateway/{alert.gateway_id}"
    return {
        "specversion": "1.0",
        "id": str(change.event_id),
        "source": source,
        "type": EVENT_TYPE_PREFIX + change.change.value,
        "time": _iso_z(change.at),
        "subject": f"{alert.site}/{target}",
        "datacontenttype": "application/json",
        "alertrevision": change.revision,
        "data": alert.model_dump(mode="json"),
    }


def cloudevent_body(event: dict[str, Any]) -> str:
    """The exact JSON text sent (and signed) for ``event``."""
    return json.dumps(event, separators=(",", ":"), ensure_ascii=False)


class SubscriptionIn(BaseModel):
    """What a caller gives to register a subscription."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    name: str = Field(min_length=1, max_length=100)
    url: Annotated[HttpUrl, UrlConstraints(max_length=2048)]
    site: Identifier | None = None
    asset_id: Identifier | None = None
    kinds: frozenset[AlertKind] | None = None
    min_severity: AlertSeverity = AlertSeverity.WARNING

    @field_validator("kinds")
    @classmethod
    def _not_empty(cls, v: frozenset[AlertKind] | None) -> frozenset[AlertKind] | None:
        if v is not None and not v:
            raise ValueError("kinds must list at least one alert kind, or be omitted for all")
        return v


class SubscriptionOut(BaseModel):
    """A subscription as shown to callers: never the secret, always the delivery health."""

    model_config = ConfigDict(frozen=True)

    subscription_id: uuid.UUID
    name: str
    url: str
    site: str | None
    asset_id: str | None
    kinds: list[str] | None
    min_severity: AlertSeverity
    status: str  # active | paused | gone
    paused_at: datetime | None
    pause_reason: str | None
    last_status: int | None
    last_error: str | None
    last_attempt_at: datetime | None
    last_delivered_at: datetime | None
    consecutive_failures: int
    secret_rotated_at: datetime | None
    created_at: datetime

    @classmethod
    def from_row(cls, row: SubscriptionRow) -> SubscriptionOut:
        return cls(
            subscription_id=row.subscription_id,
            name=row.name,
            url=row.url,
            site=row.site_id,
            asset_id=row.asset_id,
            kinds=row.kinds,
            min_severity=AlertSeverity(row.min_severity),
            status=row.status,
            paused_at=row.paused_at,
            pause_reason=row.pause_reason,
            last_status=row.last_status,
            last_error=row.last_error,
            last_attempt_at=row.last_attempt_at,
            last_delivered_at=row.last_delivered_at,
            consecutive_failures=row.consecutive_failures,
            secret_rotated_at=row.secret_rotated_at,
            created_at=row.created_at,
        )


def list_deliveries(
    session: Session,
    subscription_id: uuid.UUID,
    *,
    states: Sequence[str] | None = None,
    limit: int = 100,
) -> Sequence[DeliveryRow]:
    """A subscription's deliveries, newest first (for "why did my receiver not get it?")."""
    return page_deliveries(session, subscription_id, states=states, limit=limit)[0]


def page_deliveries(
    session: Session,
    subscription_id: uuid.UUID,
    *,
    states: Sequence[str] | None = None,
    limit: int = 100,
    cursor: str | None = None,
) -> tuple[list[DeliveryRow], str | None]:
    """Like :func:`list_deliveries`, one page at a time: returns the rows and the cursor of the
    next (older) page, or None at the end."""
    if not 1 <= limit <= 1000:
        raise InvalidInputError(f"limit must be in [1, 1000], got {limit}")
    get_subscription(session, subscription_id)
    q = select(DeliveryRow).where(DeliveryRow.subscription_id == subscription_id)
    if states:
        q = q.where(DeliveryRow.state.in_(list(states)))
    if cursor:
        (before,) = decode_cursor(cursor, 1)
        if not isinstance(before, int):
            raise InvalidInputError("cursor is not valid; pass next_cursor back unchanged")
        q = q.where(DeliveryRow.delivery_id < before)
    rows = list(session.scalars(q.order_by(DeliveryRow.delivery_id.desc()).limit(limit + 1)))
    if len(rows) <= limit:
        return rows, None
    return rows[:limit], encode_cursor(rows[limit - 1].delivery_id)


def queue_summary(session: Session) -> dict[uuid.UUID, dict[str, int]]:
    """Delivery rows per subscription and state, e.g. for metrics and a health page."""
    out: dict[uuid.UUID, dict[str, int]] = {}
    rows = session.execute(
        select(DeliveryRow.subscription_id, DeliveryRow.state, func.count()).group_by(
            DeliveryRow.subscription_id, DeliveryRow.state
        )
    )
    for sid, state, n in rows:
        out.setdefault(sid, {})[state] = int(n)
    return out


def prune_deliveries(session: Session, *, older_than: datetime) -> int:
    """Delete delivered and cancelled rows created before ``older_than``; returns how many.

    Pending, in-flight and failed rows are kept whatever their age. Keep the cutoff well beyond
    any replay of old alert changes: the rows are also what makes a re-queued event a no-op.
    """
    result = session.execute(
        delete(DeliveryRow)
        .where(
            DeliveryRow.state.in_(("delivered", "cancelled")),
            DeliveryRow.created_at < older_than,
        )
        .returning(DeliveryRow.delivery_id)
    )
    return len(result.all())


def matches(row: SubscriptionRow, alert: Alert) -> bool:
    """Does ``alert`` pass the subscription's filter (site, asset, kinds, minimum severity)?"""
    if row.site_id is not None and alert.site != row.site_id:
        return False
    if row.asset_id is not None and alert.asset_id != row.asset_id:
        return False
    if row.kinds is not None and alert.kind not in row.kinds:
        return False
    return severity_rank(alert.severity) >= severity_rank(row.min_severity)


def _check_url(url: str, policy: TargetPolicy) -> None:
    try:
        check_target(url, policy)
    except TargetRefusedError as exc:
        raise InvalidInputError(f"url refused: {exc.detail}") from None


def create_subscription(
    session: Session,
    spec: SubscriptionIn,
    *,
    sealer: SecretSealer,
    policy: TargetPolicy,
    now: datetime,
) -> tuple[SubscriptionRow, str]:
    """Register a subscription; returns the row and the plain secret (shown this once).

    Raises
    ------
    InvalidInputError
        When the URL is refused by the target policy (scheme, private address, ...).
    """
    url = str(spec.url)
    _check_url(url, policy)
    secret = new_secret()
    row = SubscriptionRow(
        subscription_id=uuid.uuid4(),
        name=spec.name,
        url=url,
        site_id=spec.site,
        asset_id=spec.asset_id,
        kinds=None if spec.kinds is None else sorted(k.value for k in spec.kinds),
        min_severity=spec.min_severity.value,
        secret_sealed=sealer.seal(secret),
        status="active",
        consecutive_failures=0,
        created_at=now,
    )
    session.add(row)
    session.flush()
    return row, secret


def _may_manage(principal: Principal, site: str | None) -> bool:
    """A key limited to sites manages only subscriptions filtered to one of them."""
    return principal.sites is None or (site is not None and site in principal.sites)


def get_subscription(
    session: Session, subscription_id: uuid.UUID, principal: Principal | None = None
) -> SubscriptionRow:
    """One subscription; with ``principal``, only when that key may see it (a key limited to
    sites sees the subscriptions filtered to one of its sites).

    Raises
    ------
    NotFoundError, ForbiddenError
    """
    row = session.get(SubscriptionRow, subscription_id)
    if row is None:
        raise NotFoundError("subscription not found")
    if principal is not None and not _may_manage(principal, row.site_id):
        raise ForbiddenError("this key may not manage subscriptions beyond its sites")
    return row


def list_subscriptions(
    session: Session, principal: Principal | None = None
) -> Sequence[SubscriptionRow]:
    """Subscriptions, oldest first; a key limited to sites sees those filtered to its sites."""
    q = select(SubscriptionRow)
    if principal is not None and principal.sites is not None:
        q = q.where(SubscriptionRow.site_id.in_(sorted(principal.sites)))
    return session.scalars(q.order_by(SubscriptionRow.created_at)).all()


def check_may_subscribe(spec: SubscriptionIn, principal: Principal) -> None:
    """A key limited to sites may subscribe only to one of its sites' alerts.

    Raises
    ------
    ForbiddenError
    """
    if not _may_manage(principal, spec.site):
        raise ForbiddenError(
            "a key limited to sites must set site to one of its sites, "
            f"{sorted(principal.sites or ())}, got {spec.site!r}"
        )


def delete_subscription(session: Session, subscription_id: uuid.UUID) -> None:
    """Remove a subscription; its delivery rows go with it (ON DELETE CASCADE)."""
    row = get_subscription(session, subscription_id)
    session.execute(delete(DeliveryRow).where(DeliveryRow.subscription_id == subscription_id))
    session.delete(row)


def rotate_secret(
    session: Session,
    subscription_id: uuid.UUID,
    *,
    sealer: SecretSealer,
    now: datetime,
    grace_s: float = 86400.0,
) -> str:
    """Replace the secret; returns the new one (shown this once).

    For ``grace_s`` seconds the previous secret still signs too (a second ``v1`` entry), so the
    receiver can switch over without dropping requests. ``grace_s=0`` drops it at once.
    """
    if grace_s < 0:
        raise InvalidInputError(f"grace_s must be >= 0, got {grace_s}")
    row = get_subscription(session, subscription_id)
    secret = new_secret()
    row.previous_secret_sealed = row.secret_sealed if grace_s > 0 else None
    row.previous_secret_expires_at = now + timedelta(seconds=grace_s) if grace_s > 0 else None
    row.secret_sealed = sealer.seal(secret)
    row.secret_rotated_at = now
    return secret


def pause_subscription(
    session: Session, subscription_id: uuid.UUID, *, reason: str, now: datetime
) -> SubscriptionRow:
    """Stop attempting deliveries (they keep queueing until :func:`resume_subscription`)."""
    row = get_subscription(session, subscription_id)
    row.status = "paused"
    row.paused_at = now
    row.pause_reason = reason[:500]
    return row


def resume_subscription(
    session: Session,
    subscription_id: uuid.UUID,
    *,
    now: datetime,
    policy: TargetPolicy,
    requeue_failed: bool = True,
) -> SubscriptionRow:
    """Deliver again: queued rows become due now and failed (given-up) rows are queued again,
    each with a fresh attempt count and time budget. The URL is checked again first."""
    row = get_subscription(session, subscription_id)
    _check_url(row.url, policy)
    row.status = "active"
    row.paused_at = None
    row.pause_reason = None
    row.consecutive_failures = 0
    states = ["pending", "failed"] if requeue_failed else ["pending"]
    session.execute(
        update(DeliveryRow)
        .where(DeliveryRow.subscription_id == subscription_id, DeliveryRow.state.in_(states))
        .values(state="pending", next_attempt_at=now, attempts=0, created_at=now)
    )
    return row


@dataclass(frozen=True, slots=True)
class EnqueueResult:
    event: dict[str, Any]
    created: int


def enqueue_deliveries(
    session: Session, change: AlertChange, *, now: datetime, source: str = DEFAULT_SOURCE
) -> EnqueueResult:
    """Write one pending delivery per matching subscription (idempotent per event id).

    Call it in the transaction that records the alert change, so the change and its deliveries
    are stored together or not at all.
    """
    event = cloudevent(change, source=source)
    subs = session.scalars(
        select(SubscriptionRow).where(SubscriptionRow.status.in_(LIVE_STATUSES))
    ).all()
    created = insert_deliveries(
        session,
        event_id=change.event_id,
        event_type=event["type"],
        body=cloudevent_body(event),
        subscription_ids=[s.subscription_id for s in subs if matches(s, change.alert)],
        now=now,
    )
    return EnqueueResult(event, created)


def insert_deliveries(
    session: Session,
    *,
    event_id: uuid.UUID,
    event_type: str,
    body: str,
    subscription_ids: Sequence[uuid.UUID],
    now: datetime,
) -> int:
    """Write one pending row per subscription, due now; an existing (event, subscription) row
    is left alone. Returns how many rows were written."""
    if not subscription_ids:
        return 0
    rows = [
        {
            "event_id": event_id,
            "subscription_id": sid,
            "event_type": event_type,
            "body": body,
            "state": "pending",
            "attempts": 0,
            "next_attempt_at": now,
            "created_at": now,
        }
        for sid in subscription_ids
    ]
    stmt = (
        insert_for(session)(DeliveryRow)
        .values(rows)
        .on_conflict_do_nothing(index_elements=["event_id", "subscription_id"])
        .returning(DeliveryRow.delivery_id)
    )
    # RETURNING counts the rows written (rowcount is not reliable for multi-row inserts)
    return len(session.execute(stmt).all())
