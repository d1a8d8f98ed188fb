"""From the JSON bodies of the contract routes and the indicator history to SVG charts.

Pure functions: each takes what a route returned (a parsed JSON body or domain objects) and
returns SVG text from :mod:`prognosis_service.dashboard.svg`.
"""

from __future__ import annotations

import fnmatch
import math
from collections.abc import Mapping, Sequence
from datetime import datetime, timedelta
from typing import Any

from prognosis_service.dashboard import svg
from prognosis_service.domain.history import Bucket, History

__all__ = [
    "KEY_INDICATOR_PATTERNS",
    "SPECTRAL_PATTERNS",
    "bucket_width",
    "choose_key_indicators",
    "diagnosis_svg",
    "health_svg",
    "indicators_svg",
    "parse_time",
]

# Which indicators the asset view shows first: overall vibration, the outer-race envelope line
# (the most common rolling-bearing defect), other envelope lines, impulsiveness, then process
# values (common practice, no source).
KEY_INDICATOR_PATTERNS = (
    "*.velocity_rms",
    "*.env_bpfo",
    "*.env_*",
    "*.kurtosis",
    "*temp*.mean",
    "*pressure.mean",
    "*.crest_factor",
    "*.rms",
)
# Envelope lines at the bearing defect frequencies, shaft orders, vane pass and the high band.
SPECTRAL_PATTERNS = ("*.env_*", "*.order_*", "*.vane_pass", "*.high_band_rms")
_BUCKETS = ("10m", "30m", "1h", "3h", "6h", "12h", "1d", "7d")


def parse_time(text: str) -> datetime:
    """An ISO 8601 time from a contract body (``Z`` or an offset)."""
    return datetime.fromisoformat(text.replace("Z", "+00:00"))


def _float(v: Any) -> float | None:
    if isinstance(v, bool) or not isinstance(v, int | float):
        return None
    return float(v) if math.isfinite(v) else None


def health_svg(body: Mapping[str, Any], *, title: str, width: float = 720) -> str:
    """The health chart from a ``GET /v1/assets/{id}/health`` body (contract.md)."""
    points = [p for p in body.get("points") or [] if isinstance(p, Mapping) and p.get("t")]
    kept = [p for p in points if not p.get("excluded")]
    t = [parse_time(str(p["t"])) for p in kept]
    hi = [_float(p.get("health_index")) for p in kept]
    forecast = None
    f = body.get("forecast")
    if isinstance(f, Mapping) and all(f.get(k) for k in ("p10_at", "p50_at", "p90_at")):
        forecast = svg.Forecast(
            parse_time(str(f["p10_at"])), parse_time(str(f["p50_at"])), parse_time(str(f["p90_at"]))
        )
    events = [
        svg.Marker(
            at=parse_time(str(e["at"])),
            label=str(e.get("kind") or "event"),
            detail=" ".join(
                str(e.get(k)) for k in ("component", "notes", "performed_by") if e.get(k)
            ),
        )
        for e in body.get("maintenance_events") or []
        if isinstance(e, Mapping) and e.get("at")
    ]
    mode = body.get("failure_mode")
    return svg.health_chart(
        t,
        hi,
        failure_threshold=_float(body.get("failure_threshold")),
        forecast=forecast,
        events=events,
        title=f"{title} — health index" + (f" ({mode})" if mode else ""),
        width=width,
    )


def diagnosis_svg(body: Mapping[str, Any], *, title: str, width: float = 720) -> str:
    """The indicator levels behind the latest diagnosis (``GET .../diagnosis`` ``indicators``):
    the defect-frequency and order indicators of :data:`SPECTRAL_PATTERNS` when there are any."""
    levels = []
    for item in body.get("indicators") or []:
        if not isinstance(item, Mapping):
            continue
        value = _float(item.get("value"))
        if value is None:
            continue
        levels.append(
            svg.Level(
                name=str(item.get("name", "")),
                unit=str(item.get("unit", "")),
                value=value,
                baseline=_float(item.get("baseline")),
                db_over_baseline=_float(item.get("db_over_baseline")),
            )
        )
    # the defect-frequency and order lines a diagnosis rests on; all levels when there are none
    spectral = [lv for lv in levels if _is_spectral(lv.name)]
    return svg.level_chart(
        spectral or levels, width=width, title=f"{title} — indicator levels vs healthy baseline"
    )


def _is_spectral(name: str) -> bool:
    return any(fnmatch.fnmatchcase(name, p) for p in SPECTRAL_PATTERNS)


def choose_key_indicators(names: Sequence[tuple[str, str]], k: int = 4) -> list[tuple[str, str]]:
    """Up to ``k`` of an asset's ``(name, unit)`` indicators: the first (by name) matching each
    of :data:`KEY_INDICATOR_PATTERNS` in turn, so that one kind of indicator does not fill the
    view with its drive-end and non-drive-end twins; then the remaining matches, then the rest."""
    ordered = sorted(names)
    chosen: list[tuple[str, str]] = []
    for pattern in KEY_INDICATOR_PATTERNS:
        match = next((i for i in ordered if fnmatch.fnmatchcase(i[0], pattern)), None)
        if match is not None and match not in chosen:
            chosen.append(match)
    rest = [i for i in ordered if i not in chosen]
    rest.sort(key=lambda i: not any(fnmatch.fnmatchcase(i[0], p) for p in KEY_INDICATOR_PATTERNS))
    return (chosen + rest)[:k]


def bucket_width(span: timedelta, *, max_buckets: int = 300) -> str:
    """The narrowest bucket width of ``10m`` … ``7d`` that gives at most ``max_buckets``."""
    for every in _BUCKETS:
        n, unit = int(every[:-1]), every[-1]
        width = timedelta(minutes=n) if unit == "m" else timedelta(hours=n) if unit == "h" else (
            timedelta(days=n))  # fmt: skip
        if span / width <= max_buckets:
            return every
    return _BUCKETS[-1]


def indicators_svg(histories: Sequence[History], *, width: float = 720) -> str:
    """The key indicators stacked in one SVG, one panel each (mean line, min–max range)."""
    if not histories:
        return svg.message_chart(
            "Key indicators", "this asset has sent no indicators yet", width=width
        )
    panels = []
    for h in histories:
        buckets = [b for b in h.items if isinstance(b, Bucket)]
        series = svg.IndicatorSeries(
            name=h.indicator,
            unit=h.unit,
            t=[b.start for b in buckets],
            mean=[b.mean for b in buckets],
            low=[b.min for b in buckets],
            high=[b.max for b in buckets],
        )
        panels.append(svg.indicator_chart(series, width=width, height=170))
    return svg.stack(panels, width=width, height_each=170, title="Key indicators")
