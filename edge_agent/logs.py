"""Structured logs on stderr: JSON lines (default) or key=value pairs.

Log calls pass their fields as ``extra={"fields": {...}}``; the message is the event name.
"""

from __future__ import annotations

import json
import logging
import sys
from datetime import UTC, datetime
from typing import Any, Literal

__all__ = ["configure_logging", "fields"]


def fields(**values: Any) -> dict[str, Any]:
    """``log.info("event", extra=fields(asset="MAL-P1"))``."""
    return {"fields": values}


class _Formatter(logging.Formatter):
    def __init__(self, style: Literal["json", "kv"]) -> None:
        super().__init__()
        self.style_name = style

    def format(self, record: logging.LogRecord) -> str:
        body: dict[str, Any] = {
            "ts": datetime.fromtimestamp(record.created, UTC)
            .isoformat(timespec="milliseconds")
            .replace("+00:00", "Z"),
            "level": record.levelname.lower(),
            "logger": record.name,
            "event": record.getMessage(),
        }
        extra = getattr(record, "fields", None)
        if isinstance(extra, dict):
            body.update(extra)
        if record.exc_info:
            body["error"] = self.formatException(record.exc_info).splitlines()[-1]
        if self.style_name == "json":
            return json.dumps(body, default=str, separators=(",", ":"))
        return " ".join(f"{k}={_kv(v)}" for k, v in body.items())


def _kv(v: Any) -> str:
    s = str(v)
    return json.dumps(s) if (not s or any(c in s for c in ' "=')) else s


def configure_logging(style: Literal["json", "kv"] = "json", level: int = logging.INFO) -> None:
    """Send the agent's logs to stderr in ``style``."""
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(_Formatter(style))
    root = logging.getLogger("edge_agent")
    root.handlers[:] = [handler]
    root.setLevel(level)
    root.propagate = False
