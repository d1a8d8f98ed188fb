"""The extractor on real bearing data, on crafted bad windows and on the pump simulator."""

from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest

from edge_agent.assets import AssetConfig, BearingGeometry, ChannelConfig
from edge_agent.extractor import ACCEL_QUANTITIES, DEFAULT_ACCEL_QUANTITIES, Extractor
from edge_agent.windows import ChannelWindow, WindowSet
from shared_schema import (
    IndicatorMessage,
    QualityFlag,
    ShaftSpeedSource,
    decode_indicators,
    encode_indicators,
)

DATA = Path(__file__).resolve().parents[1] / "data" / "ims-2nd-test"
INCH = 25.4
IMS_FS = 20_480.0  # see tests/data/ims-2nd-test/README.md, "Sample rate"
START = datetime(2026, 3, 1, 6, 0, tzinfo=UTC)


# ---------------------------------------------------------------------------------- IMS rig
# Data: J. Lee, H. Qiu, G. Yu, J. Lin, and Rexnord Technical Services (2007), IMS, University of
# Cincinnati, "Bearing Data Set", NASA Ames Prognostics Data Repository. Geometry 16 elements,
# d = 0.331 in, D = 2.815 in, 15.17 deg, 2000 rpm; bearing 1 failed on the outer race.
def _ims_asset() -> AssetConfig:
    g = BearingGeometry(
        designation="IMS rig double-row bearing",
        n_elements=16,
        element_diameter_mm=0.331 * INCH,
        pitch_diameter_mm=2.815 * INCH,
        contact_angle_deg=15.17,
    )
    return AssetConfig(
        asset_id="IMS-RIG",
        vane_count=1,
        nominal_speed_rpm=2000.0,
        speed_range_rpm=(2000.0, 2000.0),
        bearings={"b1": g, "b3": g},
        channels=(
            ChannelConfig(name="b1_accel", kind="accel", unit="g", fs_hz=IMS_FS, bearing="b1"),
            ChannelConfig(name="b3_accel", kind="accel", unit="g", fs_hz=IMS_FS, bearing="b3"),
        ),
    )


def _ims_window(record: str) -> WindowSet:
    path = DATA / f"{record}.npy"
    if not path.exists():
        path = DATA / "bearing1-only" / f"{record}.npy"
    data = np.load(path).astype(float)
    names = ["b1_accel", "b3_accel"][: data.shape[1]]
    channels = {
        n: ChannelWindow(channel=n, kind="accel", fs=IMS_FS, samples=data[:, i], unit="g")
        for i, n in enumerate(names)
    }
    return WindowSet(asset_id="IMS-RIG", start=START, channels=channels)


# The rig runs at constant speed; +-1 % keeps the 4th mains harmonic (240 Hz) out of the BPFO
# search window, as the fixture README advises.
IMS = Extractor(_ims_asset(), slip_tolerance=0.01)
LATE = ["2004.02.19.05.32.39", "2004.02.19.05.42.39", "2004.02.19.05.52.39",
        "2004.02.19.06.02.39"]  # fmt: skip


@pytest.mark.parametrize("record", ["2004.02.17.07.12.39", *LATE])
def test_ims_bearing1_env_bpfo_is_high_late(record):
    r = IMS.compute(_ims_window(record))
    assert r.values["b1_accel.env_bpfo"] > 18.0
    assert r.values["b1_accel.env_bpfo"] > r.values["b1_accel.env_bpfi"] + 8.0
    assert r.operating.shaft_speed_source is ShaftSpeedSource.NOMINAL


@pytest.mark.parametrize("record", ["2004.02.16.04.32.39", "2004.02.17.07.12.39"])
def test_ims_bearing3_env_bpfo_is_not_high(record):
    r = IMS.compute(_ims_window(record))
    assert r.values["b3_accel.env_bpfo"] < 12.0


