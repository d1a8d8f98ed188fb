"""The pump simulator against independent references, standards and the affinity laws."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import numpy as np
import pytest

from edge_agent.simulator import (
    DEMO_START,
    SALTBUSH_ASSET_IDS,
    ConstantDuty,
    DutyPoint,
    FaultScenario,
    LinearGrowth,
    PumpSimulator,
    StepGrowth,
    SystemCurve,
    bearing_defect_frequencies,
    saltbush_asset,
    saltbush_hydraulics,
    saltbush_simulators,
)
from edge_agent.simulator.physics import PumpHydraulics
from tests.edge_agent.simulator.reference import (
    band_power,
    line_amplitude,
    line_prominence,
    squared_envelope_spectrum,
    velocity_rms_mm_s,
)

T0 = datetime(2026, 5, 1, 6, 0, tzinfo=UTC)
DAY = timedelta(days=1)
FULL_SPEED = ConstantDuty(point=DutyPoint(speed_reference_rpm=1780.0))


def _at_severity(fault: str, severity: float, **kw: object) -> tuple[FaultScenario, datetime]:
    """A scenario with linear growth over 100 days and the time at which it has ``severity``."""
    sc = FaultScenario(
        fault=fault,  # type: ignore[arg-type]
        onset=T0,
        life_days=100.0,
        growth=LinearGrowth(),
        **kw,  # type: ignore[arg-type]
    )
    return sc, T0 + severity * 100.0 * DAY


def test_same_seed_and_time_give_identical_windows_in_any_order() -> None:
    asset = saltbush_asset("GIB-P1")
    sc, t = _at_severity("inner_race", 0.4)
    first = PumpSimulator(asset, sc, seed=11)
    second = PumpSimulator(asset, sc, seed=11)
    later = t + timedelta(hours=5)
    a1, a2 = first.window(t), first.window(later)
    b2, b1 = second.window(later), second.window(t)  # reverse order, fresh instance
    for a, b in ((a1, b1), (a2, b2)):
        assert a.labels == b.labels and a.process == b.process and a.start == b.start
        for name in a.channels:
            assert np.array_equal(a.channels[name].samples, b.channels[name].samples), name


def test_different_seeds_or_times_differ() -> None:
    asset = saltbush_asset("MAL-P1")
    a = PumpSimulator(asset, FaultScenario(), seed=1).window(T0)
    b = PumpSimulator(asset, FaultScenario(), seed=2).window(T0)
    c = PumpSimulator(asset, FaultScenario(), seed=1).window(T0 + timedelta(seconds=1))
    for name in a.channels:
        assert not np.array_equal(a.channels[name].samples, b.channels[name].samples), name
        assert not np.array_equal(a.channels[name].samples, c.channels[name].samples), name


def test_window_shape_rates_and_units_follow_the_asset() -> None:
    asset = saltbush_asset("SPI-P2", window_s=2.0)
    ws = PumpSimulator(asset, FaultScenario(), seed=0).window(T0)
    assert ws.asset_id == "SPI-P2" and ws.start == T0
    assert list(ws.channels) == [c.name for c in asset.channels]
    for c in asset.channels:
        w = ws.channels[c.name]
        assert (w.kind, w.unit, w.fs) == (c.kind, c.unit, c.fs_hz)
        assert w.samples.shape == (round(2.0 * c.fs_hz),)
        assert np.all(np.isfinite(w.samples))
    assert set(ws.process) == {"drive_speed_rpm", "flow_m3_per_h", "fluid_temperature_c"}


def test_labels_tell_the_truth() -> None:
    asset = saltbush_asset("MAL-P2")
    sc = FaultScenario(fault="outer_race", onset=T0, life_days=50.0, bearing="nde")
    sim = PumpSimulator(asset, sc, seed=5)
    before, during = sim.window(T0 - DAY), sim.window(T0 + 20 * DAY)
    assert before.labels["fault"] == "healthy" and before.labels["severity"] == 0.0
    assert before.labels["faulty_bearing"] is None
    assert during.labels["fault"] == "outer_race"
    assert during.labels["severity"] == pytest.approx(sc.severity(T0 + 20 * DAY))
    assert during.labels["faulty_bearing"] == "nde"
    assert during.labels["sensor_fault"] is None
    # the drive's reference is the synchronous speed; the shaft lags by the slip (0-2 %)
    shaft_rpm = 60.0 * float(during.labels["shaft_speed_hz"])  # type: ignore[arg-type]
    reference = during.process["drive_speed_rpm"]
    assert 0.98 * reference < shaft_rpm < reference
    assert 1150.0 <= reference <= 1780.0


def test_shaft_speed_label_matches_the_running_speed_line() -> None:
    # the 1x line of an unbalanced pump must sit at the labelled shaft speed
    sc, t = _at_severity("imbalance", 0.8)
    ws = PumpSimulator(saltbush_asset("MAL-P3"), sc, seed=2).window(t)
    x = ws.channels["de_accel"].samples
    f = np.fft.rfftfreq(x.size * 8, 1 / 25_600.0)
    spectrum = np.abs(np.fft.rfft(x * np.hanning(x.size), n=x.size * 8))
    low = (f > 10) & (f < 40)
    assert f[low][np.argmax(spectrum[low])] == pytest.approx(ws.labels["shaft_speed_hz"], abs=0.2)


def test_healthy_pumps_sit_in_iso_10816_3_zone_a_or_b() -> None:
    # ISO 10816-3:2009 Annex A (secondary transcription, REFERENCES.md): group 2 (15-300 kW),
    # rigid foundation, zone B/C boundary 2.8 mm/s r.m.s. velocity over 10-1000 Hz; velocity
    # from an rFFT integration independent of the project's DSP
    for asset_id in SALTBUSH_ASSET_IDS:
        sim = PumpSimulator(saltbush_asset(asset_id), FaultScenario(), seed=3)
        for t in (T0, T0 + 40 * DAY + timedelta(hours=13)):
            ws = sim.window(t)
            for name in ("de_accel", "nde_accel"):
                v = velocity_rms_mm_s(ws.channels[name].samples, 25_600.0)
                assert 0.2 < v < 2.8, (asset_id, name, v)


def test_imbalance_at_failure_threshold_reaches_zone_d_at_full_speed() -> None:
    # severity 1 is the failure threshold: above the zone C/D boundary of 4.5 mm/s (group 2,
    # rigid; ISO 10816-3 secondary transcription)
    sc, t = _at_severity("imbalance", 1.0)
    ws = PumpSimulator(saltbush_asset("MAL-P3"), sc, seed=4, duty=FULL_SPEED).window(t)
    assert velocity_rms_mm_s(ws.channels["de_accel"].samples, 25_600.0) > 4.5


@pytest.mark.parametrize("bearing", ["de", "nde"])
def test_outer_race_defect_shows_bpfo_in_the_squared_envelope_spectrum(bearing: str) -> None:
    # BPFO = n/2 fr (1 - d/D cos phi) (Randall & Antoni 2011, eqs. 1-4, REFERENCES.md); the
    # envelope by butter/sosfiltfilt + hilbert (scipy reference implementation)
    asset = saltbush_asset("MAL-P2")
    sc, t = _at_severity("outer_race", 0.3, bearing=bearing)
    ws = PumpSimulator(asset, sc, seed=8, duty=FULL_SPEED).window(t)
    fr = float(ws.labels["shaft_speed_hz"])  # type: ignore[arg-type]
    freqs = bearing_defect_frequencies(asset.bearings[bearing], fr)
    f, env = squared_envelope_spectrum(ws.channels[f"{bearing}_accel"].samples, 25_600.0)
    assert line_prominence(f, env, freqs.bpfo_hz) > 6.0
    assert line_prominence(f, env, 2 * freqs.bpfo_hz) > 3.0
    assert line_prominence(f, env, freqs.bpfi_hz) < 3.0


def test_inner_race_defect_shows_bpfi_with_shaft_rate_sidebands() -> None:
    asset = saltbush_asset("GIB-P1")
    sc, t = _at_severity("inner_race", 0.3)
    ws = PumpSimulator(asset, sc, seed=9, duty=FULL_SPEED).window(t)
    fr = float(ws.labels["shaft_speed_hz"])  # type: ignore[arg-type]
    freqs = bearing_defect_frequencies(asset.bearings["de"], fr)
    f, env = squared_envelope_spectrum(ws.channels["de_accel"].samples, 25_600.0)
    assert line_prominence(f, env, freqs.bpfi_hz) > 4.0
    # load-zone modulation at the shaft rate puts sidebands at BPFI +- fr
    assert line_prominence(f, env, freqs.bpfi_hz - fr) > 4.0
    assert line_prominence(f, env, freqs.bpfi_hz + fr) > 4.0
    assert line_prominence(f, env, fr) > 4.0
    assert line_prominence(f, env, freqs.bpfo_hz) < 3.0


def test_healthy_bearing_shows_no_defect_lines() -> None:
    asset = saltbush_asset("GIB-P1")
    ws = PumpSimulator(asset, FaultScenario(), seed=9, duty=FULL_SPEED).window(T0)
    freqs = bearing_defect_frequencies(
        asset.bearings["de"],
        float(ws.labels["shaft_speed_hz"]),  # type: ignore[arg-type]
    )
    f, env = squared_envelope_spectrum(ws.channels["de_accel"].samples, 25_600.0)
    assert line_prominence(f, env, freqs.bpfo_hz) < 3.0
    assert line_prominence(f, env, freqs.bpfi_hz) < 3.0


def test_rolling_element_and_cage_defects_show_their_frequencies() -> None:
    asset = saltbush_asset("SPI-P3")
    for fault, line in (("rolling_element", "2bsf"), ("cage", "ftf")):
        sc, t = _at_severity(fault, 0.4, bearing="nde")
        ws = PumpSimulator(asset, sc, seed=10, duty=FULL_SPEED).window(t)
        freqs = bearing_defect_frequencies(
            asset.bearings["nde"],
            float(ws.labels["shaft_speed_hz"]),  # type: ignore[arg-type]
        )
        target = 2 * freqs.bsf_hz if line == "2bsf" else freqs.ftf_hz
        f, env = squared_envelope_spectrum(ws.channels["nde_accel"].samples, 25_600.0)
        assert line_prominence(f, env, target, tolerance_hz=1.0) > 4.0, fault


def test_bearing_defect_is_stronger_on_its_own_housing() -> None:
    sc, t = _at_severity("outer_race", 0.5, bearing="de")
    ws = PumpSimulator(saltbush_asset("MAL-P2"), sc, seed=12, duty=FULL_SPEED).window(t)
    de = band_power(ws.channels["de_accel"].samples, 25_600.0, (1500.0, 7000.0))
    nde = band_power(ws.channels["nde_accel"].samples, 25_600.0, (1500.0, 7000.0))
    assert de > 3.0 * nde


def test_imbalance_raises_the_running_speed_line_with_speed_squared() -> None:
    # unbalance force m e w^2 (common practice); the housing acceleration is modelled in
    # proportion to it, so the 1x acceleration amplitude grows with speed^2
    sc = FaultScenario(fault="imbalance", onset=T0, life_days=1e6, growth=StepGrowth(step=0.8))
    asset = saltbush_asset("MAL-P3")
    speeds, amplitudes = [], []
    for rpm in (1200.0, 1480.0, 1780.0):
        sim = PumpSimulator(
            asset, sc, seed=13, duty=ConstantDuty(point=DutyPoint(speed_reference_rpm=rpm))
        )
        amp = []
        for k in range(6):
            ws = sim.window(T0 + k * timedelta(minutes=7))
            fr = float(ws.labels["shaft_speed_hz"])  # type: ignore[arg-type]
            amp.append(line_amplitude(ws.channels["de_accel"].samples, 25_600.0, fr))
        speeds.append(fr)
        amplitudes.append(float(np.mean(amp)))
    slope = np.polyfit(np.log(speeds), np.log(amplitudes), 1)[0]
    assert slope == pytest.approx(2.0, abs=0.2)
    healthy = PumpSimulator(asset, FaultScenario(), seed=13, duty=FULL_SPEED).window(T0)
    fr = float(healthy.labels["shaft_speed_hz"])  # type: ignore[arg-type]
    assert amplitudes[-1] > 3.0 * line_amplitude(healthy.channels["de_accel"].samples, 25_600, fr)


def test_misalignment_raises_twice_running_speed() -> None:
    asset = saltbush_asset("GIB-P3")
    sc, t = _at_severity("misalignment", 0.7)
    bad = PumpSimulator(asset, sc, seed=14, duty=FULL_SPEED).window(t)
    good = PumpSimulator(asset, FaultScenario(), seed=14, duty=FULL_SPEED).window(t)
    fr = float(bad.labels["shaft_speed_hz"])  # type: ignore[arg-type]
    two_x_bad = line_amplitude(bad.channels["de_accel"].samples, 25_600.0, 2 * fr)
    two_x_good = line_amplitude(good.channels["de_accel"].samples, 25_600.0, 2 * fr)
    one_x_bad = line_amplitude(bad.channels["de_accel"].samples, 25_600.0, fr)
    assert two_x_bad > 5.0 * two_x_good
    # for a misaligned coupling, 2x exceeds 1x in acceleration (common practice, no source)
    assert two_x_bad > one_x_bad


def test_cavitation_raises_high_band_energy_at_low_suction_pressure() -> None:
    asset = saltbush_asset("SPI-P1")
    sc = FaultScenario(fault="cavitation", onset=T0, life_days=100.0, growth=LinearGrowth())
    sim = PumpSimulator(asset, sc, seed=15, duty=FULL_SPEED)
    early, late = sim.window(T0 + 10 * DAY), sim.window(T0 + 99 * DAY)
    ps_early = float(np.mean(early.channels["suction_pressure"].samples))
    ps_late = float(np.mean(late.channels["suction_pressure"].samples))
    assert ps_late < ps_early - 50.0
    band = (5000.0, 12000.0)
    hf_early = band_power(early.channels["nde_accel"].samples, 25_600.0, band)
    hf_late = band_power(late.channels["nde_accel"].samples, 25_600.0, band)
    assert hf_late > 10.0 * hf_early
    assert np.std(late.channels["suction_pressure"].samples) > 3 * np.std(
        early.channels["suction_pressure"].samples
    )
    assert float(late.labels["cavitation_intensity"]) > 0.8  # type: ignore[arg-type]


def test_a_healthy_pump_cavitates_when_suction_pressure_is_low() -> None:
    # the driver is the NPSH margin, not the label: drain the tank and a healthy pump cavitates
    asset = saltbush_asset("SPI-P1")
    band = (5000.0, 12000.0)
    power = {}
    for supply in (85.0, -55.0):
        duty = ConstantDuty(point=DutyPoint(speed_reference_rpm=1780.0, supply_pressure_kpa=supply))
        ws = PumpSimulator(asset, FaultScenario(), seed=16, duty=duty).window(T0)
        power[supply] = band_power(ws.channels["nde_accel"].samples, 25_600.0, band)
    assert power[-55.0] > 10.0 * power[85.0]


def test_impeller_wear_loses_head_and_raises_vane_pass() -> None:
    asset = saltbush_asset("SPI-P2")
    sc, t = _at_severity("impeller_wear", 0.9)
    worn = PumpSimulator(asset, sc, seed=17, duty=FULL_SPEED).window(t)
    new = PumpSimulator(asset, FaultScenario(), seed=17, duty=FULL_SPEED).window(t)

    def rise(ws: object) -> float:
        ch = ws.channels  # type: ignore[attr-defined]
        return float(
            np.mean(ch["discharge_pressure"].samples) - np.mean(ch["suction_pressure"].samples)
        )

    fr = float(worn.labels["shaft_speed_hz"])  # type: ignore[arg-type]
    assert rise(worn) < 0.95 * rise(new)  # head lost at (nearly) the same speed
    vp_worn = line_amplitude(worn.channels["discharge_pressure"].samples, 1000.0, 6 * fr)
    vp_new = line_amplitude(new.channels["discharge_pressure"].samples, 1000.0, 6 * fr)
    assert vp_worn > 2.0 * vp_new


def test_worn_pump_on_flow_demand_runs_faster() -> None:
    asset = saltbush_asset("SPI-P2")
    duty = ConstantDuty(point=DutyPoint(flow_demand_m3_per_h=90.0))
    sc, t = _at_severity("impeller_wear", 0.9)
    worn = PumpSimulator(asset, sc, seed=18, duty=duty).window(t)
    new = PumpSimulator(asset, FaultScenario(), seed=18, duty=duty).window(t)
    assert worn.process["drive_speed_rpm"] > new.process["drive_speed_rpm"] + 20.0
    assert worn.process["flow_m3_per_h"] == pytest.approx(90.0, rel=1e-6)


def test_affinity_laws_hold_for_the_simulated_pump() -> None:
    # affinity laws (common practice, no source): against a pure-friction system curve the
    # operating points at two speeds are similar, so Q ~ N, H ~ N^2 and P ~ N^3
    base = saltbush_hydraulics("COO-P1")
    hydraulics = PumpHydraulics(
        pump=base.pump,
        system=SystemCurve(static_head_m=0.0, friction_head_at_bep_m=base.pump.bep_head_m,
                           bep_flow_m3_per_h=base.pump.bep_flow_m3_per_h),
        motor=base.motor,
        suction_loss_at_bep_kpa=base.suction_loss_at_bep_kpa,
    )  # fmt: skip
    asset = saltbush_asset("COO-P1")
    results = {}
    for rpm in (1200.0, 1780.0):
        duty = ConstantDuty(point=DutyPoint(speed_reference_rpm=rpm, fluid_temperature_c=30.0))
        sim = PumpSimulator(asset, FaultScenario(), seed=19, duty=duty, hydraulics=hydraulics)
        ws = sim.window(T0)
        dp = float(
            np.mean(ws.channels["discharge_pressure"].samples)
            - np.mean(ws.channels["suction_pressure"].samples)
        )
        results[rpm] = (
            float(ws.labels["shaft_speed_hz"]),  # type: ignore[arg-type]
            ws.process["flow_m3_per_h"],
            dp,
            sim.operating_state(T0).shaft_power_kw,
        )
    (n1, q1, h1, p1), (n2, q2, h2, p2) = results[1200.0], results[1780.0]
    ratio = n2 / n1
    assert q2 / q1 == pytest.approx(ratio, rel=1e-6)
    assert h2 / h1 == pytest.approx(ratio**2, rel=0.01)
    assert p2 / p1 == pytest.approx(ratio**3, rel=1e-6)


def test_motor_current_rms_tracks_load() -> None:
    asset = saltbush_asset("MAL-P1")
    rms = {}
    for rpm in (1200.0, 1780.0):
        duty = ConstantDuty(point=DutyPoint(speed_reference_rpm=rpm))
        sim = PumpSimulator(asset, FaultScenario(), seed=20, duty=duty)
        x = sim.window(T0).channels["motor_current"].samples
        rms[rpm] = float(np.sqrt(np.mean(x**2)))
        assert rms[rpm] == pytest.approx(sim.operating_state(T0).current_rms_a, rel=0.02)
    assert rms[1780.0] > rms[1200.0]
    assert rms[1780.0] < asset.rated_current_a  # type: ignore[operator]


def test_bearing_temperature_rises_with_a_failing_bearing() -> None:
    asset = saltbush_asset("MAL-P2")
    sc, t = _at_severity("outer_race", 1.0)
    hot = PumpSimulator(asset, sc, seed=21, duty=FULL_SPEED).window(t)
    cool = PumpSimulator(asset, FaultScenario(), seed=21, duty=FULL_SPEED).window(t)
    assert (
        np.mean(hot.channels["bearing_temp"].samples)
        > np.mean(cool.channels["bearing_temp"].samples) + 10.0
    )


def test_severity_label_follows_the_growth_law_to_one_at_failure() -> None:
    sims = saltbush_simulators(seed=2026)
    sim = sims["MAL-P2"]
    sc = sim.scenario
    assert sc.onset is not None and sc.failure_time is not None and sc.life_days is not None
    law = sc.growth_law
    assert law is not None
    for frac in (0.0, 0.25, 0.5, 0.75):
        t = sc.onset + frac * sc.life_days * DAY
        expected = float(law.severity(frac * sc.life_days, sc.life_days))
        assert sim.window(t).labels["severity"] == pytest.approx(expected, rel=1e-9)
    assert sim.window(sc.failure_time).labels["severity"] == pytest.approx(1.0, abs=1e-9)


def test_repaired_pump_is_healthy_again() -> None:
    sim = saltbush_simulators(seed=2026)["COO-P2"]
    assert sim.scenario.repair is not None
    before = sim.window(sim.scenario.repair - timedelta(hours=1))
    after = sim.window(sim.scenario.repair + timedelta(hours=1))
    assert before.labels["fault"] == "outer_race" and float(before.labels["severity"]) > 0  # type: ignore[arg-type]
    assert after.labels["fault"] == "healthy" and after.labels["severity"] == 0.0


def test_windows_iterates_over_a_period() -> None:
    sim = PumpSimulator(saltbush_asset("MAL-P1"), FaultScenario(), seed=0)
    sets = list(sim.windows(DEMO_START, DEMO_START + DAY, interval=timedelta(hours=6)))
    assert [ws.start for ws in sets] == [DEMO_START + k * timedelta(hours=6) for k in range(4)]
    assert np.array_equal(
        sets[2].channels["de_accel"].samples,
        sim.window(DEMO_START + timedelta(hours=12)).channels["de_accel"].samples,
    )
    with pytest.raises(ValueError, match="interval must be positive"):
        sim.windows(DEMO_START, DEMO_START + DAY, interval=timedelta(0))


def test_default_duty_varies_with_season_and_time_of_day() -> None:
    sim = PumpSimulator(saltbush_asset("MAL-P1"), FaultScenario(), seed=0)
    summer = sim.window(datetime(2026, 1, 25, 5, 0, tzinfo=UTC)).process
    winter = sim.window(datetime(2026, 7, 25, 5, 0, tzinfo=UTC)).process
    assert summer["fluid_temperature_c"] > winter["fluid_temperature_c"] + 12.0
    speeds = {
        round(sim.window(DEMO_START + k * timedelta(hours=3)).process["drive_speed_rpm"])
        for k in range(8)
    }
    assert len(speeds) > 4
    assert all(1150 <= s <= 1780 for s in speeds)


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (lambda s: s.window(datetime(2026, 5, 1)), "timezone-aware"),
        (lambda s: s.window(datetime(1969, 5, 1, tzinfo=UTC)), "before 1970"),
    ],
)
def test_bad_times_are_rejected(call: object, message: str) -> None:
    sim = PumpSimulator(saltbush_asset("MAL-P1"), FaultScenario(), seed=0)
    with pytest.raises(ValueError, match=message):
        call(sim)  # type: ignore[operator]


def test_bad_configuration_is_rejected() -> None:
    asset = saltbush_asset("MAL-P1")
    with pytest.raises(ValueError, match="seed must be"):
        PumpSimulator(asset, FaultScenario(), seed=-1)
    from edge_agent.simulator import SensorFaultEvent

    bad = FaultScenario(
        sensor_faults=(SensorFaultEvent(channel="tacho", kind="spikes", start=T0, end=T0 + DAY),)
    )
    with pytest.raises(ValueError, match="not among the asset's channels"):
        PumpSimulator(asset, bad, seed=0)
    no_bearings = asset.model_copy(update={"bearings": {}, "channels": ()})
    with pytest.raises(ValueError, match="not among the asset's bearings"):
        PumpSimulator(no_bearings, FaultScenario(fault="cage", onset=T0, life_days=9.0), seed=0)


def test_healthy_demo_pumps_never_cavitate_over_a_year_of_duty() -> None:
    # the labels stay honest: the default duty keeps a healthy pump's NPSH margin above the
    # incipient-cavitation ratio, so no healthy window carries cavitation noise
    for asset_id in SALTBUSH_ASSET_IDS:
        sim = PumpSimulator(saltbush_asset(asset_id), FaultScenario(), seed=2026)
        for k in range(0, 365 * 2, 7):
            state = sim.operating_state(DEMO_START + k * timedelta(hours=12))
            assert state.cavitation_intensity == 0.0, (asset_id, k)
            assert state.npsh_available_m > 3.0 * state.npsh_required_m


def test_a_generic_asset_with_a_tachometer_is_simulated() -> None:
    from edge_agent.assets import AssetConfig, BearingGeometry, ChannelConfig

    asset = AssetConfig(
        asset_id="TEST-1",
        power_kw=30.0,
        bearings={"pump": BearingGeometry(n_elements=8, element_diameter_mm=12.0,
                                          pitch_diameter_mm=60.0)},
        channels=(
            ChannelConfig(name="casing_accel", kind="accel", unit="g", fs_hz=20_000.0,
                          bearing="pump"),
            ChannelConfig(name="key_phasor", kind="tacho", unit="V", fs_hz=5000.0, window_s=2.0),
            ChannelConfig(name="suction_kpa", kind="pressure", unit="kPa", fs_hz=500.0),
        ),
    )  # fmt: skip
    sc = FaultScenario(fault="outer_race", onset=T0, life_days=10.0, bearing="pump")
    ws = PumpSimulator(asset, sc, seed=1, duty=FULL_SPEED).window(T0 + 5 * DAY)
    assert ws.channels["casing_accel"].samples.shape == (20_000,)
    tacho = ws.channels["key_phasor"].samples
    assert tacho.shape == (10_000,)
    rising = np.flatnonzero((tacho[1:] > 2.5) & (tacho[:-1] <= 2.5))
    revolutions = 2.0 * float(ws.labels["shaft_speed_hz"])  # type: ignore[arg-type]
    assert abs(rising.size - revolutions) <= 1.0
    freqs = bearing_defect_frequencies(
        asset.bearings["pump"],
        float(ws.labels["shaft_speed_hz"]),  # type: ignore[arg-type]
    )
    f, env = squared_envelope_spectrum(ws.channels["casing_accel"].samples, 20_000.0)
    assert line_prominence(f, env, freqs.bpfo_hz) > 6.0


def test_pressure_channels_must_say_where_they_sit() -> None:
    from edge_agent.assets import AssetConfig, ChannelConfig

    asset = AssetConfig(
        asset_id="TEST-2",
        channels=(ChannelConfig(name="line_pressure", kind="pressure", unit="kPa", fs_hz=100.0),),
    )
    with pytest.raises(ValueError, match="'discharge' or 'suction'"):
        PumpSimulator(asset, FaultScenario(), seed=0)


def test_vane_pass_follows_the_vane_count() -> None:
    asset = saltbush_asset("MAL-P1").model_copy(update={"vane_count": 5})
    ws = PumpSimulator(asset, FaultScenario(), seed=22, duty=FULL_SPEED).window(T0)
    fr = float(ws.labels["shaft_speed_hz"])  # type: ignore[arg-type]
    accel = ws.channels["nde_accel"].samples
    pressure = ws.channels["discharge_pressure"].samples
    # a line at 5x and none at 6x (common practice: vane pass = vanes x shaft rate)
    assert line_amplitude(accel, 25_600.0, 5 * fr) > 10 * line_amplitude(accel, 25_600.0, 6 * fr)
    assert line_amplitude(pressure, 1000.0, 5 * fr) > 10 * line_amplitude(pressure, 1000.0, 6 * fr)


def test_colder_more_viscous_water_takes_more_power_at_the_same_speed() -> None:
    # water viscosity falls with temperature (about 1.0 mPa s at 20 degC, 0.65 at 40 degC,
    # from memory); disc friction grows with it, the density change is small
    asset = saltbush_asset("MAL-P1")
    power = {}
    for temp in (15.0, 42.0):
        duty = ConstantDuty(point=DutyPoint(speed_reference_rpm=1600.0, fluid_temperature_c=temp))
        state = PumpSimulator(asset, FaultScenario(), seed=0, duty=duty).operating_state(T0)
        power[temp] = state.shaft_power_kw
        assert state.viscosity_pa_s == pytest.approx(1.14e-3 if temp == 15.0 else 0.63e-3, rel=0.05)
    assert power[15.0] > power[42.0]
