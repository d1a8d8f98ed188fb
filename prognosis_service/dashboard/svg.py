"""Charts of the dashboard as SVG text: pure functions, no I/O, every data string escaped.

The building blocks (``nice_ticks``, ``time_ticks``, ``LinearScale``, ``path_data``, ``escape``)
are public so that tests can check them; the three charts (``health_chart``, ``indicator_chart``,
``level_chart``) return a complete ``<svg>`` element sized by its ``viewBox`` so that the page can
scale it to the screen.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from html import escape as _html_escape

__all__ = [
    "Forecast",
    "IndicatorSeries",
    "Level",
    "LinearScale",
    "Marker",
    "escape",
    "health_chart",
    "indicator_chart",
    "level_chart",
    "message_chart",
    "nice_ticks",
    "path_data",
    "stack",
    "time_ticks",
]

# The palette of our own look: ink on paper, one accent for data, one for limits.
INK = "#1f2328"
MUTED = "#5b6470"
GRID = "#d9dde3"
DATA = "#1b5e8c"
LIMIT = "#9c2b1f"
BAND = "#b9cfe0"
EVENT = "#6b4f9c"
# 20·log10(2) ≈ 6.02 dB: an amplitude twice its baseline (common practice, no source)
ALERT_DB = 6.0
FONT = "system-ui, -apple-system, 'Segoe UI', Roboto, 'Helvetica Neue', Arial, sans-serif"

_TIME_STEPS = [
    timedelta(minutes=10),
    timedelta(minutes=30),
    timedelta(hours=1),
    timedelta(hours=3),
    timedelta(hours=6),
    timedelta(hours=12),
    timedelta(days=1),
    timedelta(days=2),
    timedelta(days=7),
    timedelta(days=14),
    timedelta(days=30),
    timedelta(days=91),
    timedelta(days=365),
]
_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)


def escape(text: object) -> str:
    """Text safe inside SVG/XML content and double- or single-quoted attribute values."""
    return _html_escape(str(text), quote=True)


def _num(v: float) -> str:
    """A coordinate with at most two decimals, without a trailing ``.0``."""
    s = f"{v:.2f}".rstrip("0").rstrip(".")
    return "0" if s in ("-0", "") else s


def nice_ticks(lo: float, hi: float, n: int = 5) -> list[float]:
    """About ``n`` round tick values covering ``[lo, hi]`` (steps of 1, 2 or 5 × 10^k).

    After the "nice numbers for graph labels" of Heckbert (Graphics Gems, 1990), with the step
    rounded from ``(hi - lo) / (n - 1)`` directly rather than from a rounded range, which keeps
    the axis tight. The first tick is at or below ``lo`` and the last at or above ``hi``; a
    zero-width range is widened by one unit (or 10 % of its magnitude) either side.
    """
    if not (math.isfinite(lo) and math.isfinite(hi)):
        raise ValueError(f"tick range must be finite, got lo={lo!r} hi={hi!r}")
    if n < 2:
        raise ValueError(f"n must be at least 2, got {n}")
    if hi < lo:
        lo, hi = hi, lo
    if hi == lo:
        pad = abs(lo) * 0.1 or 1.0
        lo, hi = lo - pad, hi + pad
    step = _nice((hi - lo) / (n - 1))
    first = math.floor(lo / step) * step
    last = math.ceil(hi / step) * step
    count = round((last - first) / step)
    # round away the binary noise of first + i * step (0.30000000000000004)
    digits = max(0, -math.floor(math.log10(step)) + 1)
    return [round(first + i * step, digits) for i in range(count + 1)]


def _nice(x: float) -> float:
    """The nearest of 1, 2, 5 or 10 × 10^k to ``x`` (> 0)."""
    exponent = math.floor(math.log10(x))
    fraction = x / 10**exponent
    nice = 1 if fraction < 1.5 else 2 if fraction < 3 else 5 if fraction < 7 else 10
    return float(nice * 10**exponent)


def time_ticks(start: datetime, end: datetime, n: int = 6) -> tuple[list[datetime], str]:
    """Tick times inside ``[start, end]`` at a round step (10 min … 1 year) giving at most ``n``
    ticks, and the ``strftime`` format that suits the step. Steps of a day or more fall on UTC
    midnight."""
    if end <= start:
        end = start + timedelta(hours=1)
    span = end - start
    step = next((s for s in _TIME_STEPS if span / s <= n), _TIME_STEPS[-1])
    while span / step > n:  # spans of many years
        step *= 2
    offset = (start - _EPOCH) % step
    first = start if offset == timedelta(0) else start - offset + step
    ticks = []
    t = first
    while t <= end:
        ticks.append(t)
        t += step
    if step < timedelta(days=1):
        fmt = "%d %b %H:%M"
    elif span > timedelta(days=400):
        fmt = "%b %Y"
    else:
        fmt = "%d %b"
    return ticks, fmt


@dataclass(frozen=True, slots=True)
class LinearScale:
    """Maps ``[d0, d1]`` (data) linearly onto ``[r0, r1]`` (pixels); r1 < r0 flips the axis."""

    d0: float
    d1: float
    r0: float
    r1: float

    def __call__(self, v: float) -> float:
        if self.d1 == self.d0:
            return (self.r0 + self.r1) / 2
        return self.r0 + (v - self.d0) * (self.r1 - self.r0) / (self.d1 - self.d0)


def path_data(points: Sequence[tuple[float, float | None]]) -> str:
    """SVG path data through ``(x, y)`` pixel points; a ``None`` or non-finite ``y`` breaks the
    line, so gaps in the data stay gaps."""
    parts: list[str] = []
    pen_down = False
    for x, y in points:
        if y is None or not math.isfinite(y):
            pen_down = False
            continue
        parts.append(f"{'L' if pen_down else 'M'}{_num(x)} {_num(y)}")
        pen_down = True
    return " ".join(parts)


@dataclass(frozen=True, slots=True)
class Marker:
    """An event on the time axis (a maintenance event): when, a short label and the full text."""

    at: datetime
    label: str
    detail: str = ""


@dataclass(frozen=True, slots=True)
class Forecast:
    """When the health index is forecast to cross its failure threshold: P10, P50 and P90."""

    p10_at: datetime
    p50_at: datetime
    p90_at: datetime


@dataclass(frozen=True, slots=True)
class IndicatorSeries:
    """One indicator over time: bucket starts, means and (optionally) each bucket's min and max."""

    name: str
    unit: str
    t: Sequence[datetime]
    mean: Sequence[float | None]
    low: Sequence[float | None] = field(default_factory=list)
    high: Sequence[float | None] = field(default_factory=list)


