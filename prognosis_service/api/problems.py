"""RFC 9457 problem details for every 4xx and 5xx, validation errors included."""

from __future__ import annotations

import logging
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from starlette.exceptions import HTTPException as StarletteHTTPException

from prognosis_service.domain.errors import DomainError

__all__ = ["PROBLEM_JSON", "ProblemError", "install_problem_handlers", "problem_response"]

PROBLEM_JSON = "application/problem+json"
log = logging.getLogger("wellspan.api")

_TITLES = {
    400: "Bad request",
    401: "Unauthorized",
    403: "Forbidden",
    404: "Not found",
    405: "Method not allowed",
    409: "Conflict",
    413: "Payload too large",
    415: "Unsupported media type",
    422: "Invalid input",
    500: "Internal server error",
    503: "Service unavailable",
}


class ProblemError(Exception):
    def __init__(
        self,
        status: int,
        detail: str,
        *,
        slug: str | None = None,
        title: str | None = None,
        headers: dict[str, str] | None = None,
    ) -> None:
        super().__init__(detail)
        self.status = status
        self.detail = detail
        self.slug = slug or _TITLES.get(status, "error").lower().replace(" ", "-")
        self.title = title or _TITLES.get(status, "Error")
        self.headers = headers


def problem_response(
    status: int,
    title: str,
    detail: str,
    slug: str,
    *,
    instance: str | None = None,
    headers: dict[str, str] | None = None,
    **extra: Any,
) -> JSONResponse:
    body: dict[str, Any] = {
        "type": f"urn:wellspan:problem:{slug}",
        "title": title,
        "status": status,
        "detail": detail,
    }
    if instance:
        body["instance"] = instance
    body.update(extra)
    return JSONResponse(body, status_code=status, headers=headers, media_type=PROBLEM_JSON)


def install_problem_handlers(app: FastAPI) -> None:
    @app.exception_handler(ProblemError)
    async def _problem(request: Request, exc: ProblemError) -> JSONResponse:
        return problem_response(
            exc.status,
            exc.title,
            exc.detail,
            exc.slug,
            instance=request.url.path,
            headers=exc.headers,
        )

    @app.exception_handler(DomainError)
    async def _domain(request: Request, exc: DomainError) -> JSONResponse:
        return problem_response(
            exc.status, exc.title, exc.detail, exc.slug, instance=request.url.path
        )

    @app.exception_handler(RequestValidationError)
    async def _validation(request: Request, exc: RequestValidationError) -> JSONResponse:
        errors = [
            {
                "location": ".".join(str(p) for p in e.get("loc", ())),
                "message": str(e.get("msg", "")),
            }
            for e in exc.errors()
        ]
        first = errors[0] if errors else {"location": "request", "message": "invalid"}
        more = f" (+{len(errors) - 1} more)" if len(errors) > 1 else ""
        return problem_response(
            422,
            "Invalid input",
            f"{first['location']}: {first['message']}{more}",
            "invalid-input",
            instance=request.url.path,
            errors=errors,
        )

    @app.exception_handler(StarletteHTTPException)
    async def _http(request: Request, exc: StarletteHTTPException) -> JSONResponse:
        status = exc.status_code
        title = _TITLES.get(status, "Error")
        detail = exc.detail if isinstance(exc.detail, str) else title
        return problem_response(
            status,
            title,
            detail,
            title.lower().replace(" ", "-"),
            instance=request.url.path,
            headers=getattr(exc, "headers", None),
        )

    @app.exception_handler(Exception)
    async def _unexpected(request: Request, exc: Exception) -> JSONResponse:
        log.exception("unhandled error on %s %s", request.method, request.url.path)
        return problem_response(
            500,
            "Internal server error",
            "the server failed to handle this request; it has been logged",
            "internal-error",
            instance=request.url.path,
        )
