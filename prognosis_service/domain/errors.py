"""Errors of the domain layer; the API turns each into a problem-details response."""

from __future__ import annotations

__all__ = ["ConflictError", "DomainError", "ForbiddenError", "InvalidInputError", "NotFoundError"]


class DomainError(Exception):
    status = 400
    title = "Bad request"
    slug = "bad-request"

    def __init__(self, detail: str) -> None:
        super().__init__(detail)
        self.detail = detail


class NotFoundError(DomainError):
    status = 404
    title = "Not found"
    slug = "not-found"


class ConflictError(DomainError):
    status = 409
    title = "Conflict"
    slug = "conflict"


class InvalidInputError(DomainError):
    status = 422
    title = "Invalid input"
    slug = "invalid-input"


class ForbiddenError(DomainError):
    status = 403
    title = "Forbidden"
    slug = "forbidden"