@dataclass(frozen=True, slots=True)
class Level:
    """An indicator's latest value against its healthy baseline (from the diagnosis)."""

    name: str
    unit: str
    value: float
    baseline: float | None
    db_over_baseline: float | None


@dataclass(frozen=True, slots=True)
class _Frame:
    width: float
    height: float
    left: float = 56
    right: float = 16
    top: float = 30
    bottom: float = 34

    @property
    def x0(self) -> float:
        return self.left

    @property
    def x1(self) -> float:
        return self.width - self.right

    @property
    def y0(self) -> float:
        return self.height - self.bottom

    @property
    def y1(self) -> float:
        return self.top


def _open(width: float, height: float, title: str, desc: str) -> list[str]:
    return [
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {_num(width)} {_num(height)}" '
        f'width="{_num(width)}" height="{_num(height)}" role="img" '
        f'font-family="{escape(FONT)}" font-size="12" fill="{INK}">',
        f"<title>{escape(title)}</title>",
        f"<desc>{escape(desc)}</desc>",
        f'<rect width="{_num(width)}" height="{_num(height)}" fill="#ffffff"/>',
    ]


def _text(x: float, y: float, text: str, **attrs: str) -> str:
    extra = "".join(f' {k.replace("_", "-")}="{escape(v)}"' for k, v in attrs.items())
    return f'<text x="{_num(x)}" y="{_num(y)}"{extra}>{escape(text)}</text>'


def _fmt(v: float) -> str:
    if v != 0 and (abs(v) >= 1e5 or abs(v) < 1e-3):
        return f"{v:.2g}"
    return f"{v:.6g}"


def _unit(unit: str) -> str:
    return "" if unit == "1" else unit  # "1": a ratio without unit


def _y_axis(frame: _Frame, ticks: Sequence[float], ys: LinearScale, unit: str) -> list[str]:
    out = []
    for v in ticks:
        y = ys(v)
        out.append(
            f'<line x1="{_num(frame.x0)}" x2="{_num(frame.x1)}" y1="{_num(y)}" y2="{_num(y)}" '
            f'stroke="{GRID}" stroke-width="1"/>'
        )
        out.append(_text(frame.x0 - 6, y + 4, _fmt(v), text_anchor="end", fill=MUTED))
    if _unit(unit):
        out.append(_text(frame.x0 - 6, frame.y1 - 10, unit, text_anchor="end", fill=MUTED))
    return out


