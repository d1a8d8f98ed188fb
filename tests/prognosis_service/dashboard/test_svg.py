"""The dashboard's SVG building blocks and charts: axis scaling, ticks, paths, escaping."""

from __future__ import annotations

import itertools
import math
import xml.etree.ElementTree as ET
from datetime import UTC, datetime, timedelta

import pytest
from hypothesis import assume, given
from hypothesis import strategies as st

from prognosis_service.dashboard import charts, svg
from prognosis_service.domain.history import Bucket, History

NS = {"s": "http://www.w3.org/2000/svg"}
T0 = datetime(2026, 6, 1, tzinfo=UTC)
HOSTILE = '<script>alert(1)</script>" onload="alert(2)\' &amp; ]]>'


def parse(text: str) -> ET.Element:
    """Well-formed XML or the test fails."""
    return ET.fromstring(text)


def texts(root: ET.Element) -> list[str]:
    return ["".join(e.itertext()) for e in root.iter() if e.tag.endswith(("text", "title", "desc"))]


# --- ticks -------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("lo", "hi", "n", "expected"),
    [
        # worked by hand from the rule after Heckbert (Graphics Gems I, 1990, "Nice numbers for
        # graph labels"): step = (hi - lo) / (n - 1) rounded to the nearest 1, 2, 5 × 10^k
        # (thresholds 1.5, 3, 7), first tick floor(lo / step), last ceil(hi / step)
        (0, 1, 5, [0, 0.2, 0.4, 0.6, 0.8, 1.0]),
        (0, 10, 5, [0, 2, 4, 6, 8, 10]),
        (1.5, 3.5, 4, [1.5, 2, 2.5, 3, 3.5]),
        (0.0012, 0.0047, 5, [0.001, 0.002, 0.003, 0.004, 0.005]),
        (97, 103, 5, [96, 98, 100, 102, 104]),
        (-0.02, 1, 6, [-0.2, 0, 0.2, 0.4, 0.6, 0.8, 1.0]),  # a tight axis, not -0.5 … 1
    ],
)
def test_nice_ticks_worked_examples(lo: float, hi: float, n: int, expected: list[float]) -> None:
    assert nice_close(svg.nice_ticks(lo, hi, n), expected)


def nice_close(a: list[float], b: list[float]) -> bool:
    return len(a) == len(b) and all(
        math.isclose(x, y, abs_tol=1e-12) for x, y in zip(a, b, strict=True)
    )


@given(
    st.floats(-1e6, 1e6, allow_nan=False),
    st.floats(1e-6, 1e6, allow_nan=False),
    st.integers(2, 10),
)
def test_nice_ticks_cover_the_range_with_round_equal_steps(lo: float, span: float, n: int) -> None:
    # spans below a millionth of the magnitude are under float resolution for equal steps
    assume(span >= 1e-6 * max(1.0, abs(lo)))
    hi = lo + span
    ticks = svg.nice_ticks(lo, hi, n)
    assert ticks[0] <= lo + 1e-9 * max(1, abs(lo)) and ticks[-1] >= hi - 1e-9 * max(1, abs(hi))
    steps = [b - a for a, b in itertools.pairwise(ticks)]
    step = steps[0]
    assert all(math.isclose(s, step, rel_tol=1e-6) for s in steps)
    mantissa = step / 10 ** math.floor(math.log10(step))
    assert any(math.isclose(mantissa, m, rel_tol=1e-6) for m in (1, 2, 5, 10))
    assert 2 <= len(ticks) <= 2 * n + 1


def test_nice_ticks_widen_a_flat_range_and_refuse_nonsense() -> None:
    ticks = svg.nice_ticks(3, 3)
    assert ticks[0] < 3 < ticks[-1]
    assert svg.nice_ticks(0, 0)[0] < 0 < svg.nice_ticks(0, 0)[-1]
    with pytest.raises(ValueError, match="finite"):
        svg.nice_ticks(0, math.inf)
    with pytest.raises(ValueError, match="at least 2"):
        svg.nice_ticks(0, 1, 1)


