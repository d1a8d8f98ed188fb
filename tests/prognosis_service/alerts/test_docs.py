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


def test_docs_name_the_headers_settings_routes_and_defaults_of_the_code() -> None:
    import re

    from prognosis_service.alerts.delivery import ATTEMPT_HEADER, USER_AGENT
    from prognosis_service.alerts.signing import (
        DEFAULT_TOLERANCE_S,
        EVENT_ID_HEADER,
        SIGNATURE_HEADER,
    )
    from prognosis_service.alerts.webhooks import CONTENT_TYPE, DEFAULT_SOURCE, EVENT_TYPE_PREFIX
    from prognosis_service.app import create_app
    from prognosis_service.settings import Settings, load_settings
    from tests.prognosis_service.alerts.conftest import DOCS

    text = DOCS.read_text(encoding="utf-8")
    for header in (EVENT_ID_HEADER, SIGNATURE_HEADER, ATTEMPT_HEADER):
        assert f"\n{header}: " in text, header
    assert f"User-Agent: {USER_AGENT}\n" in text
    assert f"Content-Type: {CONTENT_TYPE}\n" in text
    assert f'"source": "{DEFAULT_SOURCE}"' in text
    assert f'"type": "{EVENT_TYPE_PREFIX}opened"' in text
    assert DEFAULT_TOLERANCE_S == 300 and "within five minutes" in text
    # the signature recipe is the one signing.sign computes
    assert "{Wellspan-Event-Id}.{t}.{raw request body}" in text
    assert "t=<Unix seconds>" in text and "v1=<hex>" in text
    retry = RetryPolicy()
    assert (retry.base_delay_s, retry.max_delay_s, retry.max_attempts) == (10.0, 3600.0, 12)
    assert "(10 s, 20 s, 40 s … up to 1 h" in text and "After 12 failed attempts" in text
    assert retry.time_budget_s == 2 * 86400 and "(or two days)" in text

    settings = set(re.findall(r"`(webhook_\w+|alerts_\w+)", text))
    assert settings and settings <= set(Settings.model_fields), settings - set(
        Settings.model_fields
    )
    routes = {
        (method, path)
        for method, path in re.findall(r"`(GET|POST|DELETE|PUT) (/v1/[^`?\s]*)", text)
    }
    app = create_app(load_settings(database_url="sqlite://"))
    served = {
        (method.upper(), path.replace("{subscription_id}", "{id}"))
        for path, ops in app.openapi()["paths"].items()
        for method in ops
    }
    assert len(routes) == 7 and routes <= served, routes - served