def _time_axis(frame: _Frame, start: datetime, end: datetime, xs: LinearScale) -> list[str]:
    ticks, fmt = time_ticks(start, end, n=max(2, int((frame.x1 - frame.x0) // 110)))
    out = [
        f'<line x1="{_num(frame.x0)}" x2="{_num(frame.x1)}" y1="{_num(frame.y0)}" '
        f'y2="{_num(frame.y0)}" stroke="{MUTED}" stroke-width="1"/>'
    ]
    for t in ticks:
        x = xs(t.timestamp())
        out.append(
            f'<line x1="{_num(x)}" x2="{_num(x)}" y1="{_num(frame.y0)}" y2="{_num(frame.y0 + 5)}" '
            f'stroke="{MUTED}"/>'
        )
        out.append(_text(x, frame.y0 + 18, t.strftime(fmt), text_anchor="middle", fill=MUTED))
    return out


def message_chart(title: str, message: str, *, width: float = 720, height: float = 120) -> str:
    """A chart-sized panel that says in words why there is no chart (no data, no forecast)."""
    parts = _open(width, height, title, message)
    parts.append(_text(16, 24, title, font_weight="600", font_size="14"))
    parts.append(_text(16, 56, message, fill=MUTED, font_size="14"))
    parts.append("</svg>")
    return "".join(parts)


def health_chart(
    t: Sequence[datetime],
    health_index: Sequence[float | None],
    *,
    failure_threshold: float | None = None,
    forecast: Forecast | None = None,
    events: Sequence[Marker] = (),
    title: str = "Health index",
    width: float = 720,
    height: float = 300,
) -> str:
    """The health-index trend with its failure threshold, the P10–P90 window in which the trend
    is forecast to cross the threshold (shaded, P50 dashed) and maintenance events marked on the
    time axis.

    ``t`` and ``health_index`` are equally long; ``None`` values leave gaps. The time axis runs
    from the first point to the last point or the P90 time, whichever is later, but no further
    than three data spans past the last point: a P90 beyond that is stated in the legend.
    """
    if len(t) != len(health_index):
        raise ValueError(f"t and health_index differ in length: {len(t)} != {len(health_index)}")
    values = [v for v in health_index if v is not None and math.isfinite(v)]
    if not values:
        return message_chart(title, "no health-index values yet", width=width, height=height)
    frame = _Frame(width, height, top=44)
    start, last = min(t), max(t)
    data_span = max(last - start, timedelta(hours=1))
    end = last
    clipped: list[str] = []
    if forecast is not None:
        cap = last + 3 * data_span
        end = max(end, min(forecast.p90_at, cap))
        for name, at in (("P50", forecast.p50_at), ("P90", forecast.p90_at)):
            if at > cap:
                clipped.append(f"{name} {at:%d %b %Y} is beyond the chart")
    for m in events:
        start, end = min(start, m.at), max(end, m.at)
    lo = min([*values, 0.0])
    hi = max([*values, failure_threshold if failure_threshold is not None else 0.0])
    yticks = nice_ticks(lo, hi, 6)
    xs = LinearScale(start.timestamp(), end.timestamp(), frame.x0, frame.x1)
    ys = LinearScale(yticks[0], yticks[-1], frame.y0, frame.y1)
    desc = f"{title}: {len(values)} values from {start:%Y-%m-%d} to {last:%Y-%m-%d}"
    parts = _open(width, height, title, desc)
    parts.append(_text(frame.x0, 18, title, font_weight="600", font_size="14"))
    parts += _y_axis(frame, yticks, ys, "")
    if forecast is not None:
        x10 = xs(max(start, forecast.p10_at).timestamp())
        x90 = xs(min(end, forecast.p90_at).timestamp())
        parts.append(
            f'<rect class="forecast-band" x="{_num(x10)}" y="{_num(frame.y1)}" '
            f'width="{_num(max(x90 - x10, 1))}" height="{_num(frame.y0 - frame.y1)}" '
            f'fill="{BAND}" fill-opacity="0.6"><title>{escape(_band_text(forecast))}</title></rect>'
        )
        if forecast.p50_at <= end:
            x50 = xs(forecast.p50_at.timestamp())
            parts.append(
                f'<line class="forecast-p50" x1="{_num(x50)}" x2="{_num(x50)}" '
                f'y1="{_num(frame.y1)}" y2="{_num(frame.y0)}" stroke="{DATA}" '
                f'stroke-dasharray="6 4" stroke-width="1.5"/>'
            )
            parts.append(_text(x50 + 4, frame.y0 - 6, "P50", fill=DATA, font_size="11"))
    if failure_threshold is not None:
        y = ys(failure_threshold)
        parts.append(
            f'<line class="failure-threshold" x1="{_num(frame.x0)}" x2="{_num(frame.x1)}" '
            f'y1="{_num(y)}" y2="{_num(y)}" stroke="{LIMIT}" stroke-width="2" '
            f'stroke-dasharray="10 4"/>'
        )
        label = f"failure threshold {_fmt(failure_threshold)}"
        below = y - 20 < frame.y1  # no room above the line: under the legend would collide
        parts.append(_text(frame.x0 + 4, y + 15 if below else y - 6, label, fill=LIMIT))
    for m in events:
        x = xs(m.at.timestamp())
        tip = escape(f"{m.label}: {m.detail}" if m.detail else m.label)
        parts.append(
            f'<g class="maintenance-event"><title>{tip}</title>'
            f'<line x1="{_num(x)}" x2="{_num(x)}" y1="{_num(frame.y1)}" y2="{_num(frame.y0)}" '
            f'stroke="{EVENT}" stroke-width="1.5"/>'
            f'<path d="M{_num(x - 6)} {_num(frame.y0)} L{_num(x + 6)} {_num(frame.y0)} '
            f'L{_num(x)} {_num(frame.y0 - 9)} Z" fill="{EVENT}"/>'
            f"{_text(x + 4, frame.y1 + 12, m.label, fill=EVENT, font_size='11')}</g>"
        )
    pts = [
        (xs(ti.timestamp()), None if v is None else ys(v))
        for ti, v in zip(t, health_index, strict=True)
    ]
    parts.append(
        f'<path class="trend" d="{path_data(pts)}" fill="none" stroke="{DATA}" '
        f'stroke-width="2" stroke-linejoin="round"/>'
    )
    parts += _time_axis(frame, start, end, xs)
    parts += _health_legend(frame, failure_threshold, forecast, bool(events), clipped)
    parts.append("</svg>")
    return "".join(parts)


def _band_text(f: Forecast) -> str:
    return (
        f"threshold crossing forecast: P10 {f.p10_at:%Y-%m-%d %H:%M}, "
        f"P50 {f.p50_at:%Y-%m-%d %H:%M}, P90 {f.p90_at:%Y-%m-%d %H:%M} UTC"
    )


def _health_legend(
    frame: _Frame,
    threshold: float | None,
    forecast: Forecast | None,
    events: bool,
    clipped: Sequence[str],
) -> list[str]:
    items: list[tuple[str, str]] = [(DATA, "health index")]
    if threshold is not None:
        items.append((LIMIT, "failure threshold"))
    if forecast is not None:
        items.append((BAND, "P10–P90 crossing"))
    if events:
        items.append((EVENT, "maintenance"))
    out = []
    x = frame.x0
    for colour, label in items:
        out.append(f'<rect x="{_num(x)}" y="26" width="12" height="8" fill="{colour}"/>')
        out.append(_text(x + 16, 34, label, fill=MUTED, font_size="11"))
        x += 28 + 6.4 * len(label)
    if clipped:
        out.append(_text(frame.x1, 34, "; ".join(clipped), text_anchor="end", fill=MUTED))
    return out


def indicator_chart(
    series: IndicatorSeries, *, width: float = 720, height: float = 180, title: str | None = None
) -> str:
    """One indicator over time: the mean per bucket as a line, the min–max range shaded."""
    title = title or series.name
    values = [v for v in [*series.mean, *series.low, *series.high] if v is not None]
    values = [v for v in values if math.isfinite(v)]
    if not series.t or not values:
        return message_chart(title, "no values in this time range", width=width, height=height)
    frame = _Frame(width, height)
    start, end = min(series.t), max(series.t)
    if end == start:
        end = start + timedelta(hours=1)
    yticks = nice_ticks(min(values), max(values), 4)
    xs = LinearScale(start.timestamp(), end.timestamp(), frame.x0, frame.x1)
    ys = LinearScale(yticks[0], yticks[-1], frame.y0, frame.y1)
    parts = _open(width, height, title, f"{title} in {series.unit}, {len(series.t)} points")
    parts.append(_text(frame.x0, 18, title, font_weight="600", font_size="13"))
    parts += _y_axis(frame, yticks, ys, series.unit)
    if series.low and series.high and len(series.low) == len(series.high) == len(series.t):
        ranges = [
            (xs(ti.timestamp()), ys(lo), ys(hi))
            for ti, lo, hi in zip(series.t, series.low, series.high, strict=True)
            if lo is not None and hi is not None
        ]
        if ranges:
            outline = [(x, y) for x, _, y in ranges] + [(x, y) for x, y, _ in reversed(ranges)]
            parts.append(
                f'<path class="range" d="{path_data(outline)} Z" fill="{BAND}" fill-opacity="0.5"/>'
            )
    if len(series.t) != len(series.mean):
        raise ValueError(f"t and mean differ in length: {len(series.t)} != {len(series.mean)}")
    pts = [
        (xs(ti.timestamp()), None if v is None else ys(v))
        for ti, v in zip(series.t, series.mean, strict=True)
    ]
    parts.append(
        f'<path class="trend" d="{path_data(pts)}" fill="none" stroke="{DATA}" '
        f'stroke-width="1.5" stroke-linejoin="round"/>'
    )
    parts += _time_axis(frame, start, end, xs)
    parts.append("</svg>")
    return "".join(parts)


def level_chart(
    levels: Sequence[Level], *, width: float = 720, title: str = "Indicator levels vs baseline"
) -> str:
    """Each indicator's latest level in dB over its healthy baseline as a horizontal bar from
    0 dB, with the value and baseline written beside it; indicators without a baseline are listed
    with their value only."""
    if not levels:
        return message_chart(title, "the latest diagnosis names no indicator levels", width=width)
    row = 26
    label_w = min(220.0, width * 0.32)
    height = 56 + row * len(levels) + 30
    frame = _Frame(width, height, left=label_w + 12, right=210, top=50, bottom=30)
    dbs = [lv.db_over_baseline for lv in levels if lv.db_over_baseline is not None]
    dbs = [d for d in dbs if math.isfinite(d)]
    ticks = nice_ticks(min([*dbs, 0.0]), max([*dbs, 6.0]), 5)
    xs = LinearScale(ticks[0], ticks[-1], frame.x0, frame.x1)
    desc = f"{title}: {len(levels)} indicators"
    parts = _open(width, height, title, desc)
    parts.append(_text(12, 20, title, font_weight="600", font_size="14"))
    parts.append(
        _text(12, 35, f"bars of {_fmt(ALERT_DB)} dB or more (twice the baseline amplitude) in red",
              fill=MUTED, font_size="11")
    )  # fmt: skip
    for v in ticks:
        x = xs(v)
        parts.append(
            f'<line x1="{_num(x)}" x2="{_num(x)}" y1="{_num(frame.y1 - 6)}" y2="{_num(frame.y0)}" '
            f'stroke="{GRID if v else MUTED}"/>'
        )
        parts.append(_text(x, frame.y0 + 16, f"{_fmt(v)} dB", text_anchor="middle", fill=MUTED))
    for i, lv in enumerate(levels):
        y = frame.y1 + i * row
        parts.append(_text(label_w, y + 15, lv.name, text_anchor="end"))
        db = lv.db_over_baseline
        if db is not None and math.isfinite(db):
            x_zero, x_db = xs(0.0), xs(db)
            colour = LIMIT if db >= ALERT_DB else DATA
            parts.append(
                f'<rect class="level" x="{_num(min(x_zero, x_db))}" y="{_num(y + 4)}" '
                f'width="{_num(max(abs(x_db - x_zero), 1))}" height="{row - 10}" '
                f'fill="{colour}"><title>{escape(f"{lv.name}: {db:+.1f} dB")}</title></rect>'
            )
            base = "" if lv.baseline is None else f" vs {lv.baseline:.3g}"
            note = f"{db:+.1f} dB · {lv.value:.3g}{base} {_unit(lv.unit)}"
        else:
            why = "no baseline" if lv.baseline is None else f"vs {lv.baseline:.3g}, no dB level"
            note = f"{lv.value:.3g} {_unit(lv.unit)} · {why}"
        parts.append(_text(frame.x1 + 8, y + 15, note, fill=MUTED, font_size="11"))
    parts.append("</svg>")
    return "".join(parts)


def stack(panels: Sequence[str], *, width: float, height_each: float, title: str) -> str:
    """Panels (each an ``<svg>`` of ``width`` × ``height_each``) one below the other in one SVG."""
    height = height_each * len(panels)
    parts = _open(width, height, title, f"{title}: {len(panels)} panels")
    for i, panel in enumerate(panels):
        parts.append(f'<g transform="translate(0 {_num(i * height_each)})">{panel}</g>')
    parts.append("</svg>")
    return "".join(parts)