def test_ims_absent_channel_is_missing_and_flagged():
    r = IMS.compute(_ims_window(LATE[0]))
    assert all(v is None for k, v in r.values.items() if k.startswith("b3_accel."))
    assert QualityFlag.DROPOUT in r.quality["b3_accel"].flags
    assert all(v is not None for k, v in r.values.items() if k.startswith("b1_accel."))


def test_ims_message_validates_and_round_trips():
    msg = IMS.extract(_ims_window(LATE[1]), gateway_id="gw-test", site="lab", sequence=7)
    again = IndicatorMessage.model_validate(msg.model_dump())
    assert again == msg
    frame = encode_indicators(msg, IMS.layout)
    decoded = decode_indicators(
        frame, {IMS.layout.digest: IMS.layout}, gateway_id="gw-test", site="lab",
        asset_id="IMS-RIG",
    )  # fmt: skip
    assert decoded.values_by_name(IMS.layout)["b1_accel.env_bpfo"] == pytest.approx(
        msg.values_by_name(IMS.layout)["b1_accel.env_bpfo"], rel=1e-3
    )


# ------------------------------------------------------------------------- crafted windows
def _pump_asset() -> AssetConfig:
    bearing = BearingGeometry(
        n_elements=9, element_diameter_mm=7.94, pitch_diameter_mm=39.04, contact_angle_deg=0.0
    )
    return AssetConfig(
        asset_id="MAL-P9",
        rated_current_a=60.0,
        bearings={"de": bearing},
        channels=(
            ChannelConfig(name="de_accel", kind="accel", unit="g", fs_hz=25_600.0, bearing="de"),
            ChannelConfig(name="nde_accel", kind="accel", unit="g", fs_hz=25_600.0),
            ChannelConfig(name="discharge_pressure", kind="pressure", unit="kPa", fs_hz=1000.0),
            ChannelConfig(name="suction_pressure", kind="pressure", unit="kPa", fs_hz=1000.0),
            ChannelConfig(name="motor_current", kind="current", unit="A", fs_hz=1000.0),
            ChannelConfig(name="bearing_temp", kind="temperature", unit="degC", fs_hz=10.0),
            ChannelConfig(name="shaft_tacho", kind="tacho", unit="V", fs_hz=25_600.0),
        ),
    )


def _pump_window(shaft_hz: float = 29.1, *, flat: str | None = None, seed: int = 0) -> WindowSet:
    rng = np.random.default_rng(seed)
    t = np.arange(25_600) / 25_600.0
    tp = np.arange(1000) / 1000.0

    def accel() -> np.ndarray:
        return 0.05 * np.sin(2 * np.pi * shaft_hz * t) + 0.02 * rng.normal(size=t.size)

    vane_pass = 3 * np.sin(2 * np.pi * 6 * shaft_hz * tp)
    line_current = 42 * np.sqrt(2) * np.sin(2 * np.pi * 50 * tp)
    samples = {
        "de_accel": accel(),
        "nde_accel": accel(),
        "discharge_pressure": 450 + vane_pass + rng.normal(size=1000),
        "suction_pressure": 80 + 0.3 * rng.normal(size=1000),
        "motor_current": line_current + 0.1 * rng.normal(size=1000),
        "bearing_temp": np.full(10, 47.5),
        "shaft_tacho": 5.0 * (np.mod(t * shaft_hz, 1.0) < 0.02),
    }
    if flat is not None:
        samples[flat] = np.full_like(samples[flat], 0.013)
    asset = _pump_asset()
    channels = {
        c.name: ChannelWindow(
            channel=c.name, kind=c.kind, fs=c.fs_hz, samples=samples[c.name], unit=c.unit
        )
        for c in asset.channels
    }
    process = {"flow_m3_per_h": 85.0, "fluid_temperature_c": 31.0}
    return WindowSet(asset_id=asset.asset_id, start=START, channels=channels, process=process)


PUMP = Extractor(_pump_asset())


