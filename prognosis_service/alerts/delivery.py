"""Durable webhook delivery: a repository of delivery rows and the worker that attempts them.

Every delivery is a row before its first attempt. A worker *claims* due rows (PostgreSQL:
``SELECT ... FOR UPDATE SKIP LOCKED`` so replicas never take the same row; SQLite: a conditional
``UPDATE`` inside a write transaction) and holds them under a lease. It POSTs each event, then marks
the row delivered, or failed with the time of the next attempt. A worker that dies leaves its rows
"in flight"; once their lease expires another worker (or the restarted one) claims them again, so a
restart loses nothing. The price is that an attempt cut short by the crash may have reached the
receiver: delivery is at least once, and receivers de-duplicate by ``Wellspan-Event-Id`` to see
each event exactly once.

Retries back off exponentially with jitter; a ``Retry-After`` (seconds or HTTP-date) on 429/503 is
honoured. ``410 Gone`` means "stop": the subscription is set ``gone`` and its queue cancelled. When
an event still fails after ``max_attempts`` or ``time_budget_s``, the row is marked failed and the
subscription paused with the last status and error, for a person to look at and resume.
"""

from __future__ import annotations

import argparse
import logging
import os
import random
import secrets
import signal
import socket
import sys
import threading
import uuid
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from email.utils import parsedate_to_datetime
from typing import Protocol

import httpx
from sqlalchemy import ColumnElement, and_, or_, select, update

from prognosis_service.alerts.models import DeliveryRow, SubscriptionRow
from prognosis_service.alerts.signing import (
    EVENT_ID_HEADER,
    SIGNATURE_HEADER,
    SecretSealer,
    signature_header,
)
from prognosis_service.alerts.ssrf import TargetPolicy, TargetRefusedError, check_target
from prognosis_service.alerts.webhooks import CONTENT_TYPE, insert_deliveries
from prognosis_service.store.engine import Store

__all__ = [
    "ATTEMPT_HEADER",
    "ClaimedDelivery",
    "DeliveryRepository",
    "DeliveryWorker",
    "RetryPolicy",
    "SqlDeliveryRepository",
    "main",
    "parse_retry_after",
]

log = logging.getLogger(__name__)

ATTEMPT_HEADER = "Wellspan-Delivery-Attempt"
USER_AGENT = "wellspan-alerts/1"
_ERROR_MAX = 500
_SNIPPET_BYTES = 200  # of an error answer's body, kept as the delivery's last error


def _now() -> datetime:
    return datetime.now(UTC)


@dataclass(frozen=True, slots=True, kw_only=True)
class ClaimedDelivery:
    """A delivery this worker holds under lease, with what it needs to attempt it."""

    delivery_id: int
    event_id: uuid.UUID
    subscription_id: uuid.UUID
    body: str
    attempts: int  # including the attempt about to be made
    claim_token: str
    created_at: datetime
    url: str
    sealed_secrets: tuple[str, ...]  # newest first

    def __repr__(self) -> str:
        return (
            f"ClaimedDelivery(delivery_id={self.delivery_id}, event_id={self.event_id}, "
            f"attempts={self.attempts}, url={self.url!r})"
        )


