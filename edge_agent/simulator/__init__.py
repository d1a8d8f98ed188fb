"""Simulated pumps: a physics-based data source of raw multi-channel windows.

The simulator is a data source like any other: `PumpSimulator.window(t)` returns the same
`edge_agent.windows.WindowSet` a real acquisition driver would, plus the truth in ``labels``.

Modules
-------
``fleet``          the Saltbush Flats pads, gateways, pumps, channels and bearing table
``physics``        pure signal and hydraulic models (shaft orders, bearing impulses, resonance,
                   cavitation, pump and system curves, motor, water properties)
``degradation``    severity growth laws (exponential, Paris, linear, step) and life draws
``scenario``       fault scenarios and the demo's story for the twelve pumps
``duty``           process conditions over time (flow demand, temperatures, tank pressure)
``sensor_faults``  clipping, flatline, spikes, dropout, DC drift
``simulator``      `PumpSimulator` itself
``recording``      recordings on disk (``.npy``/``.csv`` + ``labels.jsonl``) and asset TOML

Examples
--------
>>> from datetime import UTC, datetime
>>> sims = saltbush_simulators(seed=2026)
>>> ws = sims["MAL-P2"].window(datetime(2026, 6, 1, tzinfo=UTC))
>>> ws.labels["fault"], sorted(ws.process)
('outer_race', ['drive_speed_rpm', 'flow_m3_per_h', 'fluid_temperature_c'])
"""

from edge_agent.simulator.degradation import (
    ExponentialGrowth,
    GrowthLaw,
    LinearGrowth,
    ParisGrowth,
    StepGrowth,
    draw_life_days,
)
from edge_agent.simulator.duty import ConstantDuty, DutyPoint, DutyProfile, SaltbushDuty
from edge_agent.simulator.fleet import (
    SALTBUSH_ASSET_IDS,
    SALTBUSH_SITE_ID,
    PadSpec,
    pump_channels,
    saltbush_asset,
    saltbush_fleet,
    saltbush_hydraulics,
)
from edge_agent.simulator.physics import (
    DefectFrequencies,
    InductionMotor,
    PumpCurve,
    PumpHydraulics,
    SystemCurve,
    bearing_defect_frequencies,
)
from edge_agent.simulator.recording import (
    ASSET_FILE,
    LABELS_FILE,
    RECORDING_FORMATS,
    RecordingEntry,
    RecordingFile,
    RecordingFormat,
    RecordingFormatError,
    asset_from_toml,
    asset_to_toml,
    read_asset_toml,
    read_recordings,
    record_simulation,
    write_asset_toml,
    write_recording,
)
from edge_agent.simulator.scenario import (
    BEARING_FAULTS,
    DEMO_START,
    FAULT_MODES,
    SALTBUSH_STORY_DAYS,
    FaultMode,
    FaultScenario,
    SensorFaultEvent,
    draw_sensor_faults,
    saltbush_scenarios,
)
from edge_agent.simulator.sensor_faults import SENSOR_FAULT_KINDS, SensorFaultKind
from edge_agent.simulator.simulator import OperatingState, PumpSimulator, saltbush_simulators

__all__ = [
    "ASSET_FILE",
    "BEARING_FAULTS",
    "DEMO_START",
    "FAULT_MODES",
    "LABELS_FILE",
    "RECORDING_FORMATS",
    "SALTBUSH_ASSET_IDS",
    "SALTBUSH_SITE_ID",
    "SALTBUSH_STORY_DAYS",
    "SENSOR_FAULT_KINDS",
    "ConstantDuty",
    "DefectFrequencies",
    "DutyPoint",
    "DutyProfile",
    "ExponentialGrowth",
    "FaultMode",
    "FaultScenario",
    "GrowthLaw",
    "InductionMotor",
    "LinearGrowth",
    "OperatingState",
    "PadSpec",
    "ParisGrowth",
    "PumpCurve",
    "PumpHydraulics",
    "PumpSimulator",
    "RecordingEntry",
    "RecordingFile",
    "RecordingFormat",
    "RecordingFormatError",
    "SaltbushDuty",
    "SensorFaultEvent",
    "SensorFaultKind",
    "StepGrowth",
    "SystemCurve",
    "asset_from_toml",
    "asset_to_toml",
    "bearing_defect_frequencies",
    "draw_life_days",
    "draw_sensor_faults",
    "pump_channels",
    "read_asset_toml",
    "read_recordings",
    "record_simulation",
    "saltbush_asset",
    "saltbush_fleet",
    "saltbush_hydraulics",
    "saltbush_scenarios",
    "saltbush_simulators",
    "write_asset_toml",
    "write_recording",
]
