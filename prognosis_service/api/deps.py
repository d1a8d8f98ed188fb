"""Dependencies as ``Annotated`` aliases: the runtime, sessions and API keys with a scope."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from typing import Annotated

from fastapi import Depends, Request
from fastapi.security import HTTPAuthorizationCredentials, HTTPBearer
from sqlalchemy.orm import Session

from prognosis_service.alerts.runtime import AlertWorkers
from prognosis_service.alerts.service import AlertService
from prognosis_service.api.problems import ProblemError
from prognosis_service.api.ratelimit import TokenBuckets
from prognosis_service.assessment.worker import AssessmentWorker
from prognosis_service.auth import Principal, verify_token
from prognosis_service.ingest.consumer import IngestService
from prognosis_service.ingest.pipeline import Pipeline
from prognosis_service.settings import Settings
from prognosis_service.store.engine import Store

__all__ = [
    "AdminKey",
    "IngestKey",
    "OperatorKey",
    "ReadSessionDep",
    "ReaderKey",
    "Runtime",
    "RuntimeDep",
    "require_scope",
]


@dataclass(slots=True)
class Runtime:
    """What a running service holds: settings, the store, the pipeline, and the MQTT ingest
    when it runs in this process."""

    settings: Settings
    store: Store
    pipeline: Pipeline
    ingest: IngestService | None = None
    alerts: AlertService | None = None
    alert_workers: AlertWorkers | None = None
    assessor: AssessmentWorker | None = None
    limiter: TokenBuckets = field(init=False, repr=False)

    def __post_init__(self) -> None:
        self.limiter = TokenBuckets(self.settings.rate_limit_per_s, self.settings.rate_limit_burst)


def get_runtime(request: Request) -> Runtime:
    runtime: Runtime = request.app.state.runtime
    return runtime


RuntimeDep = Annotated[Runtime, Depends(get_runtime)]


def get_read_session(runtime: RuntimeDep) -> Iterator[Session]:
    with runtime.store.read() as session:
        yield session


ReadSessionDep = Annotated[Session, Depends(get_read_session)]

_bearer = HTTPBearer(auto_error=False, description="An API key: `Authorization: Bearer wsk_...`")
_CHALLENGE = {"WWW-Authenticate": 'Bearer realm="wellspan"'}


def require_scope(scope: str) -> Callable[..., Principal]:
    def _check(
        runtime: RuntimeDep,
        credentials: Annotated[HTTPAuthorizationCredentials | None, Depends(_bearer)],
    ) -> Principal:
        if credentials is None:
            raise ProblemError(
                401, "an API key is required (Authorization: Bearer <key>)", headers=_CHALLENGE
            )
        with runtime.store.read() as session:
            principal = verify_token(session, credentials.credentials)
        if principal is None:
            raise ProblemError(
                401, "the API key is not valid or has been revoked", headers=_CHALLENGE
            )
        wait_s = runtime.limiter.take(principal.key_id)
        if wait_s > 0:
            raise ProblemError(
                429,
                f"this API key sent more than {runtime.settings.rate_limit_per_s:g} requests per "
                f"second (burst {runtime.settings.rate_limit_burst}); retry later",
                slug="rate-limited",
                title="Too many requests",
                headers={"Retry-After": TokenBuckets.retry_after(wait_s)},
            )
        if not principal.has_scope(scope):
            raise ProblemError(
                403, f"this API key lacks the {scope!r} scope", slug="insufficient-scope"
            )
        return principal

    _check.required_scope = scope  # type: ignore[attr-defined]  # read by the route audit
    return _check


ReaderKey = Annotated[Principal, Depends(require_scope("read"))]
IngestKey = Annotated[Principal, Depends(require_scope("ingest"))]
OperatorKey = Annotated[Principal, Depends(require_scope("operate"))]
AdminKey = Annotated[Principal, Depends(require_scope("admin"))]
