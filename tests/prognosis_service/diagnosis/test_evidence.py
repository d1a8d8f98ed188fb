"""Evidence rules on hand-built indicator vectors (fast, no simulation)."""

from __future__ import annotations

import numpy as np
import pytest

from edge_agent.assets import AssetConfig, BearingGeometry, ChannelConfig
from edge_agent.simulator import FAULT_MODES
from prognosis_service.diagnosis import (
    DIAGNOSED_MODES,
    IndicatorBaseline,
    gather_evidence,
    mode_strengths,
)
from shared_schema import FaultMode
from wellspan.training_data import defect_orders

HEALTHY = {
    "de_accel.order_1x": 0.80,
    "de_accel.order_2x": 0.20,
    "de_accel.vane_pass": 0.40,
    "de_accel.high_band_rms": 0.004,
    "de_accel.env_bpfo": 3.0,
    "de_accel.env_bpfi": 4.0,
    "de_accel.env_bsf": 2.0,
    "de_accel.env_ftf": 3.0,
    "nde_accel.order_1x": 0.60,
    "nde_accel.order_2x": 0.15,
    "nde_accel.env_bpfo": 3.0,
    "discharge_pressure.mean": 650.0,
    "discharge_pressure.vane_pass": 4.0,
    "suction_pressure.mean": 75.0,
}
SPREAD = {
    "de_accel.order_1x": 0.04,
    "de_accel.order_2x": 0.02,
    "de_accel.vane_pass": 0.03,
    "de_accel.high_band_rms": 0.0004,
    "de_accel.env_bpfo": 1.0,
    "de_accel.env_bpfi": 1.0,
    "de_accel.env_bsf": 1.0,
    "de_accel.env_ftf": 1.0,
    "nde_accel.order_1x": 0.04,
    "nde_accel.order_2x": 0.02,
    "nde_accel.env_bpfo": 1.0,
    "discharge_pressure.mean": 3.0,
    "discharge_pressure.vane_pass": 0.3,
    "suction_pressure.mean": 1.5,
}
SHAFT_HZ = 29.5
# Drive-end bearing of the CWRU bearing data set: BPFO 3.5848, BPFI 5.4152, FTF 0.39828,
# BSF 2.3567 x shaft speed (CWRU Bearing Data Center, secondary; see REFERENCES.md).
CWRU_DE = {"bpfo": 3.5848, "bpfi": 5.4152, "bsf": 2.3567, "ftf": 0.39828}


def baseline(shaft_speed_hz: float | None = SHAFT_HZ) -> IndicatorBaseline:
    names = tuple(HEALTHY)
    return IndicatorBaseline(
        names,
        np.array([HEALTHY[n] for n in names]),
        np.array([SPREAD[n] for n in names]),
        shaft_speed_hz=shaft_speed_hz,
    )


def window(**changes: float) -> dict[str, float | None]:
    values: dict[str, float | None] = dict(HEALTHY)
    for key, v in changes.items():
        values[key.replace("__", ".")] = v
    return values


def test_healthy_window_gives_no_evidence() -> None:
    assert gather_evidence(window(), baseline(), shaft_speed_hz=SHAFT_HZ) == []


def test_outer_race_sentence_names_the_multiple_and_the_rise() -> None:
    ev = gather_evidence(
        window(de_accel__env_bpfo=17.0), baseline(), shaft_speed_hz=SHAFT_HZ,
        defect_orders=CWRU_DE,
    )  # fmt: skip
    assert [e.mode for e in ev] == ["outer_race"]
    e = ev[0]
    assert "3.58× shaft speed" in e.sentence
    assert "outer race defect frequency" in e.sentence
    assert "14 dB over baseline" in e.sentence
    assert "106 Hz" in e.sentence  # 3.5848 x 29.5 Hz = 105.75 Hz (computed)
    assert e.basis == "Randall & Antoni 2011"
    assert e.measures["multiple_of_shaft_speed"] == pytest.approx(3.5848)
    assert 0.0 < e.strength <= 1.0


def test_per_channel_defect_orders_pick_that_bearing() -> None:
    nde = {"bpfo": 3.05, "bpfi": 4.95, "bsf": 1.99, "ftf": 0.38}
    ev = gather_evidence(
        window(nde_accel__env_bpfo=20.0), baseline(), shaft_speed_hz=SHAFT_HZ,
        defect_orders={"de_accel": CWRU_DE, "nde_accel": nde},
    )  # fmt: skip
    assert len(ev) == 1
    assert ev[0].sentence.startswith("non-drive-end envelope line at 3.05× shaft speed")


def test_without_defect_orders_the_line_is_named_but_not_its_multiple() -> None:
    ev = gather_evidence(window(de_accel__env_bpfi=19.0), baseline())
    assert ev[0].mode == "inner_race"
    assert "×" not in ev[0].sentence
    assert "inner race defect frequency (BPFI), 15 dB over baseline" in ev[0].sentence


def test_a_cage_harmonic_at_bpfo_counts_less_than_the_cage_line() -> None:
    # BPFO = n x FTF exactly (Randall & Antoni 2011, eqs. 1 and 3), so cage harmonics reach it.
    ev = gather_evidence(window(de_accel__env_ftf=23.0, de_accel__env_bpfo=14.0), baseline())
    s = mode_strengths(ev)
    assert s["cage"] > s["outer_race"]


def test_imbalance_sentence() -> None:
    ev = gather_evidence(window(de_accel__order_1x=2.24), baseline())
    assert [e.mode for e in ev] == ["imbalance"]
    assert "drive-end 1× running-speed vibration 2.8× its baseline" in ev[0].sentence
    assert "common practice, no source" in ev[0].sentence
    assert ev[0].strength == pytest.approx((2.8 - 1.5) / 1.5)