class DeliveryRepository(Protocol):
    """Where delivery rows live. One real implementation: :class:`SqlDeliveryRepository`."""

    def create_deliveries(
        self,
        *,
        event_id: uuid.UUID,
        event_type: str,
        body: str,
        subscription_ids: Sequence[uuid.UUID],
        now: datetime,
    ) -> int:
        """Write pending rows; an existing (event, subscription) row is left alone."""
        ...

    def claim_due(
        self, *, now: datetime, limit: int, lease_s: float, worker_id: str
    ) -> list[ClaimedDelivery]:
        """Take up to ``limit`` due rows of active subscriptions (or rows whose lease expired)."""
        ...

    def mark_delivered(self, delivery: ClaimedDelivery, *, status: int, at: datetime) -> bool:
        """Record success; False when the lease had passed to another worker."""
        ...

    def mark_failed(
        self,
        delivery: ClaimedDelivery,
        *,
        status: int | None,
        error: str,
        at: datetime,
        next_attempt_at: datetime | None,
        cancel: bool = False,
    ) -> bool:
        """Record a failed attempt; ``next_attempt_at`` None means give up (``cancel``: the
        subscription asked us to stop, so the row is cancelled rather than failed)."""
        ...

    def release(self, delivery: ClaimedDelivery, *, cancel: bool = False) -> bool:
        """Give a claimed row back unattempted (``cancel``: drop it instead)."""
        ...

    def pause_subscription(
        self,
        subscription_id: uuid.UUID,
        *,
        reason: str,
        status: int | None,
        error: str,
        at: datetime,
        gone: bool = False,
    ) -> None:
        """Stop delivering to a subscription (``gone``: for good, its queue is cancelled)."""
        ...


def _due(now: datetime) -> ColumnElement[bool]:
    return or_(
        and_(DeliveryRow.state == "pending", DeliveryRow.next_attempt_at <= now),
        and_(DeliveryRow.state == "in_flight", DeliveryRow.lease_expires_at <= now),
    )


