"""Typed description of a monitored asset: a motor-driven pump and its sensors.

The extractor, the simulator and the gateway configuration all read this one model.
"""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

from edge_agent.dsp.bearing import DefectFrequencies, defect_frequencies
from edge_agent.windows import ChannelKind

__all__ = ["AssetConfig", "BearingGeometry", "ChannelConfig", "SeverityClass"]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class BearingGeometry(_Strict):
    """Rolling-element bearing geometry (dimensions in mm, angle in degrees)."""

    designation: str = ""
    n_elements: int = Field(gt=2, le=100, description="number of rolling elements per row")
    element_diameter_mm: float = Field(gt=0, description="rolling-element diameter d, mm")
    pitch_diameter_mm: float = Field(gt=0, description="pitch diameter D, mm")
    contact_angle_deg: float = Field(default=0.0, ge=0, lt=90, description="contact angle, deg")

    @model_validator(mode="after")
    def _element_fits(self) -> BearingGeometry:
        if self.element_diameter_mm >= self.pitch_diameter_mm:
            raise ValueError(
                "element_diameter_mm must be smaller than pitch_diameter_mm, got "
                f"d={self.element_diameter_mm:g} mm, D={self.pitch_diameter_mm:g} mm"
            )
        return self

    def defect_frequencies(self, shaft_hz: float) -> DefectFrequencies:
        """BPFO, BPFI, BSF and FTF in Hz at ``shaft_hz`` (multiples of shaft speed at 1.0)."""
        return defect_frequencies(
            shaft_hz,
            n_elements=self.n_elements,
            element_diameter=self.element_diameter_mm,
            pitch_diameter=self.pitch_diameter_mm,
            contact_angle_deg=self.contact_angle_deg,
        )


class SeverityClass(_Strict):
    """Machine group and foundation for the ISO 10816-3 vibration severity zones."""

    machine_group: Literal[1, 2] = 2
    foundation: Literal["rigid", "flexible"] = "rigid"


class ChannelConfig(_Strict):
    """One sensor channel on the asset."""

    name: str = Field(pattern=r"^[a-z][a-z0-9_]*$", max_length=32)
    kind: ChannelKind
    unit: str
    fs_hz: float = Field(gt=0, le=1_000_000)
    window_s: float = Field(default=1.0, gt=0, le=60)
    sensitivity: float = Field(default=1.0, gt=0, description="engineering units per volt")
    bearing: str | None = Field(
        default=None, description="key of the bearing in AssetConfig.bearings this sensor sits on"
    )


class AssetConfig(_Strict):
    """A motor-driven centrifugal pump and its channels."""

    asset_id: str = Field(pattern=r"^[A-Za-z0-9][A-Za-z0-9_.-]*$", max_length=64)
    asset_class: str = "end-suction-centrifugal"
    vane_count: int = Field(default=6, ge=1, le=32)
    nominal_speed_rpm: float = Field(default=1780.0, gt=0)
    speed_range_rpm: tuple[float, float] = (1150.0, 1780.0)
    rated_current_a: float | None = Field(default=None, gt=0)
    power_kw: float | None = Field(default=None, gt=0)
    severity: SeverityClass = SeverityClass()
    bearings: dict[str, BearingGeometry] = Field(default_factory=dict)
    channels: tuple[ChannelConfig, ...] = ()

    @model_validator(mode="after")
    def _consistent(self) -> AssetConfig:
        lo, hi = self.speed_range_rpm
        if not 0 < lo <= hi:
            raise ValueError(
                f"speed_range_rpm must be (low, high) with 0 < low <= high, got {lo, hi}"
            )
        names = [c.name for c in self.channels]
        if len(set(names)) != len(names):
            raise ValueError(f"channel names must be unique, got {names}")
        for c in self.channels:
            if c.bearing is not None and c.bearing not in self.bearings:
                raise ValueError(
                    f"channel {c.name!r} refers to bearing {c.bearing!r}, "
                    f"which is not among the asset's bearings {sorted(self.bearings)}"
                )
        return self

    def channel(self, name: str) -> ChannelConfig:
        for c in self.channels:
            if c.name == name:
                return c
        raise KeyError(name)