def test_misalignment_needs_2x_above_1x_for_full_weight() -> None:
    above = gather_evidence(window(de_accel__order_2x=1.2), baseline())
    assert above[0].mode == "misalignment"
    assert "2× running speed 1.20 mm/s, above 1× (0.80 mm/s)" in above[0].sentence
    below = gather_evidence(window(de_accel__order_2x=0.7), baseline())
    assert below[0].mode == "misalignment"
    assert "below 1×" in below[0].sentence
    assert below[0].strength == pytest.approx(0.5 * above[0].strength)


def test_cavitation_sentence_with_suction_fall() -> None:
    hb = 0.004 * 10 ** (9 / 20)  # 9 dB up
    ev = gather_evidence(
        window(de_accel__high_band_rms=hb, suction_pressure__mean=35.0), baseline()
    )
    assert ev[0].mode == "cavitation"
    assert ev[0].sentence == (
        "high-band energy up 9 dB with suction pressure 40 kPa below baseline (cavitation)"
    )


def test_high_band_alone_is_weaker_evidence_of_cavitation() -> None:
    hb = 0.004 * 10 ** (12 / 20)
    alone = gather_evidence(window(de_accel__high_band_rms=hb), baseline())
    both = gather_evidence(
        window(de_accel__high_band_rms=hb, suction_pressure__mean=35.0), baseline()
    )
    assert "bearing damage also raises it" in alone[0].sentence
    assert alone[0].strength < both[0].strength


def test_impeller_wear_sentence_at_the_same_speed() -> None:
    ev = gather_evidence(
        window(discharge_pressure__mean=598.0, discharge_pressure__vane_pass=9.0),
        baseline(),
        shaft_speed_hz=SHAFT_HZ,
    )
    assert ev[0].mode == "impeller_wear"
    assert ev[0].sentence.startswith("discharge pressure 8 % below baseline at the same speed")
    assert "vane-pass pulsation up 2.2×" in ev[0].sentence


def test_speed_change_alone_is_not_impeller_wear() -> None:
    # Affinity laws (common practice): head ∝ n². At 5 % less speed a healthy pump's
    # differential pressure is 0.95² = 90.25 % of the baseline's.
    speed = SHAFT_HZ * 0.95
    dp = (650.0 - 75.0) * 0.95**2
    values = window(discharge_pressure__mean=75.0 + dp)
    assert gather_evidence(values, baseline(), shaft_speed_hz=speed) == []
    # ...while the same reading without knowing the speed looks like a 10 % head loss
    assert gather_evidence(values, baseline(shaft_speed_hz=None))[0].mode == "impeller_wear"


def test_a_change_within_the_baseline_scatter_is_not_evidence() -> None:
    b = baseline()
    wide = IndicatorBaseline(b.names, b.median, np.where(np.array(b.names) ==
                             "de_accel.order_1x", 0.6, b.spread))  # fmt: skip
    assert gather_evidence(window(de_accel__order_1x=2.0), wide) == []
    assert gather_evidence(window(de_accel__order_1x=2.0), b)[0].mode == "imbalance"


def test_missing_values_are_skipped_not_guessed() -> None:
    values = window()
    values["de_accel.env_bpfo"] = None
    values["suction_pressure.mean"] = None
    assert gather_evidence(values, baseline()) == []


def test_evidence_is_sorted_and_bounded() -> None:
    ev = gather_evidence(
        window(de_accel__env_bpfo=40.0, de_accel__order_1x=1.3, de_accel__order_2x=0.9),
        baseline(),
    )
    strengths = [e.strength for e in ev]
    assert strengths == sorted(strengths, reverse=True)
    assert all(0.0 <= s <= 1.0 for s in strengths)
    assert ev[0].strength == 1.0


@pytest.mark.parametrize(
    ("orders", "message"),
    [
        ({"bpf": 3.5}, "keys must be among"),
        ({"bpfo": -3.5}, "must be a multiple of shaft speed > 0"),
        ({"de_accel": {"bpfo": 3.5}, "nde_accel": 3.0}, "either"),
    ],
)
def test_bad_defect_orders_are_refused(orders: dict[str, object], message: str) -> None:
    with pytest.raises(ValueError, match=message):
        gather_evidence(window(), baseline(), defect_orders=orders)


def test_defect_orders_from_the_asset_registry_match_published_multiples() -> None:
    """CWRU drive-end bearing: n=9, d=0.3126 in, D=1.537 in (CWRU Bearing Data Center,
    secondary; REFERENCES.md): BPFO 3.5848, BPFI 5.4152, FTF 0.39828, BSF 2.3567."""
    asset = AssetConfig(
        asset_id="CWRU-DE",
        bearings={
            "de": BearingGeometry(n_elements=9, element_diameter_mm=0.3126, pitch_diameter_mm=1.537)
        },
        channels=(
            ChannelConfig(name="de_accel", kind="accel", unit="g", fs_hz=25600.0, bearing="de"),
        ),
    )
    orders = defect_orders(asset)["de_accel"]
    for key, published in CWRU_DE.items():
        assert orders[key] == pytest.approx(published, rel=2e-4), key


def test_diagnosed_modes_are_the_contract_and_simulator_vocabulary() -> None:
    assert set(DIAGNOSED_MODES) == {m.value for m in FaultMode} - {"other"}
    assert set(DIAGNOSED_MODES) == set(FAULT_MODES)
