"""Opaque cursors: the sort key of the last item returned, base64url-encoded JSON."""

from __future__ import annotations

import base64
import binascii
import json
from typing import Any

from prognosis_service.domain.errors import InvalidInputError

__all__ = ["decode_cursor", "encode_cursor"]


def encode_cursor(*key: Any) -> str:
    raw = json.dumps(list(key), separators=(",", ":"), default=str).encode()
    return base64.urlsafe_b64encode(raw).decode().rstrip("=")


def decode_cursor(cursor: str, arity: int) -> list[Any]:
    try:
        raw = base64.urlsafe_b64decode(cursor + "=" * (-len(cursor) % 4))
        key = json.loads(raw)
    except (binascii.Error, ValueError):
        raise InvalidInputError("cursor is not valid; pass next_cursor back unchanged") from None
    if not isinstance(key, list) or len(key) != arity:
        raise InvalidInputError("cursor is not valid; pass next_cursor back unchanged")
    return key