class SqlDeliveryRepository:
    """Delivery rows in the service's store (SQLite or PostgreSQL)."""

    def __init__(self, store: Store) -> None:
        self.store = store

    def __repr__(self) -> str:
        return f"SqlDeliveryRepository({self.store!r})"

    def create_deliveries(
        self,
        *,
        event_id: uuid.UUID,
        event_type: str,
        body: str,
        subscription_ids: Sequence[uuid.UUID],
        now: datetime,
    ) -> int:
        with self.store.write() as s:
            return insert_deliveries(
                s,
                event_id=event_id,
                event_type=event_type,
                body=body,
                subscription_ids=subscription_ids,
                now=now,
            )

    def claim_due(
        self, *, now: datetime, limit: int, lease_s: float, worker_id: str
    ) -> list[ClaimedDelivery]:
        token = secrets.token_hex(16)
        due = _due(now)
        with self.store.write() as s:
            pick = (
                select(DeliveryRow.delivery_id)
                .join(SubscriptionRow)
                .where(SubscriptionRow.status == "active", due)
                .order_by(DeliveryRow.next_attempt_at, DeliveryRow.delivery_id)
                .limit(limit)
            )
            if s.get_bind().dialect.name == "postgresql":
                pick = pick.with_for_update(skip_locked=True, of=DeliveryRow)
            ids = list(s.scalars(pick))
            if not ids:
                return []
            # The repeated due-condition makes the claim conditional: on SQLite (one writer at a
            # time) a row another worker took between our SELECT and UPDATE is simply skipped.
            s.execute(
                update(DeliveryRow)
                .where(DeliveryRow.delivery_id.in_(ids), due)
                .values(
                    state="in_flight",
                    claimed_by=worker_id[:64],
                    claim_token=token,
                    lease_expires_at=now + timedelta(seconds=lease_s),
                    attempts=DeliveryRow.attempts + 1,
                    last_attempt_at=now,
                )
                .execution_options(synchronize_session=False)
            )
            rows = s.execute(
                select(DeliveryRow, SubscriptionRow)
                .join(SubscriptionRow)
                .where(DeliveryRow.claim_token == token)
                .order_by(DeliveryRow.next_attempt_at, DeliveryRow.delivery_id)
            ).all()
            out = []
            for d, sub in rows:
                sealed = [sub.secret_sealed]
                if (
                    sub.previous_secret_sealed
                    and sub.previous_secret_expires_at is not None
                    and sub.previous_secret_expires_at > now
                ):
                    sealed.append(sub.previous_secret_sealed)
                out.append(
                    ClaimedDelivery(
                        delivery_id=d.delivery_id,
                        event_id=d.event_id,
                        subscription_id=d.subscription_id,
                        body=d.body,
                        attempts=d.attempts,
                        claim_token=token,
                        created_at=d.created_at,
                        url=sub.url,
                        sealed_secrets=tuple(sealed),
                    )
                )
            return out

    def _mine(self, delivery: ClaimedDelivery) -> ColumnElement[bool]:
        return and_(
            DeliveryRow.delivery_id == delivery.delivery_id,
            DeliveryRow.claim_token == delivery.claim_token,
            DeliveryRow.state == "in_flight",
        )

    def _settle(
        self,
        delivery: ClaimedDelivery,
        row: dict[str, object],
        subscription: dict[str, object],
    ) -> bool:
        """Update our claimed row, then its subscription's delivery health, in one transaction;
        False (and nothing written) when the lease had passed to another worker."""
        with self.store.write() as s:
            res = s.execute(
                update(DeliveryRow)
                .where(self._mine(delivery))
                .values(lease_expires_at=None, **row)
                .execution_options(synchronize_session=False)
            )
            if int(getattr(res, "rowcount", 0) or 0) != 1:
                return False
            s.execute(
                update(SubscriptionRow)
                .where(SubscriptionRow.subscription_id == delivery.subscription_id)
                .values(**subscription)
            )
            return True

    def mark_delivered(self, delivery: ClaimedDelivery, *, status: int, at: datetime) -> bool:
        return self._settle(
            delivery,
            {"state": "delivered", "delivered_at": at, "last_status": status, "last_error": None},
            {
                "last_status": status,
                "last_error": None,
                "last_attempt_at": at,
                "last_delivered_at": at,
                "consecutive_failures": 0,
            },
        )

    def mark_failed(
        self,
        delivery: ClaimedDelivery,
        *,
        status: int | None,
        error: str,
        at: datetime,
        next_attempt_at: datetime | None,
        cancel: bool = False,
    ) -> bool:
        error = error[:_ERROR_MAX]
        if next_attempt_at is not None:
            state: dict[str, object] = {"state": "pending", "next_attempt_at": next_attempt_at}
        else:
            state = {"state": "cancelled" if cancel else "failed"}
        return self._settle(
            delivery,
            {"last_status": status, "last_error": error, "claim_token": None, **state},
            {
                "last_status": status,
                "last_error": error,
                "last_attempt_at": at,
                "consecutive_failures": SubscriptionRow.consecutive_failures + 1,
            },
        )

    def release(self, delivery: ClaimedDelivery, *, cancel: bool = False) -> bool:
        with self.store.write() as s:
            res = s.execute(
                update(DeliveryRow)
                .where(self._mine(delivery))
                .values(
                    state="cancelled" if cancel else "pending",
                    attempts=DeliveryRow.attempts - 1,
                    lease_expires_at=None,
                    claim_token=None,
                )
                .execution_options(synchronize_session=False)
            )
            return int(getattr(res, "rowcount", 0) or 0) == 1

    def pause_subscription(
        self,
        subscription_id: uuid.UUID,
        *,
        reason: str,
        status: int | None,
        error: str,
        at: datetime,
        gone: bool = False,
    ) -> None:
        with self.store.write() as s:
            s.execute(
                update(SubscriptionRow)
                .where(SubscriptionRow.subscription_id == subscription_id)
                .values(
                    status="gone" if gone else "paused",
                    paused_at=at,
                    pause_reason=reason[:_ERROR_MAX],
                    last_status=status,
                    last_error=error[:_ERROR_MAX],
                )
            )
            if gone:
                s.execute(
                    update(DeliveryRow)
                    .where(
                        DeliveryRow.subscription_id == subscription_id,
                        DeliveryRow.state == "pending",
                    )
                    .values(state="cancelled", last_error="subscription gone (410)")
                )


