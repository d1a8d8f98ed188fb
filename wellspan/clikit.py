"""Small helpers every wellspan command shares: one-line errors, tables, JSON output.

Conventions: results to stdout, logs and progress to stderr; exit 0 on success, 1 when the work
found a problem, 2 for bad usage or bad input (with one line naming what was wrong).
"""

from __future__ import annotations

import json
import sys
from collections.abc import Iterable, Sequence
from typing import Any

__all__ = ["EXIT_BAD_INPUT", "EXIT_OK", "EXIT_PROBLEM", "UsageError", "print_json", "print_table"]

EXIT_OK = 0
EXIT_PROBLEM = 1
EXIT_BAD_INPUT = 2


class UsageError(Exception):
    """Bad usage or bad input: the CLI prints ``wellspan: <message>`` and exits with 2."""


def print_json(obj: Any) -> None:
    json.dump(obj, sys.stdout, indent=2, ensure_ascii=False, default=str)
    sys.stdout.write("\n")


def _cell(v: Any) -> str:
    if v is None:
        return "-"
    if isinstance(v, float):
        return f"{v:.4g}"
    return str(v)


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def print_table(headers: Sequence[str], rows: Iterable[Sequence[Any]]) -> None:
    """A plain aligned text table; columns holding only numbers are right-aligned."""
    cells = [[_cell(v) for v in row] for row in rows]
    widths = [len(h) for h in headers]
    for row in cells:
        widths = [max(w, len(c)) for w, c in zip(widths, row, strict=False)]
    numeric = [
        all(_is_number(row[i]) or row[i] == "-" for row in cells if i < len(row)) and bool(cells)
        for i in range(len(headers))
    ]
    out = sys.stdout
    out.write(
        "  ".join(
            h.rjust(w) if num else h.ljust(w)
            for h, w, num in zip(headers, widths, numeric, strict=True)
        ).rstrip()
        + "\n"
    )
    out.write("  ".join("-" * w for w in widths) + "\n")
    for row in cells:
        parts = [
            c.rjust(w) if num else c.ljust(w)
            for c, w, num in zip(row, widths, numeric, strict=False)
        ]
        out.write("  ".join(parts).rstrip() + "\n")
