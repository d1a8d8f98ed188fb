"""The Saltbush Flats fleet: pads, gateways, pumps, channels and bearing table."""

from __future__ import annotations

import pytest

from edge_agent.simulator import (
    SALTBUSH_ASSET_IDS,
    SALTBUSH_SITE_ID,
    bearing_defect_frequencies,
    saltbush_asset,
    saltbush_fleet,
    saltbush_hydraulics,
)


def test_four_pads_three_pumps_each() -> None:
    pads = saltbush_fleet()
    assert [p.name for p in pads] == ["Mallee", "Gibber", "Spinifex", "Coolibah"]
    assert [p.gateway_id for p in pads] == ["gw-mallee", "gw-gibber", "gw-spinifex", "gw-coolibah"]
    assert all(p.site_id == SALTBUSH_SITE_ID == "saltbush-flats" for p in pads)
    assert [p.asset_ids for p in pads] == [
        ("MAL-P1", "MAL-P2", "MAL-P3"),
        ("GIB-P1", "GIB-P2", "GIB-P3"),
        ("SPI-P1", "SPI-P2", "SPI-P3"),
        ("COO-P1", "COO-P2", "COO-P3"),
    ]
    assert len(SALTBUSH_ASSET_IDS) == 12


def test_every_pump_has_the_six_channels() -> None:
    expected = {
        "de_accel": ("accel", "g", 25_600.0, "de"),
        "nde_accel": ("accel", "g", 25_600.0, "nde"),
        "discharge_pressure": ("pressure", "kPa", 1000.0, None),
        "suction_pressure": ("pressure", "kPa", 1000.0, None),
        "motor_current": ("current", "A", 1000.0, None),
        "bearing_temp": ("temperature", "degC", 10.0, None),
    }
    for asset_id in SALTBUSH_ASSET_IDS:
        asset = saltbush_asset(asset_id)
        got = {c.name: (c.kind, c.unit, c.fs_hz, c.bearing) for c in asset.channels}
        assert got == expected
        assert asset.vane_count == 6
        assert asset.speed_range_rpm == (1150.0, 1780.0)
        assert asset.severity.machine_group == 2  # 15-300 kW (ISO 10816-3 group 2)
        assert asset.power_kw is not None and 15.0 <= asset.power_kw <= 300.0


def test_window_length_is_configurable() -> None:
    assert {c.window_s for c in saltbush_asset("MAL-P1", window_s=2.5).channels} == {2.5}


def test_each_pump_has_its_own_plausible_bearings() -> None:
    geometries = set()
    for asset_id in SALTBUSH_ASSET_IDS:
        bearings = saltbush_asset(asset_id).bearings
        assert set(bearings) == {"de", "nde"}
        for b in bearings.values():
            assert "illustrative" in b.designation
            assert 7 <= b.n_elements <= 10
            assert 0.15 < b.element_diameter_mm / b.pitch_diameter_mm < 0.25
            geometries.add((b.n_elements, b.element_diameter_mm, b.pitch_diameter_mm))
            # BPFO + BPFI = n fr (follows from the standard formulas, REFERENCES.md)
            f = bearing_defect_frequencies(b, 29.0)
            assert f.bpfo_hz + f.bpfi_hz == pytest.approx(b.n_elements * 29.0)
    assert len(geometries) == 24


def test_hydraulics_meet_the_duty_at_full_speed() -> None:
    for asset_id in SALTBUSH_ASSET_IDS:
        h = saltbush_hydraulics(asset_id)
        q = h.pump.bep_flow_m3_per_h
        assert h.pump.head_m(q, 1780.0) == pytest.approx(h.system.head_m(q))


def test_unknown_asset_is_named() -> None:
    with pytest.raises(KeyError, match="XYZ-P9"):
        saltbush_asset("XYZ-P9")