def parse_retry_after(value: str | None, *, now: datetime) -> float | None:
    """Seconds to wait from a ``Retry-After`` header (delta-seconds or HTTP-date; RFC 9110
    §10.2.3); None when absent or unreadable."""
    if value is None:
        return None
    value = value.strip()
    if value.isdigit():
        return float(value)
    try:
        when = parsedate_to_datetime(value)
    except (TypeError, ValueError, IndexError):
        return None
    if when.tzinfo is None:
        when = when.replace(tzinfo=UTC)
    return max((when - now).total_seconds(), 0.0)


@dataclass(frozen=True, slots=True, kw_only=True)
class RetryPolicy:
    """When to try again, and when to give up.

    The n-th retry waits ``min(max_delay_s, base_delay_s × multiplier^(n-1))``, shortened by a
    random fraction of at most ``jitter`` so that many failed deliveries do not return in step.
    A ``Retry-After`` on 429/503 replaces the backoff (capped at ``max_retry_after_s``). The
    delivery is given up after ``max_attempts`` attempts or once the next attempt would fall more
    than ``time_budget_s`` after the event was queued.
    """

    base_delay_s: float = 10.0
    multiplier: float = 2.0
    max_delay_s: float = 3600.0
    jitter: float = 0.5
    max_attempts: int = 12
    time_budget_s: float = 2 * 86400.0
    max_retry_after_s: float = 86400.0

    def __post_init__(self) -> None:
        if not self.base_delay_s > 0:
            raise ValueError(f"base_delay_s must be > 0, got {self.base_delay_s}")
        if self.multiplier < 1:
            raise ValueError(f"multiplier must be >= 1, got {self.multiplier}")
        if not 0 <= self.jitter < 1:
            raise ValueError(f"jitter must be in [0, 1), got {self.jitter}")
        if self.max_attempts < 1:
            raise ValueError(f"max_attempts must be >= 1, got {self.max_attempts}")

    def backoff_s(self, attempts: int, rng: random.Random) -> float:
        """Delay after the ``attempts``-th failed attempt."""
        exp = min(attempts - 1, 60)
        delay = min(self.max_delay_s, self.base_delay_s * self.multiplier**exp)
        return delay * (1.0 - self.jitter * rng.random())


_RETRY_AFTER_STATUSES = frozenset({429, 503})


@dataclass(slots=True)
class _Outcome:
    status: int | None
    error: str
    retry_after_s: float | None = None


