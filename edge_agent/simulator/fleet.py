"""The Saltbush Flats fleet: four wellpads, three transfer pumps each.

Saltbush Flats is a fictional produced-water operator. Every pump is a single-stage end-suction
centrifugal pump with a six-vane impeller, direct-coupled to a four-pole induction motor on a
variable-speed drive (1,150-1,780 rpm). The bearing geometries below are **illustrative**
deep-groove ball bearings invented for pumps of this size (bore about 40-55 mm); they are not
taken from any manufacturer's catalogue.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

from edge_agent.assets import AssetConfig, BearingGeometry, ChannelConfig, SeverityClass
from edge_agent.simulator.physics import InductionMotor, PumpCurve, PumpHydraulics, SystemCurve

__all__ = [
    "SALTBUSH_ASSET_IDS",
    "SALTBUSH_SITE_ID",
    "PadSpec",
    "pump_channels",
    "saltbush_asset",
    "saltbush_fleet",
    "saltbush_hydraulics",
]

SALTBUSH_SITE_ID = "saltbush-flats"

_PADS: tuple[tuple[str, str], ...] = (
    ("Mallee", "MAL"),
    ("Gibber", "GIB"),
    ("Spinifex", "SPI"),
    ("Coolibah", "COO"),
)


class _Unit(NamedTuple):
    """One pump's table row (illustrative values only)."""

    power_kw: float
    rated_current_a: float
    de: tuple[int, float, float]  # drive-end bearing: elements, element dia. mm, pitch dia. mm
    nde: tuple[int, float, float]  # non-drive-end bearing, same
    shutoff_head_m: float
    bep_head_m: float
    bep_flow_m3_per_h: float
    static_head_m: float


_UNITS: dict[str, _Unit] = {
    "MAL-P1": _Unit(37.0, 58.0, (8, 15.2, 70.5), (9, 11.8, 58.0), 72.0, 60.0, 120.0, 25.0),
    "MAL-P2": _Unit(37.0, 58.0, (8, 15.9, 72.0), (9, 12.3, 59.5), 71.0, 59.0, 118.0, 24.0),
    "MAL-P3": _Unit(37.0, 58.0, (9, 14.3, 68.0), (8, 12.7, 57.2), 73.0, 61.0, 122.0, 26.0),
    "GIB-P1": _Unit(37.0, 58.0, (8, 16.5, 77.5), (9, 12.0, 61.0), 70.0, 58.0, 125.0, 22.0),
    "GIB-P2": _Unit(37.0, 58.0, (7, 17.5, 74.0), (8, 13.5, 60.0), 72.5, 60.5, 119.0, 25.5),
    "GIB-P3": _Unit(37.0, 58.0, (9, 15.0, 75.0), (9, 11.5, 56.5), 71.5, 59.5, 121.0, 23.0),
    "SPI-P1": _Unit(45.0, 70.0, (8, 14.8, 66.5), (8, 12.5, 55.0), 80.0, 67.0, 125.0, 30.0),
    "SPI-P2": _Unit(45.0, 70.0, (10, 13.5, 71.0), (9, 11.0, 54.0), 79.0, 66.0, 128.0, 29.0),
    "SPI-P3": _Unit(45.0, 70.0, (8, 17.0, 80.0), (9, 13.0, 63.0), 81.0, 68.0, 124.0, 31.0),
    "COO-P1": _Unit(45.0, 70.0, (9, 15.5, 73.5), (8, 12.2, 57.8), 78.0, 65.0, 130.0, 28.0),
    "COO-P2": _Unit(45.0, 70.0, (8, 16.0, 76.0), (10, 11.2, 60.5), 80.5, 67.5, 126.0, 30.5),
    "COO-P3": _Unit(45.0, 70.0, (7, 18.0, 78.0), (9, 12.8, 62.0), 79.5, 66.5, 127.0, 29.5),
}

SALTBUSH_ASSET_IDS: tuple[str, ...] = tuple(_UNITS)


@dataclass(frozen=True, slots=True, kw_only=True)
class PadSpec:
    """One wellpad: its name, the gateway that serves it and the pumps on it."""

    name: str
    pad_id: str
    site_id: str
    gateway_id: str
    assets: tuple[AssetConfig, ...]

    @property
    def asset_ids(self) -> tuple[str, ...]:
        return tuple(a.asset_id for a in self.assets)