def test_layout_names_units_and_encodings():
    layout = PUMP.layout
    assert layout.names[: len(DEFAULT_ACCEL_QUANTITIES)] == tuple(
        f"de_accel.{q}" for q in DEFAULT_ACCEL_QUANTITIES
    )
    units = {s.name: s.unit for s in layout.indicators}
    assert units["de_accel.velocity_rms"] == "mm/s"
    assert units["de_accel.env_bpfo"] == "dB"
    assert units["discharge_pressure.ripple"] == "kPa"
    assert units["motor_current.rms"] == "A"
    assert units["bearing_temp.mean"] == "degC"
    assert not any(s.channel == "shaft_tacho" for s in layout.indicators)
    full = Extractor(_pump_asset(), accel_quantities=tuple(ACCEL_QUANTITIES))
    enc = {s.name: s.encoding for s in full.layout.indicators}
    assert enc["de_accel.peak_frequency"] == "f32"
    assert enc["de_accel.kurtosis"] == "f16"
    # Same configuration, same layout digest; a different set, a different digest.
    assert Extractor(_pump_asset()).layout.digest == layout.digest
    assert full.layout.digest != layout.digest


def test_clean_window_gives_every_value_and_speed_from_tacho():
    r = PUMP.compute(_pump_window())
    missing = [k for k, v in r.values.items() if v is None]
    # The nde accelerometer has no bearing configured: its envelope lines are missing.
    assert missing == [f"nde_accel.{q}" for q in ("env_bpfo", "env_bpfi", "env_bsf", "env_ftf")]
    assert not any(q.flags for q in r.quality.values())
    assert r.operating.shaft_speed_source is ShaftSpeedSource.TACHO
    assert r.operating.shaft_speed_hz == pytest.approx(29.1, rel=1e-3)
    assert r.operating.load_fraction == pytest.approx(42 / 60, rel=1e-3)
    assert r.operating.suction_pressure_kpa == pytest.approx(80.0, abs=0.1)
    assert r.operating.flow_m3_per_h == 85.0
    assert r.operating.fluid_temperature_c == 31.0
    assert r.values["bearing_temp.mean"] == pytest.approx(47.5)
    assert r.values["discharge_pressure.vane_pass"] == pytest.approx(3 / np.sqrt(2), rel=0.02)
    assert not r.out_of_regime


def test_flatline_channel_gives_missing_values_and_a_flag():
    ws = _pump_window(flat="de_accel")
    r = PUMP.compute(ws)
    assert all(v is None for k, v in r.values.items() if k.startswith("de_accel."))
    assert r.quality["de_accel"].flags == {QualityFlag.FLATLINE}
    assert r.values["nde_accel.rms"] is not None
    msg = PUMP.extract(ws, gateway_id="gw-mallee", site="saltbush-flats", sequence=3)
    assert msg.quality_of("de_accel").flags == {QualityFlag.FLATLINE}
    assert len(encode_indicators(msg, PUMP.layout)) < 160


def test_spikes_and_dropouts_are_flagged_and_values_kept():
    ws = _pump_window()
    x = ws.channels["de_accel"].samples.copy()
    x[[1000, 9000]] += 2.0
    x[5000:5010] = np.nan
    de = ChannelWindow(channel="de_accel", kind="accel", fs=25_600.0, samples=x, unit="g")
    ws = WindowSet(asset_id=ws.asset_id, start=ws.start, channels={**ws.channels, "de_accel": de})
    r = PUMP.compute(ws)
    q = r.quality["de_accel"]
    assert q.flags == {QualityFlag.SPIKES_REMOVED, QualityFlag.DROPOUT}
    assert q.spikes_removed == 2
    assert r.values["de_accel.kurtosis"] == pytest.approx(1.9, abs=0.3)  # spikes gone


def test_out_of_regime_speed_is_flagged():
    r = PUMP.compute(_pump_window(shaft_hz=40.0))  # 2400 rpm > 1780 rpm
    assert r.out_of_regime
    assert QualityFlag.OUT_OF_REGIME in r.quality["de_accel"].flags
    assert QualityFlag.OUT_OF_REGIME not in r.quality["discharge_pressure"].flags


