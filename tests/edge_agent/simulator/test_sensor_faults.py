"""Each sensor-fault kind leaves its crafted signature, on its channel only."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import numpy as np
import pytest

from edge_agent.simulator import (
    SENSOR_FAULT_KINDS,
    FaultScenario,
    PumpSimulator,
    SensorFaultEvent,
    SensorFaultKind,
    saltbush_asset,
)
from edge_agent.simulator.sensor_faults import DEFAULT_DRIFT_PER_DAY, apply_sensor_fault

T0 = datetime(2026, 6, 1, tzinfo=UTC)
DAY = timedelta(days=1)


def _pair(
    channel: str, kind: SensorFaultKind, t: datetime, **kw: float
) -> tuple[np.ndarray, np.ndarray, dict[str, object]]:
    """Samples of ``channel`` with and without the fault, same seed and time, and the labels."""
    asset = saltbush_asset("GIB-P2")
    event = SensorFaultEvent(
        channel=channel,
        kind=kind,
        start=T0,
        end=T0 + 30 * DAY,
        **kw,
    )
    faulty = PumpSimulator(asset, FaultScenario(sensor_faults=(event,)), seed=4).window(t)
    clean = PumpSimulator(asset, FaultScenario(), seed=4).window(t)
    for name in clean.channels:  # every other channel is untouched
        if name != channel:
            assert np.array_equal(faulty.channels[name].samples, clean.channels[name].samples)
    return faulty.channels[channel].samples, clean.channels[channel].samples, dict(faulty.labels)


@pytest.mark.parametrize("channel", ["de_accel", "discharge_pressure", "motor_current"])
def test_clipping_holds_samples_at_two_rails(channel: str) -> None:
    x, clean, labels = _pair(channel, "clipping", T0 + DAY)
    assert labels["sensor_fault"] == "clipping" and labels["sensor_fault_channel"] == channel
    top, bottom = x.max(), x.min()
    assert np.mean(x == top) > 0.05 and np.mean(x == bottom) > 0.05
    assert np.sum(clean == clean.max()) == 1  # the clean signal has no flat tops
    inside = (clean > bottom) & (clean < top)
    assert np.array_equal(x[inside], clean[inside])


def test_flatline_is_constant() -> None:
    x, clean, labels = _pair("suction_pressure", "flatline", T0 + DAY)
    assert labels["sensor_fault"] == "flatline"
    assert np.ptp(x) == 0.0 and np.ptp(clean) > 0.0
    assert x[0] == clean[0]


def test_spikes_are_few_isolated_and_large() -> None:
    x, clean, _ = _pair("de_accel", "spikes", T0 + DAY)
    changed = np.flatnonzero(x != clean)
    assert 3 <= changed.size <= 11
    assert np.all(np.abs(x[changed] - clean[changed]) > 10.0 * np.std(clean))


def test_dropout_is_one_run_of_nan() -> None:
    x, clean, labels = _pair("discharge_pressure", "dropout", T0 + DAY)
    assert labels["sensor_fault"] == "dropout"
    lost = np.flatnonzero(np.isnan(x))
    assert 0.1 * x.size - 1 <= lost.size <= 0.6 * x.size + 1
    assert np.all(np.diff(lost) == 1)  # contiguous
    kept = ~np.isnan(x)
    assert np.array_equal(x[kept], clean[kept])


def test_dc_drift_grows_linearly_with_time_since_onset() -> None:
    rate = DEFAULT_DRIFT_PER_DAY["temperature"]
    offsets = []
    for days in (2.0, 6.0):
        x, clean, labels = _pair("bearing_temp", "dc_drift", T0 + days * DAY)
        assert labels["sensor_fault"] == "dc_drift"
        offsets.append(float(np.mean(x - clean)))
        assert np.allclose(x - clean, rate * days)
    assert offsets[1] == pytest.approx(3.0 * offsets[0])
    x, clean, _ = _pair("bearing_temp", "dc_drift", T0 + 2 * DAY, drift_per_day=0.25)
    assert np.allclose(x - clean, 0.5)


def test_fault_window_is_respected() -> None:
    _, _, labels = _pair("de_accel", "spikes", T0 - DAY)
    assert labels["sensor_fault"] is None and labels["sensor_faults"] == {}


@pytest.mark.parametrize("kind", SENSOR_FAULT_KINDS)
def test_apply_sensor_fault_copies_and_handles_empty(kind: SensorFaultKind) -> None:
    x = np.sin(np.linspace(0.0, 30.0, 500))
    before = x.copy()
    y = apply_sensor_fault(x, kind=kind, rng=np.random.default_rng(0), elapsed_days=1.0,
                           drift_per_day=0.1)  # fmt: skip
    assert np.array_equal(x, before)
    assert not np.array_equal(y, x, equal_nan=True)
    assert apply_sensor_fault([], kind=kind, rng=np.random.default_rng(0)).size == 0


def test_apply_sensor_fault_rejects_unknown_kind() -> None:
    with pytest.raises(ValueError, match="kind must be one of"):
        apply_sensor_fault([1.0, 2.0], kind="hum", rng=np.random.default_rng(0))
