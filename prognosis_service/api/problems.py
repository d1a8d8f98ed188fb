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


PROBLEM_SCHEMA: dict[str, Any] = {
    "title": "Problem",
    "description": "RFC 9457 problem details; validation errors add `errors`.",
    "type": "object",
    "required": ["type", "title", "status", "detail"],
    "properties": {
        "type": {"type": "string"},
        "title": {"type": "string"},
        "status": {"type": "integer"},
        "detail": {"type": "string"},
        "instance": {"type": "string"},
        "errors": {
            "type": "array",
            "items": {
                "type": "object",
                "properties": {"location": {"type": "string"}, "message": {"type": "string"}},
            },
        },
    },
}


def _document_problems(app: FastAPI) -> None:
    """Make the OpenAPI document say what the handlers below answer: every 4xx is a problem
    document (FastAPI would describe its own 422 body, which this service never sends)."""
    build = app.openapi

    def openapi() -> dict[str, Any]:
        if app.openapi_schema is not None:
            return app.openapi_schema
        spec = build()
        spec.setdefault("components", {}).setdefault("schemas", {})["Problem"] = PROBLEM_SCHEMA
        problem = {
            "description": "Problem details (RFC 9457)",
            "content": {PROBLEM_JSON: {"schema": {"$ref": "#/components/schemas/Problem"}}},
        }
        for ops in spec.get("paths", {}).values():
            for op in ops.values():
                responses = op.setdefault("responses", {})
                responses.pop("422", None)
                responses.setdefault("4XX", problem)
        for unused in ("HTTPValidationError", "ValidationError"):
            spec["components"]["schemas"].pop(unused, None)
        app.openapi_schema = spec
        return spec

    app.openapi = openapi  # type: ignore[method-assign]


def install_problem_handlers(app: FastAPI) -> None:
    _document_problems(app)

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
