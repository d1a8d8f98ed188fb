"""The alert engine on the store: evaluate, persist, fan out — in one transaction.

:class:`AlertService` loads the condition state a batch of readings touches, runs the pure
:class:`~prognosis_service.alerts.rules.AlertEngine`, then writes the new state, the alerts and one
delivery row per matching webhook subscription together. Only after the commit are the events
handed to the optional MQTT publisher, so nothing is published that the store does not hold.
"""

from __future__ import annotations

import uuid
from collections.abc import Callable, Iterable, Sequence
from datetime import UTC, datetime
from typing import Any

from sqlalchemy import and_, func, or_, select
from sqlalchemy.orm import Session

from prognosis_service.alerts.models import AlertConditionRow, AlertRow
from prognosis_service.alerts.rules import (
    AlertChange,
    AlertEngine,
    AlertKind,
    AlertRecord,
    AlertState,
    ConditionState,
    LastHeardReading,
    Reading,
    condition_key,
)
from prognosis_service.alerts.webhooks import DEFAULT_SOURCE, enqueue_deliveries
from prognosis_service.auth import Principal
from prognosis_service.domain.errors import (
    ConflictError,
    ForbiddenError,
    InvalidInputError,
    NotFoundError,
)
from prognosis_service.domain.pagination import decode_cursor, encode_cursor
from prognosis_service.store.engine import Store, insert_for
from prognosis_service.store.models import Asset, Gateway, MessageRow

__all__ = [
    "ALERT_STATE_FILTERS",
    "AlertService",
    "get_alert",
    "list_alerts",
    "load_state",
    "save_state",
    "silence_readings",
]

EventSink = Callable[[AlertChange, dict[str, Any]], object]


def _now() -> datetime:
    return datetime.now(UTC)


def load_state(session: Session, keys: Iterable[str] | None = None) -> AlertState:
    """The persisted condition state (of ``keys`` only, when given), locked for update on
    PostgreSQL so two replicas cannot evaluate the same condition at once."""
    q = select(AlertConditionRow)
    if keys is not None:
        q = q.where(AlertConditionRow.condition_key.in_(sorted(set(keys))))
    if session.get_bind().dialect.name == "postgresql":
        q = q.with_for_update()
    rows = session.scalars(q).all()
    return AlertState({r.condition_key: ConditionState.from_dict(r.body) for r in rows})


def save_state(
    session: Session, state: AlertState, *, now: datetime, keys: Iterable[str] | None = None
) -> None:
    """Upsert the condition rows of ``keys`` (default: every condition in ``state``)."""
    chosen = state.conditions.keys() if keys is None else set(keys)
    rows = [
        {
            "condition_key": k,
            "site_id": k.split("/", 1)[0],
            "body": state.conditions[k].to_dict(),
            "updated_at": now,
        }
        for k in chosen
        if k in state.conditions
    ]
    if not rows:
        return
    insert = insert_for(session)
    stmt = insert(AlertConditionRow).values(rows)
    stmt = stmt.on_conflict_do_update(
        index_elements=["condition_key"],
        set_={"body": stmt.excluded.body, "updated_at": stmt.excluded.updated_at},
    )
    session.execute(stmt)


def _upsert_alert(session: Session, change: AlertChange, *, now: datetime) -> None:
    a = change.alert
    detail = dict(a.detail)
    values: dict[str, Any] = {
        "site_id": a.site,
        "asset_id": a.asset_id,
        "gateway_id": a.gateway_id,
        "kind": a.kind,
        "qualifier": change.qualifier,
        "severity": a.severity.value,
        "state": a.state,
        "opened_at": a.opened_at,
        "summary": a.summary,
        "detail": detail,
        "acknowledged_at": _parse(detail.get("acknowledged_at")),
        "acknowledged_by": detail.get("acknowledged_by"),
        "resolved_at": _parse(detail.get("resolved_at")),
        "resolved_by": detail.get("resolved_by"),
        "resolution": detail.get("resolution"),
        "revision": change.revision,
        "updated_at": now,
    }
    row = session.get(AlertRow, a.alert_id)
    if row is None:
        session.add(AlertRow(alert_id=a.alert_id, **values))
    elif row.revision < change.revision:
        for k, v in values.items():
            setattr(row, k, v)


def _parse(value: object) -> datetime | None:
    if not isinstance(value, str):
        return None
    return datetime.fromisoformat(value.replace("Z", "+00:00"))


