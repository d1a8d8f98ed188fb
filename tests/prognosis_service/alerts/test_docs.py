"""The receiver example of docs/webhooks.md, run against real deliveries."""

from __future__ import annotations

import threading
from typing import Any

from sqlalchemy import update

from prognosis_service.alerts.delivery import DeliveryWorker, RetryPolicy, SqlDeliveryRepository
from prognosis_service.alerts.models import DeliveryRow
from prognosis_service.alerts.signing import signature_header
from prognosis_service.alerts.webhooks import SubscriptionIn, create_subscription
from tests.prognosis_service.alerts.conftest import docs_example
from tests.prognosis_service.alerts.test_delivery import changes_for, deliveries, enqueue


def test_docs_receiver_verifies_and_deduplicates(sqlite_store, sealer, local_policy) -> None:
    example = docs_example()
    handled: list[dict[str, Any]] = []
    with sqlite_store.write() as s:
        row, secret = create_subscription(
            s,
            SubscriptionIn(name="docs", url="http://127.0.0.1:1/placeholder"),
            sealer=sealer,
            policy=local_policy,
            now=changes_for("MAL-P1")[0].at,
        )
        sid = row.subscription_id
    server = example.make_server(secret, handled.append, host="127.0.0.1", port=0)
    port = server.server_address[1]
    thread = threading.Thread(target=server.serve_forever, args=(0.02,), daemon=True)
    thread.start()
    worker = DeliveryWorker(
        repository=SqlDeliveryRepository(sqlite_store),
        sealer=sealer,
        target_policy=local_policy,
        retry=RetryPolicy(base_delay_s=1.0),
        lease_s=30,
        timeout_s=5,
    )
    try:
        from prognosis_service.alerts.models import SubscriptionRow

        with sqlite_store.write() as s:
            s.get(SubscriptionRow, sid).url = f"http://127.0.0.1:{port}/wellspan"
        changes = changes_for("MAL-P", n_alerts=2)
        enqueue(sqlite_store, changes, _Clock())
        assert worker.run_once() == 2
        assert [d.state for d in deliveries(sqlite_store)] == ["delivered", "delivered"]
        assert sorted(e["id"] for e in handled) == sorted(str(c.event_id) for c in changes)
        # a redelivery of the same event (e.g. after a crash) is answered 2xx and ignored
        with sqlite_store.write() as s:
            s.execute(update(DeliveryRow).values(state="pending"))
        assert worker.run_once() == 2
        assert [d.state for d in deliveries(sqlite_store)] == ["delivered", "delivered"]
        assert len(handled) == 2
    finally:
        worker.close()
        server.shutdown()
        server.server_close()


def test_docs_verifier_refuses_forgeries() -> None:
    example = docs_example()
    body = b'{"id":"e1"}'
    good = signature_header(["whsec1_abc"], "e1", 1_000_000, body)
    assert example.verify_signature("whsec1_abc", "e1", good, body, now=1_000_010)
    assert not example.verify_signature("whsec1_abd", "e1", good, body, now=1_000_010)
    assert not example.verify_signature("whsec1_abc", "e2", good, body, now=1_000_010)
    assert not example.verify_signature("whsec1_abc", "e1", good, body + b" ", now=1_000_010)
    assert not example.verify_signature("whsec1_abc", "e1", good, body, now=1_000_400)
    assert not example.verify_signature("whsec1_abc", "e1", "v1=00", body, now=1_000_000)


class _Clock:
    def __call__(self):  # the real time: the docs' receiver checks signatures against it
        from datetime import UTC, datetime

        return datetime.now(UTC)