@dataclass(slots=True, kw_only=True)
class DeliveryWorker:
    """Claims due deliveries and attempts them, one at a time.

    Parameters
    ----------
    repository : DeliveryRepository
    sealer : SecretSealer
        Opens the subscriptions' sealed secrets for signing.
    target_policy : TargetPolicy
        Checked again before every attempt (DNS may have changed since registration).
    retry : RetryPolicy
    lease_s : float, default 120
        How long a claim holds; must exceed the request timeout. A crashed worker's rows are
        claimed again after it.
    timeout_s : float, default 10
        Per-request timeout (connect, read, write, pool each).
    """

    repository: DeliveryRepository
    sealer: SecretSealer
    target_policy: TargetPolicy = field(default_factory=TargetPolicy)
    retry: RetryPolicy = field(default_factory=RetryPolicy)
    lease_s: float = 120.0
    timeout_s: float = 10.0
    batch_size: int = 20
    worker_id: str = field(default_factory=lambda: f"{socket.gethostname()}:{os.getpid()}")
    clock: Callable[[], datetime] = _now
    rng: random.Random = field(default_factory=random.Random)
    client: httpx.Client | None = None

    def __post_init__(self) -> None:
        if not self.lease_s > self.timeout_s * 2:
            raise ValueError(
                f"lease_s must exceed twice timeout_s = {2 * self.timeout_s:g}, got {self.lease_s}"
            )
        if self.client is None:
            # no proxies from the environment (they would bypass the address pinning), no
            # redirects (a redirect could point inside the network)
            self.client = httpx.Client(
                timeout=httpx.Timeout(self.timeout_s),
                follow_redirects=False,
                trust_env=False,
                headers={"User-Agent": USER_AGENT},
            )

    def close(self) -> None:
        if self.client is not None:
            self.client.close()

    def run_once(self) -> int:
        """Claim one batch and attempt each; returns how many were attempted."""
        claimed = self.repository.claim_due(
            now=self.clock(), limit=self.batch_size, lease_s=self.lease_s, worker_id=self.worker_id
        )
        stopped: dict[uuid.UUID, bool] = {}  # subscription -> gone (True) or paused (False)
        attempted = 0
        for delivery in claimed:
            if delivery.subscription_id in stopped:
                # paused or gone earlier in this batch: hand the row back without an attempt
                self.repository.release(delivery, cancel=stopped[delivery.subscription_id])
                continue
            attempted += 1
            verdict = self._attempt(delivery)
            if verdict is not None:
                stopped[delivery.subscription_id] = verdict
        return attempted

    def run(self, stop: threading.Event, *, poll_s: float = 1.0) -> None:
        """Work until ``stop`` is set; sleeps ``poll_s`` when nothing is due."""
        while not stop.is_set():
            try:
                n = self.run_once()
            except Exception:  # the store may be briefly unreachable; keep the worker alive
                log.exception("delivery batch failed; retrying after %.1f s", poll_s)
                n = 0
            if n == 0:
                stop.wait(poll_s)

    # ---- one attempt

    def _post(self, delivery: ClaimedDelivery) -> _Outcome:
        assert self.client is not None
        try:
            target = check_target(delivery.url, self.target_policy)
        except TargetRefusedError as exc:
            return _Outcome(None, f"target refused: {exc.detail}")
        try:
            keys = [self.sealer.open(s) for s in delivery.sealed_secrets]
        except ValueError as exc:
            return _Outcome(None, f"cannot open the subscription secret: {exc}")
        body = delivery.body.encode()
        event_id = str(delivery.event_id)
        timestamp = int(self.clock().timestamp())
        headers = {
            "Host": target.host_header,
            "Content-Type": CONTENT_TYPE,
            EVENT_ID_HEADER: event_id,
            SIGNATURE_HEADER: signature_header(keys, event_id, timestamp, body),
            ATTEMPT_HEADER: str(delivery.attempts),
        }
        try:
            request = self.client.build_request(
                "POST",
                target.pinned_url(),
                content=body,
                headers=headers,
                extensions={"sni_hostname": target.host},
            )
            # streamed, so an answer's body is never read beyond the snippet we keep
            response = self.client.send(request, stream=True)
            try:
                snippet = b""
                for chunk in response.iter_raw():
                    snippet += chunk
                    if len(snippet) >= _SNIPPET_BYTES:
                        break
            finally:
                response.close()
        except httpx.TimeoutException as exc:
            return _Outcome(None, f"timeout: {type(exc).__name__}")
        except httpx.HTTPError as exc:
            return _Outcome(None, f"{type(exc).__name__}: {exc}")
        status = response.status_code
        if 200 <= status < 300:
            return _Outcome(status, "")
        retry_after = None
        if status in _RETRY_AFTER_STATUSES:
            retry_after = parse_retry_after(response.headers.get("Retry-After"), now=self.clock())
        text = snippet[:_SNIPPET_BYTES].decode("utf-8", "replace").replace("\n", " ")
        return _Outcome(
            status, f"HTTP {status} {response.reason_phrase} {text}".strip(), retry_after
        )

    def _attempt(self, delivery: ClaimedDelivery) -> bool | None:
        """One attempt; returns True when the subscription is gone, False when it was paused,
        None when it stays active."""
        outcome = self._post(delivery)
        repo = self.repository
        at = self.clock()
        status = outcome.status
        if status is not None and 200 <= status < 300:
            repo.mark_delivered(delivery, status=status, at=at)
            return None
        if status == 410:
            return self._stop_subscription(
                delivery,
                outcome,
                at,
                reason="the receiver answered 410 Gone: it no longer wants these events",
                gone=True,
            )
        if outcome.retry_after_s is not None:
            delay = min(outcome.retry_after_s, self.retry.max_retry_after_s)
        else:
            delay = self.retry.backoff_s(delivery.attempts, self.rng)
        next_at = at + timedelta(seconds=delay)
        budget_end = delivery.created_at + timedelta(seconds=self.retry.time_budget_s)
        if delivery.attempts >= self.retry.max_attempts or next_at > budget_end:
            return self._stop_subscription(
                delivery,
                outcome,
                at,
                reason=(
                    f"event {delivery.event_id} failed {delivery.attempts} attempts; "
                    "deliveries paused until the subscription is resumed"
                ),
                gone=False,
            )
        repo.mark_failed(
            delivery, status=status, error=outcome.error, at=at, next_attempt_at=next_at
        )
        return None

    def _stop_subscription(
        self, delivery: ClaimedDelivery, outcome: _Outcome, at: datetime, *, reason: str, gone: bool
    ) -> bool:
        """Give the delivery up and pause the subscription (``gone``: for good, 410); returns
        ``gone`` for :meth:`_attempt`."""
        self.repository.mark_failed(
            delivery,
            status=outcome.status,
            error=outcome.error,
            at=at,
            next_attempt_at=None,
            cancel=gone,
        )
        self.repository.pause_subscription(
            delivery.subscription_id,
            reason=reason,
            status=outcome.status,
            error=outcome.error,
            at=at,
            gone=gone,
        )
        return gone