def get_alert(
    session: Session, alert_id: uuid.UUID, principal: Principal | None = None
) -> AlertRow:
    """One alert; with ``principal``, only when that key may see the alert's site.

    Raises
    ------
    NotFoundError
        Also for another site's alert, so a site-limited key cannot learn that it exists.
    """
    row = session.get(AlertRow, alert_id)
    if row is None or (principal is not None and not principal.may_see(row.site_id)):
        raise NotFoundError("alert not found")
    return row


ALERT_STATE_FILTERS: dict[str, tuple[str, ...]] = {
    "live": ("open", "acknowledged"),
    "open": ("open",),
    "acknowledged": ("acknowledged",),
    "resolved": ("resolved",),
}


def _alert_cursor(cursor: str) -> tuple[datetime, uuid.UUID]:
    opened, last_id = decode_cursor(cursor, 2)
    try:
        t, after = _parse(opened), uuid.UUID(str(last_id))
    except ValueError:
        t = None
    if t is None:
        raise InvalidInputError("cursor is not valid; pass next_cursor back unchanged")
    return t, after


def list_alerts(
    session: Session,
    principal: Principal | None = None,
    *,
    site: str | None = None,
    asset_id: str | None = None,
    state: str | None = None,
    kind: str | None = None,
    limit: int = 100,
    cursor: str | None = None,
) -> tuple[list[AlertRow], str | None]:
    """Alerts newest first (by ``opened_at``, then id) and the cursor of the next page.

    ``state`` is ``live`` (open or acknowledged), ``open``, ``acknowledged`` or ``resolved``; a
    key limited to sites sees only those sites' alerts.

    Raises
    ------
    InvalidInputError
        For an unknown state or kind, a bad limit or cursor.
    ForbiddenError
        When ``site`` is not one the key may see.
    """
    if not 1 <= limit <= 1000:
        raise InvalidInputError(f"limit must be in [1, 1000], got {limit}")
    q = select(AlertRow)
    if state is not None:
        if state not in ALERT_STATE_FILTERS:
            raise InvalidInputError(
                f"state must be one of {list(ALERT_STATE_FILTERS)}, got {state!r}"
            )
        q = q.where(AlertRow.state.in_(ALERT_STATE_FILTERS[state]))
    if kind is not None:
        kinds = [k.value for k in AlertKind]
        if kind not in kinds:
            raise InvalidInputError(f"kind must be one of {kinds}, got {kind!r}")
        q = q.where(AlertRow.kind == kind)
    if site is not None:
        if principal is not None and not principal.may_see(site):
            raise ForbiddenError(f"this key may not read site {site!r}")
        q = q.where(AlertRow.site_id == site)
    if principal is not None and principal.sites is not None:
        q = q.where(AlertRow.site_id.in_(sorted(principal.sites)))
    if asset_id is not None:
        q = q.where(AlertRow.asset_id == asset_id)
    if cursor:
        t, after = _alert_cursor(cursor)
        q = q.where(
            or_(AlertRow.opened_at < t, and_(AlertRow.opened_at == t, AlertRow.alert_id < after))
        )
    q = q.order_by(AlertRow.opened_at.desc(), AlertRow.alert_id.desc()).limit(limit + 1)
    rows = list(session.scalars(q))
    if len(rows) <= limit:
        return rows, None
    rows = rows[:limit]
    last = rows[-1]
    return rows, encode_cursor(last.opened_at.isoformat(), str(last.alert_id))


def silence_readings(session: Session, *, now: datetime) -> list[LastHeardReading]:
    """When each gateway and each asset was last heard from, as readings taken at ``now``.

    A gateway counts as heard when anything arrived from it; an asset when an indicator message
    of it arrived (or, before its first one, when it was registered).
    """
    readings = [
        LastHeardReading(
            site=gw.site_id,
            gateway_id=gw.gateway_id,
            at=now,
            last_heard_at=gw.last_seen_at or gw.state_at,
        )
        for gw in session.scalars(select(Gateway).order_by(Gateway.gateway_id))
    ]
    last_message = {
        asset_id: heard
        for asset_id, heard in session.execute(
            select(MessageRow.asset_id, func.max(MessageRow.received_at)).group_by(
                MessageRow.asset_id
            )
        )
    }
    readings += [
        LastHeardReading(
            site=a.site_id,
            asset_id=a.asset_id,
            gateway_id=a.gateway_id,
            asset_class=a.asset_class,
            at=now,
            last_heard_at=last_message.get(a.asset_id) or a.registered_at,
        )
        for a in session.scalars(select(Asset).order_by(Asset.asset_id))
    ]
    return readings


