"""Fault scenarios and the demo assignment for the twelve Saltbush Flats pumps."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import numpy as np
import pytest

from edge_agent.simulator import (
    BEARING_FAULTS,
    DEMO_START,
    FAULT_MODES,
    SALTBUSH_ASSET_IDS,
    SENSOR_FAULT_KINDS,
    ExponentialGrowth,
    FaultScenario,
    LinearGrowth,
    SensorFaultEvent,
    StepGrowth,
    saltbush_scenarios,
)

T0 = datetime(2026, 4, 1, tzinfo=UTC)
DAY = timedelta(days=1)


def test_severity_follows_the_law_and_reaches_one_at_failure() -> None:
    law = ExponentialGrowth(initial=0.05)
    sc = FaultScenario(fault="outer_race", onset=T0, life_days=80.0, growth=law)
    assert sc.failure_time == T0 + 80 * DAY
    assert sc.severity(T0 - DAY) == 0.0
    assert sc.fault_at(T0 - DAY) == "healthy"
    assert sc.fault_at(T0) == "outer_race"
    for d in (0.0, 10.0, 40.0, 79.0):
        assert sc.severity(T0 + d * DAY) == pytest.approx(float(law.severity(d, 80.0)))
    assert sc.severity(T0 + 80 * DAY) == pytest.approx(1.0, abs=1e-12)
    assert sc.severity(T0 + 200 * DAY) == 1.0


def test_repair_resets_the_fault() -> None:
    sc = FaultScenario(
        fault="misalignment", onset=T0, life_days=100.0, growth=StepGrowth(step=0.5),
        repair=T0 + 30 * DAY,
    )  # fmt: skip
    assert sc.severity(T0 + 29 * DAY) == pytest.approx(0.5 + 0.5 * 29 / 100)
    assert sc.severity(T0 + 30 * DAY) == 0.0
    assert sc.fault_at(T0 + 31 * DAY) == "healthy"


def test_default_growth_by_fault() -> None:
    assert isinstance(FaultScenario(fault="inner_race", onset=T0, life_days=5).growth_law,
                      ExponentialGrowth)  # fmt: skip
    assert isinstance(FaultScenario(fault="impeller_wear", onset=T0, life_days=5).growth_law,
                      LinearGrowth)  # fmt: skip
    assert FaultScenario().growth_law is None
    assert FaultScenario().failure_time is None


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"fault": "bent_shaft"}, "fault must be one of"),
        ({"fault": "cage", "life_days": 10.0}, "onset is required"),
        ({"fault": "cage", "onset": T0}, "life_days must be > 0"),
        ({"fault": "cage", "onset": datetime(2026, 4, 1), "life_days": 3.0}, "timezone-aware"),
        ({"fault": "cage", "onset": T0, "life_days": 3.0, "repair": T0}, "repair must be after"),
        ({"fault": "cage", "onset": T0, "life_days": 3.0, "bearing": ""}, "bearing must name"),
    ],
)
def test_bad_scenarios_are_rejected_with_the_parameter_named(
    kwargs: dict[str, object], message: str
) -> None:
    with pytest.raises(ValueError, match=message):
        FaultScenario(**kwargs)  # type: ignore[arg-type]


def test_sensor_fault_event_validation_and_activity() -> None:
    e = SensorFaultEvent(channel="de_accel", kind="spikes", start=T0, end=T0 + DAY)
    assert e.active(T0) and not e.active(T0 + DAY)
    with pytest.raises(ValueError, match="kind must be one of"):
        SensorFaultEvent(channel="de_accel", kind="hum", start=T0, end=T0 + DAY)  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="end must be after start"):
        SensorFaultEvent(channel="de_accel", kind="spikes", start=T0, end=T0)


def test_saltbush_story_covers_every_fault_mode() -> None:
    scenarios = saltbush_scenarios()
    assert sorted(scenarios) == sorted(SALTBUSH_ASSET_IDS)
    faults = {s.fault for s in scenarios.values()}
    assert faults == set(FAULT_MODES)
    healthy = [a for a, s in scenarios.items() if s.fault == "healthy"]
    assert len(healthy) == 3
    # one bearing is replaced mid-way, before it reaches the failure threshold
    repaired_early = [
        a for a, s in scenarios.items()
        if s.repair is not None and s.failure_time is not None and s.repair < s.failure_time
        and s.fault in BEARING_FAULTS
    ]  # fmt: skip
    assert repaired_early == ["COO-P2"]
    assert any(s.sensor_faults for s in scenarios.values())
    for s in scenarios.values():
        if s.onset is not None:
            assert DEMO_START <= s.onset < DEMO_START + 180 * DAY


def test_saltbush_story_is_seeded_with_unit_to_unit_variation() -> None:
    a, b, c = saltbush_scenarios(seed=1), saltbush_scenarios(seed=1), saltbush_scenarios(seed=2)
    assert a == b
    assert a["MAL-P2"].onset != c["MAL-P2"].onset
    assert a["MAL-P2"].life_days != c["MAL-P2"].life_days
    lives = {a[x].life_days for x in ("MAL-P2", "GIB-P1", "SPI-P3", "COO-P1")}
    assert len(lives) == 4


def test_random_sensor_faults_are_seeded_and_within_the_period() -> None:
    from edge_agent.simulator import draw_sensor_faults

    channels = ["de_accel", "suction_pressure", "bearing_temp"]
    end = T0 + 3650 * DAY
    a = draw_sensor_faults(
        channels, start=T0, end=end, rng=np.random.default_rng(5), episodes_per_year=4.0
    )
    b = draw_sensor_faults(
        channels, start=T0, end=end, rng=np.random.default_rng(5), episodes_per_year=4.0
    )
    assert a == b
    # Poisson count: 4 episodes per channel-year over 10 years and 3 channels -> about 120
    assert 80 <= len(a) <= 160
    assert {e.kind for e in a} == set(SENSOR_FAULT_KINDS)
    assert all(T0 <= e.start < end and e.channel in channels for e in a)
    drift = [e for e in a if e.kind == "dc_drift"]
    assert all(20 * DAY <= e.end - e.start <= 60 * DAY for e in drift)
    with pytest.raises(ValueError, match="kinds must be"):
        draw_sensor_faults(channels, start=T0, end=end, rng=np.random.default_rng(5), kinds=["hum"])  # type: ignore[list-item]