def test_time_ticks_pick_a_round_step_aligned_to_utc_midnight() -> None:
    # 6 d 19 h in at most 6 steps: 1 day would give 6.8, so 2 days
    ticks, fmt = svg.time_ticks(T0 + timedelta(hours=5), T0 + timedelta(days=7), n=6)
    assert {b - a for a, b in itertools.pairwise(ticks)} == {timedelta(days=2)}
    assert all(t.hour == 0 and t.minute == 0 and t.tzinfo is UTC for t in ticks)
    assert T0 + timedelta(hours=5) <= ticks[0] and ticks[-1] <= T0 + timedelta(days=7)
    assert fmt == "%d %b"
    hours, fmt_h = svg.time_ticks(T0, T0 + timedelta(hours=6), n=6)
    assert hours == [T0 + timedelta(hours=i) for i in range(7)]
    assert "%H:%M" in fmt_h
    years, fmt_y = svg.time_ticks(T0, T0 + timedelta(days=3000), n=6)
    assert len(years) <= 7 and fmt_y == "%b %Y"


# --- scales and paths --------------------------------------------------------------------------


def test_linear_scale_maps_ends_and_flips_for_screen_y() -> None:
    xs = svg.LinearScale(0, 10, 50, 650)
    assert xs(0) == 50 and xs(10) == 650 and xs(5) == 350
    ys = svg.LinearScale(0, 1, 266, 44)  # screen y grows downwards
    assert ys(0) == 266 and ys(1) == 44 and ys(0.5) == 155
    assert svg.LinearScale(2, 2, 0, 100)(2) == 50  # a zero-width domain sits in the middle


def test_path_data_breaks_at_gaps() -> None:
    d = svg.path_data([(0, 1), (1, 2), (2, None), (3, float("nan")), (4, 5), (5, 6)])
    assert d == "M0 1 L1 2 M4 5 L5 6"
    assert svg.path_data([]) == ""
    assert svg.path_data([(0.123456, -0.0)]) == "M0.12 0"


# --- escaping ----------------------------------------------------------------------------------


def test_escape_covers_markup_and_both_quotes() -> None:
    assert svg.escape("<a href='x' b=\"y\">&</a>") == (
        "&lt;a href=&#x27;x&#x27; b=&quot;y&quot;&gt;&amp;&lt;/a&gt;"
    )


def _hostile_charts() -> list[str]:
    t = [T0 + timedelta(hours=i) for i in range(10)]
    return [
        svg.health_chart(
            t,
            [0.1 * i for i in range(10)],
            failure_threshold=1.0,
            forecast=svg.Forecast(t[-1], t[-1] + timedelta(hours=5), t[-1] + timedelta(hours=9)),
            events=[svg.Marker(t[2], HOSTILE, HOSTILE)],
            title=HOSTILE,
        ),
        svg.indicator_chart(
            svg.IndicatorSeries(HOSTILE, HOSTILE, t, [float(i) for i in range(10)]), title=None
        ),
        svg.level_chart([svg.Level(HOSTILE, HOSTILE, 2.0, 1.0, 6.02)], title=HOSTILE),
        svg.message_chart(HOSTILE, HOSTILE),
        charts.health_svg(
            {
                "failure_mode": HOSTILE,
                "points": [{"t": "2026-06-01T00:00:00Z", "health_index": 0.2}],
                "maintenance_events": [
                    {"at": "2026-06-01T00:00:00Z", "kind": HOSTILE, "notes": HOSTILE}
                ],
            },
            title=HOSTILE,
        ),
    ]


@pytest.mark.parametrize("index", range(5))
def test_hostile_names_stay_text(index: int) -> None:
    text = _hostile_charts()[index]
    root = parse(text)  # well formed despite the name
    tags = {e.tag.split("}")[-1] for e in root.iter()}
    assert "script" not in tags
    for e in root.iter():
        assert not any(a.lower().startswith("on") for a in e.attrib), e.attrib
    # the name is shown, exactly, as text
    assert any(HOSTILE in s for s in texts(root))
    assert "<script>" not in text


# --- charts ------------------------------------------------------------------------------------


def _line(root: ET.Element, cls: str) -> ET.Element:
    found = root.find(f".//s:line[@class='{cls}']", NS)
    assert found is not None, cls
    return found