class AlertService:
    """Alert evaluation and lifecycle over the store.

    Parameters
    ----------
    store : Store
    engine : AlertEngine
    source : str
        The CloudEvents ``source`` of every event.
    on_event : callable, optional
        Called as ``on_event(change, cloudevent)`` after each commit, e.g.
        ``AlertPublisher.publish_event`` (module ``mqtt_publisher``).
    clock : callable
        Returns the current UTC time (rows' ``updated_at``, deliveries' first attempt).
    """

    def __init__(
        self,
        store: Store,
        engine: AlertEngine,
        *,
        source: str = DEFAULT_SOURCE,
        on_event: EventSink | None = None,
        clock: Callable[[], datetime] = _now,
    ) -> None:
        self.store = store
        self.engine = engine
        self.source = source
        self.on_event = on_event
        self.clock = clock

    def __repr__(self) -> str:
        return f"AlertService(store={self.store!r}, source={self.source!r})"

    def _record(self, session: Session, changes: Sequence[AlertChange]) -> list[dict[str, Any]]:
        now = self.clock()
        events = []
        for change in changes:
            _upsert_alert(session, change, now=now)
            events.append(enqueue_deliveries(session, change, now=now, source=self.source).event)
        return events

    def _emit(self, changes: Sequence[AlertChange], events: Sequence[dict[str, Any]]) -> None:
        if self.on_event is None:
            return
        for change, event in zip(changes, events, strict=True):
            self.on_event(change, event)

    def evaluate(self, readings: Iterable[Reading]) -> list[AlertChange]:
        """Evaluate readings in order; returns the changes, stored with their deliveries."""
        readings = list(readings)
        keys = {self.engine.condition_key(r) for r in readings}
        with self.store.write() as s:
            state = load_state(s, keys)
            changes: list[AlertChange] = []
            for r in readings:
                changes.extend(self.engine.evaluate(state, r))
            save_state(s, state, now=self.clock(), keys=keys)
            events = self._record(s, changes)
        self._emit(changes, events)
        return changes

    def _lifecycle(
        self,
        alert_id: uuid.UUID,
        action: str,
        *,
        by: str,
        note: str,
        at: datetime | None,
        principal: Principal | None,
    ) -> AlertChange:
        at = at or self.clock()
        with self.store.write() as s:
            row = get_alert(s, alert_id, principal)
            if row.state == "resolved":
                raise ConflictError("alert is already resolved")
            key = condition_key(
                row.site_id, row.asset_id or row.gateway_id or "", row.kind, row.qualifier
            )
            state = load_state(s, [key])
            try:
                if action == "acknowledge":
                    change = self.engine.acknowledge(state, alert_id, by=by, at=at, note=note)
                else:
                    change = self.engine.resolve(state, alert_id, by=by, at=at, note=note)
            except KeyError:
                raise ConflictError("alert is no longer live") from None
            except ValueError as exc:
                raise ConflictError(str(exc)) from None
            save_state(s, state, now=self.clock(), keys=[key])
            events = self._record(s, [change])
        self._emit([change], events)
        return change

    def acknowledge(
        self,
        alert_id: uuid.UUID,
        *,
        by: str,
        note: str = "",
        at: datetime | None = None,
        principal: Principal | None = None,
    ) -> AlertChange:
        """open → acknowledged. Raises NotFoundError (also when ``principal`` may not see the
        alert's site) or ConflictError when not open."""
        return self._lifecycle(
            alert_id, "acknowledge", by=by, note=note, at=at, principal=principal
        )

    def resolve(
        self,
        alert_id: uuid.UUID,
        *,
        by: str,
        note: str = "",
        at: datetime | None = None,
        principal: Principal | None = None,
    ) -> AlertChange:
        """open/acknowledged → resolved by a person (ConflictError when already resolved)."""
        return self._lifecycle(alert_id, "resolve", by=by, note=note, at=at, principal=principal)

    def check_silence(self, *, now: datetime | None = None) -> list[AlertChange]:
        """Raise (or clear) silence alerts for every known gateway and asset; call it on a
        timer, e.g. every few minutes."""
        now = now or self.clock()
        with self.store.read() as s:
            readings = silence_readings(s, now=now)
        return self.evaluate(readings)

    def live_alerts(self) -> list[AlertRecord]:
        with self.store.read() as s:
            return load_state(s).live_alerts()
