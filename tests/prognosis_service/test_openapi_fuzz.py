"""schemathesis against the service's own OpenAPI document, in-process (ASGI) on SQLite, with a
valid admin key: no 5xx, and every response matches the document (status codes, content types,
bodies, headers). Operations added later are picked up from the document itself.

Bounded for CI (a few examples per operation); ``WELLSPAN_FUZZ_EXAMPLES`` raises the count for a
long run.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

import pytest
import schemathesis
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from schemathesis import GenerationMode, checks

from prognosis_service.app import create_app
from prognosis_service.auth import create_key
from prognosis_service.settings import load_settings
from prognosis_service.store.engine import Store
from prognosis_service.store.migrate import upgrade

EXAMPLES = int(os.environ.get("WELLSPAN_FUZZ_EXAMPLES", "0")) or 8
CHECKS = [
    checks.not_a_server_error,
    checks.status_code_conformance,
    checks.content_type_conformance,
    checks.response_schema_conformance,
    checks.response_headers_conformance,
]


@schemathesis.serializer("application/toml")
def _toml(ctx: Any, value: Any) -> bytes:
    """The gateway-config import takes a TOML document, described as a string."""
    return value.encode() if isinstance(value, str) else repr(value).encode()


@pytest.fixture(scope="module")
def admin_app(tmp_path_factory: pytest.TempPathFactory) -> tuple[Any, str]:
    """The app on a fresh SQLite store holding one admin key (no rate limit: the fuzzer is
    meant to be fast, and the limit has its own test)."""
    url = f"sqlite:///{Path(tmp_path_factory.mktemp('openapi')) / 'wellspan.db'}"
    upgrade(url)
    store = Store(url)
    with store.write() as s:
        _, token = create_key(s, name="schemathesis", scopes=["admin"])
    store.dispose()
    settings_ = load_settings(database_url=url, mqtt_url="mqtt://127.0.0.1:9", rate_limit_per_s=0)
    return create_app(settings_), token


@pytest.fixture(scope="module")
def api_schema(admin_app: tuple[Any, str]) -> Any:
    app, _ = admin_app
    return schemathesis.openapi.from_asgi("/openapi.json", app)


def _labels() -> list[str]:
    """The operations of the document (read from an app that is built but not started)."""
    app = create_app(load_settings(database_url="sqlite://", mqtt_url="mqtt://127.0.0.1:9"))
    ops = schemathesis.openapi.from_dict(app.openapi()).get_all_operations()
    # /readyz answers 503 by design here: this fixture's broker URL points nowhere
    return [op.ok().label for op in ops if op.ok().path != "/readyz"]


@pytest.mark.parametrize("label", _labels())
def test_every_operation_answers_as_documented(
    api_schema: Any, admin_app: tuple[Any, str], label: str
) -> None:
    _, token = admin_app
    operation = api_schema.find_operation_by_label(label)
    cases = st.one_of(
        operation.as_strategy(GenerationMode.POSITIVE),
        operation.as_strategy(GenerationMode.NEGATIVE),
    )

    @given(case=cases)
    @settings(max_examples=EXAMPLES, deadline=None, suppress_health_check=list(HealthCheck))
    def check(case: Any) -> None:
        case.call_and_validate(headers={"Authorization": f"Bearer {token}"}, checks=CHECKS)

    check()