def test_health_chart_places_threshold_band_and_events_on_the_axes() -> None:
    t = [T0 + timedelta(days=i) for i in range(11)]
    hi = [0.05 * i for i in range(11)]
    forecast = svg.Forecast(
        T0 + timedelta(days=14), T0 + timedelta(days=16), T0 + timedelta(days=20)
    )
    root = parse(
        svg.health_chart(
            t,
            hi,
            failure_threshold=1.0,
            forecast=forecast,
            events=[svg.Marker(T0 + timedelta(days=5), "repair")],
            width=700,
            height=300,
        )
    )
    # the plot spans x 56 … 684 over 1 Jun … 21 Jun (P90) and y 266 … 44 over 0 … 1 (ticks)
    x = svg.LinearScale(T0.timestamp(), (T0 + timedelta(days=20)).timestamp(), 56, 684)
    y = svg.LinearScale(0, 1, 266, 44)
    threshold = _line(root, "failure-threshold")
    assert float(threshold.attrib["y1"]) == pytest.approx(y(1.0), abs=0.01)
    band = root.find(".//s:rect[@class='forecast-band']", NS)
    assert band is not None
    assert float(band.attrib["x"]) == pytest.approx(x(forecast.p10_at.timestamp()), abs=0.01)
    right = float(band.attrib["x"]) + float(band.attrib["width"])
    assert right == pytest.approx(x(forecast.p90_at.timestamp()), abs=0.02)
    p50 = _line(root, "forecast-p50")
    assert float(p50.attrib["x1"]) == pytest.approx(x(forecast.p50_at.timestamp()), abs=0.01)
    event = root.find(".//s:g[@class='maintenance-event']/s:line", NS)
    assert event is not None
    assert float(event.attrib["x1"]) == pytest.approx(x((T0 + timedelta(days=5)).timestamp()), 0.01)
    trend = root.find(".//s:path[@class='trend']", NS)
    assert trend is not None
    first = trend.attrib["d"].split()[0:2]
    assert first == ["M56", svg._num(y(0.0))]


def test_health_chart_states_a_far_forecast_instead_of_squashing_the_trend() -> None:
    t = [T0 + timedelta(days=i) for i in range(3)]
    far = svg.Forecast(T0 + timedelta(days=30), T0 + timedelta(days=300), T0 + timedelta(days=900))
    text = svg.health_chart(t, [0.1, 0.2, 0.3], failure_threshold=1.0, forecast=far)
    assert "P90 " in text and "beyond the chart" in text
    with pytest.raises(ValueError, match="differ in length"):
        svg.health_chart(t, [0.1])


def test_charts_without_values_say_so() -> None:
    assert "no health-index values yet" in svg.health_chart([T0], [None])
    series = svg.IndicatorSeries("x.rms", "g", [], [])
    assert "no values in this time range" in svg.indicator_chart(series)
    assert "names no indicator levels" in svg.level_chart([])
    assert "sent no indicators" in charts.indicators_svg([])


def test_level_chart_bar_length_is_db_over_baseline() -> None:
    root = parse(
        svg.level_chart(
            [
                svg.Level("de_accel.env_bpfo", "g", 0.4, 0.1, 12.04),
                svg.Level("de_accel.order_1x", "mm/s", 1.0, None, None),
            ],
            width=700,
        )
    )
    bars = root.findall(".//s:rect[@class='level']", NS)
    assert len(bars) == 1  # no baseline, no bar: the value is written instead
    # ticks 0, 5, 10, 15 dB over x 232 … 490 (labels 220 px + 12, notes 210 px on the right)
    scale = svg.LinearScale(0, 15, 232, 490)
    assert float(bars[0].attrib["width"]) == pytest.approx(scale(12.04) - scale(0), abs=0.02)
    assert any("no baseline" in s for s in texts(root))


# --- from contract bodies ----------------------------------------------------------------------