# ------------------------------------------------------------------------------------------ CLI


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="python -m prognosis_service.alerts.delivery",
        description="Run a webhook delivery worker. The database, the seal key "
        "(alerts_seal_key, WELLSPAN_ALERTS_SEAL_KEY) and the target policy come from the "
        "service settings; the options below override them.",
    )
    p.add_argument("--config", default=None, help="service settings TOML")
    p.add_argument("--database-url", default=None)
    p.add_argument("--worker-id", default=None)
    p.add_argument("--poll-s", type=float, default=1.0)
    p.add_argument("--lease-s", type=float, default=120.0)
    p.add_argument("--timeout-s", type=float, default=10.0)
    p.add_argument("--base-delay-s", type=float, default=10.0)
    p.add_argument("--max-delay-s", type=float, default=3600.0)
    p.add_argument("--max-attempts", type=int, default=12)
    p.add_argument("--allow-private-targets", action="store_true")
    p.add_argument("--allow-http", action="store_true")
    return p


def main(argv: Sequence[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    logging.basicConfig(level=logging.INFO, stream=sys.stderr, format="%(asctime)s %(message)s")
    from prognosis_service.alerts.runtime import sealer_for, target_policy_for
    from prognosis_service.settings import SettingsError, load_settings

    try:
        overrides = {"database_url": args.database_url} if args.database_url else {}
        settings = load_settings(args.config, **overrides)
    except SettingsError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    policy = target_policy_for(settings)
    try:
        sealer = sealer_for(settings)
        retry = RetryPolicy(
            base_delay_s=args.base_delay_s,
            max_delay_s=args.max_delay_s,
            max_attempts=args.max_attempts,
        )
        store = Store(settings.database_url)
        worker = DeliveryWorker(
            repository=SqlDeliveryRepository(store),
            sealer=sealer,
            target_policy=TargetPolicy(
                allow_private_targets=args.allow_private_targets or policy.allow_private_targets,
                allow_http=args.allow_http or policy.allow_http,
            ),
            retry=retry,
            lease_s=args.lease_s,
            timeout_s=args.timeout_s,
            **({"worker_id": args.worker_id} if args.worker_id else {}),
        )
    except ValueError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    stop = threading.Event()
    signal.signal(signal.SIGTERM, lambda *_: stop.set())
    signal.signal(signal.SIGINT, lambda *_: stop.set())
    log.info("delivery worker %s started", worker.worker_id)
    try:
        worker.run(stop, poll_s=args.poll_s)
    finally:
        worker.close()
        store.dispose()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