def pump_channels(*, window_s: float = 1.0) -> tuple[ChannelConfig, ...]:
    """The six channels fitted to every Saltbush Flats pump.

    Accelerometers at 25.6 kHz on both bearing housings, pressures at 1 kHz, motor current at
    1 kHz (ample for a 60 Hz line current and its shaft-rate sidebands) and the bearing
    temperature at 10 Hz (a slowly varying quantity; the gateway averages the window).
    """
    return (
        ChannelConfig(name="de_accel", kind="accel", unit="g", fs_hz=25_600.0,
                      window_s=window_s, bearing="de"),
        ChannelConfig(name="nde_accel", kind="accel", unit="g", fs_hz=25_600.0,
                      window_s=window_s, bearing="nde"),
        ChannelConfig(name="discharge_pressure", kind="pressure", unit="kPa", fs_hz=1000.0,
                      window_s=window_s),
        ChannelConfig(name="suction_pressure", kind="pressure", unit="kPa", fs_hz=1000.0,
                      window_s=window_s),
        ChannelConfig(name="motor_current", kind="current", unit="A", fs_hz=1000.0,
                      window_s=window_s),
        ChannelConfig(name="bearing_temp", kind="temperature", unit="degC", fs_hz=10.0,
                      window_s=window_s),
    )  # fmt: skip


def _unit(asset_id: str) -> _Unit:
    try:
        return _UNITS[asset_id]
    except KeyError:
        raise KeyError(
            f"asset_id must be one of the Saltbush Flats pumps {list(_UNITS)}, got {asset_id!r}"
        ) from None


def _bearing(position: str, spec: tuple[int, float, float]) -> BearingGeometry:
    n, d, pitch = spec
    return BearingGeometry(
        designation=f"illustrative deep-groove ball, {position}, {n} x {d:g} mm on {pitch:g} mm",
        n_elements=n,
        element_diameter_mm=d,
        pitch_diameter_mm=pitch,
        contact_angle_deg=0.0,
    )


def saltbush_asset(asset_id: str, *, window_s: float = 1.0) -> AssetConfig:
    """The asset configuration of one Saltbush Flats pump, e.g. ``saltbush_asset("MAL-P1")``.

    Raises
    ------
    KeyError
        If ``asset_id`` is not one of `SALTBUSH_ASSET_IDS`.
    """
    unit = _unit(asset_id)
    return AssetConfig(
        asset_id=asset_id,
        asset_class="end-suction-centrifugal",
        vane_count=6,
        nominal_speed_rpm=1780.0,
        speed_range_rpm=(1150.0, 1780.0),
        rated_current_a=unit.rated_current_a,
        power_kw=unit.power_kw,
        severity=SeverityClass(machine_group=2, foundation="rigid"),
        bearings={
            "de": _bearing("drive end", unit.de),
            "nde": _bearing("non-drive end", unit.nde),
        },
        channels=pump_channels(window_s=window_s),
    )


def saltbush_hydraulics(asset_id: str) -> PumpHydraulics:
    """Pump curve, pipeline, suction line and motor of one Saltbush Flats pump (illustrative)."""
    unit = _unit(asset_id)
    pump = PumpCurve(
        nominal_speed_rpm=1780.0,
        shutoff_head_m=unit.shutoff_head_m,
        bep_flow_m3_per_h=unit.bep_flow_m3_per_h,
        bep_head_m=unit.bep_head_m,
        bep_efficiency=0.74,
        npsh_required_bep_m=4.0,
    )
    system = SystemCurve(
        static_head_m=unit.static_head_m,
        friction_head_at_bep_m=unit.bep_head_m - unit.static_head_m,
        bep_flow_m3_per_h=unit.bep_flow_m3_per_h,
    )
    motor = InductionMotor(rated_power_kw=unit.power_kw, rated_current_a=unit.rated_current_a)
    return PumpHydraulics(pump=pump, system=system, motor=motor, suction_loss_at_bep_kpa=12.0)


def saltbush_fleet(*, window_s: float = 1.0) -> list[PadSpec]:
    """The four Saltbush Flats pads with their gateways and pumps."""
    pads = []
    for name, prefix in _PADS:
        pad_id = name.lower()
        assets = tuple(
            saltbush_asset(a, window_s=window_s) for a in _UNITS if a.startswith(prefix + "-")
        )
        pads.append(
            PadSpec(
                name=name,
                pad_id=pad_id,
                site_id=SALTBUSH_SITE_ID,
                gateway_id=f"gw-{pad_id}",
                assets=assets,
            )
        )
    return pads