def test_health_svg_reads_the_contract_body_and_skips_excluded_points() -> None:
    body = {
        "asset_id": "MAL-P1",
        "failure_mode": "outer_race",
        "failure_threshold": 1.0,
        "points": [
            {"t": "2026-06-01T00:00:00Z", "health_index": 0.1, "excluded": False},
            {"t": "2026-06-01T01:00:00Z", "health_index": 9.0, "excluded": True},
            {"t": "2026-06-01T02:00:00Z", "health_index": None, "excluded": False},
            {"t": "2026-06-01T03:00:00Z", "health_index": 0.3, "excluded": False},
        ],
        "maintenance_events": [{"at": "2026-06-01T01:30:00Z", "kind": "inspection"}],
        "forecast": {
            "p10_at": "2026-06-02T00:00:00Z",
            "p50_at": "2026-06-03T00:00:00Z",
            "p90_at": "2026-06-04T00:00:00Z",
        },
    }
    root = parse(charts.health_svg(body, title="MAL-P1"))
    trend = root.find(".//s:path[@class='trend']", NS)
    assert trend is not None
    assert trend.attrib["d"].count("M") == 2  # the None breaks the line; 9.0 is left out
    assert "9" not in [t for t in texts(root) if t.startswith("9")]
    assert root.find(".//s:rect[@class='forecast-band']", NS) is not None
    assert len(root.findall(".//s:g[@class='maintenance-event']", NS)) == 1
    assert "MAL-P1 — health index (outer_race)" in texts(root)


def test_choose_key_indicators_and_bucket_width() -> None:
    names = [
        ("discharge_pressure.mean", "kPa"),
        ("nde_accel.velocity_rms", "mm/s"),
        ("de_accel.kurtosis", "1"),
        ("de_accel.env_bpfi", "g"),
        ("de_accel.env_bpfo", "g"),
        ("de_accel.velocity_rms", "mm/s"),
        ("zz.other", "1"),
    ]
    chosen = [n for n, _ in charts.choose_key_indicators(names, 5)]
    # one of each kind first (the drive-end velocity, not its non-drive-end twin too)
    assert chosen == [
        "de_accel.velocity_rms",
        "de_accel.env_bpfo",
        "de_accel.env_bpfi",
        "de_accel.kurtosis",
        "discharge_pressure.mean",
    ]
    everything = [n for n, _ in charts.choose_key_indicators(names, 10)]
    assert everything[5:] == ["nde_accel.velocity_rms", "zz.other"]
    assert charts.bucket_width(timedelta(days=1)) == "10m"  # 144 buckets
    assert charts.bucket_width(timedelta(days=7)) == "1h"  # 168 buckets; 30 min would be 336
    assert charts.bucket_width(timedelta(days=366)) == "7d"


def test_indicators_svg_stacks_one_panel_per_history() -> None:
    buckets = [Bucket(T0 + timedelta(hours=i), 6, 0, 1.0 + i, 0.5 + i, 1.5 + i) for i in range(5)]
    h = History("MAL-P1", "de_accel.velocity_rms", "mm/s", buckets, None)
    root = parse(charts.indicators_svg([h, h], width=640))
    assert root.attrib["viewBox"] == "0 0 640 340"
    assert len(root.findall("./s:g/s:svg", NS)) == 2
    assert len(root.findall(".//s:path[@class='range']", NS)) == 2


def test_diagnosis_svg_shows_the_defect_frequency_and_order_lines() -> None:
    body = {
        "indicators": [
            {"name": "de_accel.env_bpfo", "unit": "g", "value": 0.4, "baseline": 0.1,
             "db_over_baseline": 12.0},
            {"name": "de_accel.order_1x", "unit": "mm/s", "value": 1.0, "baseline": 1.0,
             "db_over_baseline": 0.0},
            {"name": "de_accel.kurtosis", "unit": "1", "value": 3.1, "baseline": 3.0,
             "db_over_baseline": None},
            {"name": "bad", "unit": "g", "value": "not a number"},
        ]
    }  # fmt: skip
    root = parse(charts.diagnosis_svg(body, title="MAL-P2"))
    labels = texts(root)
    assert "de_accel.env_bpfo" in labels and "de_accel.order_1x" in labels
    assert "de_accel.kurtosis" not in labels and "bad" not in labels
    assert len(root.findall(".//s:rect[@class='level']", NS)) == 2
    # without any spectral line, every level is shown
    only = {"indicators": [body["indicators"][2]]}
    assert "de_accel.kurtosis" in texts(parse(charts.diagnosis_svg(only, title="MAL-P2")))
