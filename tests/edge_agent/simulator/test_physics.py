"""Signal and hydraulic building blocks of the simulator against closed forms and references."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from edge_agent.assets import BearingGeometry
from edge_agent.simulator import physics
from tests.edge_agent.simulator.reference import band_power, line_amplitude

FS = 25_600.0


@pytest.mark.parametrize(
    ("geometry", "expected"),
    [
        # CWRU drive-end bearing: n=9, d=0.3126 in, D=1.537 in (REFERENCES.md; CWRU Bearing Data
        # Center bearing information page, secondary transcription)
        (
            BearingGeometry(n_elements=9, element_diameter_mm=0.3126, pitch_diameter_mm=1.537),
            {"bpfi_hz": 5.4152, "bpfo_hz": 3.5848, "ftf_hz": 0.39828, "bsf_hz": 4.7135 / 2},
        ),
        # CWRU fan-end bearing: n=8, d=0.2656 in, D=1.122 in (same source)
        (
            BearingGeometry(n_elements=8, element_diameter_mm=0.2656, pitch_diameter_mm=1.122),
            {"bpfi_hz": 4.9469, "bpfo_hz": 3.0530, "ftf_hz": 0.3817, "bsf_hz": 3.9874 / 2},
        ),
        # Curtin University bearing data sheet (2012), secondary: n=9, d=7.9375, D=38.50 mm
        (
            BearingGeometry(n_elements=9, element_diameter_mm=7.9375, pitch_diameter_mm=38.50),
            {"bpfi_hz": 5.428, "bpfo_hz": 3.572, "ftf_hz": 0.3969, "bsf_hz": 2.32},
        ),
    ],
)
def test_defect_frequencies_match_published_multiples(
    geometry: BearingGeometry, expected: dict[str, float]
) -> None:
    got = physics.bearing_defect_frequencies(geometry, 1.0)._asdict()
    for name, value in expected.items():
        assert got[name] == pytest.approx(value, rel=2e-3), name


def test_defect_frequencies_computed_at_1780_rpm() -> None:
    # REFERENCES.md (computed): CWRU drive-end geometry at 1780 rpm
    g = BearingGeometry(n_elements=9, element_diameter_mm=0.3126, pitch_diameter_mm=1.537)
    f = physics.bearing_defect_frequencies(g, 1780.0 / 60.0)
    assert f.ftf_hz == pytest.approx(11.82, abs=0.01)
    assert f.bsf_hz == pytest.approx(69.92, abs=0.01)
    assert f.bpfo_hz == pytest.approx(106.35, abs=0.01)
    assert f.bpfi_hz == pytest.approx(160.65, abs=0.01)


def test_velocity_to_acceleration_worked_example() -> None:
    # REFERENCES.md: 1 g peak at 100 Hz -> 15.61 mm/s peak, 11.04 mm/s RMS (computed)
    assert float(physics.velocity_to_accel_peak_g(11.04, 100.0)) == pytest.approx(1.0, rel=1e-3)


def test_shaft_order_line_has_requested_velocity() -> None:
    n = 25_600
    shaft_hz = 29.5
    x = physics.shaft_order_vibration(
        n, FS, shaft_hz=shaft_hz, orders=[1.0, 6.0], velocity_rms_mm_s=[2.0, 0.5], phase_rad=[0, 1]
    )
    # RMS of a sine of amplitude A is A/sqrt(2) (common practice); a = v 2 pi f
    for order, v_rms in ((1.0, 2.0), (6.0, 0.5)):
        f = order * shaft_hz
        a_peak = line_amplitude(x, FS, f)
        assert a_peak / math.sqrt(2) * 9.80665 / (2 * math.pi * f) * 1e3 == pytest.approx(
            v_rms, rel=1e-3
        )


def test_shaft_order_vibration_rejects_mismatched_shapes() -> None:
    with pytest.raises(ValueError, match="len\\(orders\\)"):
        physics.shaft_order_vibration(
            10, FS, shaft_hz=30.0, orders=[1, 2], velocity_rms_mm_s=[1.0], phase_rad=[0.0]
        )


def test_impulse_train_rate_and_slip() -> None:
    rng = np.random.default_rng(0)
    x = physics.impulse_train(
        256_000, FS, rate_hz=100.0, amplitude=1.0, rng=rng, slip=0.02, amplitude_scatter=0.0
    )
    where = np.flatnonzero(x)
    spacing = np.diff(where) / FS
    assert spacing.mean() == pytest.approx(0.01, rel=0.01)
    # jitter of the spacing is the requested slip (sample rounding adds ~ 1/(fs sqrt 6))
    assert spacing.std() / spacing.mean() == pytest.approx(0.02, rel=0.15)


def test_impulse_train_without_slip_is_periodic() -> None:
    x = physics.impulse_train(
        25_600, FS, rate_hz=128.0, amplitude=2.0, rng=np.random.default_rng(1), slip=0.0,
        amplitude_scatter=0.0,
    )  # fmt: skip
    where = np.flatnonzero(x)
    assert np.all(np.diff(where) == 200)
    assert np.allclose(x[where], 2.0)


def test_load_zone_modulation_follows_stribeck() -> None:
    # Stribeck load distribution q = (1 - (1 - cos psi)/(2 eps))^1.5 (McFadden & Smith 1984,
    # from memory): zero outside +-90 deg for eps = 0.5, 1 at the load line
    psi = np.linspace(-np.pi, np.pi, 721)
    q = physics.load_zone_factor(psi)
    assert q.max() == pytest.approx(1.0)
    assert np.allclose(q[np.abs(psi) >= np.pi / 2], 0.0, atol=1e-12)
    inside = np.abs(psi) < np.pi / 2
    assert np.allclose(q[inside], np.cos(psi[inside]) ** 1.5)  # eps = 0.5 reduces to cos^1.5


def test_inner_race_train_is_modulated_at_shaft_rate() -> None:
    # an inner-race defect turns with the shaft: each impact's strength is the Stribeck load
    # at the defect's angle at that instant (McFadden & Smith 1984, from memory)
    x = physics.impulse_train(
        256_000, FS, rate_hz=160.0, amplitude=1.0, rng=np.random.default_rng(2), slip=0.0,
        modulation_hz=30.0, modulation_phase_rad=0.0, amplitude_scatter=0.0,
    )  # fmt: skip
    where = np.flatnonzero(x)
    expected = physics.load_zone_factor(2 * np.pi * 30.0 * where / FS)
    assert np.allclose(x[where], expected, atol=0.01)
    # about half the 1600 impacts fall in the unloaded half and leave no trace
    assert 600 < where.size < 1000


def test_resonance_impulse_response_matches_closed_form() -> None:
    fn, zeta = 3200.0, 0.04
    x = np.zeros(512)
    x[0] = 1.0
    y = physics.ring_resonance(x, FS, resonance_hz=fn, damping_ratio=zeta)
    t = np.arange(1, 512) / FS
    wn = 2 * np.pi * fn
    expected = np.exp(-zeta * wn * t) * np.sin(wn * math.sqrt(1 - zeta**2) * t)
    assert np.allclose(y[1:], expected, atol=1e-12)


def test_resonance_peaks_at_its_frequency() -> None:
    # compare with scipy.signal.freqz (scipy reference implementation)
    b, a = physics.resonance_coefficients(3500.0, 0.05, FS)
    f, h = signal.freqz(b, a, worN=8192, fs=FS)
    assert f[np.argmax(np.abs(h))] == pytest.approx(3500.0, rel=0.01)


def test_resonance_rejects_bad_parameters() -> None:
    with pytest.raises(ValueError, match="resonance_hz must lie in"):
        physics.resonance_coefficients(13_000.0, 0.05, FS)
    with pytest.raises(ValueError, match="damping_ratio"):
        physics.resonance_coefficients(3000.0, 1.5, FS)


def test_cavitation_noise_is_high_frequency_and_grows_with_intensity() -> None:
    rng = np.random.default_rng(3)
    weak = physics.cavitation_noise(25_600, FS, intensity=0.2, rng=rng)
    strong = physics.cavitation_noise(25_600, FS, intensity=1.0, rng=rng)
    assert band_power(strong, FS, (5000.0, 12000.0)) > 10 * band_power(weak, FS, (5000.0, 12000.0))
    # most of the power lies above the 4 kHz high-pass
    assert band_power(strong, FS, (4000.0, 12800.0)) > 0.8 * band_power(strong, FS, (0.0, 12800.0))
    assert not np.any(physics.cavitation_noise(1000, FS, intensity=0.0, rng=rng))


def test_cavitation_intensity_from_npsh_margin() -> None:
    got = physics.cavitation_intensity([20.0, 12.0, 8.0, 4.0, 2.0], 4.0)
    assert got.tolist() == [0.0, 0.0, 0.5, 1.0, 1.0]


def test_water_properties_at_20_c() -> None:
    # steam-table values at 20 degC (from memory): p_v 2.339 kPa, rho 998.21 kg/m3,
    # mu 1.002 mPa s; boiling at 101.325 kPa at 100 degC
    assert float(physics.water_vapour_pressure_kpa(20.0)) == pytest.approx(2.339, rel=0.01)
    assert float(physics.water_vapour_pressure_kpa(100.0)) == pytest.approx(101.325, rel=0.005)
    assert float(physics.water_density_kg_m3(20.0)) == pytest.approx(998.21, abs=0.05)
    assert float(physics.water_viscosity_pa_s(20.0)) == pytest.approx(1.002e-3, rel=0.01)
    assert float(physics.water_viscosity_pa_s(40.0)) < float(physics.water_viscosity_pa_s(20.0))


def test_pump_curve_affinity_laws() -> None:
    # affinity laws (common practice, no source): Q ~ N, H ~ N^2, NPSHr ~ N^2; efficiency is
    # unchanged between similar operating points
    curve = physics.PumpCurve()
    for q, n, ratio in ((100.0, 1780.0, 0.65), (60.0, 1500.0, 1.1), (130.0, 1700.0, 0.8)):
        assert curve.head_m(q * ratio, n * ratio) == pytest.approx(ratio**2 * curve.head_m(q, n))
        assert curve.npsh_required_m(q * ratio, n * ratio) == pytest.approx(
            ratio**2 * curve.npsh_required_m(q, n)
        )
        assert curve.efficiency(q * ratio, n * ratio) == pytest.approx(curve.efficiency(q, n))
    assert curve.head_m(curve.bep_flow_m3_per_h, curve.nominal_speed_rpm) == pytest.approx(
        curve.bep_head_m
    )
    assert curve.head_m(0.0, 1780.0, head_loss=0.1) == pytest.approx(0.9 * curve.shutoff_head_m)


def test_induction_motor_slip_and_current() -> None:
    motor = physics.InductionMotor(rated_power_kw=37.0, rated_current_a=58.0)
    assert motor.slip(37.0, 1780.0) == pytest.approx(0.012)
    assert motor.slip(18.5, 1780.0) == pytest.approx(0.006)
    # at rated load the modelled line current is of the order of the nameplate current
    assert 0.7 * 58.0 < motor.current_rms_a(37.0, 60.0) < 1.1 * 58.0
    assert motor.current_rms_a(10.0, 60.0) < motor.current_rms_a(30.0, 60.0)