def test_message_is_small_and_validates():
    msg = PUMP.extract(
        _pump_window(), gateway_id="gw-mallee", site="saltbush-flats", sequence=123_456
    )
    assert msg.layout_digest == PUMP.layout.digest
    assert msg.window_start == START
    assert len(msg.values) == len(PUMP.layout.indicators)
    assert len(encode_indicators(msg, PUMP.layout)) <= 140


def test_bad_input():
    ws = _pump_window()
    other = WindowSet(asset_id="MAL-P2", start=START, channels=ws.channels)
    with pytest.raises(ValueError, match="window_set is for asset 'MAL-P2'"):
        PUMP.compute(other)
    with pytest.raises(ValueError, match="accel_quantities must be distinct names"):
        Extractor(_pump_asset(), accel_quantities=("rms", "wobble"))
    with pytest.raises(ValueError, match="sk_nperseg must be an even integer"):
        Extractor(_pump_asset(), sk_nperseg=63)
    with pytest.raises(ValueError, match="full_scale names channels"):
        Extractor(_pump_asset(), full_scale={"nope": 5.0})
    naive = WindowSet(asset_id=ws.asset_id, start=datetime(2026, 3, 1), channels=ws.channels)
    with pytest.raises(ValueError, match="timezone"):
        PUMP.extract(naive, gateway_id="gw-mallee", site="saltbush-flats", sequence=0)


# ------------------------------------------------------------------------- pump simulator
simulator = pytest.importorskip("edge_agent.simulator")


@pytest.mark.parametrize(("fault", "own", "other"), [
    ("outer_race", "env_bpfo", "env_bpfi"),
    ("inner_race", "env_bpfi", "env_bpfo"),
])  # fmt: skip
def test_simulated_bearing_defect_shows_its_own_line(fault, own, other):
    asset = simulator.saltbush_asset("MAL-P1")
    extractor = Extractor(asset)
    scenario = simulator.FaultScenario(
        fault=fault, onset=simulator.DEMO_START, life_days=10.0, bearing="de"
    )
    sim = simulator.PumpSimulator(asset, scenario, seed=1)
    ws = sim.window(simulator.DEMO_START + timedelta(days=8))
    r = extractor.compute(ws)
    assert r.values[f"de_accel.{own}"] > 15.0
    assert r.values[f"de_accel.{own}"] > r.values[f"de_accel.{other}"] + 10.0
    assert r.operating.shaft_speed_source is ShaftSpeedSource.SPECTRUM
    assert r.operating.shaft_speed_hz == pytest.approx(ws.labels["shaft_speed_hz"], abs=0.05)


def test_simulated_healthy_pump_shows_no_defect_line():
    asset = simulator.saltbush_asset("MAL-P1")
    sim = simulator.PumpSimulator(asset, simulator.FaultScenario(), seed=1)
    r = Extractor(asset).compute(sim.window(simulator.DEMO_START + timedelta(days=8)))
    for q in ("env_bpfo", "env_bpfi"):
        assert r.values[f"de_accel.{q}"] < 12.0
        assert r.values[f"nde_accel.{q}"] < 12.0


def test_empty_channel_window_is_missing_not_an_error():
    ws = _pump_window()
    empty = ChannelWindow(
        channel="discharge_pressure", kind="pressure", fs=1000.0, samples=np.empty(0), unit="kPa"
    )
    ws = WindowSet(
        asset_id=ws.asset_id, start=ws.start, channels={**ws.channels, "discharge_pressure": empty}
    )
    msg = PUMP.extract(ws, gateway_id="gw-mallee", site="saltbush-flats", sequence=9)
    values = msg.values_by_name(PUMP.layout)
    assert values["discharge_pressure.mean"] is None
    assert msg.quality_of("discharge_pressure").flags == {QualityFlag.DROPOUT}
    assert msg.window_s == pytest.approx(1.0)
